"""The site profile: channels, instruments, input settings and alarm thresholds (TOML).

See docs/site-profile.md for every key. :func:`load_site` returns a frozen
:class:`SiteProfile` or raises :class:`ProfileError` listing every problem
with its file, line and key.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from firewatch.settings._tomlcheck import MISSING, ProfileError, TomlReader, in_range, one_of
from firewatch.settings.modbus_map import MODBUS_FORMATS, MODBUS_INPUT_KEYS, ModbusInput, read_modbus_input
from firewatch.physics.thermocouples import TYPES as TC_TYPES
from firewatch.physics.thermocouples import temperature_range
from firewatch.physics.tolerances import TOLERANCE_CLASSES
from firewatch.physics.windows import MATERIALS

__all__ = [
    "ProfileError",
    "SiteProfile",
    "Thermocouple",
    "Pyrometer",
    "InputSettings",
    "AlarmSettings",
    "load_site",
    "check_site",
    "profiles_dir",
    "DEMO_SITE",
]


def profiles_dir() -> Path:
    """The directory of the profiles shipped with firewatch (the repository's profiles/).

    An installed firewatch carries them as the package ``firewatch.profiles``;
    a source checkout has them at the top of the repository.
    """
    package = Path(__file__).resolve().parents[1]  # firewatch/
    for candidate in (package / "profiles", package.parent / "profiles"):
        if (candidate / DEMO_SITE).is_file():
            return candidate
    return package / "profiles"


DEMO_SITE = "demo-site.toml"
"""File name of the demo site profile in :func:`profiles_dir`."""


@dataclass(frozen=True)
class Thermocouple:
    """A thermocouple channel."""

    name: str
    type: str
    unit: str = "mV"
    """What the line reports: EMF in mV, or degC from a bridge that converts."""
    cold_junction: str | float = 0.0
    """A channel name reporting the cold-junction temperature (degC), or a fixed degC."""
    role: str = "monitor"
    """``control``, ``reference`` or ``monitor``."""
    tolerance_class: str = "astm-standard"
    time_constant_s: float = 30.0
    label: str = ""


@dataclass(frozen=True)
class Pyrometer:
    """A pyrometer channel: single-band or ratio, with what is known of the ware and sight path."""

    name: str
    kind: str
    band_um: tuple[float, float]
    band2_um: tuple[float, float] | None = None
    band_file: str | None = None
    set_emissivity: float = 1.0
    set_transmission: float = 1.0
    set_slope: float = 1.0
    emissivity: float = 1.0
    emissivity_uncertainty: float = 0.0
    slope: float = 1.0
    slope_uncertainty: float = 0.0
    window: str | None = None
    fouling: float = 1.0
    transmission: float = 1.0
    transmission_uncertainty: float = 0.0
    background: str | float | None = None
    """A thermocouple channel whose temperature the ware reflects, a fixed degC, or None."""
    accuracy_c: float = 0.0
    accuracy_percent: float = 0.0
    range_c: tuple[float, float] = (-math.inf, math.inf)
    reference: str | None = None
    """The thermocouple this pyrometer is compared with for divergence."""
    label: str = ""


@dataclass(frozen=True)
class InputSettings:
    """How the line is read."""

    format: str = "native"
    baudrate: int = 9600
    bytesize: int = 8
    parity: str = "N"
    stopbits: float = 1
    clock: str = "wall"
    """``wall``: stamp readings on receipt; ``device``: use the line's own time."""
    generic: dict[str, Any] = field(default_factory=dict)
    modbus: ModbusInput | None = None
    """For ``modbus-rtu`` and ``modbus-tcp``: the link and the register maps (docs/modbus.md)."""


@dataclass(frozen=True)
class AlarmSettings:
    """Thresholds for the alarm engine (issue 4)."""

    divergence_k: float = 3.0
    divergence_clear_k: float = 2.0
    divergence_debounce_s: float = 180.0
    over_temperature_c: float | None = None
    deviation_c: float = 30.0
    deviation_debounce_s: float = 900.0
    rate_window_s: float = 300.0
    no_data_s: float = 30.0
    frozen_s: float = 900.0
    latching: tuple[str, ...] = ()


@dataclass(frozen=True)
class MqttSettings:
    """Plant-scale publishing (docs/mqtt.md). The password is never in the profile: it names an environment variable."""

    kiln_id: str = ""
    username: str = ""
    password_env: str = "FIREWATCH_MQTT_PASSWORD"
    ca_file: str = ""
    accept_actions: bool = False
    """Apply acknowledge and shelve requests arriving over MQTT (off unless the site enables it)."""


@dataclass(frozen=True)
class SiteProfile:
    """Everything firewatch knows about one kiln and its instruments."""

    name: str
    kiln: str
    input: InputSettings
    thermocouples: tuple[Thermocouple, ...]
    pyrometers: tuple[Pyrometer, ...]
    cold_junctions: tuple[str, ...]
    alarms: AlarmSettings
    path: Path | None = None
    text: str = ""
    mqtt: MqttSettings = field(default_factory=MqttSettings)

    def thermocouple(self, name: str) -> Thermocouple | None:
        return next((t for t in self.thermocouples if t.name == name), None)

    def pyrometer(self, name: str) -> Pyrometer | None:
        return next((p for p in self.pyrometers if p.name == name), None)

    @property
    def channel_names(self) -> tuple[str, ...]:
        return tuple(t.name for t in self.thermocouples) + self.cold_junctions + tuple(p.name for p in self.pyrometers)

    @property
    def control(self) -> Thermocouple | None:
        """The control thermocouple, else the first."""
        return next((t for t in self.thermocouples if t.role == "control"), self.thermocouples[0] if self.thermocouples else None)

    @property
    def reference(self) -> Thermocouple | None:
        """The reference thermocouple (for the ware temperature), else the control one."""
        return next((t for t in self.thermocouples if t.role == "reference"), self.control)


def _band(reader: TomlReader, table: dict, path: tuple, key: str, required: bool) -> tuple[float, float] | None:
    if key not in table:
        if required:
            reader.problem(path + (key,), "missing: give [START_UM, END_UM]")
        return None
    value = table[key]
    if (
        not isinstance(value, list)
        or len(value) != 2
        or not all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in value)
        or not 0 < value[0] < value[1]
    ):
        reader.problem(path + (key,), f"expected [START_UM, END_UM] with 0 < START < END, got {value!r}")
        return None
    return float(value[0]), float(value[1])


def _range(reader: TomlReader, table: dict, path: tuple, key: str) -> tuple[float, float]:
    value = table.get(key)
    if value is None:
        return (-math.inf, math.inf)
    if (
        not isinstance(value, list)
        or len(value) != 2
        or not all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in value)
        or not value[0] < value[1]
    ):
        reader.problem(path + (key,), f"expected [LOW_C, HIGH_C] with LOW < HIGH, got {value!r}")
        return (-math.inf, math.inf)
    return float(value[0]), float(value[1])


_TC_KEYS = {"name", "type", "unit", "cold_junction", "role", "tolerance_class", "time_constant_s", "label"}
_PY_KEYS = {
    "name", "kind", "band_um", "band2_um", "band_file", "set_emissivity", "set_transmission", "set_slope",
    "emissivity", "emissivity_uncertainty", "slope", "slope_uncertainty", "window", "fouling", "transmission",
    "transmission_uncertainty", "background", "accuracy_c", "accuracy_percent", "range_c", "reference", "label",
}
_INPUT_KEYS = {"format", "baudrate", "bytesize", "parity", "stopbits", "clock", "delimiter", "columns", "time_field", "pair_separator", "kv_separator", "channels"} | MODBUS_INPUT_KEYS
_ALARM_KEYS = {f.name for f in AlarmSettings.__dataclass_fields__.values()}
_FRACTION = in_range(0.0, 1.0, lo_open=True)
_NONNEG = in_range(0.0)


def _name_check(value: str) -> str | None:
    import re

    if not re.fullmatch(r"[A-Za-z0-9_\-]{1,32}", value):
        return f"channel names use letters, digits, '_' or '-' (1-32 characters), got {value!r}"
    return None


def _read(reader: TomlReader) -> SiteProfile | None:
    data = reader.data
    reader.unknown_keys((), data, {"site", "input", "thermocouple", "pyrometer", "cold_junction", "alarms", "mqtt"})
    site = reader.table(("site",), required=True)
    reader.unknown_keys(("site",), site, {"name", "kiln"})
    name = reader.get(site, ("site",), "name", str, default="unnamed site")
    kiln = reader.get(site, ("site",), "kiln", str, default="")

    inp = reader.table(("input",))
    reader.unknown_keys(("input",), inp, _INPUT_KEYS)
    fmt = reader.get(inp, ("input",), "format", str, default="native", check=one_of("native", "csv", "keyvalue", *MODBUS_FORMATS))
    generic = {k: v for k, v in inp.items() if k in {"delimiter", "columns", "time_field", "pair_separator", "kv_separator", "channels"}}
    if fmt in ("csv", "keyvalue") and not generic.get("channels"):
        reader.problem(("input", "channels"), f"format {fmt!r} needs [input.channels.NAME] tables mapping fields to channels")
    if fmt == "csv" and not isinstance(generic.get("columns"), list):
        reader.problem(("input", "columns"), "format 'csv' needs columns = [\"name\", ...] in column order")
    input_settings = InputSettings(
        format=fmt,
        baudrate=reader.get(inp, ("input",), "baudrate", int, default=9600, check=in_range(1, lo_open=False)),
        bytesize=reader.get(inp, ("input",), "bytesize", int, default=8, check=lambda v: None if v in (5, 6, 7, 8) else "must be 5, 6, 7 or 8"),
        parity=reader.get(inp, ("input",), "parity", str, default="N", check=one_of("N", "E", "O", "M", "S")),
        stopbits=reader.get(inp, ("input",), "stopbits", float, default=1.0, check=lambda v: None if v in (1, 1.5, 2) else "must be 1, 1.5 or 2"),
        clock=reader.get(inp, ("input",), "clock", str, default="wall", check=one_of("wall", "device")),
        generic=generic,
    )

    cold = reader.tables("cold_junction")
    cold_names: list[str] = []
    for i, cj in enumerate(cold):
        path = ("cold_junction", i)
        reader.unknown_keys(path, cj, {"name", "label"})
        n = reader.get(cj, path, "name", str, check=_name_check)
        if n:
            cold_names.append(n)

    tcs: list[Thermocouple] = []
    for i, tc in enumerate(reader.tables("thermocouple", required=True)):
        path = ("thermocouple", i)
        reader.unknown_keys(path, tc, _TC_KEYS)
        tc_name = reader.get(tc, path, "name", str, check=_name_check)
        tc_type = reader.get(
            tc, path, "type", str,
            check=lambda v: None if v.upper() in TC_TYPES else f"unknown thermocouple type {v!r}; expected one of {', '.join(TC_TYPES)}",
        )
        cj_value = tc.get("cold_junction", 0.0)
        if isinstance(cj_value, str):
            if cj_value not in [c for c in cold_names]:
                reader.problem(path + ("cold_junction",), f"no [[cold_junction]] named {cj_value!r}")
        elif isinstance(cj_value, (int, float)) and not isinstance(cj_value, bool):
            cj_value = float(cj_value)
            if tc_type and tc_type.upper() in TC_TYPES:
                lo, hi = temperature_range(tc_type)
                if not lo <= cj_value <= hi:
                    reader.problem(path + ("cold_junction",), f"{cj_value:g} degC is outside type {tc_type.upper()}'s range {lo:g}..{hi:g}")
        else:
            reader.problem(path + ("cold_junction",), f"expected a [[cold_junction]] name or a temperature in degC, got {cj_value!r}")
        tcs.append(
            Thermocouple(
                name=tc_name or f"tc{i + 1}",
                type=(tc_type or "K").upper(),
                unit=reader.get(tc, path, "unit", str, default="mV", check=one_of("mV", "C")),
                cold_junction=cj_value,
                role=reader.get(tc, path, "role", str, default="monitor", check=one_of("control", "reference", "monitor")),
                tolerance_class=reader.get(tc, path, "tolerance_class", str, default="astm-standard", check=one_of(*TOLERANCE_CLASSES)),
                time_constant_s=reader.get(tc, path, "time_constant_s", float, default=30.0, check=_NONNEG),
                label=reader.get(tc, path, "label", str, default=""),
            )
        )
    tc_names = [t.name for t in tcs]

    pys: list[Pyrometer] = []
    for i, py in enumerate(reader.tables("pyrometer")):
        path = ("pyrometer", i)
        reader.unknown_keys(path, py, _PY_KEYS)
        py_name = reader.get(py, path, "name", str, check=_name_check)
        kind = reader.get(py, path, "kind", str, default="single", check=one_of("single", "ratio"))
        band_file = reader.get(py, path, "band_file", str, default=None)
        band = _band(reader, py, path, "band_um", required=band_file is None or kind == "ratio")
        band2 = _band(reader, py, path, "band2_um", required=kind == "ratio")
        if kind == "ratio" and band and band2 and not band[1] <= band2[0] + 1e-12 and not band[0] < band2[0]:
            reader.problem(path + ("band2_um",), "band2_um must lie at longer wavelengths than band_um")
        if band_file is not None and reader.path.parent.joinpath(band_file).exists() is False and not Path(band_file).exists():
            reader.problem(path + ("band_file",), f"no such file {band_file!r}")
        window = reader.get(
            py, path, "window", str, default=None,
            check=lambda v: None if v in MATERIALS else f"unknown window material {v!r}; expected one of {', '.join(sorted(MATERIALS))}",
        )
        if window is not None and "transmission" in py:
            reader.problem(path + ("transmission",), "give either window (modelled) or transmission (gray), not both")
        background = py.get("background")
        if isinstance(background, str):
            if background not in tc_names:
                reader.problem(path + ("background",), f"no [[thermocouple]] named {background!r}")
        elif isinstance(background, (int, float)) and not isinstance(background, bool):
            background = float(background)
        elif background is not None:
            reader.problem(path + ("background",), f"expected a thermocouple name or a temperature in degC, got {background!r}")
            background = None
        reference = reader.get(py, path, "reference", str, default=None)
        if reference is not None and reference not in tc_names:
            reader.problem(path + ("reference",), f"no [[thermocouple]] named {reference!r}")
        pys.append(
            Pyrometer(
                name=py_name or f"py{i + 1}",
                kind=kind or "single",
                band_um=band or (0.8, 1.1),
                band2_um=band2,
                band_file=band_file,
                set_emissivity=reader.get(py, path, "set_emissivity", float, default=1.0, check=_FRACTION),
                set_transmission=reader.get(py, path, "set_transmission", float, default=1.0, check=_FRACTION),
                set_slope=reader.get(py, path, "set_slope", float, default=1.0, check=in_range(0.0, lo_open=True)),
                emissivity=reader.get(py, path, "emissivity", float, default=1.0, check=_FRACTION),
                emissivity_uncertainty=reader.get(py, path, "emissivity_uncertainty", float, default=0.0, check=_NONNEG),
                slope=reader.get(py, path, "slope", float, default=1.0, check=in_range(0.0, lo_open=True)),
                slope_uncertainty=reader.get(py, path, "slope_uncertainty", float, default=0.0, check=_NONNEG),
                window=window,
                fouling=reader.get(py, path, "fouling", float, default=1.0, check=_FRACTION),
                transmission=reader.get(py, path, "transmission", float, default=1.0, check=_FRACTION),
                transmission_uncertainty=reader.get(py, path, "transmission_uncertainty", float, default=0.0, check=_NONNEG),
                background=background,
                accuracy_c=reader.get(py, path, "accuracy_c", float, default=0.0, check=_NONNEG),
                accuracy_percent=reader.get(py, path, "accuracy_percent", float, default=0.0, check=_NONNEG),
                range_c=_range(reader, py, path, "range_c"),
                reference=reference,
                label=reader.get(py, path, "label", str, default=""),
            )
        )

    # Modbus register maps, checked against the channels above (firewatch/settings/modbus_map.py)
    input_settings = replace(input_settings, modbus=read_modbus_input(reader, inp, fmt, tcs, pys, cold_names))

    names = tc_names + cold_names + [p.name for p in pys]
    seen: set[str] = set()
    for n in names:
        if n in seen:
            reader.problem((), f"channel name {n!r} is used twice")
        seen.add(n)

    al = reader.table(("alarms",))
    reader.unknown_keys(("alarms",), al, _ALARM_KEYS)
    defaults = AlarmSettings()
    values: dict[str, Any] = {}
    for key in _ALARM_KEYS:
        default = getattr(defaults, key)
        if key == "latching":
            lat = al.get("latching", [])
            if not isinstance(lat, list) or not all(isinstance(x, str) for x in lat):
                reader.problem(("alarms", "latching"), "expected an array of alarm kinds")
                lat = []
            values[key] = tuple(lat)
        elif key == "over_temperature_c":
            values[key] = reader.get(al, ("alarms",), key, float, default=None)
        else:
            values[key] = reader.get(al, ("alarms",), key, float, default=default, check=in_range(0.0, lo_open=True))
    if values["divergence_clear_k"] > values["divergence_k"]:
        reader.problem(("alarms", "divergence_clear_k"), "must not exceed divergence_k (the clear threshold is the lower one)")

    mq = reader.table(("mqtt",))
    reader.unknown_keys(("mqtt",), mq, {"kiln_id", "username", "password_env", "ca_file", "accept_actions"})
    mqtt = MqttSettings(
        kiln_id=reader.get(mq, ("mqtt",), "kiln_id", str, default="", check=lambda v: None if not v or _name_check(v) is None else "use letters, digits, '_' or '-'"),
        username=reader.get(mq, ("mqtt",), "username", str, default=""),
        password_env=reader.get(mq, ("mqtt",), "password_env", str, default="FIREWATCH_MQTT_PASSWORD"),
        ca_file=reader.get(mq, ("mqtt",), "ca_file", str, default=""),
        accept_actions=reader.get(mq, ("mqtt",), "accept_actions", bool, default=False),
    )
    if "password" in mq:
        reader.problem(("mqtt", "password"), "never put the password in the profile: set password_env to the name of an environment variable")

    if reader.problems:
        return None
    return SiteProfile(
        name=name,
        kiln=kiln,
        input=input_settings,
        thermocouples=tuple(tcs),
        pyrometers=tuple(pys),
        cold_junctions=tuple(cold_names),
        alarms=AlarmSettings(**values),
        path=reader.path,
        text=reader.text,
        mqtt=mqtt,
    )


def check_site(reader: TomlReader) -> SiteProfile | None:
    """Validate an already-parsed site profile; problems land in ``reader.problems``."""
    return _read(reader)


def load_site(path: str | Path | None = None, text: str | None = None) -> SiteProfile:
    """Load and validate a site profile (the demo site when ``path`` is None)."""
    reader = TomlReader(path if path is not None else profiles_dir() / DEMO_SITE, text)
    profile = _read(reader)
    reader.raise_if_problems()
    assert profile is not None
    return profile


def resolve_profile(name: str | Path, relative_to: Path | None = None) -> Path:
    """A profile path as given, else beside ``relative_to``, else among the shipped profiles."""
    p = Path(name)
    if p.exists():
        return p
    if relative_to is not None and (relative_to / p).exists():
        return relative_to / p
    shipped = profiles_dir() / p
    if shipped.exists():
        return shipped
    return p


__all__ += ["resolve_profile", "MISSING"]
