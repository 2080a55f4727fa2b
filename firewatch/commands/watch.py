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
    # a clear message for a missing or foreign file before the screen opens; the integrity check
    # runs behind the live screen (ui.app), which an operator should not wait for
    open_log(args.log, check=False).close()
    from firewatch.ui import run_watch

    if args.site:
        from firewatch.commands._args import UsageError
        from firewatch.settings._tomlcheck import ProfileError
        from firewatch.settings.profile import load_site

        try:  # the tuning screen writes into it: a valid profile in a regular file, else refused now
            load_site(args.site)
        except ProfileError as exc:
            raise UsageError(f"--site: {exc.problems[0]}") from None
    return run_watch(args.log, site_path=args.site, utc=args.utc)
