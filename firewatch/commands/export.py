"""``firewatch export``: a firing log to CSV, streamed so a week-long log never sits in memory."""

from __future__ import annotations

import argparse
import csv
import sys

import numpy as np

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


def _times(t: np.ndarray) -> list[str]:
    """ISO 8601 times to the second, as :func:`~firewatch.commands._common.iso` gives them, a page at once.

    ``datetime.fromtimestamp`` rounds the fraction to the microsecond, half to
    even, before ``isoformat`` drops it; so a time within half a microsecond of
    the next second is that second's.
    """
    whole = np.floor(t)
    secs = whole + (np.rint((t - whole) * 1e6) >= 1e6)
    return np.datetime_as_string(secs.astype("datetime64[s]"), unit="s").tolist()


def _flags(statuses: list[tuple[str, np.ndarray]], words: dict[int, str], n: int) -> list[str]:
    """Each sample's measured statuses other than ok, ``name:status`` joined by spaces ("" for none).

    Built once per distinct combination of statuses in the page (a handful:
    a status lasts), not once per sample.
    """
    if not statuses:
        return [""] * n
    codes = np.stack([st for _, st in statuses], axis=1)
    combos, which = np.unique(codes, axis=0, return_inverse=True)
    texts = [" ".join(f"{name}:{words.get(c, c)}" for (name, _), c in zip(statuses, combo) if c) for combo in combos.tolist()]
    return np.array(texts, dtype=object)[which.ravel()].tolist()


def _rows(columns: list[np.ndarray | list[str]], kinds: str) -> str:
    """The rows of a page as CSV text: one ``%`` formatting of the page, in C.

    ``kinds`` has a letter per column: ``s`` text as it is, ``z`` a UTC time followed by Z, ``r`` a float as
    Python's shortest repr (it reads back to the same float64), ``g`` a float to
    6 significant digits, ``f`` a float to 3 decimals; a NaN float is an empty field.
    """
    n = len(columns[0])
    grid = np.empty((n, len(columns)), dtype=object)
    for j, col in enumerate(columns):
        grid[:, j] = col
    spec = {"z": "%sZ", "s": "%s", "r": "%r", "g": "%.6g", "f": "%.3f"}
    row = ",".join(spec[k] for k in kinds) + "\r\n"
    text = (row * n) % tuple(grid.ravel().tolist())
    # a NaN came out as "nan"; no other field can be exactly that (the flags come last and are name:status)
    return text.replace(",nan,", ",,").replace(",nan,", ",,")


def export_csv(reader, out) -> int:
    """Write the CSV; return the number of rows.

    Streams :data:`PAGE` samples at a time: the measured readings are read once
    a page, the derived channels recomputed from them (:class:`~firewatch.store.derive.Deriver`
    carries the rate history from page to page), and the page is formatted in one go.
    """
    from firewatch.store.derive import Deriver
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
    progress = [(cid, name) for cid, name, _, _ in channels if name not in measured and other[name][1] == STEP_KIND]
    steps = ", ".join(step_column(cid) for cid, _ in progress)
    kinds = "z" + ("s" if start is None else "f") + "".join("r" if name in measured else "g" for _, name, _, _ in channels) + "s"
    deriver = Deriver(reader)
    rows = 0
    lo, hi = span
    for a in range(lo, hi + 1, PAGE):
        b = min(a + PAGE - 1, hi)
        block = reader.block(a, b)
        if not block.ids.size:
            continue
        derived = deriver.derive(a, b, block)
        n = block.ids.size
        columns: list[np.ndarray | list[str]] = [_times(block.t), [""] * n if start is None else block.t - start]
        bad: list[tuple[str, np.ndarray]] = []
        placed: dict[str, np.ndarray] = {}
        if progress:
            got = reader.query(f"SELECT sample_id, {steps} FROM step WHERE sample_id BETWEEN ? AND ?", (a, b))
            if got:
                arr = np.array(got, dtype=float).reshape(len(got), len(progress) + 1)  # NULL becomes NaN
                at = np.searchsorted(block.ids, arr[:, 0].astype(np.int64))
                for k, (_, name) in enumerate(progress):
                    col = np.full(n, np.nan)
                    col[at] = arr[:, k + 1]
                    placed[name] = col
        for cid, name, _, _ in channels:
            if name in measured:
                has = block.has[name]
                columns.append(np.where(has, block.values[name], np.nan))
                bad.append((name, np.where(has, block.status[name], 0)))
            elif name in placed:
                columns.append(placed[name])
            else:
                got_v = derived.values.get(name)
                columns.append(got_v if got_v is not None and got_v.size == n else np.full(n, np.nan))
        columns.append(_flags(bad, words, n))
        out.write(_rows(columns, kinds))
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
