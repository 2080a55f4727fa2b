"""``firewatch export``: a firing log to CSV, streamed so a week-long log never sits in memory."""

from __future__ import annotations

import argparse
import csv
import sys

from firewatch.commands._args import UsageError
from firewatch.commands._common import iso, open_log

__all__ = ["add_parser", "run", "export_csv"]

PAGE = 20_000
"""Samples read, recomputed and written at a time (bounded memory whatever the log's length)."""


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("export", help="export a firing log to CSV",
                       description="One row per sample: its time, every channel (measured values exactly as kept, derived values "
                                   "recomputed, to 6 significant digits; progress every 10 s of the time line), units in the header, "
                                   "and the measured channels' statuses other than ok.")
    p.add_argument("log", metavar="FILE.db")
    p.add_argument("--csv", required=True, metavar="OUT.csv", help="output file ('-' for standard output)")


def _exact(values: list[float]) -> list[str]:
    """Measured values as Python's shortest repr, which reads back to the same float64 ("" for none)."""
    return ["" if v != v else repr(v) for v in values]


def _short(values: list[float]) -> list[str]:
    """Derived values to 6 significant digits ("" for none)."""
    return ["" if v != v else f"{v:.6g}" for v in values]


def export_csv(reader, out) -> int:
    """Write the CSV; return the number of rows.

    Streams :data:`PAGE` samples at a time: each channel is turned into text
    a column at a time, and the rows are joined and written once per page.
    """
    import numpy as np

    from firewatch.store.derive import derived_block
    from firewatch.store.layout import STEP_KIND, step_column
    from firewatch.transport.records import Status

    channels = reader.query("SELECT id, name, unit, kind FROM channel ORDER BY id")
    measured, other = reader._channels()
    start = reader.firing().get("started_t")
    csv.writer(out).writerow(["time_utc", "elapsed_s"] + [f"{name} [{unit}]" for _, name, unit, _ in channels] + ["flags"])
    span = reader.sample_span()
    if span is None:
        return 0
    words = {int(s): Status(s).name.lower() for s in Status}
    rows = 0
    lo, hi = span
    for a in range(lo, hi + 1, PAGE):
        b = min(a + PAGE - 1, hi)
        block = reader.block(a, b)
        if not block.ids.size:
            continue
        derived = derived_block(reader, a, b)
        n = block.ids.size
        columns: list[list[str]] = [[iso(t) or "" for t in block.t.tolist()]]
        columns.append(["" if start is None else f"{x:.3f}" for x in (block.t - (start or 0.0)).tolist()])
        flags = [""] * n
        for cid, name, _, _ in channels:
            if name in measured:
                has = block.has[name]
                columns.append(_exact(np.where(has, block.values[name], np.nan).tolist()))
                bad = np.flatnonzero(has & (block.status[name] != 0))
                for i, st in zip(bad.tolist(), block.status[name][bad].tolist()):
                    flags[i] = f"{flags[i]} {name}:{words.get(st, st)}" if flags[i] else f"{name}:{words.get(st, st)}"
            elif other[name][1] == STEP_KIND:
                col = np.full(n, np.nan)
                col_name = step_column(cid)
                got = reader.query(f"SELECT sample_id, {col_name} FROM step WHERE sample_id BETWEEN ? AND ? AND {col_name} IS NOT NULL", (a, b))
                if got:
                    arr = np.array(got, dtype=float)
                    col[np.searchsorted(block.ids, arr[:, 0].astype(np.int64))] = arr[:, 1]
                columns.append(_short(col.tolist()))
            else:
                got_v = derived.values.get(name)
                columns.append(_short(got_v.tolist()) if got_v is not None and got_v.size == n else [""] * n)
        columns.append(flags)
        out.write("".join(",".join(row) + "\r\n" for row in zip(*columns)))
        rows += n
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
