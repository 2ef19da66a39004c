"""``rotorwatch run``: the monitoring daemon (see rotorwatch.service.daemon and deploy/install.md)."""

from __future__ import annotations

import argparse

from ..errors import RotorwatchError


def add_parser(p: argparse.ArgumentParser) -> None:
    p.add_argument("--config", "-c", required=True, metavar="FILE", help="configuration file (TOML)")
    p.add_argument("--state-dir", metavar="DIR",
                   help="folder for baselines and snapshots (default: storage.state_dir of the config)")
    bounded = p.add_mutually_exclusive_group()
    bounded.add_argument("--once", action="store_true",
                         help="stop after the first update round; an input that cannot start is an error (exit 2)")
    bounded.add_argument("--max-updates", type=int, metavar="N", help="stop after N update rounds")
    p.add_argument("--duration", type=float, metavar="S", help="stop after S seconds (wall clock)")
    p.add_argument("--set", action="append", default=[], metavar="KEY=VALUE", dest="overrides",
                   help="override a config value, e.g. --set mqtt.port=1884 (repeatable; kept on reload)")
    p.add_argument("--log-format", choices=("text", "json"), default="text",
                   help="log lines on stderr: 'level component message key=value' or one JSON object")
    p.add_argument("--log-level", choices=("DEBUG", "INFO", "WARNING", "ERROR"), default="INFO")


def run(args: argparse.Namespace) -> int:
    from ..logs import setup_logging
    from ..service.daemon import Daemon, RunOptions

    if args.max_updates is not None and args.max_updates < 1:
        raise RotorwatchError(f"--max-updates = {args.max_updates}: must be at least 1")
    if args.duration is not None and not args.duration > 0:
        raise RotorwatchError(f"--duration = {args.duration:g}: must be positive (seconds)")
    setup_logging(args.log_level, args.log_format)
    options = RunOptions(
        state_dir=args.state_dir,
        max_updates=1 if args.once else args.max_updates,
        fail_fast=bool(args.once),
        duration_s=args.duration,
        overrides=tuple(args.overrides),
    )
    return Daemon(args.config, options).run()
