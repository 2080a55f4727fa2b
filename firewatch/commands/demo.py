"""``firewatch demo``: the simulator, a recorder and the dashboard together, cleaned up on exit."""

from __future__ import annotations

import argparse
import shutil
import subprocess
import sys
import tempfile
import time
from pathlib import Path

from firewatch.cli import UsageError
from firewatch.commands import _args
__all__ = ["add_parser", "run", "start_demo"]


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("demo", help="try firewatch: a simulated kiln, a recorder and the dashboard",
                       description="Starts the simulated kiln and a recorder in the background and opens the dashboard; "
                       "both stop when the dashboard closes.")
    p.add_argument("--speed", type=_args.positive, default=60.0, help="simulated seconds per real second (default 60)")
    p.add_argument("--log", metavar="FILE.db", help="keep the firing log here (default: a temporary file, removed on exit)")
    p.add_argument("--fault", action="append", default=[], metavar="KIND@MINUTES[:K=V,...]", help="a simulator fault (repeatable)")
    p.add_argument("--utc", action="store_true", help="clock times in UTC instead of the site's time zone ([site] timezone, else this computer's)")


def start_demo(log: Path, speed: float, faults: list[str]) -> tuple[subprocess.Popen, subprocess.Popen]:
    """Start the simulator and a recorder; return both processes once the log has readings."""
    sim = subprocess.Popen(
        [sys.executable, "-m", "firewatch", "sim", "--tcp", "127.0.0.1:0", "--speed", f"{speed:g}", *sum((["--fault", f] for f in faults), [])],
        stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True,
    )
    first = sim.stdout.readline().strip() if sim.stdout else ""
    if not first:
        sim.kill()
        raise UsageError("the simulator did not start")
    port = first.rsplit(":", 1)[1]
    rec = subprocess.Popen(
        [sys.executable, "-m", "firewatch", "record", "--port", f"socket://127.0.0.1:{port}", "--clock", "device", "--log", str(log)],
        stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL,
    )
    from firewatch.store._common import LogError
    from firewatch.store.reader import LogReader

    deadline = time.monotonic() + 30.0
    while time.monotonic() < deadline:
        if rec.poll() is not None:
            sim.kill()
            raise UsageError(f"--log: the recorder stopped (exit {rec.returncode}); is {log} in use?")
        try:
            with LogReader(log) as r:
                if r.query("SELECT count(*) FROM sample")[0][0] > 0:
                    return sim, rec
        except (LogError, Exception):
            pass
        time.sleep(0.2)
    return sim, rec


def _stop(*procs: subprocess.Popen) -> None:
    for p in procs:
        if p.poll() is None:
            p.terminate()
    for p in procs:
        try:
            p.wait(10)
        except subprocess.TimeoutExpired:
            p.kill()


def run(args: argparse.Namespace) -> int:
    tmp = None
    if args.log:
        log = Path(args.log)
        if not log.parent.exists():
            raise UsageError(f"--log: directory {log.parent} does not exist")
    else:
        tmp = Path(tempfile.mkdtemp(prefix="firewatch-demo-"))
        log = tmp / "demo-firing.db"
    sim = rec = None
    try:
        sim, rec = start_demo(log, args.speed, args.fault)
        from firewatch.ui import run_watch

        return run_watch(log, utc=args.utc)
    finally:
        _stop(*(p for p in (rec, sim) if p is not None))
        if tmp is not None:
            shutil.rmtree(tmp, ignore_errors=True)
