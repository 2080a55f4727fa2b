"""``firewatch watch``: the dashboard over a live firing log (any number of viewers)."""

from __future__ import annotations

import argparse

from firewatch.commands._common import open_log

__all__ = ["add_parser", "run"]


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("watch", help="watch a live firing (the dashboard)",
                       description="Attach to a firing log that a recorder is writing. Closing the viewer, or losing "
                       "the SSH connection, never disturbs the recorder.")
    p.add_argument("log", metavar="FILE.db")
    p.add_argument("--site", metavar="SITE.toml", help="the site profile file that the tuning screen may write (accept is offered only with it)")
    p.add_argument("--utc", action="store_true", help="clock times in UTC instead of the site's time zone ([site] timezone, else this computer's)")


def run(args: argparse.Namespace) -> int:
    open_log(args.log).close()  # a clear message for a missing or foreign file, before the screen opens
    from firewatch.ui import run_watch

    if args.site:
        from pathlib import Path

        if not Path(args.site).is_file():
            from firewatch.cli import UsageError

            raise UsageError(f"--site: no such file {args.site!r}")
    return run_watch(args.log, site_path=args.site, utc=args.utc)
