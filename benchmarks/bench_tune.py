"""Benchmark: tuning a 72 h, 1 Hz firing, both answers (target under 1 s, issue 12), against reading the data alone.

Two firings: the open-port furnace (the ware's emissivity can be fitted) and the closed demo kiln (it is
hidden, and the fit has to find that out). Each prints the time to read and select the data (the baseline,
measured in the same run), the instrument setting, the ware's fit, and all of ``tune`` (what the command
does), with ratios to the baseline; then the tuning screen's key press.

Run by hand: ``python benchmarks/bench_tune.py``.
"""

from __future__ import annotations

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
    print(f"  read and select the data (baseline): {t_load:6.3f} s")
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


def main() -> None:
    tmp = Path(tempfile.mkdtemp(prefix="fw-bench-"))
    for name, scenario in (("open-port furnace, 72 h", "open-port"), ("closed demo kiln, 72 h", "closed-kiln")):
        log = tmp / f"{scenario}.db"
        t0 = time.perf_counter()
        serve.to_log(Simulation(load_scenario(scenario).with_changes(duration_s=72 * 3600.0)), log)
        print(f"made the {name} log in {time.perf_counter() - t0:.1f} s")
        bench(name, log)


if __name__ == "__main__":
    main()
