"""Benchmark: ``replay --headless`` of a 72 h, 1 Hz, 8-channel firing against reading the same rows
with bare sqlite3, in the same run, and the share of progress and alarms in the replay (cProfile).

Run by hand: ``python benchmarks/bench_replay.py [LOG.db]`` (without a log, one is simulated as in
bench_alarms.py). Target (issue 15): replay --headless in at most 1.5 s on the machine where the bare
read of the same rows is measured (the sample rows, which a replay with the log's own site reads; and the
raw lines inflated, which one with another conversion parses); the ratio is printed, and the shares say
where the time goes.
"""

from __future__ import annotations

import cProfile
import io
import pstats
import sqlite3
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "benchmarks"))

from bench_alarms import make_log  # noqa: E402

from firewatch.services.replay import profiles_from_log, reevaluate  # noqa: E402
from firewatch.store.reader import LogReader  # noqa: E402


def bare_read(log: Path) -> tuple[float, int]:
    """The baseline: every sample row read with bare sqlite3, as replay reads them (the measured values as kept)."""
    t0 = time.perf_counter()
    con = sqlite3.connect(f"file:{log}?mode=ro", uri=True)
    rows = con.execute("SELECT * FROM sample ORDER BY id").fetchall()
    con.close()
    return time.perf_counter() - t0, len(rows)


def bare_raw(log: Path) -> tuple[float, int]:
    """A second baseline: every raw line read and inflated (what a replay with another conversion parses)."""
    import zlib

    t0 = time.perf_counter()
    con = sqlite3.connect(f"file:{log}?mode=ro", uri=True)
    n = 0
    for (lines,) in con.execute("SELECT lines FROM raw_block ORDER BY id"):
        n += zlib.decompress(lines).count(b"\n") + 1
    n += con.execute("SELECT count(*) FROM raw_line").fetchone()[0]
    con.close()
    return time.perf_counter() - t0, n


def replay_process(log: Path) -> float:
    """``firewatch replay --headless --json`` as a whole process, seconds."""
    t0 = time.perf_counter()
    out = subprocess.run([sys.executable, "-m", "firewatch", "replay", str(log), "--headless", "--json"], cwd=ROOT,
                         capture_output=True, text=True)
    assert out.returncode == 0, out.stderr
    return time.perf_counter() - t0


def shares(log: Path) -> tuple[float, dict[str, float]]:
    """The re-evaluation in this process under cProfile: its time and the cumulative time of progress and alarms."""
    prof = cProfile.Profile()
    with LogReader(log) as r:
        site, schedule = profiles_from_log(r)
        t0 = time.perf_counter()
        prof.enable()
        reevaluate(r, site, schedule)
        prof.disable()
        total = time.perf_counter() - t0
    stats = pstats.Stats(prof, stream=io.StringIO())
    want = {"progress": ("progress.py", "update"), "alarms": ("engine.py", "evaluate")}
    out = {k: 0.0 for k in want}
    for (path, _, func), (_, _, _, cum, _) in stats.stats.items():  # type: ignore[attr-defined]
        for k, (file, name) in want.items():
            if path.endswith(file) and func == name:
                out[k] += cum
    return total, out


def main() -> None:
    if len(sys.argv) > 1:
        log = Path(sys.argv[1])
    else:
        log = make_log(Path(tempfile.mkdtemp(prefix="fw-bench-")))
    bare_read(log)  # warm the page cache for both
    t_bare, n = bare_read(log)
    t_replay = min(replay_process(log) for _ in range(3))
    t_bare = min(t_bare, bare_read(log)[0])
    t_raw, lines = min(bare_raw(log) for _ in range(3))
    total, parts = shares(log)
    print(f"firing: {n} samples, {lines} raw lines ({log})")
    print(f"baseline: bare sqlite3 read of the sample rows  {t_bare:6.2f} s")
    print(f"baseline: the raw lines read and inflated       {t_raw:6.2f} s")
    print(f"replay --headless --json (whole process)        {t_replay:6.2f} s, best of 3 (target <= 1.5 s), "
          f"ratio to the bare read {t_replay / t_bare:.1f}")
    print(f"re-evaluation in process, under cProfile      {total:6.2f} s")
    for k, v in parts.items():
        print(f"  {k:10s} {v:6.2f} s  ({v / total:5.1%} of the re-evaluation)")


if __name__ == "__main__":
    main()
