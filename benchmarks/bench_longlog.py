"""Benchmark: a week-long log's size, ``export --csv`` and seeking in it (issue 15).

Run by hand: ``python benchmarks/bench_longlog.py [--days 7] [--keep DIR]``. Writes the demo firing
stretched to ``--days`` with ``sim --to-log`` (kept in ``--keep`` for the next run), then prints, each
against a baseline measured in the same run:

- the log's size (target <= 60 MB for 7 days);
- ``firewatch export --csv`` against a bare ``sqlite3 -csv`` dump of the same sample rows
  (``SELECT * FROM sample``: the measured values as kept, one row per sample; target <= 3 x);
- seeking: ``FiringView.moment(t)`` at 20 moments spread over the firing, in one process with the log
  open as the dashboard has it, worst and median, against a bare indexed point query of one sample row
  (target: worst <= 50 ms), and how long opening the view took (it builds the band tables then).
"""

from __future__ import annotations

import argparse
import os
import random
import shutil
import sqlite3
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from firewatch.store.view import FiringView  # noqa: E402


def timed(cmd: list[str], out: Path | None = None) -> float:
    t0 = time.perf_counter()
    with open(out or os.devnull, "wb") as sink:
        proc = subprocess.run(cmd, cwd=ROOT, stdout=sink, stderr=subprocess.PIPE)
    if proc.returncode:
        sys.exit(proc.stderr.decode())
    return time.perf_counter() - t0


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--days", type=float, default=7.0)
    ap.add_argument("--keep", type=Path, default=Path(tempfile.gettempdir()) / "firewatch-bench")
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    if shutil.which("sqlite3") is None:
        sys.exit("needs the sqlite3 shell (Debian: sqlite3) for the baseline")
    args.keep.mkdir(parents=True, exist_ok=True)
    log = args.keep / f"demo-{args.days:g}d.db"
    if not log.exists():
        tmp = log.with_suffix(".tmp.db")
        tmp.unlink(missing_ok=True)
        took = timed([sys.executable, "-m", "firewatch", "sim", "--to-log", str(tmp), "--minutes", str(args.days * 1440), "-q"])
        tmp.rename(log)
        print(f"wrote {log} with sim --to-log in {took:.1f} s")
    con = sqlite3.connect(f"file:{log}?mode=ro", uri=True)
    samples = con.execute("SELECT count(*) FROM sample").fetchone()[0]
    measured = con.execute("SELECT count(*) FROM channel WHERE kind IN ('thermocouple', 'cold_junction', 'pyrometer')").fetchone()[0]
    hi = con.execute("SELECT max(id) FROM sample").fetchone()[0]
    t_lo, t_hi = con.execute("SELECT (SELECT t FROM sample ORDER BY id LIMIT 1), (SELECT t FROM sample ORDER BY id DESC LIMIT 1)").fetchone()
    con.close()
    size = log.stat().st_size
    print(f"{args.days:g}-day demo log: {samples:,} samples x {measured} measured channels; {size / 1e6:.1f} MB "
          f"({size / (samples * measured):.1f} bytes per measured reading; target <= 60 MB for 7 days)")

    bare, ours = [], []
    with tempfile.TemporaryDirectory() as tmp:
        for _ in range(args.repeat):
            bare.append(timed(["sqlite3", "-readonly", "-csv", str(log), "SELECT * FROM sample"], Path(tmp) / "bare.csv"))
            ours.append(timed([sys.executable, "-m", "firewatch", "export", str(log), "--csv", str(Path(tmp) / "ours.csv"), "-q"]))
        bare_mb = (Path(tmp) / "bare.csv").stat().st_size / 1e6
        ours_mb = (Path(tmp) / "ours.csv").stat().st_size / 1e6
    print(f"export --csv: best {min(ours):.2f} s, median {statistics.median(ours):.2f} s ({ours_mb:.0f} MB, every channel, derived ones recomputed); "
          f"baseline sqlite3 -csv of the sample rows: best {min(bare):.2f} s, median {statistics.median(bare):.2f} s ({bare_mb:.0f} MB); ratio {min(ours) / min(bare):.2f} (target <= 3)")

    t0 = time.perf_counter()
    view = FiringView(log)  # builds the derive pipelines' band tables, which the first seek would otherwise pay for
    opened = time.perf_counter() - t0
    rng = random.Random(15)
    moments = [t_lo + (t_hi - t_lo) * rng.random() for _ in range(20)]
    seeks = []
    for t in moments:
        t0 = time.perf_counter()
        view.moment(t)
        seeks.append(time.perf_counter() - t0)
    view.close()
    con = sqlite3.connect(f"file:{log}?mode=ro", uri=True)
    points = []
    for _ in range(20):
        sid = rng.randint(1, hi)
        t0 = time.perf_counter()
        con.execute("SELECT * FROM sample WHERE id = ?", (sid,)).fetchall()
        points.append(time.perf_counter() - t0)
    con.close()
    print(f"seek (FiringView.moment), 20 moments: worst {max(seeks) * 1e3:.1f} ms, median {statistics.median(seeks) * 1e3:.1f} ms "
          f"(target: worst <= 50 ms); baseline one sample row by id: worst {max(points) * 1e3:.3f} ms, median {statistics.median(points) * 1e3:.3f} ms; "
          f"opening the view took {opened * 1e3:.0f} ms")


if __name__ == "__main__":
    main()
