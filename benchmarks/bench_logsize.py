"""Benchmark: bytes per measured reading of the compact log (schema 3), and ``sim --to-log`` time (issue 15).

Run by hand: ``python benchmarks/bench_logsize.py [--hours 24]``. Writes the
demo firing with ``sim --to-log`` and prints, beside the log's size, baselines
measured in the same run from the same readings: the float64 floor (8 bytes a
value plus an 8-byte time per sample), the measured readings as plain CSV, the
same CSV gzipped, the raw lines alone, and a schema-1 layout rebuilt from the
log (one row per reading of every channel, the derived ones recomputed and the
progress carried from its steps, raw lines uncompressed), so the ratio shows
what the layout gains on identical data.

Targets (issue 15): <= 20 bytes per measured reading (aim 10) for the 24-hour
demo, raw lines included; a 7-day log <= 60 MB; ``sim --to-log`` of 24 h <= 4 s.
"""

from __future__ import annotations

import argparse
import csv
import gzip
import io
import sqlite3
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

import numpy as np  # noqa: E402

from firewatch.store.derive import derived_block  # noqa: E402
from firewatch.store.reader import LogReader  # noqa: E402

SCHEMA1_READING = """CREATE TABLE reading(
    channel_id INTEGER NOT NULL, sample_id INTEGER NOT NULL, t REAL NOT NULL, value REAL, status INTEGER NOT NULL,
    PRIMARY KEY (channel_id, sample_id)) WITHOUT ROWID;
CREATE TABLE raw_line(id INTEGER PRIMARY KEY, session_id INTEGER NOT NULL, received_utc REAL NOT NULL, line BLOB NOT NULL,
    ok INTEGER NOT NULL, reason TEXT);
CREATE TABLE sample(id INTEGER PRIMARY KEY, session_id INTEGER NOT NULL, t REAL NOT NULL, received_utc REAL NOT NULL,
    device_time REAL, seq INTEGER, raw_id INTEGER);
CREATE INDEX sample_t ON sample(t);"""


def size_of(path: Path) -> int:
    con = sqlite3.connect(path)
    con.execute("PRAGMA wal_checkpoint(TRUNCATE)")
    con.close()
    return path.stat().st_size


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--hours", type=float, default=24.0)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        log = Path(tmp) / "demo.db"
        t0 = time.perf_counter()
        out = subprocess.run([sys.executable, "-m", "firewatch", "sim", "--to-log", str(log), "--minutes", str(args.hours * 60)],
                             cwd=ROOT, capture_output=True, text=True)
        t_log = time.perf_counter() - t0
        if out.returncode:
            sys.exit(out.stderr)
        t0 = time.perf_counter()
        from firewatch.simulator.run import Simulation
        from firewatch.simulator.scenario import load_scenario

        sum(len(c) for c in Simulation(load_scenario().with_changes(duration_s=args.hours * 3600.0)).chunks())
        t_sim = time.perf_counter() - t0
        size = size_of(log)
        reader = LogReader(log)
        con = reader.con
        measured = list(reader._channels()[0])
        samples = con.execute("SELECT count(*) FROM sample").fetchone()[0]
        readings = samples * len(measured)
        span = reader.sample_span()
        assert span is not None
        block = reader.block(*span)
        # baselines from the same readings
        text = io.StringIO()
        w = csv.writer(text)
        w.writerow(["t", *measured])
        for row in zip(block.t.tolist(), *(block.values[n].tolist() for n in measured)):
            w.writerow([repr(v) if v == v else "" for v in row])
        csv_bytes = text.getvalue().encode()
        raw = [r for rows in reader.raw_rows() for r in rows]
        raw_bytes = sum(len(r[2]) for r in raw)
        floor = samples * 8 * (len(measured) + 1)
        # every channel at full rate, as schema 1 kept them
        derived = derived_block(reader, *span)
        channels = {name: cid for cid, name in con.execute("SELECT id, name FROM channel")}
        every = {n: (block.values[n], block.status[n]) for n in measured}
        every.update({n: (derived.values[n], derived.status[n]) for n in derived.values})
        for name, (cid, kind) in reader._channels()[1].items():
            if kind == "progress":
                steps = np.array(con.execute(f"SELECT sample_id, p{cid} FROM step ORDER BY sample_id").fetchall(), dtype=float)
                idx = np.searchsorted(steps[:, 0], block.ids, side="right") - 1
                v = np.where(idx >= 0, steps[np.maximum(idx, 0), 1], np.nan)
                every[name] = (v, np.where(np.isnan(v), 6, 0))
        old = Path(tmp) / "schema1.db"
        o = sqlite3.connect(old)
        o.executescript(SCHEMA1_READING)
        o.execute("BEGIN")
        o.executemany("INSERT INTO sample VALUES (?, ?, ?, ?, ?, ?, ?)",
                      ((i, 1, t, t, t, i, i) for i, t in zip(block.ids.tolist(), block.t.tolist())))
        for name, (v, s) in every.items():
            o.executemany("INSERT INTO reading VALUES (?, ?, ?, ?, ?)",
                          ((channels[name], i, t, x if x == x else None, st) for i, t, x, st in zip(block.ids.tolist(), block.t.tolist(), v.tolist(), s.tolist())))
        o.executemany("INSERT INTO raw_line VALUES (?, ?, ?, ?, ?, ?)", ((r[0], r[5], r[1], r[2], r[3], r[4]) for r in raw))
        o.execute("COMMIT")
        o.close()
        old_size = size_of(old)
        tables = con.execute("SELECT name, sum(pgsize) FROM dbstat GROUP BY name ORDER BY 2 DESC").fetchall()
        reader.close()
    per = size / readings
    print(f"demo firing, {args.hours:g} h: {samples} samples x {len(measured)} measured channels = {readings} readings")
    print(f"compact log (schema 3):                    {size / 1e6:8.2f} MB  {per:6.1f} bytes per measured reading (target <= 20, aim 10)")
    print(f"baseline float64 floor:          {floor / 1e6:8.2f} MB  {floor / readings:6.1f} bytes  (log / floor {size / floor:.2f})")
    print(f"baseline plain CSV (measured):   {len(csv_bytes) / 1e6:8.2f} MB  {len(csv_bytes) / readings:6.1f} bytes  (log / CSV {size / len(csv_bytes):.2f})")
    gz = len(gzip.compress(csv_bytes, 6))
    print(f"baseline gzipped CSV:            {gz / 1e6:8.2f} MB  {gz / readings:6.1f} bytes  (log / gzip {size / gz:.2f})")
    print(f"baseline raw lines alone:        {raw_bytes / 1e6:8.2f} MB  {raw_bytes / readings:6.1f} bytes")
    print(f"baseline schema-1 layout, same data (derived rows as stored): {old_size / 1e6:8.2f} MB  {old_size / readings:6.1f} bytes  "
          f"(the compact log is {old_size / size:.1f} x smaller)")
    print(f"7-day log at this rate:          {size / args.hours * 168 / 1e6:8.1f} MB (target <= 60 MB; extrapolated unless --hours 168)")
    print("where the bytes go (SQLite's dbstat): " + ", ".join(f"{name} {b / readings:.2f}" for name, b in tables if b / readings >= 0.05)
          + " bytes per measured reading")
    print(f"sim --to-log:                    {t_log:8.2f} s   simulation alone {t_sim:.2f} s, ratio {t_log / t_sim:.2f} (target <= 4 s for 24 h)")


if __name__ == "__main__":
    main()
