"""Benchmark: the emissivity fit on a 72 h, 1 Hz firing (target <= 2 s), against loading the data alone.

Run by hand: ``python benchmarks/bench_tune.py``.
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from firewatch.store.reader import LogReader  # noqa: E402
from firewatch.services.replay import profiles_from_log  # noqa: E402
from firewatch.firing.tuning import fit, load_data  # noqa: E402
from firewatch.simulator import serve  # noqa: E402
from firewatch.simulator.run import Simulation  # noqa: E402
from firewatch.simulator.scenario import load_scenario  # noqa: E402


def main() -> None:
    tmp = Path(tempfile.mkdtemp(prefix="fw-bench-"))
    log = tmp / "tune72.db"
    sc = load_scenario(ROOT / "tests" / "data" / "cold-sight-scenario.toml").with_changes(emissivity=0.8, duration_s=72 * 3600.0)
    t0 = time.perf_counter()
    serve.to_log(Simulation(sc), log)
    print(f"made a 72 h cold-sight firing log in {time.perf_counter() - t0:.1f} s")
    with LogReader(log) as r:
        site, _ = profiles_from_log(r)
        t0 = time.perf_counter()
        data = load_data(r, site)
        t_load = time.perf_counter() - t0
        t0 = time.perf_counter()
        result = fit(data)
        t_fit = time.perf_counter() - t0
        t0 = time.perf_counter()
        fit(data, model="linear")
        t_lin = time.perf_counter() - t0
    print(f"load and select the data ({data.t.size} readings): {t_load:.2f} s")
    print(f"fit, constant emissivity: {t_fit:.2f} s (load + fit {t_load + t_fit:.2f} s; target <= 2 s), ratio fit/load {t_fit / t_load:.2f}")
    print(f"fit, linear in temperature: {t_lin:.2f} s")
    import numpy as np

    from firewatch.firing.tuning import reconcile_with

    idx = np.unique(np.linspace(0, data.t.size - 1, 2000).astype(int))
    t0 = time.perf_counter()
    for k in range(50):
        reconcile_with(data, 0.8 + k * 0.001, 1.0, idx)
    t_key = (time.perf_counter() - t0) / 50
    t0 = time.perf_counter()
    reconcile_with(data, 0.8, 1.0)
    t_all = time.perf_counter() - t0
    print(f"tuning screen, one key press: reconcile 2000 points spread over the firing {t_key * 1e3:.1f} ms "
          f"(target <= 100 ms with the redraw); every one of the {data.t.size} readings {t_all * 1e3:.1f} ms")
    print(f"result: {result.emissivity:.4f} (95 % CI {result.ci95[0]:.4f}-{result.ci95[1]:.4f}) from {result.points_used} points; truth 0.8000")


if __name__ == "__main__":
    main()
