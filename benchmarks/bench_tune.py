"""Benchmark: tuning a 72 h, 1 Hz firing, both answers (target under 1 s, issue 12), against reading the data alone;
and the peak memory of ``firewatch tune`` on a 7-day firing (target at most 120 MB, issue 15).

Time: two firings, the open-port furnace (the ware's emissivity can be fitted) and the closed demo kiln (it
is hidden, and the fit has to find that out). Each prints the time to read and select the data (the
baseline, measured in the same run), the instrument setting, the ware's fit, and all of ``tune`` (what the
command does), with ratios to the baseline; then the tuning screen's key press.

Memory: the demo firing recorded for 1 day and for 7 days (``firewatch sim --to-log X.db --minutes N -q``,
kept in the temporary directory between runs, since the week takes a minute or two to make). For each, the
peak resident set (``ru_maxrss`` of a child process) of ``firewatch tune --json``, against two baselines
measured in the same run: a process that only imports numpy, scipy and what ``tune`` imports of
firewatch, and one that reads the same channels' rows whole with bare sqlite3 into numpy arrays. A third
line is the same command reading each series whole, as before issue 15 (``load_data(..., window_s=math.inf)``).
The growth per hour of firing is the difference between the two firings over their 144 h.

Run by hand: ``python benchmarks/bench_tune.py`` (``--memory`` for the memory part alone).
"""

from __future__ import annotations

import math
import os
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from firewatch.firing.tuning import EmissivityHidden, fit, instrument_setting, load_data, reconcile_with, tune  # noqa: E402
from firewatch.services.replay import profiles_from_log  # noqa: E402
from firewatch.simulator import serve  # noqa: E402
from firewatch.simulator.run import Simulation  # noqa: E402
from firewatch.simulator.scenario import load_scenario  # noqa: E402
from firewatch.store.reader import LogReader  # noqa: E402


def best_of(fn, repeat: int = 3) -> float:
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def bench(name: str, log: Path) -> None:
    with LogReader(log) as r:
        site, _ = profiles_from_log(r)
        t_load = best_of(lambda: load_data(r, site))
        t_whole = best_of(lambda: load_data(r, site, window_s=math.inf))
        data = load_data(r, site)
        t_inst = best_of(lambda: instrument_setting(data))

        def ware() -> None:
            try:
                fit(data)
            except EmissivityHidden:
                pass

        t_fit = best_of(ware)
        t_all = best_of(lambda: tune(load_data(r, site)))
        result = tune(data)
    print(f"{name}: {data.t.size} readings, {int(data.valid.sum())} valid")
    print(f"  read and select the data (baseline): {t_load:6.3f} s  (each series read whole, as before issue 15: "
          f"{t_whole:.3f} s, ratio {t_load / t_whole:.2f})")
    print(f"  instrument setting:                  {t_inst:6.3f} s  ratio {t_inst / t_load:.2f}")
    print(f"  the ware's emissivity fit:           {t_fit:6.3f} s  ratio {t_fit / t_load:.2f}")
    print(f"  tune, both answers, from the log:    {t_all:6.3f} s  ratio {t_all / t_load:.2f} (target under 1 s)")
    i = result.instrument
    print(f"  instrument setting {i.emissivity:.3f} ({i.ci95[0]:.3f} to {i.ci95[1]:.3f}) from {i.basis}")
    if result.ware is not None:
        w = result.ware
        print(f"  ware's emissivity {w.emissivity:.3f} ({w.ci95[0]:.3f} to {w.ci95[1]:.3f})")
    else:
        print(f"  ware's emissivity hidden: {result.hidden_reason}")
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    t_cli = best_of(lambda: subprocess.run([sys.executable, "-m", "firewatch", "tune", str(log), "--json"], env=env,
                                           capture_output=True, check=True))
    t_start = best_of(lambda: subprocess.run([sys.executable, "-m", "firewatch", "--version"], env=env, capture_output=True))
    print(f"  firewatch tune --json, a new process:  {t_cli:6.3f} s  (the process start alone {t_start:.3f} s; "
          f"tuning in it {t_cli - t_start:.3f} s, ratio to the baseline {(t_cli - t_start) / t_load:.2f})")
    idx = np.unique(np.linspace(0, data.t.size - 1, 2000).astype(int))
    t_key = best_of(lambda: reconcile_with(data, 0.8, 1.0, idx), repeat=20)
    print(f"  tuning screen, one key press: reconcile 2000 points {t_key * 1e3:.1f} ms (target <= 100 ms with the redraw)")


IMPORTS = ("import numpy, scipy.optimize\n"
           "import firewatch.commands.tune, firewatch.firing.tuning, firewatch.services.replay, firewatch.store.reader\n")

# The bare-sqlite3 baseline: the three channels' values and the sample times read whole into numpy arrays, the least
# a whole-series read holds. It knows the compact layout (schema 3): a measured channel is the column m<id> of sample.
BARE = IMPORTS + """
import sqlite3, sys
import numpy as np
con = sqlite3.connect(f"file:{sys.argv[1]}?mode=ro", uri=True)
if con.execute("SELECT type FROM sqlite_master WHERE name = 'reading'").fetchone() == ("table",):
    sys.exit(3)
cols = ", ".join("m%d" % con.execute("SELECT id FROM channel WHERE name = ?", (name,)).fetchone()[0] for name in ("py1", "tc2", "tc1"))
cur = con.execute(f"SELECT t, {cols} FROM sample ORDER BY id")
parts = []
while rows := cur.fetchmany(50_000):
    parts.append(np.array(rows, dtype=float))
held = np.concatenate(parts)
print(held.shape[0])
"""

# the command itself, with each series read whole (one window), as before issue 15
WHOLE = IMPORTS + """
import functools, math, sys
import firewatch.firing.tuning as tuning
from firewatch.cli import main
tuning.load_data = functools.partial(tuning.load_data, window_s=math.inf)
sys.exit(main(["tune", sys.argv[1], "--json"]))
"""


def peak_mb(argv: list[str]) -> tuple[float, float]:
    """Peak resident set (MB) and wall time (s) of a child process; it must exit 0 (or 3: not applicable)."""
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    with tempfile.TemporaryFile() as err:
        t0 = time.perf_counter()
        child = subprocess.Popen(argv, stdout=subprocess.DEVNULL, stderr=err, env=env)
        _, status, usage = os.wait4(child.pid, 0)
        wall = time.perf_counter() - t0
        code = os.waitstatus_to_exitcode(status)
        if code == 3:
            return math.nan, wall
        if code != 0:
            err.seek(0)
            raise SystemExit(f"{argv[:4]} failed ({code}): {err.read().decode()[-500:]}")
    # Linux gives ru_maxrss in KiB (getrusage(2)); macOS gives bytes
    return usage.ru_maxrss / (1024 * 1024 if sys.platform == "darwin" else 1024), wall


def firing_log(minutes: int) -> Path:
    """The demo firing recorded for ``minutes``, made once and kept in the temporary directory."""
    cache = Path(tempfile.gettempdir()) / "firewatch-bench-tune-v3"  # logs of the compact layout
    cache.mkdir(exist_ok=True)
    log, done = cache / f"demo-{minutes}min.db", cache / f"demo-{minutes}min.done"
    if not done.exists():  # a run stopped half-way leaves no .done: make it again
        log.unlink(missing_ok=True)
        t0 = time.perf_counter()
        subprocess.run([sys.executable, "-m", "firewatch", "sim", "--to-log", str(log), "--minutes", str(minutes), "-q"],
                       env=dict(os.environ, PYTHONPATH=str(ROOT)), check=True)
        done.write_text("made\n")
        print(f"made the {minutes / 1440:g}-day demo firing in {time.perf_counter() - t0:.0f} s: {log}")
    return log


def memory() -> None:
    print("peak memory (ru_maxrss of a child process, MB); the baselines measured in the same run")
    tune_peaks: dict[int, float] = {}
    for minutes in (1440, 10080):
        log = firing_log(minutes)
        base, _ = peak_mb([sys.executable, "-c", IMPORTS])
        bare, t_bare = peak_mb([sys.executable, "-c", BARE, str(log)])
        whole, t_whole = peak_mb([sys.executable, "-c", WHOLE, str(log)])
        peak, t_tune = peak_mb([sys.executable, "-m", "firewatch", "tune", str(log), "--json"])
        tune_peaks[minutes] = peak
        print(f"{minutes / 1440:g}-day demo firing ({log.stat().st_size / 1e6:.0f} MB log):")
        print(f"  imports alone (baseline):                 {base:6.1f} MB")
        if math.isnan(bare):
            print("  bare sqlite3, the channels whole:         not measured (a log of the earlier layout)")
        else:
            print(f"  bare sqlite3, the channels whole:         {bare:6.1f} MB  (+{bare - base:.1f} over the imports; {t_bare:.1f} s)")
        print(f"  tune reading each series whole (before):  {whole:6.1f} MB  (+{whole - base:.1f}; {t_whole:.1f} s)")
        print(f"  firewatch tune --json, in windows:        {peak:6.1f} MB  (+{peak - base:.1f}; {t_tune:.1f} s; "
              f"ratio to the imports {peak / base:.2f}, to bare sqlite3 {peak / bare:.2f}; target <= 120 MB)")
    growth = (tune_peaks[10080] - tune_peaks[1440]) / 144.0
    print(f"  growth of tune's peak with the firing's length: {growth:+.3f} MB per hour (1 day to 7 days)")


def main() -> None:
    memory()
    if "--memory" in sys.argv[1:]:
        return
    tmp = Path(tempfile.mkdtemp(prefix="fw-bench-"))
    for name, scenario in (("open-port furnace, 72 h", "open-port"), ("closed demo kiln, 72 h", "closed-kiln")):
        log = tmp / f"{scenario}.db"
        t0 = time.perf_counter()
        serve.to_log(Simulation(load_scenario(scenario).with_changes(duration_s=72 * 3600.0)), log)
        print(f"made the {name} log in {time.perf_counter() - t0:.1f} s")
        bench(name, log)


if __name__ == "__main__":
    main()
