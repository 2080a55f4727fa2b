"""``firewatch demo``: the simulator, a recorder and the dashboard together; nothing outlives it, its log stays.

Whatever ends the demo ends the simulator and recorder it started, within a few seconds:

* ``q`` in the dashboard, or an error: the ``finally`` below stops both.
* SIGHUP (the terminal closed), SIGTERM, SIGINT: a handler stops both first, then closes the
  dashboard; if the screen cannot close (its terminal is gone) the process leaves at once.
* SIGKILL, or anything else that ends the demo unannounced: the children learn it from the
  kernel (Linux) or by polling their parent id (see :mod:`firewatch.commands._lifeline`); the
  recorder then closes its session with the reason.

The children run in process groups of their own, so the terminal's signals reach the demo
alone and the demo decides the order: recorder first (it closes the session), then simulator.
"""

from __future__ import annotations

import argparse
import asyncio
import datetime as dt
import os
import signal
import subprocess
import sys
import threading
import time
from pathlib import Path

from firewatch.commands import _args
from firewatch.commands._args import UsageError

__all__ = ["add_parser", "run", "start_demo", "demo_folder", "demo_log_path", "discard_log"]

LEAVE_S = 5.0
"""After a signal, the demo leaves within this long even if its screen cannot close, seconds."""


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("demo", help="try firewatch: a simulated kiln, a recorder and the dashboard",
                       description="Starts the simulated kiln and a recorder in the background and opens the dashboard; "
                       "both stop when the dashboard closes. The firing log, notes included, is kept (in "
                       "$XDG_STATE_HOME/firewatch/demo/, else ~/.local/state/firewatch/demo/) unless --discard is given.")
    p.add_argument("--speed", type=_args.positive, default=60.0, help="simulated seconds per real second (default 60)")
    p.add_argument("--log", metavar="FILE.db", help="write the firing log here, a new file (default: a dated file in the demo folder)")
    keep = p.add_mutually_exclusive_group()
    keep.add_argument("--keep", dest="discard", action="store_false", help="keep the firing log on exit (the default)")
    keep.add_argument("--discard", dest="discard", action="store_true", help="delete the firing log on exit")
    p.set_defaults(discard=False)
    p.add_argument("--fault", action="append", default=[], metavar="KIND@MINUTES[:K=V,...]", help="a simulator fault (repeatable)")
    p.add_argument("--scenario", metavar="NAME|FILE", help="a built-in scenario by name (closed-kiln, open-port; see "
                   "firewatch sim --list-scenarios) or a scenario TOML (default: closed-kiln)")
    p.add_argument("--utc", action="store_true", help="clock times in UTC instead of the site's time zone ([site] timezone, else this computer's)")


def scenario_profiles(scenario: str | None) -> list[str]:
    """The recorder's ``--site`` and ``--schedule`` for a scenario (name or file), so that it records what is simulated."""
    from firewatch.settings._tomlcheck import ProfileError
    from firewatch.simulator.scenario import load_scenario

    try:
        sc = load_scenario(scenario)
    except ProfileError as exc:
        raise UsageError(f"--scenario: {exc.problems[0]}") from None
    out: list[str] = []
    if sc.site.path is not None:
        out += ["--site", str(sc.site.path)]
    if sc.schedule.path is not None:
        out += ["--schedule", str(sc.schedule.path)]
    return out


def demo_folder() -> Path:
    """Where demo firings are kept: ``$XDG_STATE_HOME/firewatch/demo`` (XDG Base Directory Specification)."""
    base = os.environ.get("XDG_STATE_HOME") or os.path.join(os.path.expanduser("~"), ".local", "state")
    return Path(base) / "firewatch" / "demo"


def demo_log_path(folder: Path, now: dt.datetime | None = None) -> Path:
    """A new dated file name in ``folder``: ``demo-2026-03-14-0930.db`` (local time), numbered if taken."""
    stamp = (now or dt.datetime.now()).strftime("%Y-%m-%d-%H%M")
    path = folder / f"demo-{stamp}.db"
    n = 2
    while path.exists():
        path = folder / f"demo-{stamp}-{n}.db"
        n += 1
    return path


def discard_log(log: Path) -> None:
    """Delete a demo's firing log and the files SQLite and firewatch keep beside it."""
    for suffix in ("", "-wal", "-shm", ".lock", ".actions", ".actions-wal", ".actions-shm", ".actions-journal", "-journal"):
        try:
            Path(f"{log}{suffix}").unlink()
        except FileNotFoundError:
            pass


def start_demo(log: Path, speed: float, faults: list[str], children: list[subprocess.Popen] | None = None,
               scenario: str | None = None) -> tuple[subprocess.Popen, subprocess.Popen]:
    """Start the simulator and a recorder; return both processes once the log has readings.

    Each started process is appended to ``children`` at once, so that a signal arriving while
    this waits can stop it.
    """
    children = [] if children is None else children
    profiles = scenario_profiles(scenario)
    chosen = ["--scenario", str(scenario)] if scenario else []
    me = str(os.getpid())
    sim = subprocess.Popen(
        [sys.executable, "-m", "firewatch", "sim", "--tcp", "127.0.0.1:0", "--speed", f"{speed:g}", *chosen, "--parent-pid", me,
         *sum((["--fault", f] for f in faults), [])],
        stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True, process_group=0,
    )
    children.append(sim)
    first = sim.stdout.readline().strip() if sim.stdout else ""
    if not first:
        sim.kill()
        raise UsageError("the simulator did not start")
    port = first.rsplit(":", 1)[1]
    rec = subprocess.Popen(
        [sys.executable, "-m", "firewatch", "record", "--port", f"socket://127.0.0.1:{port}", "--clock", "device",
         "--log", str(log), "--parent-pid", me, *profiles],
        stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, process_group=0,
    )
    children.insert(0, rec)  # stopped first: it closes the session while the simulator still serves
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
        except LogError:
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
            p.wait()


def run(args: argparse.Namespace) -> int:
    if args.log:
        log = Path(args.log)
        if not log.parent.exists():
            raise UsageError(f"--log: directory {log.parent} does not exist")
        if log.exists() or log.is_symlink():
            # the demo writes simulated readings: never into an existing log, never delete one it did not make
            raise UsageError(f"--log: {log} exists; the demo writes a new firing log (choose another name)")
    else:
        folder = demo_folder()
        try:
            folder.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise UsageError(f"cannot make the demo folder {folder} ({exc.strerror}); give --log FILE.db") from None
        log = demo_log_path(folder)
    children: list[subprocess.Popen] = []
    app = None
    leaving = threading.Event()

    def on_signal(signum: int, frame: object) -> None:
        # children first: whatever the screen does next, they must not outlive the demo
        first = not leaving.is_set()
        leaving.set()
        _stop(*children)
        if not first:
            return
        code = 128 + signum
        # a terminal that has gone can leave the screen unable to close: leave regardless
        timer = threading.Timer(LEAVE_S, os._exit, (code,))
        timer.daemon = True
        timer.start()
        try:
            loop = asyncio.get_running_loop()  # the dashboard's, running in this thread
        except RuntimeError:
            loop = None
        if app is not None and loop is not None:
            loop.call_soon_threadsafe(app.exit, None, code)  # safe from a signal handler, unlike posting a message
        else:
            raise SystemExit(code)

    for sig in (signal.SIGHUP, signal.SIGTERM, signal.SIGINT):
        signal.signal(sig, on_signal)
    try:
        start_demo(log, args.speed, args.fault, children, args.scenario)
        from firewatch.ui import run_app
        from firewatch.ui.app import FirewatchApp

        app = FirewatchApp(log, mode="live", utc=args.utc)
        return run_app(app)
    finally:
        leaving.set()
        _stop(*children)
        _farewell(log, args.discard)


def _farewell(log: Path, discard: bool) -> None:
    """Say where the firing log is (or that it was discarded); the terminal may be gone, so never fail."""
    if discard:
        discard_log(log)
        text = f"firewatch demo: the firing log {log} was discarded (--discard)"
    elif log.exists():
        text = (f"firewatch demo: the firing log (notes included) is kept in {log}\n"
                f"  replay it with: firewatch replay {log}   (firewatch demo --discard keeps none)")
    else:
        return
    try:
        print(text, file=sys.stderr, flush=True)
    except (OSError, ValueError):
        pass
