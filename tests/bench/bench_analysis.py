"""Benchmark of the point analysis: prints real-time factors against its FFT floor and a plain scipy pipeline
and peak RSS (``rotorwatch bench``). Not collected by pytest; run it directly:

    .venv/bin/python tests/bench/bench_analysis.py [--duration 60] [--repeat 7] [--scaling]
"""

from __future__ import annotations

import sys

from rotorwatch.cli import main

if __name__ == "__main__":
    sys.exit(main(["bench", *sys.argv[1:]]))
