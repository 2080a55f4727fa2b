"""``firewatch upgrade-log``: write the compact copy of a log of the earlier layout, never touching the original."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

__all__ = ["add_parser", "run"]


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "upgrade-log",
        help="convert a firing log of the earlier layout (schema 1) to the compact one",
        description="Write NEW.db, the compact layout (schema 3) of OLD.db, a log of the earlier layout (schema 1, or the interim 2). "
        "OLD.db is only read, and NEW.db must not exist. Every reading, raw line, event and alarm is carried over; the readings "
        "digest of the two is the same. Every command also reads old logs as they are, and a recorder continuing one converts it.",
    )
    p.add_argument("old", metavar="OLD.db")
    p.add_argument("new", metavar="NEW.db")


def run(args: argparse.Namespace) -> int:
    from firewatch.commands._common import open_log
    from firewatch.store._common import LogError
    from firewatch.store.upgrade import upgrade_log

    new = Path(args.new)
    if new.exists():
        raise LogError(f"{new}: already exists; upgrade-log writes a new file and never overwrites one")
    if not new.parent.is_dir():
        raise LogError(f"{new}: directory {new.parent} does not exist")
    open_log(args.old).close()  # a missing, foreign or damaged file is refused with one line, as by every reader
    counts = upgrade_log(args.old, new)
    print(f"firewatch upgrade-log: {args.old} -> {new}: {counts['samples']:,} samples, {counts['lines']:,} raw lines, "
          f"{counts['alarms']} alarms; {args.old} is unchanged", file=sys.stderr)
    return 0
