"""Scenarios (TOML) and fault specifications for the simulated kiln.

A scenario names a site profile and a schedule, the ware's true optical
properties, the kiln's parameters and the faults to inject::

    [scenario]
    name = "..."
    site = "demo-site.toml"       # beside this file, or a shipped profile
    schedule = "demo-glaze.toml"
    start = "2026-03-14T05:00:00Z" # simulated clock at the start (UTC)
    interval_s = 1.0               # one reading set per simulated second
    duration_min = 1500            # default: the schedule, then cooling to cool_end_c
    cool_end_c = 150
    seed = 7

    [ware]
    emissivity = 0.88              # true, in the single-band pyrometer's band
    slope = 1.0                    # true e1/e2 seen by a ratio pyrometer
    fouling = 1.0                  # gray transmission of deposits on the window at the start

    [kiln]                         # any KilnParameters field
    p_max_w = 11000

    [[fault]]
    kind = "tc-drift"
    at_min = 600
    channel = "tc2"
    rate = 6

Fault kinds and their parameters (defaults in brackets):

=================== ==========================================================
tc-drift            channel [reference thermocouple], rate degC/h [6]
tc-open             channel [reference thermocouple]
loop-break          channel [first pyrometer]: its signal is lost (ERR on the
                    line, 0 mA on a 4-20 mA loop over Modbus)
window-fouling      rate, fraction of transmission lost per hour [0.05]
emissivity-step     to, the new emissivity in the single-band instrument's band
                    [+0.07 when slope is not given, else unchanged]; slope,
                    the new ratio e1/e2 of the emissivities in a ratio
                    instrument's two bands [unchanged] (a non-gray step:
                    ``slope`` alone, or with ``to``)
dropout             seconds [60], disconnect 0/1 [0] (drop the TCP client)
garbage             seconds [60], fraction of lines spoiled [0.3]
=================== ==========================================================

On the command line a fault is ``KIND@MINUTES[:KEY=VALUE,...]``, for
example ``tc-drift@600:channel=tc2,rate=6``.

Built-in scenarios are named in :data:`BUILT_IN` (``firewatch sim
--list-scenarios``); wherever a scenario is asked for, a built-in name or a
file will do.
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, field, fields, replace
from pathlib import Path
from typing import Any

from firewatch.settings._tomlcheck import ProfileError, TomlReader, in_range
from firewatch.settings.profile import SiteProfile, load_site, profiles_dir, resolve_profile
from firewatch.settings.schedule import Schedule, load_schedule
from firewatch.simulator.kiln import KilnParameters

__all__ = ["BUILT_IN", "FAULT_KINDS", "Fault", "Scenario", "load_scenario", "parse_fault", "scenario_path", "DEMO_SCENARIO"]

DEMO_SCENARIO = "demo-scenario.toml"

BUILT_IN: dict[str, tuple[str, str]] = {
    "closed-kiln": (DEMO_SCENARIO, "Kiln 3, a closed electric kiln, glaze firing; its walls hide the ware's emissivity "
                                   "from the pyrometer; the default"),
    "open-port": ("open-port-scenario.toml", "Furnace 5, an electric box furnace for trials; its pyrometer looks at the "
                                             "load through a water-cooled sight tube, so the load's emissivity can be fitted"),
}
"""Built-in scenarios: name -> (file among the shipped profiles, what it is)."""


def scenario_path(name: str | Path | None) -> Path:
    """The file of a built-in scenario by name, else ``name`` as a path (the default scenario for None)."""
    if name is None:
        return profiles_dir() / DEMO_SCENARIO
    if str(name) in BUILT_IN:
        return profiles_dir() / BUILT_IN[str(name)][0]
    return Path(name)

FAULT_KINDS: dict[str, dict[str, Any]] = {
    "tc-drift": {"channel": None, "rate": 6.0},
    "tc-open": {"channel": None},
    "loop-break": {"channel": None},
    "window-fouling": {"rate": 0.05},
    "emissivity-step": {"to": None, "slope": None},
    "dropout": {"seconds": 60.0, "disconnect": 0.0},
    "garbage": {"seconds": 60.0, "fraction": 0.3},
}
"""Each fault kind and its parameters with defaults (None: decided by the scenario)."""


@dataclass(frozen=True)
class Fault:
    """One fault: ``kind`` starting ``at_s`` simulated seconds into the firing."""

    kind: str
    at_s: float
    params: dict[str, Any] = field(default_factory=dict)

    def param(self, key: str) -> Any:
        return self.params.get(key, FAULT_KINDS[self.kind].get(key))


def _fault(kind: str, at_min: Any, params: dict[str, Any], where: str) -> Fault:
    if kind not in FAULT_KINDS:
        raise ValueError(f"{where}: unknown fault kind {kind!r}; expected one of {', '.join(FAULT_KINDS)}")
    try:
        minutes = float(at_min)
    except (TypeError, ValueError):
        raise ValueError(f"{where}: fault time must be minutes, got {at_min!r}") from None
    if minutes < 0:
        raise ValueError(f"{where}: fault time must be >= 0 minutes, got {minutes:g}")
    known = FAULT_KINDS[kind]
    out: dict[str, Any] = {}
    for key, value in params.items():
        if key not in known:
            raise ValueError(f"{where}: fault {kind!r} has no parameter {key!r}; expected {', '.join(known) or 'none'}")
        if key == "channel":
            out[key] = str(value)
        else:
            try:
                out[key] = float(value)
            except (TypeError, ValueError):
                raise ValueError(f"{where}: fault parameter {key} must be a number, got {value!r}") from None
    return Fault(kind, minutes * 60.0, out)


def parse_fault(text: str) -> Fault:
    """Parse ``KIND@MINUTES[:KEY=VALUE,...]``; ``ValueError`` names the problem."""
    kind, at, rest = text.partition("@")
    if not at:
        raise ValueError(f"expected KIND@MINUTES[:KEY=VALUE,...], got {text!r}")
    minutes, _, params_text = rest.partition(":")
    params: dict[str, Any] = {}
    if params_text:
        for pair in params_text.split(","):
            key, eq, value = pair.partition("=")
            if not eq:
                raise ValueError(f"fault parameters are KEY=VALUE, got {pair!r} in {text!r}")
            params[key.strip()] = value.strip()
    return _fault(kind.strip(), minutes, params, "--fault")


@dataclass(frozen=True)
class Scenario:
    """A resolved scenario: site, schedule, truth, kiln and faults."""

    name: str
    site: SiteProfile
    schedule: Schedule
    start_utc: float
    interval_s: float = 1.0
    duration_s: float | None = None
    cool_end_c: float = 150.0
    seed: int = 1
    emissivity: float = 0.88
    slope: float = 1.0
    fouling: float = 1.0
    """Gray transmission of deposits already on the sight window at the start (truth)."""
    kiln: KilnParameters = field(default_factory=KilnParameters)
    faults: tuple[Fault, ...] = ()
    instruments: dict[str, dict[str, float]] = field(default_factory=dict)
    path: Path | None = None

    def with_changes(self, **changes: Any) -> Scenario:
        return replace(self, **changes)


_KILN_FIELDS = {f.name for f in fields(KilnParameters)}


def load_scenario(path: str | Path | None = None) -> Scenario:
    """Load a scenario by built-in name or file (the default one when ``path`` is None), raising ProfileError listing every problem."""
    given = path
    path = scenario_path(path)
    if given is not None and str(given) not in BUILT_IN and not path.exists():
        raise ProfileError([f"{given}: no such file, and no built-in scenario of that name ({', '.join(BUILT_IN)})"])
    reader = TomlReader(path)
    reader.unknown_keys((), reader.data, {"scenario", "ware", "kiln", "fault", "instruments"})
    head = reader.table(("scenario",), required=True)
    reader.unknown_keys(("scenario",), head, {"name", "site", "schedule", "start", "interval_s", "duration_min", "cool_end_c", "seed"})
    here = path.parent
    site_name = reader.get(head, ("scenario",), "site", str, default="demo-site.toml")
    schedule_name = reader.get(head, ("scenario",), "schedule", str, default="demo-glaze.toml")
    start_text = reader.get(head, ("scenario",), "start", (str, dt.datetime), default="2026-03-14T05:00:00Z")
    start = 0.0
    try:
        if isinstance(start_text, dt.datetime):
            moment = start_text
        else:
            moment = dt.datetime.fromisoformat(str(start_text).replace("Z", "+00:00"))
        if moment.tzinfo is None:
            moment = moment.replace(tzinfo=dt.UTC)
        start = moment.timestamp()
    except ValueError:
        reader.problem(("scenario", "start"), f"expected an ISO 8601 time such as 2026-03-14T05:00:00Z, got {start_text!r}")
    interval = reader.get(head, ("scenario",), "interval_s", float, default=1.0, check=in_range(0.05, 60.0))
    duration = reader.get(head, ("scenario",), "duration_min", float, default=None, check=in_range(0.0, lo_open=True))
    cool_end = reader.get(head, ("scenario",), "cool_end_c", float, default=150.0)
    seed = reader.get(head, ("scenario",), "seed", int, default=1)
    ware = reader.table(("ware",))
    reader.unknown_keys(("ware",), ware, {"emissivity", "slope", "fouling"})
    emissivity = reader.get(ware, ("ware",), "emissivity", float, default=0.88, check=in_range(0.0, 1.0, lo_open=True))
    slope = reader.get(ware, ("ware",), "slope", float, default=1.0, check=in_range(0.0, lo_open=True))
    fouling = reader.get(ware, ("ware",), "fouling", float, default=1.0, check=in_range(0.0, 1.0, lo_open=True))
    kiln_table = reader.table(("kiln",))
    reader.unknown_keys(("kiln",), kiln_table, _KILN_FIELDS)
    kiln_values = {k: reader.get(kiln_table, ("kiln",), k, float, default=getattr(KilnParameters(), k)) for k in _KILN_FIELDS}
    instruments_table = reader.table(("instruments",))
    instruments: dict[str, dict[str, float]] = {}
    for name, table in instruments_table.items():
        if not isinstance(table, dict):
            reader.problem(("instruments", name), "expected a table")
            continue
        reader.unknown_keys(("instruments", name), table, {"noise_c", "noise_uv", "offset_c", "time_constant_s"})
        instruments[name] = {k: reader.get(table, ("instruments", name), k, float) for k in table}
    faults: list[Fault] = []
    for i, ft in enumerate(reader.tables("fault")):
        params = {k: v for k, v in ft.items() if k not in ("kind", "at_min")}
        try:
            faults.append(_fault(str(ft.get("kind")), ft.get("at_min"), params, "fault"))
        except ValueError as exc:
            reader.problem(("fault", i), str(exc).split(": ", 1)[1])
    reader.raise_if_problems()
    try:
        site = load_site(resolve_profile(site_name, here))
        schedule = load_schedule(resolve_profile(schedule_name, here))
    except ProfileError as exc:
        raise ProfileError([f"{path}: scenario.site/schedule: {p}" for p in exc.problems]) from None
    return Scenario(
        name=reader.get(head, ("scenario",), "name", str, default=path.stem),
        site=site,
        schedule=schedule,
        start_utc=start,
        interval_s=interval,
        duration_s=None if duration is None else duration * 60.0,
        cool_end_c=cool_end,
        seed=seed,
        emissivity=emissivity,
        slope=slope,
        fouling=fouling,
        kiln=KilnParameters(**kiln_values),
        faults=tuple(faults),
        instruments=instruments,
        path=path,
    )
