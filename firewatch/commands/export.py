"""``firewatch export``: a firing log to CSV, streamed so a week-long log never sits in memory."""

from __future__ import annotations

import argparse
import csv
import sys

from firewatch.commands._args import UsageError
from firewatch.commands._common import iso, open_log

__all__ = ["add_parser", "run", "export_csv"]

PAGE = 2000
"""Samples read per query."""


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("export", help="export a firing log to CSV",
                       description="One row per time, one column per channel and derived value, units in the header.")
    p.add_argument("log", metavar="FILE.db")
    p.add_argument("--csv", required=True, metavar="OUT.csv", help="output file ('-' for standard output)")


def export_csv(reader, out) -> int:
    """Write the CSV; return the number of rows."""
    from firewatch.transport.records import Status

    channels = reader.query("SELECT id, name, unit, kind FROM channel ORDER BY id")
    start = reader.firing().get("started_t")
    writer = csv.writer(out)
    writer.writerow(["time_utc", "elapsed_s"] + [f"{name} [{unit}]" for _, name, unit, _ in channels] + ["flags"])
    measured = {cid for cid, _, _, kind in channels if kind in ("thermocouple", "cold_junction", "pyrometer")}
    index = {cid: i for i, (cid, _, _, _) in enumerate(channels)}
    names = {cid: name for cid, name, _, _ in channels}
    rows = 0
    last = 0
    while True:
        page = reader.query("SELECT id, t FROM sample WHERE id > ? ORDER BY id LIMIT ?", (last, PAGE))
        if not page:
            break
        lo, hi = page[0][0], page[-1][0]
        last = hi
        cells: dict[int, list] = {sid: [""] * len(channels) for sid, _ in page}
        flags: dict[int, list[str]] = {sid: [] for sid, _ in page}
        for cid, _, _, _ in channels:
            for sid, value, status in reader.query(
                "SELECT sample_id, value, status FROM reading WHERE channel_id = ? AND sample_id BETWEEN ? AND ?", (cid, lo, hi)
            ):
                if sid not in cells:
                    continue
                if value is not None:
                    cells[sid][index[cid]] = f"{value:.6g}"
                if status != 0 and cid in measured:
                    flags[sid].append(f"{names[cid]}:{Status(status).name.lower()}")
        for sid, t in page:
            writer.writerow([iso(t), f"{t - start:.3f}" if start is not None else ""] + cells[sid] + [" ".join(flags[sid])])
            rows += 1
    return rows


def run(args: argparse.Namespace) -> int:
    with open_log(args.log) as reader:
        if args.csv == "-":
            export_csv(reader, sys.stdout)
            return 0
        try:
            with open(args.csv, "w", newline="", encoding="utf-8") as out:
                rows = export_csv(reader, out)
        except OSError as exc:
            raise UsageError(f"--csv: cannot write {args.csv!r}: {exc.strerror}") from None
    print(f"firewatch export: {rows} rows to {args.csv}", file=sys.stderr)
    return 0
