"""``firewatch tune``: set a pyrometer from thermocouple references, in two answers.

The *instrument setting* (the emissivity to dial into the instrument so that
it reads the reference) is given wherever a valid stretch exists; the
*ware's emissivity* where the background lets the firing separate it, and
otherwise one sentence saying why not. Exit 0 whenever the first answer
exists; exit 1, saying which condition failed, only when no stretch is
usable; exit 2 for a bad command line.
"""

from __future__ import annotations

import argparse
import datetime as dt
import json
import sys
from typing import Any

from firewatch.commands._args import UsageError
from firewatch.commands._common import iso, open_log

__all__ = ["add_parser", "run"]


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("tune", help="set the pyrometer's emissivity from thermocouple references",
                       description="From the holds and slow ramps of a recorded firing: the emissivity to set on the "
                       "instrument so that it reads what the reference thermocouple reads (always, with a 95 % interval), "
                       "and the ware's own emissivity where the firing can separate it from the window and the reflected "
                       "background (optionally with the window transmission, or linear in temperature). Exits 1, saying "
                       "why, only when no stretch of the firing is usable.")
    p.add_argument("log", metavar="FILE.db")
    p.add_argument("--channel", help="the single-band pyrometer (default: the first)")
    p.add_argument("--reference", help="the reference thermocouple (default: the pyrometer's)")
    p.add_argument("--model", choices=("constant", "linear"), default="constant", help="the ware's emissivity constant or linear in temperature")
    p.add_argument("--fit-transmission", action="store_true", help="also fit a gray transmission factor (window fouling)")
    p.add_argument("--site", help="site profile to use instead of the one stored in the log")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--apply", metavar="SITE.toml", help="write the instrument setting (set_emissivity) and, where found, the "
                   "ware's emissivity into this site profile, keeping its comments")


def run(args: argparse.Namespace) -> int:
    from firewatch.firing.tuning import TuneError, interval_text, load_data, tune
    from firewatch.services.replay import profiles_from_log
    from firewatch.settings._tomlcheck import ProfileError
    from firewatch.settings.profile import load_site

    if args.apply:
        try:  # refuse a profile that cannot take the result before spending a fit on it
            load_site(args.apply)
        except ProfileError as exc:
            raise UsageError(f"--apply: {exc.problems[0]}") from None
    with open_log(args.log) as reader:
        try:
            site, _ = profiles_from_log(reader)
            if args.site:
                site = load_site(args.site)
        except ProfileError as exc:
            raise UsageError(f"--site: {exc.problems[0]}") from None
        if args.channel and site.pyrometer(args.channel) is None:
            raise UsageError(f"--channel: no pyrometer {args.channel!r}; the site has {', '.join(p.name for p in site.pyrometers)}")
        if args.reference and site.thermocouple(args.reference) is None:
            raise UsageError(f"--reference: no thermocouple {args.reference!r}")
        try:
            result = tune(load_data(reader, site, args.channel, args.reference), args.model, args.fit_transmission)
        except TuneError as exc:
            if args.json:
                json.dump({"refused": str(exc)}, sys.stdout)
                sys.stdout.write("\n")
            print(f"firewatch tune: refused: {exc}", file=sys.stderr)
            return 1
        start = reader.firing().get("started_t")
    data, setting, ware = result.data, result.instrument, result.ware
    found = ware if ware is not None and not ware.emissivity_held else None  # the ware's emissivity, where identified
    out: dict[str, Any] = {
        "channel": data.py.name,
        "reference": data.reference,
        "instrument_emissivity": setting.emissivity,
        "instrument_emissivity_ci95": list(setting.ci95),
        "instrument_basis": setting.basis,
        "instrument_stretches": setting.by_stretch,
        "instrument_note": setting.note,
        "profile_set_emissivity": data.py.set_emissivity,
        "emissivity": found.emissivity if found is not None else None,
        "ci95": list(found.ci95) if found is not None else None,
        "hidden_reason": result.hidden_reason,
        "model": args.model,
        "points_used": int(data.valid.sum()),
        "blocks": ware.blocks if ware is not None else None,
        "windows": data.windows,
        "residual_c": found.residual_c if found is not None else None,
        "model_fits": found.model_fits if found is not None else None,
        "note": ware.note if ware is not None else "",
        "profile_emissivity": data.py.emissivity,
    }
    if found is not None and found.slope_per_100c is not None:
        out["slope_per_100c"] = found.slope_per_100c
    if ware is not None and ware.transmission is not None and ware.transmission_ci95 is not None:
        out["transmission"] = ware.transmission
        out["transmission_ci95"] = list(ware.transmission_ci95)
    written: dict[str, float] = {}
    not_written: list[str] = []
    if args.apply:
        written, not_written = _apply(args, result, start, found)
        out["applied_to"] = args.apply
        out["applied"] = written
        out["not_applied"] = not_written
    if args.json:
        json.dump(out, sys.stdout)
        sys.stdout.write("\n")
        return 0
    from rich.console import Console
    from rich.table import Table

    console = Console(highlight=False)
    console.print(f"[bold]{data.py.name}[/bold] against {data.reference}")
    console.print(f"instrument setting: set the emissivity on {data.py.name} to [bold]{setting.emissivity:.3f}[/bold] "
                  f"(95 % interval {interval_text(setting.ci95)}; it is set to {data.py.set_emissivity:g} now), "
                  f"transmission setting left at {data.py.set_transmission:g}; from {setting.basis}")
    if len(setting.by_stretch) > 1:
        by = Table(title="the instrument setting at each stretch (a drift with temperature shows here)", title_justify="left")
        for col in ("from", "to", "reference", "", "setting", "95 % interval"):
            by.add_column(col, justify="right" if col in ("reference", "setting") else "left")
        for s in setting.by_stretch:
            by.add_row(f"{s['start_s'] / 3600:.2f} h", f"{s['end_s'] / 3600:.2f} h", f"{s['ref_c']:.0f} °C",
                       "hold" if s["hold"] else "ramp", f"{s['emissivity']:.3f}" + (" ◀" if s.get("basis") else ""),
                       interval_text((s["ci95"][0], s["ci95"][1])))
        console.print(by)
    if setting.note:
        console.print(f"  {setting.note}")
    if found is not None:
        console.print(f"ware's emissivity: [bold]{found.emissivity:.3f}[/bold] (95 % interval {interval_text(found.ci95)}; "
                      f"the profile says {data.py.emissivity:g})"
                      + (f", window transmission factor {found.transmission:.3f} ({interval_text(found.transmission_ci95)})"
                         if found.transmission is not None and found.transmission_ci95 is not None else ""))
        console.print(f"  {found.points_used} points in {found.blocks} ten-minute blocks; residuals mean {found.residual_c['mean']:+.2f} K, "
                      f"sd {found.residual_c['sd']:.2f} K, trend {found.residual_c['trend_per_100c']:+.2f} K per 100 °C")
    else:
        console.print(f"ware's emissivity: not found: {result.hidden_reason}")
        if ware is not None and ware.transmission is not None and ware.transmission_ci95 is not None:
            console.print(f"  window transmission factor {ware.transmission:.3f} ({interval_text(ware.transmission_ci95)}), "
                          f"with the emissivity held at the profile's {data.py.emissivity:g}")
    if ware is not None and ware.note and not ware.emissivity_held:
        console.print(f"  {ware.note}")
    table = Table(title="stretches used and rejected", title_justify="left")
    for col in ("from", "to", "points", "used", "reason"):
        table.add_column(col)
    for w in data.windows:
        table.add_row(f"{w['start_s'] / 3600:.2f} h", f"{w['end_s'] / 3600:.2f} h", str(w["points"]), "yes" if w["used"] else "no", w["reason"])
    console.print(table)
    if args.apply:
        if written:
            names = " and ".join(f"{k} = {v:g}" for k, v in written.items())
            console.print(f"wrote {names} into {args.apply}"
                          + (f"; dial {written['set_emissivity']:.3f} into {data.py.name} itself" if "set_emissivity" in written else ""))
        for why in not_written:
            console.print(f"not written: {why}")
    return 0


def _apply(args: argparse.Namespace, result: Any, start: float | None, found: Any) -> tuple[dict[str, float], list[str]]:
    """Write what the firing answered into the profile; return what was written and why anything was not."""
    from firewatch.firing.profile_writer import apply_tuning
    from firewatch.firing.tuning import interval_text
    from firewatch.settings._tomlcheck import ProfileError

    setting, ware, py = result.instrument, result.ware, result.data.py
    values: dict[str, float] = {}
    not_written: list[str] = []
    parts: list[str] = []
    if setting.emissivity <= 1.0:
        values["set_emissivity"] = setting.emissivity
        parts.append(f"instrument setting {setting.emissivity:.3f} (95 % interval {interval_text(setting.ci95)}) from {setting.basis}")
    else:
        not_written.append(f"set_emissivity: the instrument setting {setting.emissivity:.3f} is above 1 ({setting.note})")
    if found is not None:
        values["emissivity"] = found.emissivity
        values["emissivity_uncertainty"] = round((found.ci95[1] - found.ci95[0]) / (2 * 1.96), 4)
        parts.append(f"ware's emissivity {found.emissivity:.3f} (95 % interval {interval_text(found.ci95)}), "
                     f"{found.points_used} points, residual sd {found.residual_c['sd']:.2f} K")
    else:
        not_written.append(f"emissivity: the ware's emissivity was not found ({result.hidden_reason})")
    if ware is not None and ware.transmission is not None:
        values["fouling"] = ware.transmission
        parts.append(f"window transmission factor {ware.transmission:.3f} (95 % interval {interval_text(ware.transmission_ci95)})")
    if not values:
        return {}, not_written
    when = dt.datetime.now(dt.UTC).isoformat(timespec="seconds").replace("+00:00", "Z")
    comment = f"tuned by firewatch tune from {args.log} (firing from {iso(start)}) at {when}: " + "; ".join(parts)
    try:
        apply_tuning(args.apply, py.name, values, comment)
    except FileNotFoundError:
        raise UsageError(f"--apply: no such file {args.apply!r}") from None
    except ProfileError as exc:
        raise UsageError(f"--apply: {exc.problems[0]}") from None
    return {k: round(float(v), 4) for k, v in values.items()}, not_written
