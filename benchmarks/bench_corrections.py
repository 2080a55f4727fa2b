"""Benchmark: single-band corrections per second, against numpy.interp and a naive root-finder.

Run by hand: ``python benchmarks/bench_corrections.py``. Prints ratios
against baselines measured in the same run; no timings are asserted in tests.
Times are CPU times of this process (the least of a few runs), so that other
work on a shared machine does not enter them.

Targets (issue 2): no slower than 3 x one numpy.interp over the same number
of readings; at least 500 x faster than per-reading quadrature inside a
root-finder; largest error against quadrature <= 0.01 K over 500-3000 degC.
Issue 12: the Monte Carlo propagation at 10^4 draws under 50 ms per reading,
against first-order propagation over the same 10^4 values as a baseline.
Issue 15: the uncertainty path (with and without the linearity check) at most
4 x one numpy.interp; also shown with the tables read by numpy.interp's own
search (the lookups before issue 15) and for time-ordered readings, where
numpy.interp's guess from the previous reading spares most of its search.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np
from scipy.integrate import quad
from scipy.optimize import brentq

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))  # this checkout's firewatch, not an installed one

from firewatch.physics import bands  # noqa: E402
from firewatch.physics.bands import Band  # noqa: E402
from firewatch.physics.corrections import correct_ratio, correct_single_band  # noqa: E402
from firewatch.physics.montecarlo import monte_carlo_single_band  # noqa: E402
from firewatch.physics.planck import planck_radiance  # noqa: E402
from firewatch.physics.windows import Window  # noqa: E402


def best_of(fn, repeat: int = 5) -> float:
    """Least CPU time of this process over ``repeat`` calls: on a shared machine, others' work stays out of it."""
    times = []
    for _ in range(repeat):
        t0 = time.process_time()
        fn()
        times.append(time.process_time() - t0)
    return min(times)


def naive_correct(indicated_c: float, start_um: float, end_um: float, eps: float) -> float:
    """Per reading: quadrature of Planck inside a root-finder, the way one would write it first."""

    def signal(t_k: float) -> float:
        return quad(lambda lam: planck_radiance(lam, t_k), start_um * 1e-6, end_um * 1e-6, epsrel=1e-12)[0]

    measured = signal(indicated_c + 273.15)
    return brentq(lambda t: eps * signal(t) - measured, 200.0, 4500.0, xtol=1e-9) - 273.15


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--readings", type=int, default=1_000_000)
    parser.add_argument("--naive-sample", type=int, default=300)
    args = parser.parse_args()
    rng = np.random.default_rng(1)
    band = Band(0.8, 1.1)
    eps = 0.85
    indicated = rng.uniform(500.0, 3000.0, args.readings)
    correct_single_band(indicated[:10], band, eps)  # build the table outside the timing

    log_t, log_s = band._table
    xs = rng.uniform(log_s[0], log_s[-1], args.readings)
    t_interp = best_of(lambda: np.interp(xs, log_s, log_t))
    t_plain = best_of(lambda: correct_single_band(indicated, band, eps))
    window = Window("fused-silica", fouling=0.9)
    correct_single_band(indicated[:10], band, eps, window, background_c=400.0)
    t_full = best_of(lambda: correct_single_band(indicated, band, eps, window, background_c=400.0))
    unc = dict(emissivity_u=0.02, instrument_u_c=1.0, return_uncertainty=True)  # the recorder's two uncertain inputs

    def uncertainty_times(readings: np.ndarray) -> tuple[float, float, float]:
        checked = best_of(lambda: correct_single_band(readings, band, eps, **unc), repeat=3)
        unchecked = best_of(lambda: correct_single_band(readings, band, eps, check_linearity=False, **unc), repeat=3)
        ratio = best_of(lambda: correct_ratio(readings, r1, r2, 1.02, slope_u=0.01, instrument_u_c=1.0, return_uncertainty=True),
                        repeat=3)
        return checked, unchecked, ratio

    r1, r2 = Band(0.75, 0.85), Band(0.95, 1.05)
    correct_ratio(indicated[:10], r1, r2, 1.0)
    t_unc, t_unc_lin, t_ratio = uncertainty_times(indicated)
    search_below = bands._SEARCH_BELOW
    bands._SEARCH_BELOW = args.readings + 1  # every table read by numpy.interp's own search (the lookups before issue 15)
    t_unc_np, t_unc_lin_np, t_ratio_np = uncertainty_times(indicated)
    bands._SEARCH_BELOW = search_below
    ordered = np.sort(indicated)  # a firing's readings in time order
    xs_ordered = np.sort(xs)
    t_ord_interp = best_of(lambda: np.interp(xs_ordered, log_s, log_t))
    t_unc_ord, t_unc_lin_ord, t_ratio_ord = uncertainty_times(ordered)

    sample = indicated[: args.naive_sample]
    t0 = time.process_time()
    naive = np.array([naive_correct(float(x), 0.8, 1.1, eps) for x in sample])
    t_naive_each = (time.process_time() - t0) / sample.size
    fast = correct_single_band(sample, band, eps)
    err = np.max(np.abs(fast - naive))

    n = args.readings
    print(f"readings: {n:,}")
    print(f"numpy.interp baseline:             {t_interp * 1e3:8.1f} ms")
    print(f"correct_single_band (gray, no bg): {t_plain * 1e3:8.1f} ms  {n / t_plain:,.0f}/s  ratio to interp {t_plain / t_interp:.2f} (target <= 3)")
    print(f"  with window + background:        {t_full * 1e3:8.1f} ms  ratio to interp {t_full / t_interp:.2f}")
    print(f"  with uncertainty (default check): {t_unc * 1e3:8.1f} ms  ratio to interp {t_unc / t_interp:.2f} (target <= 4)")
    print(f"  with uncertainty, no check:       {t_unc_lin * 1e3:8.1f} ms  ratio to interp {t_unc_lin / t_interp:.2f} (target <= 4)")
    print(f"  the same, tables by numpy.interp: {t_unc_np * 1e3:8.1f} ms  ratio {t_unc_np / t_interp:.2f}; no check "
          f"{t_unc_lin_np * 1e3:.1f} ms  ratio {t_unc_lin_np / t_interp:.2f}")
    print(f"correct_ratio with uncertainty:    {t_ratio * 1e3:8.1f} ms  ratio to interp {t_ratio / t_interp:.2f}"
          f"  (numpy.interp's search: {t_ratio_np / t_interp:.2f})")
    print(f"time-ordered readings: numpy.interp {t_ord_interp * 1e3:.1f} ms; uncertainty, check {t_unc_ord / t_ord_interp:.2f} x, "
          f"no check {t_unc_lin_ord / t_ord_interp:.2f} x, ratio {t_ratio_ord / t_ord_interp:.2f} x that interp")
    print(f"naive quadrature+root per reading: {t_naive_each * 1e3:8.2f} ms  speed-up {t_naive_each * n / t_plain:,.0f} x (target >= 500)")
    print(f"largest error vs quadrature, {sample.size} readings 500-3000 degC: {err:.2e} K (target <= 0.01)")

    # Monte Carlo (issue 12): 10^4 draws of every input per reading, with a window and a background
    draws = 10_000
    mc_kw = dict(emissivity_u=0.05, transmission_u=0.01, instrument_u_c=2.0, background_c=900.0, background_u_c=10.0)
    hot = rng.uniform(1000.0, 1500.0, draws)  # readings well above the 900 degC background
    t_lin = best_of(lambda: correct_single_band(hot, band, eps, window, background_c=900.0, emissivity_u=0.05,
                                                transmission_u=0.01, instrument_u_c=2.0, background_u_c=10.0,
                                                return_uncertainty=True, check_linearity=False))
    t_check = best_of(lambda: correct_single_band(hot, band, eps, window, background_c=900.0, emissivity_u=0.05,
                                                  transmission_u=0.01, instrument_u_c=2.0, background_u_c=10.0,
                                                  return_uncertainty=True))
    monte_carlo_single_band(1200.0, band, eps, window, **mc_kw)  # tables built outside the timing
    t_mc1 = best_of(lambda: monte_carlo_single_band(1200.0, band, eps, window, draws=draws, **mc_kw))
    batch = hot[:100]
    t_mc100 = best_of(lambda: monte_carlo_single_band(batch, band, eps, window, draws=draws, **mc_kw), repeat=3) / batch.size
    print(f"first-order uncertainty over {draws:,} readings (baseline): {t_lin * 1e3:8.2f} ms")
    print(f"  with the linearity probes (the default):        {t_check * 1e3:8.2f} ms  ratio to baseline {t_check / t_lin:.2f}")
    print(f"Monte Carlo, {draws:,} draws, one reading:        {t_mc1 * 1e3:8.2f} ms  ratio to baseline {t_mc1 / t_lin:.2f} (target <= 50 ms)")
    print(f"Monte Carlo, {draws:,} draws, per reading of 100: {t_mc100 * 1e3:8.2f} ms  ratio to baseline {t_mc100 / t_lin:.2f}")


if __name__ == "__main__":
    main()
