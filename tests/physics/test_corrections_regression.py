"""Issue 15: the faster uncertainty path gives the values and warnings it gave before.

``tests/physics/data/corrections_regression.npz`` holds regression values: the corrected
temperatures, their standard uncertainties and the warnings that :func:`correct_single_band` and
:func:`correct_ratio` gave on the cases of :func:`cases` at commit 3cc897b, before issue 15's
rewrite of the uncertainty path. The rewrite must reproduce them to the last few ulps (the
corrected temperature bit for bit) and raise the same warnings with the same words.

Regenerate (only when a change of value is intended, and say so in the commit):
``python -m tests.physics.test_corrections_regression --write``.
"""

from __future__ import annotations

import json
import sys
import warnings
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from firewatch.physics import bands, corrections
from firewatch.physics.bands import Band
from firewatch.physics.corrections import correct_ratio, correct_single_band
from firewatch.physics.windows import Window

DATA = Path(__file__).parent / "data" / "corrections_regression.npz"

MAX_ULP = 4
"""How far (in units in the last place) a stored value may move: another machine's numpy may round its exp and log
differently in the last place. On the machine that wrote the file they agree to the bit."""

SI_BAND = Band(0.8, 1.1)
SHORT = Band(0.65, 0.7)
SWIR = Band(1.5, 1.7)
THERMAL = Band(8.0, 14.0)
R1, R2 = Band(0.945, 0.955), Band(1.045, 1.055)
# instrument bands and the readings below are common practice, no source


def _readings(seed: int, n: int, lo: float, hi: float) -> np.ndarray:
    """Readings in random order with a missing one, one beyond the table and one exactly on the table's lowest point."""
    x = np.random.default_rng(seed).uniform(lo, hi, n)
    x[3] = np.nan
    x[7] = 4200.0  # beyond 4000 K
    x[11] = 200.0 - 273.15  # the table's first point
    return x


def cases() -> Iterator[tuple[str, Callable[[], Any]]]:
    """(name, call) pairs; each call returns (t, u)."""
    r = _readings(1, 1000, 500.0, 3000.0)
    yield "gray, emissivity and instrument (the benchmark's case)", lambda: correct_single_band(
        r, SI_BAND, 0.85, emissivity_u=0.02, instrument_u_c=1.0, return_uncertainty=True)
    yield "gray, no linearity check", lambda: correct_single_band(
        r, SI_BAND, 0.85, emissivity_u=0.02, instrument_u_c=1.0, return_uncertainty=True, check_linearity=False)
    yield "gray settings and a numeric transmission", lambda: correct_single_band(
        r, SHORT, 0.7, 0.8, 0.9, 0.95, emissivity_u=0.03, transmission_u=0.02, instrument_u_c=2.0,
        return_uncertainty=True)
    window = Window("fused-silica", fouling=0.9)
    hot = _readings(2, 1000, 450.0, 1600.0)
    yield "window and background, all four inputs", lambda: correct_single_band(
        hot, SI_BAND, 0.8, window, background_c=400.0, emissivity_u=0.05, transmission_u=0.01, instrument_u_c=2.0,
        background_u_c=10.0, return_uncertainty=True)
    yield "window and background, no linearity check", lambda: correct_single_band(
        hot, SI_BAND, 0.8, window, background_c=400.0, emissivity_u=0.05, transmission_u=0.01, instrument_u_c=2.0,
        background_u_c=10.0, return_uncertainty=True, check_linearity=False)
    near = _readings(3, 800, 880.0, 1300.0)
    yield "background near the target (some below it)", lambda: correct_single_band(
        near, SI_BAND, 0.5, background_c=900.0, emissivity_u=0.05, instrument_u_c=1.0, background_u_c=10.0,
        return_uncertainty=True)
    cold = _readings(4, 800, 100.0, 900.0)
    yield "long wavelength, large u(e)/e", lambda: correct_single_band(
        cold, THERMAL, 0.3, emissivity_u=0.06, instrument_u_c=1.0, return_uncertainty=True)
    yield "short-wave infrared, transmission only", lambda: correct_single_band(
        r, SWIR, 0.9, 0.6, transmission_u=0.1, return_uncertainty=True)
    grid_t = np.linspace(600.0, 1400.0, 41)[:, None]
    grid_e = np.array([0.1, 0.3, 0.6, 1.0])
    yield "broadcast readings x emissivities", lambda: correct_single_band(
        grid_t, SI_BAND, grid_e, emissivity_u=0.1 * grid_e, instrument_u_c=1.5, return_uncertainty=True)
    missing = np.arange(hot.size) % 5 == 0  # the pipeline's cavity fallback: no background value here
    bg = np.where(missing, np.nan_to_num(hot, nan=1000.0), 420.0)
    yield "the pipeline's fallback mix", lambda: correct_single_band(
        hot, SI_BAND, np.where(missing, 1.0, 0.85), window, background_c=bg,
        emissivity_u=np.where(missing, 0.0, 0.02), transmission_u=0.01, instrument_u_c=np.abs(hot) * 0.003 + 1.0,
        return_uncertainty=True)
    yield "one reading", lambda: correct_single_band(
        1150.0, SI_BAND, 0.8, Window("sapphire"), background_c=900.0, emissivity_u=0.02, instrument_u_c=2.0,
        background_u_c=5.0, return_uncertainty=True)
    yield "one reading, background near the target", lambda: correct_single_band(
        1000.0, SI_BAND, 0.7, emissivity_u=0.1, instrument_u_c=1.0, background_c=995.0, background_u_c=10.0,
        return_uncertainty=True)
    rr = _readings(5, 1000, 700.0, 3000.0)
    yield "ratio, slope and instrument", lambda: correct_ratio(
        rr, R1, R2, 1.05, 0.98, slope_u=0.01, instrument_u_c=np.abs(rr) * 0.005, return_uncertainty=True)
    yield "ratio, one reading", lambda: correct_ratio(1300.0, R1, R2, 0.95, slope_u=0.02, instrument_u_c=2.0,
                                                       return_uncertainty=True)


def _run(call: Callable[[], Any]) -> tuple[np.ndarray, np.ndarray, list[str]]:
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        t, u = call()
    said = [f"{w.category.__name__}: {w.message}" for w in caught]
    return np.asarray(t, dtype=float), np.asarray(u, dtype=float), said


def _write() -> None:
    arrays: dict[str, np.ndarray] = {}
    said: dict[str, list[str]] = {}
    for i, (name, call) in enumerate(cases()):
        t, u, w = _run(call)
        arrays[f"t{i}"], arrays[f"u{i}"], said[name] = t, u, w
    DATA.parent.mkdir(exist_ok=True)
    np.savez_compressed(DATA, warnings=np.array(json.dumps(said, indent=1)), **arrays)


def _stored() -> tuple[Any, dict[str, list[str]]]:
    data = np.load(DATA)
    return data, json.loads(str(data["warnings"]))


CASES = list(cases())


@pytest.mark.parametrize("i", range(len(CASES)), ids=[name for name, _ in CASES])
def test_same_values_and_warnings_as_before(i: int) -> None:
    # issue 15: the rewrite of the uncertainty path changes no value and no warning
    data, said = _stored()
    name, call = CASES[i]
    t, u, w = _run(call)
    t_before, u_before = data[f"t{i}"], data[f"u{i}"]  # regression values (commit 3cc897b)
    for now, before in ((t, t_before), (u, u_before)):
        assert np.array_equal(np.isnan(now), np.isnan(before))
        ok = ~np.isnan(before)
        np.testing.assert_array_max_ulp(now[ok], before[ok], maxulp=MAX_ULP)
    assert w == said[name]


@pytest.mark.parametrize("i", range(len(CASES)), ids=[name for name, _ in CASES])
def test_bucket_reads_and_numpy_interp_reads_agree_to_the_bit(i: int, monkeypatch: pytest.MonkeyPatch) -> None:
    # issue 15: on any machine, the corrections read through the buckets equal those read by numpy.interp's search
    t, u, w = _run(CASES[i][1])
    monkeypatch.setattr(bands, "_SEARCH_BELOW", 1 << 62)  # every table read by numpy.interp
    t2, u2, w2 = _run(CASES[i][1])
    np.testing.assert_array_equal(t, t2)
    np.testing.assert_array_equal(u, u2)
    assert w == w2


def test_the_cases_exercise_every_warning() -> None:
    # the pins above are only as good as the warnings the cases raise: each kind must occur (regression values)
    _, said = _stored()
    text = "\n".join(m for ms in said.values() for m in ms)
    for cause in ("u(e)/e = ", "is near the target", "transmission's uncertainty", "has no value within 2 u",
                  "below what the background alone", "OutOfRangeWarning: "):
        assert cause in text, cause
    assert not any("UncertaintyWarning" in m for m in said["gray, no linearity check"])


def test_the_worst_value_in_a_later_slice_is_found_and_named() -> None:
    # issue 15: the probes run slice by slice; the one value that warns, in the last slice, must be counted and
    # its cause named as for that reading alone (u(e)/e = 0.1/0.3: the module's example of a large ratio)
    n = 3 * corrections._SLICE + 5
    eps = np.full(n, 0.8)
    u_eps = np.full(n, 0.001)
    eps[-2], u_eps[-2] = 0.3, 0.1
    with pytest.warns(Warning) as many:
        correct_single_band(np.full(n, 1000.0), SI_BAND, eps, emissivity_u=u_eps, instrument_u_c=1.0, return_uncertainty=True)
    with pytest.warns(Warning) as one:
        correct_single_band(1000.0, SI_BAND, 0.3, emissivity_u=0.1, instrument_u_c=1.0, return_uncertainty=True)
    assert [str(w.message) for w in many] == [f"1 of {n} values: " + str(w.message) for w in one]
    assert "u(e)/e = 0.33" in str(one[0].message)


@pytest.mark.parametrize("i", [0, 5, 7], ids=[CASES[i][0] for i in (0, 5, 7)])
def test_slices_change_no_value_and_no_warning(i: int, monkeypatch: pytest.MonkeyPatch) -> None:
    # slices of 97 readings (ending anywhere) against one slice for all: the same doubles, the same words
    t, u, w = _run(CASES[i][1])
    monkeypatch.setattr(corrections, "_SLICE", 97)
    t2, u2, w2 = _run(CASES[i][1])
    np.testing.assert_array_equal(t2, t)
    np.testing.assert_array_equal(u2, u)
    assert w2 == w


if __name__ == "__main__":
    if sys.argv[1:] == ["--write"]:
        _write()
        print(f"wrote {DATA}")
    else:
        print(__doc__)
