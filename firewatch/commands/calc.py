"""``firewatch calc``: the measurement core as a calculator, for the kiln side and for scripts.

``--json`` prints one JSON object whose temperature keys end in ``_c`` and
are in degC whatever ``--units`` says; otherwise a small table.

One value is worked at a time, so any range warning of the physics is an
error here (exit status 2), except :class:`UncertaintyWarning`: the answer
stands, with a note that its first-order uncertainty is unreliable and the
suggestion of ``--monte-carlo``.
"""

from __future__ import annotations

import argparse
import json
import sys
import warnings
from typing import Any

from firewatch.commands import _args
from firewatch.commands._args import UsageError

__all__ = ["add_parser", "run"]

MATERIAL_NAMES = ("fused-silica", "sapphire", "borosilicate", "calcium-fluoride")


def add_parser(sub: argparse._SubParsersAction) -> None:
    calc = sub.add_parser(
        "calc",
        help="convert thermocouple EMF and correct pyrometer readings",
        description="Thermocouple conversions and pyrometer corrections on single values.",
    )
    kinds = calc.add_subparsers(dest="calc", metavar="KIND", required=True, parser_class=type(calc))

    def common(p: argparse.ArgumentParser) -> None:
        p.add_argument("--units", type=_args.unit, default="C", help="units of temperatures typed and shown: C, F or K (default C)")
        p.add_argument("--json", action="store_true", help="print one JSON object (temperatures in degC, keys ending _c)")

    tc = kinds.add_parser("tc", help="thermocouple EMF to temperature and back (ITS-90)")
    tc.add_argument("--type", required=True, help="thermocouple type: B, E, J, K, N, R, S or T")
    what = tc.add_mutually_exclusive_group(required=True)
    what.add_argument("--emf", type=_args.number, help="measured EMF, mV")
    what.add_argument("--temperature", type=_args.number, help="hot-junction temperature")
    tc.add_argument("--cold-junction", type=_args.number, default=None, help="cold-junction temperature (default 0 degC)")
    common(tc)

    pyro = kinds.add_parser("pyro", help="correct a single-band pyrometer reading, or predict one")
    what = pyro.add_mutually_exclusive_group(required=True)
    what.add_argument("--indicated", type=_args.number, help="what the pyrometer shows")
    what.add_argument("--true", dest="true_temperature", type=_args.number, help="the ware's true temperature: predict what the pyrometer shows")
    bands = pyro.add_mutually_exclusive_group(required=True)
    bands.add_argument("--band", type=_args.band, help="flat band START:END in um, e.g. 0.8:1.1")
    bands.add_argument("--band-file", help="CSV of wavelength_um,relative_response")
    pyro.add_argument("--emissivity", type=_args.fraction, required=True, help="the ware's emissivity in the band, (0, 1]")
    pyro.add_argument("--set-emissivity", type=_args.fraction, default=1.0, help="the instrument's emissivity setting (default 1.0)")
    path = pyro.add_mutually_exclusive_group()
    path.add_argument("--transmission", type=_args.fraction, help="gray transmission of the sight path, (0, 1]")
    path.add_argument("--window", choices=MATERIAL_NAMES, help="window material, modelled spectrally")
    pyro.add_argument("--fouling", type=_args.fraction, default=1.0, help="gray factor of window deposits with --window (default 1.0)")
    pyro.add_argument("--set-transmission", type=_args.fraction, default=1.0, help="the instrument's transmission setting (default 1.0)")
    pyro.add_argument("--background", type=_args.number, help="temperature of the surroundings the ware reflects (default: none)")
    pyro.add_argument("--emissivity-uncertainty", type=_args.non_negative, default=0.0, help="standard uncertainty of the emissivity")
    pyro.add_argument("--transmission-uncertainty", type=_args.non_negative, default=0.0, help="standard uncertainty of the transmission")
    pyro.add_argument("--instrument-uncertainty", type=_args.non_negative, default=0.0, help="the instrument's stated standard uncertainty, degrees")
    pyro.add_argument("--background-uncertainty", type=_args.non_negative, default=0.0, help="standard uncertainty of the background temperature, degrees")
    pyro.add_argument("--monte-carlo", action="store_true",
                      help="also propagate the uncertainties by Monte Carlo (JCGM 101): an asymmetric 95 %% interval")
    pyro.add_argument("--draws", type=_draws, default=100_000, help="Monte Carlo draws (default 100000)")
    pyro.add_argument("--seed", type=int, default=1, help="Monte Carlo seed (default 1; the same seed gives the same interval)")
    common(pyro)

    ratio = kinds.add_parser("ratio", help="correct a ratio (two-colour) pyrometer reading")
    ratio.add_argument("--indicated", type=_args.number, required=True, help="what the pyrometer shows")
    ratio.add_argument("--band1", type=_args.band, required=True, help="shorter band START:END in um")
    ratio.add_argument("--band2", type=_args.band, required=True, help="longer band START:END in um")
    ratio.add_argument("--slope", type=_args.positive, required=True, help="the ware's emissivity slope e1/e2")
    ratio.add_argument("--set-slope", type=_args.positive, default=1.0, help="the slope the instrument assumes (default 1.0)")
    ratio.add_argument("--slope-uncertainty", type=_args.non_negative, default=0.0, help="standard uncertainty of the slope")
    ratio.add_argument("--instrument-uncertainty", type=_args.non_negative, default=0.0, help="the instrument's stated standard uncertainty, degrees")
    common(ratio)

    window = kinds.add_parser("window", help="band-effective transmission of a window")
    window.add_argument("--material", required=True, help=f"one of {', '.join(MATERIAL_NAMES)}")
    window.add_argument("--band", type=_args.band, required=True, help="band START:END in um")
    window.add_argument("--temperature", type=_args.number, default=None, help="target temperature for the Planck weighting (default 1000 degC)")
    common(window)


def _draws(text: str) -> int:
    """Monte Carlo draws: a whole number of at least 100."""
    try:
        value = int(text)
    except ValueError:
        raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
    if value < 100:
        raise argparse.ArgumentTypeError(f"must be at least 100, got {text}")
    return value


def run(args: argparse.Namespace) -> int:
    from firewatch.physics._warnings import UncertaintyWarning

    handler = {"tc": _tc, "pyro": _pyro, "ratio": _ratio, "window": _window}[args.calc]
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("error")  # one value: any range warning is an error here ...
        warnings.simplefilter("always", UncertaintyWarning)  # ... but an unreliable linear uncertainty is a note
        result, rows = handler(args)
    notes = [str(w.message) for w in caught if issubclass(w.category, UncertaintyWarning)]
    if args.calc == "pyro":
        result["linear_unreliable"] = notes[0] if notes else None
    if args.json:
        json.dump(result, sys.stdout)
        sys.stdout.write("\n")
    else:
        _print_table(f"firewatch calc {args.calc}", rows)
        for note in notes:
            if getattr(args, "monte_carlo", False):
                note = note.split("; use the Monte Carlo")[0] + "; the Monte Carlo interval above allows for it"
            print(f"note: {note}")
    return 0


# -- helpers -------------------------------------------------------------
def _c(value: float, args: argparse.Namespace) -> float:
    from firewatch.settings.units import to_celsius

    return float(to_celsius(value, args.units))


def _show(value_c: float, args: argparse.Namespace, digits: int = 2) -> str:
    from firewatch.settings.units import from_celsius, symbol

    return f"{float(from_celsius(value_c, args.units)):.{digits}f} {symbol(args.units)}"


def _show_delta(delta: float, args: argparse.Namespace) -> str:
    from firewatch.settings.units import delta_from_celsius, symbol

    sym = "K" if args.units == "K" else symbol(args.units)
    return f"{float(delta_from_celsius(delta, args.units)):.2f} {sym}"


def _uncertainty_c(value: float, args: argparse.Namespace) -> float:
    return value * 5.0 / 9.0 if args.units == "F" else value


def _print_table(title: str, rows: list[tuple[str, str]]) -> None:
    from rich.console import Console
    from rich.table import Table

    table = Table(title=title, show_header=False, title_justify="left")
    table.add_column("quantity")
    table.add_column("value", justify="right")
    for name, value in rows:
        table.add_row(name, value)
    Console().print(table)


def _fail(option: str, exc: Exception) -> UsageError:
    return UsageError(f"{option}: {exc}")


def _tc(args: argparse.Namespace) -> tuple[dict[str, Any], list[tuple[str, str]]]:
    from firewatch.physics.thermocouples import check_type, emf_to_temperature, temperature_to_emf

    try:
        letter = check_type(args.type)
    except ValueError as exc:
        raise _fail("--type", exc) from None
    cj_c = _c(args.cold_junction, args) if args.cold_junction is not None else 0.0
    try:
        e_cj = float(temperature_to_emf(cj_c, letter))
    except ValueError as exc:
        raise _fail("--cold-junction", exc) from None
    if args.emf is not None:
        emf = args.emf
        try:
            t_c = float(emf_to_temperature(emf, letter, cj_c))
        except ValueError as exc:
            raise _fail("--emf", exc) from None
    else:
        t_c = _c(args.temperature, args)
        try:
            emf = float(temperature_to_emf(t_c, letter)) - e_cj
        except ValueError as exc:
            raise _fail("--temperature", exc) from None
    result = {"type": letter, "emf_mv": round(emf, 6), "temperature_c": round(t_c, 4), "cold_junction_c": cj_c}
    rows = [
        ("type", letter),
        ("EMF (against the cold junction)", f"{emf:.3f} mV"),
        ("cold junction", _show(cj_c, args)),
        ("hot junction", _show(t_c, args)),
    ]
    return result, rows


def _band(args: argparse.Namespace, option: str = "--band"):
    from firewatch.physics.bands import Band

    if getattr(args, "band_file", None):
        try:
            return Band.from_csv(args.band_file)
        except FileNotFoundError:
            raise UsageError(f"--band-file: no such file {args.band_file!r}") from None
        except (ValueError, OSError) as exc:
            raise _fail("--band-file", exc) from None
    start, end = getattr(args, option.lstrip("-").replace("-", "_"))
    return Band(start, end)


def _pyro(args: argparse.Namespace) -> tuple[dict[str, Any], list[tuple[str, str]]]:
    from firewatch.physics._warnings import UncertaintyWarning
    from firewatch.physics.corrections import correct_single_band, effective_transmission, indicated_single_band
    from firewatch.physics.windows import Window

    band = _band(args)
    if args.window:
        transmission: Any = Window(args.window, fouling=args.fouling)
    elif args.fouling != 1.0:
        raise UsageError("--fouling: needs --window (with --transmission give the whole gray value)")
    else:
        transmission = 1.0 if args.transmission is None else args.transmission
    background_c = _c(args.background, args) if args.background is not None else None
    common = dict(
        band=band,
        emissivity=args.emissivity,
        transmission=transmission,
        set_emissivity=args.set_emissivity,
        set_transmission=args.set_transmission,
        background_c=background_c,
    )
    try:
        if args.true_temperature is not None:
            true_c = _c(args.true_temperature, args)
            option = "--true"
            indicated_c = float(indicated_single_band(true_c, **common))
        else:
            option = "--indicated"
            indicated_c = _c(args.indicated, args)
        uncertainties = dict(
            emissivity_u=args.emissivity_uncertainty,
            transmission_u=args.transmission_uncertainty,
            instrument_u_c=_uncertainty_c(args.instrument_uncertainty, args),
            background_u_c=_uncertainty_c(args.background_uncertainty, args),
        )
        if args.background_uncertainty and background_c is None:
            raise UsageError("--background-uncertainty: needs --background")
        corrected_a, u_a = correct_single_band(indicated_c, **common, **uncertainties, return_uncertainty=True)
        tau = float(effective_transmission(band, transmission, float(corrected_a)))
        mc = None
        if args.monte_carlo:
            from firewatch.physics.montecarlo import monte_carlo_single_band

            mc = monte_carlo_single_band(indicated_c, **common, **uncertainties, draws=args.draws, seed=args.seed)
    except (ValueError, Warning) as exc:
        if isinstance(exc, UncertaintyWarning):
            raise
        raise _fail(option, exc) from None
    corrected, u = float(corrected_a), float(u_a)
    result: dict[str, Any] = {
        "indicated_c": round(indicated_c, 4),
        "corrected_c": round(corrected, 4),
        "uncertainty_c": round(u, 4),
        "transmission": round(tau, 6),
        "band_um": [band.start_um, band.end_um],
        "emissivity": args.emissivity,
        "background_c": background_c,
    }
    rows = [
        ("band", band.name),
        ("pyrometer shows", _show(indicated_c, args)),
        ("settings (emissivity, transmission)", f"{args.set_emissivity:g}, {args.set_transmission:g}"),
        ("ware emissivity", f"{args.emissivity:g}"),
        ("sight path", transmission.name if args.window else f"gray {transmission:g}"),
        ("effective transmission", f"{tau:.4f}"),
        ("reflected background", "none" if background_c is None else _show(background_c, args)),
        ("true temperature", f"{_show(corrected, args)} ± {_show_delta(u, args)} (1 σ)"),
    ]
    if mc is not None:
        low, high = float(mc.low_c), float(mc.high_c)
        result["monte_carlo"] = {
            "draws": mc.draws,
            "seed": args.seed,
            "mean_c": _rounded(float(mc.mean_c)),
            "u_c": _rounded(float(mc.u_c)),
            "ci95_c": [_rounded(low), _rounded(high)],
            "undefined_fraction": round(float(mc.undefined), 6),
        }
        rows.append((f"95 % interval (Monte Carlo, {mc.draws} draws)",
                     f"{_show(low, args)} to {_show(high, args)} "
                     f"({_signed_delta(low - corrected, args)}, {_signed_delta(high - corrected, args)})"))
    return result, rows


def _rounded(value: float) -> float | None:
    """A temperature for JSON: 4 decimals, or null where the Monte Carlo gives none (an unbounded tail)."""
    import math

    return round(value, 4) if math.isfinite(value) else None


def _signed_delta(delta: float, args: argparse.Namespace) -> str:
    from firewatch.settings.units import delta_from_celsius, symbol

    sym = "K" if args.units == "K" else symbol(args.units)
    return f"{float(delta_from_celsius(delta, args.units)):+.2f} {sym}"


def _ratio(args: argparse.Namespace) -> tuple[dict[str, Any], list[tuple[str, str]]]:
    from firewatch.physics.bands import Band
    from firewatch.physics.corrections import correct_ratio

    band1, band2 = Band(*args.band1), Band(*args.band2)
    indicated_c = _c(args.indicated, args)
    try:
        corrected_a, u_a = correct_ratio(
            indicated_c, band1, band2, args.slope, args.set_slope,
            slope_u=args.slope_uncertainty,
            instrument_u_c=_uncertainty_c(args.instrument_uncertainty, args),
            return_uncertainty=True,
        )
    except (ValueError, Warning) as exc:
        option = "--band1" if "band 1" in str(exc) else "--indicated"
        raise _fail(option, exc) from None
    corrected, u = float(corrected_a), float(u_a)
    result = {
        "indicated_c": round(indicated_c, 4),
        "corrected_c": round(corrected, 4),
        "uncertainty_c": round(u, 4),
        "slope": args.slope,
        "set_slope": args.set_slope,
    }
    rows = [
        ("bands", f"{band1.name} / {band2.name}"),
        ("pyrometer shows", _show(indicated_c, args)),
        ("slope (set, true)", f"{args.set_slope:g}, {args.slope:g}"),
        ("true temperature", f"{_show(corrected, args)} ± {_show_delta(u, args)} (1 σ)"),
    ]
    return result, rows


def _window(args: argparse.Namespace) -> tuple[dict[str, Any], list[tuple[str, str]]]:
    from firewatch.physics.bands import Band
    from firewatch.physics.windows import Window, material, refractive_index, slab_transmission

    try:
        mat = material(args.material)
    except ValueError as exc:
        raise _fail("--material", exc) from None
    band = Band(*args.band)
    t_c = 1000.0 if args.temperature is None else _c(args.temperature, args)
    try:
        from firewatch.physics.windows import band_effective_transmission

        tau = float(band_effective_transmission(band, Window(mat), t_c + 273.15))
    except (ValueError, Warning) as exc:
        raise _fail("--temperature", exc) from None
    # The dispersion formula holds only over its published range; outside it the model keeps the index at the
    # range's end (where the cut-off edge dominates), which is not the band's index and is not reported as one.
    lo_um, hi_um = mat.valid_um
    centre_um = band.centre_m * 1e6
    inside = lo_um <= centre_um <= hi_um
    n = float(refractive_index(mat, band.centre_m)) if inside else None
    validity = f"{lo_um:g}-{hi_um:g} um"
    if not inside:
        note = (f"the band centre ({centre_um:.3g} um) lies outside the dispersion formula's validity ({validity}); "
                "no index is given for it, and the model holds the index at the end of that range")
    elif band.start_um < lo_um or band.end_um > hi_um:
        edge = hi_um if band.end_um > hi_um else lo_um
        note = (f"the band runs past the dispersion formula's validity ({validity}) at {edge:g} um; "
                "beyond it the model holds the index at its value there")
    else:
        note = None
    result = {
        "material": mat.name,
        "band_um": [band.start_um, band.end_um],
        "temperature_c": t_c,
        "transmission": round(tau, 6),
        "refractive_index": None if n is None else round(n, 5),
        "dispersion_valid_um": [lo_um, hi_um],
        "dispersion_note": note,
        "cutoff_um": mat.cutoff_um,
    }
    rows = [
        ("material", f"{mat.name} ({mat.reference})"),
        ("band", band.name),
        ("dispersion formula valid", validity),
        ("refractive index at band centre", f"{n:.5f}" if n is not None else f"none: {centre_um:.3g} um is outside {validity}"),
        ("clean slab, no absorption", f"{float(slab_transmission(n)):.4f}" if n is not None else "none"),
        ("long-wavelength cut-off", f"{mat.cutoff_um:g} um"),
        ("target temperature", _show(t_c, args)),
        ("band-effective transmission", f"{tau:.4f}"),
    ]
    if note is not None:
        rows.append(("note", note))
    return result, rows
