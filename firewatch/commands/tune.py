"""``firewatch tune``: fit a pyrometer's emissivity (and transmission) against thermocouple references."""

from __future__ import annotations

import argparse
import datetime as dt
import json
import sys

from firewatch.cli import UsageError
from firewatch.commands._common import iso, open_log

__all__ = ["add_parser", "run"]


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("tune", help="fit the emissivity setting against thermocouple references",
                       description="Fit the emissivity (optionally the window transmission, or an emissivity linear in "
                       "temperature) that makes the reconciled pyrometer agree with the reference thermocouple, using only "
                       "holds and slow ramps. Exits 1, saying why, when the data cannot support a fit.")
    p.add_argument("log", metavar="FILE.db")
    p.add_argument("--channel", help="the single-band pyrometer (default: the first)")
    p.add_argument("--reference", help="the reference thermocouple (default: the pyrometer's)")
    p.add_argument("--model", choices=("constant", "linear"), default="constant", help="emissivity constant or linear in temperature")
    p.add_argument("--fit-transmission", action="store_true", help="also fit a gray transmission factor (window fouling)")
    p.add_argument("--site", help="site profile to use instead of the one stored in the log")
    p.add_argument("--json", action="store_true", help="print one JSON object")
    p.add_argument("--apply", metavar="SITE.toml", help="write the tuned values into this site profile, keeping its comments")


def run(args: argparse.Namespace) -> int:
    from firewatch.settings._tomlcheck import ProfileError
    from firewatch.settings.profile import load_site
    from firewatch.services.replay import profiles_from_log
    from firewatch.firing.tuning import TuneError, fit, load_data

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
            data = load_data(reader, site, args.channel, args.reference)
            result = fit(data, args.model, args.fit_transmission)
        except TuneError as exc:
            if args.json:
                json.dump({"refused": str(exc)}, sys.stdout)
                sys.stdout.write("\n")
            print(f"firewatch tune: refused: {exc}", file=sys.stderr)
            return 1
        start = reader.firing().get("started_t")
    out = {
        "channel": data.py.name,
        "reference": data.reference,
        "model": result.model,
        "emissivity": result.emissivity,
        "ci95": list(result.ci95),
        "points_used": result.points_used,
        "blocks": result.blocks,
        "windows": result.windows,
        "residual_c": result.residual_c,
        "model_fits": result.model_fits,
        "note": result.note,
        "profile_emissivity": data.py.emissivity,
    }
    if result.slope_per_100c is not None:
        out["slope_per_100c"] = result.slope_per_100c
    if result.transmission is not None:
        out["transmission"] = result.transmission
        out["transmission_ci95"] = list(result.transmission_ci95) if result.transmission_ci95 is not None else None
    if args.apply:
        values = {"emissivity": result.emissivity,
                  "emissivity_uncertainty": round((result.ci95[1] - result.ci95[0]) / (2 * 1.96), 4)}
        if result.transmission is not None:
            values["fouling"] = result.transmission
        when = dt.datetime.now(dt.timezone.utc).isoformat(timespec="seconds").replace("+00:00", "Z")
        comment = (f"tuned by firewatch tune from {args.log} (firing from {iso(start)}) at {when}: 95 % CI "
                   f"{result.ci95[0]:.3f}-{result.ci95[1]:.3f}, {result.points_used} points, residual sd {result.residual_c['sd']:.2f} K")
        try:
            from firewatch.firing.profile_writer import apply_tuning

            apply_tuning(args.apply, data.py.name, values, comment)
        except FileNotFoundError:
            raise UsageError(f"--apply: no such file {args.apply!r}") from None
        except ProfileError as exc:
            raise UsageError(f"--apply: {exc.problems[0]}") from None
        out["applied_to"] = args.apply
    if args.json:
        json.dump(out, sys.stdout)
        sys.stdout.write("\n")
        return 0
    from rich.console import Console
    from rich.table import Table

    console = Console()
    console.print(f"{data.py.name} against {data.reference}: emissivity {result.emissivity:.3f} "
                  f"(95 % CI {result.ci95[0]:.3f}-{result.ci95[1]:.3f}; the profile says {data.py.emissivity:g})"
                  + (f", transmission factor {result.transmission:.3f}" if result.transmission is not None else ""))
    console.print(f"{result.points_used} points in {result.blocks} ten-minute blocks; residuals mean {result.residual_c['mean']:+.2f} K, "
                  f"sd {result.residual_c['sd']:.2f} K, trend {result.residual_c['trend_per_100c']:+.2f} K per 100 °C")
    if result.note:
        console.print(result.note)
    table = Table(title="stretches", title_justify="left")
    for col in ("from", "to", "points", "used", "reason"):
        table.add_column(col)
    for w in result.windows:
        table.add_row(f"{w['start_s'] / 3600:.2f} h", f"{w['end_s'] / 3600:.2f} h", str(w["points"]), "yes" if w["used"] else "no", w["reason"])
    console.print(table)
    if args.apply:
        console.print(f"written to {args.apply}")
    return 0
