"""Benchmark of the point analysis: prints real-time factors, the speed-up over the scipy-only reference
and peak RSS (``rotorwatch bench``). Not collected by pytest; run it directly:

    .venv/bin/python tests/bench/bench_analysis.py [--duration 60] [--reference-duration 16]
"""

from __future__ import annotations

import sys

from rotorwatch.cli import main

if __name__ == "__main__":
    sys.exit(main(["bench", *sys.argv[1:]]))
