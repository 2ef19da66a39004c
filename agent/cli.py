"""The ``rotorwatch`` command line.

Each subcommand lives in its own module under ``rotorwatch.commands`` exposing ``add_parser(subparsers)``
and ``run(args) -> int``; modules are imported only when their command runs, so the daemon's start-up
does not pay for plotting or benchmarking code. Errors a user can cause are printed as one line
(``rotorwatch: ...``) with a non-zero exit; ``--debug`` shows the traceback.
"""

from __future__ import annotations

import argparse
import importlib
import importlib.util
import sys

from . import __version__
from .errors import RotorwatchError

# command name -> module under rotorwatch.commands, with a one-line summary for --help
COMMANDS: dict[str, tuple[str, str]] = {
    "check": ("check", "validate a configuration file and print the derived frequencies"),
    "analyze": ("analyze", "analyze a recording (WAV or .npz) and report bearing findings"),
    "replay": ("replay", "run a simulated scenario or a recording through the alarm logic"),
    "run": ("run", "run the monitoring daemon"),
    "devices": ("devices", "list audio input devices"),
    "calibrate": ("calibrate", "measure a channel's sensitivity against a reference shaker"),
    "simulate": ("simulate", "synthesize a scenario's signals to WAV files"),
    "bench": ("bench", "measure analysis speed and memory"),
    "trend": ("trend", "print stored trend values"),
    "snapshot": ("snapshot", "list, show and plot evidence snapshots"),
}


def _available() -> dict[str, tuple[str, str]]:
    out = {}
    for name, (module, summary) in COMMANDS.items():
        if importlib.util.find_spec(f"rotorwatch.commands.{module}") is not None:
            out[name] = (module, summary)
    return out


def build_parser(commands: dict[str, tuple[str, str]] | None = None) -> argparse.ArgumentParser:
    commands = commands if commands is not None else _available()
    parser = argparse.ArgumentParser(prog="rotorwatch", description="Vibration monitoring for critical machines.")
    parser.add_argument("--version", action="version", version=f"rotorwatch {__version__}")
    parser.add_argument("--debug", action="store_true", help="show tracebacks")
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True
    wanted = next((a for a in sys.argv[1:] if not a.startswith("-")), None)
    for name, (module, summary) in commands.items():
        if name == wanted:
            mod = importlib.import_module(f"rotorwatch.commands.{module}")
            p = sub.add_parser(name, help=summary, description=summary)
            mod.add_parser(p)
            p.set_defaults(_module=mod)
        else:
            sub.add_parser(name, help=summary, add_help=False)
    return parser


def main(argv: list[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    sys.argv = [sys.argv[0], *argv]
    parser = build_parser()
    args = parser.parse_args(argv)
    module = getattr(args, "_module", None)
    if module is None:  # parsed a placeholder: import it properly
        mod_name = _available()[args.command][0]
        module = importlib.import_module(f"rotorwatch.commands.{mod_name}")
        p = argparse.ArgumentParser(prog=f"rotorwatch {args.command}")
        module.add_parser(p)
        args = p.parse_args(argv[argv.index(args.command) + 1:], namespace=args)
    try:
        return int(module.run(args) or 0)
    except RotorwatchError as e:
        if args.debug:
            raise
        for line in str(e).splitlines() or [type(e).__name__]:
            print(f"rotorwatch: {line}", file=sys.stderr)
        return e.exit_code
    except KeyboardInterrupt:
        return 130
    except BrokenPipeError:
        return 0


if __name__ == "__main__":
    sys.exit(main())
