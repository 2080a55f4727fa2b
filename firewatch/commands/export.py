"""``firewatch export``: a firing log to CSV, streamed so a week-long log never sits in memory."""

from __future__ import annotations

import argparse
import sys

from firewatch.commands._args import UsageError
from firewatch.commands._common import open_log

__all__ = ["add_parser", "run"]


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("export", help="export a firing log to CSV",
                       description="One row per sample: its time, every channel (measured values exactly as kept, derived values "
                                   "recomputed, to 6 significant digits; progress every 10 s of the time line), units in the header, "
                                   "and the measured channels' statuses other than ok.")
    p.add_argument("log", metavar="FILE.db")
    p.add_argument("--csv", required=True, metavar="OUT.csv", help="output file ('-' for standard output)")


def run(args: argparse.Namespace) -> int:
    from firewatch.commands._export_csv import Output, export_csv

    # the integrity check (open_log's) comes before any worker starts and before anything is written
    with open_log(args.log) as reader:
        if args.csv == "-":
            export_csv(reader, sys.stdout)
            return 0
        out = Output(args.csv)
        try:
            try:
                rows = export_csv(reader, out)
            finally:
                out.close()
        except OSError as exc:
            raise UsageError(f"--csv: cannot write {args.csv!r}: {exc.strerror}") from None
    print(f"firewatch export: {rows} rows to {args.csv}", file=sys.stderr)
    return 0
