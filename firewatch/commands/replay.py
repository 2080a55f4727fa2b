"""``firewatch replay``: a recorded firing again; ``--headless`` re-runs its alarms with other settings."""

from __future__ import annotations

import argparse
import json
import sys

from firewatch.commands import _args
from firewatch.commands._args import UsageError
from firewatch.commands._common import iso, open_log

__all__ = ["add_parser", "run"]


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "replay",
        help="replay a recorded firing (--headless: re-run its alarms with other settings)",
        description="Re-run conversion, reconciliation and alarms over a recorded firing, optionally with another "
        "site profile or schedule; the log is never changed.",
    )
    p.add_argument("log", metavar="FILE.db")
    p.add_argument("--headless", action="store_true", help="no dashboard: print the alarms and a summary")
    p.add_argument("--site", help="site profile to use instead of the one stored in the log")
    p.add_argument("--schedule", help="schedule to use instead of the one stored in the log")
    p.add_argument("--json", action="store_true", help="with --headless: one JSON object")
    p.add_argument("--speed", type=_args.positive, default=60.0, help="dashboard: initial replay speed (default 60x)")
    p.add_argument("--utc", action="store_true", help="clock times in UTC instead of the site's time zone ([site] timezone, "
                   "else this computer's), on the dashboard and with --headless")


def run(args: argparse.Namespace) -> int:
    from firewatch.services.replay import alarm_summary, profiles_from_log, reevaluate
    from firewatch.settings._tomlcheck import ProfileError
    from firewatch.settings.profile import load_site
    from firewatch.settings.schedule import load_schedule

    reader = open_log(args.log)
    with reader:
        try:
            site, schedule = profiles_from_log(reader)
        except ProfileError as exc:
            raise UsageError(f"{args.log}: the profiles stored in the log do not load: {exc.problems[0]}") from None
        try:
            if args.site:
                site = load_site(args.site)
            if args.schedule:
                schedule = load_schedule(args.schedule)
        except ProfileError as exc:
            raise UsageError(f"--{'site' if args.site else 'schedule'}: {exc.problems[0]}") from None
        if not args.headless:
            try:
                from firewatch.ui import run_replay
            except ImportError:
                raise UsageError("the replay dashboard is not part of this version; use --headless") from None
            return run_replay(args.log, site, schedule, speed=args.speed, site_path=args.site, utc=args.utc)
        result = reevaluate(reader, site, schedule)
        original = len(reader.alarms())
    alarms = alarm_summary(result)
    info = {
        "log": args.log,
        "site": site.name,
        "schedule": schedule.name if schedule else None,
        "start": iso(result.start_t),
        "end": iso(result.end_t),
        "lines": result.lines,
        "samples": result.samples,
        "malformed_lines": result.malformed,
        "alarms": alarms,
        "recorded_alarms": original,
    }
    if args.json:
        json.dump(info, sys.stdout)
        sys.stdout.write("\n")
        return 0
    from rich.console import Console
    from rich.table import Table

    from firewatch.settings.timefmt import Clock, duration

    console = Console()
    clock = Clock.for_site(site.timezone, utc=args.utc)
    start, end = result.start_t, result.end_t  # both set by the first sample, or neither
    span = duration(end - start) if start is not None and end is not None else "-"
    console.print(f"re-evaluated {args.log}: {result.lines} lines ({result.malformed} malformed), {span}, site '{site.name}', "
                  f"schedule '{info['schedule']}'. The log was not changed; it recorded {original} alarm(s). "
                  f"Clock times in {clock.describe(start, result.end_t)}.")
    table = Table(title=f"{len(alarms)} alarm(s) on re-evaluation", title_justify="left")
    for col in ("raised", "kind", "channel", "cause", "priority", "cleared", "message"):
        table.add_column(col, no_wrap=col in ("raised", "cleared"))  # a time is never split
    for a in alarms:
        raised = clock.stamp(start + a["raised_s"]) if start is not None else "-"
        cleared = f"after {duration(a['cleared_s'] - a['raised_s'])}" if a["cleared_s"] is not None else "active"
        table.add_row(raised, a["kind"], a["channel"] or "-", a["cause"] or "-", a["priority"], cleared, a["message"])
    console.print(table)
    return 0
