"""The compact layout of the firing log (schema 3): what the writer, the readers and ``upgrade-log`` share.

A measured reading (thermocouple, cold junction, pyrometer as shown) is kept
exactly, as a float64 column of its sample's row (``sample.m<channel id>``),
so that the time is stored once per sample and not once per value. A status
other than OK is kept in ``flag`` as a run (first and last sample of a run of
one status). Derived channels are not kept per sample: rates, reconciled
temperatures, their uncertainties, divergences and allowances are recomputed
on read from the measured values and the profile each session ran with
(:mod:`firewatch.store.derive`). The schedule's progress (``plan.*``), which
only a pass from the firing's start could recompute, is kept once every
:data:`STEP_S` seconds of the time line in ``step``. Every derived and progress
channel's newest value is kept in ``latest``, for the live screen. Raw
lines wait uncompressed in ``raw_line`` and are compressed with zlib, in
blocks of :data:`RAW_BLOCK_LINES`, into ``raw_block``.

docs/log-format.md explains the choices with the measurements behind them.
"""

from __future__ import annotations

import itertools
import json
import sqlite3
import zlib
from collections.abc import Iterable

import numpy as np

__all__ = [
    "CHARTED_SUFFIX", "COMPACT_VERSION", "MEASURED_KINDS", "STEP_KIND", "STEP_S", "RAW_BLOCK_LINES", "is_compact", "column", "step_column", "write_views",
    "pack_raw", "insert_raw_blocks", "unpack_raw", "status_runs",
]

COMPACT_VERSION = 3
"""``meta.schema_version`` of the compact layout."""
MEASURED_KINDS = ("thermocouple", "cold_junction", "pyrometer")
"""Channels whose readings are kept exactly, sample by sample."""
STEP_S = 10.0
"""Progress channels are kept for the first sample of every this many seconds of the time line."""
STEP_KIND = "progress"
"""The kind of channel kept at the step rate: the schedule's progress, which only a pass from the firing's start could
recompute (the rates and the pyrometers' derived channels are recomputed on read from the measured values)."""
CHARTED_SUFFIX = ".reconciled"
"""Derived channels whose per-minute envelope is kept in ``trend_minute`` beside every measured channel's: the
pyrometers' reconciled temperatures, which the charts and the report draw."""
RAW_BLOCK_LINES = 1024
"""Raw lines are compressed together once this many wait (zlib gains on many similar lines: 83-byte demo lines
take 18.5 bytes each in blocks of 512 to 8,192, against 40 alone in blocks of 16)."""


def is_compact(con: sqlite3.Connection) -> bool:
    """True for the compact layout; False for a log with a ``reading`` table (schema 1, and the interim 2)."""
    row = con.execute("SELECT type FROM sqlite_master WHERE name = 'reading'").fetchone()
    return row is None or row[0] != "table"


def column(channel_id: int) -> str:
    """The ``sample`` column holding a measured channel's values."""
    return f"m{int(channel_id)}"


def step_column(channel_id: int) -> str:
    """The ``step`` column holding a progress channel's values (NULL: not placed in the schedule, status missing)."""
    return f"p{int(channel_id)}"


def write_views(con: sqlite3.Connection) -> None:
    """(Re)write the views ``reading`` and ``readings`` from the channel table (inside the caller's transaction).

    ``reading`` has the columns of schema 1's table: every measured reading at
    full rate (the status from its run in ``flag``, else OK), then the derived
    and progress channels at the step rate.
    """
    arms = []
    for cid, first in con.execute("SELECT id, coalesce(first_sample, 1) FROM channel WHERE kind IN (?, ?, ?) ORDER BY id", MEASURED_KINDS):
        arms.append(
            f"SELECT {cid} AS channel_id, s.id AS sample_id, s.t AS t, s.{column(cid)} AS value, "
            f"coalesce((SELECT f.status FROM flag f WHERE f.channel_id = {cid} AND f.first_id <= s.id AND f.last_id >= s.id "
            f"ORDER BY f.first_id DESC LIMIT 1), 0) AS status FROM sample s WHERE s.id >= {int(first)}"
        )
    for (cid,) in con.execute("SELECT id FROM channel WHERE kind = ? ORDER BY id", (STEP_KIND,)):
        col = step_column(cid)
        arms.append(f"SELECT {cid}, p.sample_id, s.t, p.{col}, CASE WHEN p.{col} IS NULL THEN 6 ELSE 0 END "
                    f"FROM step p JOIN sample s ON s.id = p.sample_id")
    con.execute("DROP VIEW IF EXISTS main.readings")
    con.execute("DROP VIEW IF EXISTS main.reading")
    con.execute("CREATE VIEW main.reading AS\n    " + "\n    UNION ALL ".join(arms))
    con.execute(
        "CREATE VIEW main.readings AS SELECT c.name AS channel, r.t AS t, r.value AS value, r.status AS status, c.unit AS unit "
        "FROM reading r JOIN channel c ON c.id = r.channel_id"
    )


def status_runs(status: np.ndarray) -> list[tuple[int, int, int]]:
    """Runs of one status other than OK: ``(first index, last index, status)``.

    >>> status_runs(np.array([0, 1, 1, 0, 2, 2, 1]))
    [(1, 2, 1), (4, 5, 2), (6, 6, 1)]
    """
    s = np.asarray(status, dtype=np.int64)
    if s.size == 0 or not s.any():
        return []
    edges = np.flatnonzero(np.diff(s)) + 1
    starts = np.concatenate([[0], edges])
    ends = np.concatenate([edges - 1, [s.size - 1]])
    vals = s[starts]
    keep = vals != 0
    return list(zip(starts[keep].tolist(), ends[keep].tolist(), vals[keep].tolist()))


def pack_raw(rows: Iterable[tuple[int, float, bytes, int, str | None]]) -> tuple[int, int, int, int, bytes, bytes, bytes, int, bytes, str | None]:
    """One ``raw_block`` row from raw lines ``(id, received_utc, line, ok, reason)`` in id order.

    Returns ``(first id, last id, n, bad, received, ok, lengths, size, lines, reasons)``: the arrays
    are zlib-compressed little-endian float64, uint8 and uint32; the lines are joined with newlines
    (``size`` bytes) and compressed, so that the sqlite3 shell's ``sqlar_uncompress(lines, size)``
    shows them as text (the lengths say where each ends, should a line hold a newline);
    ``reasons`` is JSON ``[[index, reason], ...]`` for the lines with one, or None.
    """
    rows = list(rows)
    received = np.array([r[1] for r in rows], dtype="<f8")
    ok = np.array([r[3] for r in rows], dtype=np.uint8)
    lines = [bytes(r[2]) for r in rows]
    lengths = np.array([len(b) for b in lines], dtype="<u4")
    reasons = [[i, r[4]] for i, r in enumerate(rows) if r[4]]
    text = b"\n".join(lines)
    return (
        rows[0][0], rows[-1][0], len(rows), int((ok == 0).sum()),
        zlib.compress(received.tobytes(), 6), zlib.compress(ok.tobytes(), 6), zlib.compress(lengths.tobytes(), 6),
        len(text), zlib.compress(text, 6), json.dumps(reasons) if reasons else None,
    )


def insert_raw_blocks(con: sqlite3.Connection, rows: list[tuple[int, float, bytes, int, str | None, int]]) -> None:
    """Raw lines ``(id, received_utc, line, ok, reason, session_id)``, in id order, into ``raw_block``: one block per
    session among them (inside the caller's transaction)."""
    for session, group in itertools.groupby(rows, key=lambda r: r[5]):
        con.execute(
            "INSERT INTO raw_block(id, last_id, n, bad, received, ok, lengths, size, lines, reasons, session_id) "
            "VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?, ?)",
            (*pack_raw(r[:5] for r in group), session),
        )


def unpack_raw(first_id: int, received: bytes, ok: bytes, lengths: bytes, lines: bytes, reasons: str | None
               ) -> list[tuple[int, float, bytes, int, str | None]]:
    """The raw lines of one ``raw_block`` row: ``(id, received_utc, line, ok, reason)``."""
    rec = np.frombuffer(zlib.decompress(received), dtype="<f8").tolist()
    oks = np.frombuffer(zlib.decompress(ok), dtype=np.uint8).tolist()
    lens = np.frombuffer(zlib.decompress(lengths), dtype="<u4").astype(np.int64)
    data = zlib.decompress(lines)
    starts = (np.cumsum(lens) - lens + np.arange(lens.size)).tolist()  # one newline between lines
    why = {int(i): str(r) for i, r in json.loads(reasons)} if reasons else {}
    return [(first_id + i, rec[i], data[a:a + int(n)], oks[i], why.get(i)) for i, (a, n) in enumerate(zip(starts, lens.tolist()))]
