"""Benchmark: crash durability under repeated SIGKILL of the real recorder on one log (issue 15, item 4).

Run by hand: ``python benchmarks/bench_kills.py [--kills 50] [--seed 15] [--rate 20] [--keep DIR]``.

A line server on 127.0.0.1 sends native lines (each stamped with its send time as the device time) to
``firewatch record --clock device``; the recorder is SIGKILLed at a random moment 0.3 to 3 s after its first new
reading is committed, the log is checked, and the recorder is started again on the same log, ``--kills`` times;
then once more, stopped with SIGTERM (the control). The log is read through public routes only (tests/e2e/kills.py).

Printed per kill: time to (re)start, how long it ran, ``PRAGMA integrity_check``, lines sent and kept, the loss in
seconds (the kill's time less the send time of the oldest line not in the log). Baselines measured in the same run:
the commit interval, from the session heartbeat the recorder rewrites in every commit; the cost of starting Python
and importing the recorder, which bounds the time to restart from below; and the first start, on an empty log.

Targets (issue 15 item 4): a commit at least every second; at most 1 s of lines lost on SIGKILL; integrity ``ok``
after every one of 50 kills. Exit status 1 when a target is missed.
"""

from __future__ import annotations

import argparse
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from tests.e2e.helpers import env, inspect  # noqa: E402
from tests.e2e.kills import CHANNEL, LOSS_LIMIT_S, Kill, LineServer, campaign  # noqa: E402


def import_baseline(runs: int = 3) -> float:
    """Median wall time of a fresh Python importing the recorder and the record command: the floor of a restart."""
    code = "import firewatch.services.recorder, firewatch.commands.record, firewatch.firing.pipeline"
    times = []
    for _ in range(runs):
        t0 = time.perf_counter()
        subprocess.run([sys.executable, "-c", code], cwd=ROOT, env=env(), check=True)
        times.append(time.perf_counter() - t0)
    return statistics.median(times)


def row(kill: Kill) -> str:
    lost = kill.sent - kill.kept
    flag = "" if kill.integrity == "ok" and kill.missing_old == 0 and kill.strangers == 0 else "  <-- MISSED"
    return (
        f"{kill.n:4d}  {kill.start_s:7.2f}  {kill.ran_s:6.2f}  {kill.integrity:>9}  {kill.sent:5d}  {kill.kept:5d}  "
        f"{lost:4d}  {kill.loss_s:6.3f}  {kill.missing_old:7d}{flag}"
    )


def pct(values: list[float], q: float) -> float:
    ordered = sorted(values)
    return ordered[min(len(ordered) - 1, int(round(q * (len(ordered) - 1))))]


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--kills", type=int, default=50)
    ap.add_argument("--seed", type=int, default=15)
    ap.add_argument("--rate", type=float, default=20.0, help="lines per second (default 20)")
    ap.add_argument("--run-min", type=float, default=0.3, help="shortest run before a kill, s")
    ap.add_argument("--run-max", type=float, default=3.0, help="longest run before a kill, s")
    ap.add_argument("--keep", type=Path, help="write the log in this directory and keep it")
    args = ap.parse_args()

    base_import = import_baseline()
    workdir = args.keep or Path(tempfile.mkdtemp(prefix="bench-kills-"))
    log = workdir / "kills.db"
    if log.exists():
        print(f"{log} exists: give --keep an empty directory", file=sys.stderr)
        return 2
    print(f"{args.kills} SIGKILLs of firewatch record on {log}; {args.rate:g} lines/s on 127.0.0.1; seed {args.seed}")
    print("kill  start_s   ran_s  integrity   sent   kept  lost  loss_s  missing>1s")
    wall = time.perf_counter()
    with LineServer(rate_hz=args.rate) as server:
        result = campaign(log, server, args.kills, args.seed, (args.run_min, args.run_max), on_kill=lambda k: print(row(k), flush=True))
    wall = time.perf_counter() - wall
    final = result.final
    print(row(final) + "   (control: SIGTERM)")

    kills = result.kills
    losses = [k.loss_s for k in kills]
    restarts = [k.start_s for k in kills[1:]] + [final.start_s]
    commits = result.commit_gaps()
    integrity_ok = sum(k.integrity == "ok" for k in [*kills, final])
    missed = [k.n for k in kills if k.missing_old or k.strangers or k.loss_s > LOSS_LIMIT_S]
    info = inspect(log)
    gaps = [g["reason"] for g in info["gaps"]]

    print()
    print(f"integrity_check ok        {integrity_ok} of {len(kills) + 1} (after each kill and the control)")
    print(f"loss on SIGKILL           worst {max(losses):.3f} s, median {statistics.median(losses):.3f} s, p95 {pct(losses, 0.95):.3f} s "
          f"(target <= {LOSS_LIMIT_S:g} s); lines lost {sum(k.sent - k.kept for k in kills)} of {sum(k.sent for k in kills)}")
    print(f"lines sent > 1 s before a kill and missing: {sum(k.missing_old for k in kills)} (kills {missed or 'none'})")
    print(f"control (SIGTERM)         lost {final.sent - final.kept} of {final.sent} lines, loss {final.loss_s:.3f} s")
    if commits:
        print(f"baseline: commit interval from heartbeats  median {statistics.median(commits):.3f} s, p95 {pct(commits, 0.95):.3f} s, "
              f"max {max(commits):.3f} s over {len(commits)} commits (target <= 1 s)")
        print(f"  worst loss / median commit interval = {max(losses) / statistics.median(commits):.2f}")
    print(f"time to restart (spawn to first new reading committed)  median {statistics.median(restarts):.2f} s, p95 {pct(restarts, 0.95):.2f} s, max {max(restarts):.2f} s; "
          f"first 5 {statistics.median(restarts[:5]):.2f} s, last 5 {statistics.median(restarts[-5:]):.2f} s (median)")
    print(f"baseline: first start on an empty log {kills[0].start_s:.2f} s; Python + imports alone {base_import:.2f} s "
          f"(restart median / imports = {statistics.median(restarts) / base_import:.2f})")
    print(f"log after the run         {info['sessions']} sessions, {info['samples'][CHANNEL]} readings of {CHANNEL}, "
          f"{gaps.count('recorder restart')} restart gaps, {log.stat().st_size / 2**20:.2f} MiB; {wall:.0f} s wall")

    ok = (
        integrity_ok == len(kills) + 1
        and not missed
        and (not commits or max(commits) <= 1.0)
        and info["sessions"] == len(kills) + 1
        and gaps == ["recorder restart"] * len(kills)
    )
    print("targets met" if ok else "TARGETS MISSED")
    return 0 if ok else 1


if __name__ == "__main__":
    sys.exit(main())
