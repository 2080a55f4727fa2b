"""The site profile: channels, instruments, input settings and alarm thresholds (TOML).

See docs/site-profile.md for every key. :func:`load_site` returns a frozen
:class:`SiteProfile` or raises :class:`ProfileError` listing every problem
with its file, line and key.
"""

from __future__ import annotations

import math
import re
from collections.abc import Callable
from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from firewatch.physics.thermocouples import TYPES as TC_TYPES
from firewatch.physics.thermocouples import temperature_range
from firewatch.physics.tolerances import TOLERANCE_CLASSES
from firewatch.physics.windows import MATERIALS
from firewatch.settings._tomlcheck import (
    MISSING,
    Field,
    ProfileError,
    TomlReader,
    in_range,
    one_of,
    strings,
)
from firewatch.settings.modbus_map import MODBUS_FORMATS, MODBUS_INPUT_KEYS, ModbusInput, read_modbus_input

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
    cause_window_s: float = 3600.0
    cause_every_s: float = 60.0
    lag_min_r2: float = 0.6


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
    timezone: str = ""
    """``[site] timezone``: an IANA zone name for clock times shown to people ("" = the computer's zone)."""

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


# -- the tables, key by key ------------------------------------------------------------------
# Each table of the profile is a list of Field: key, type, default, check and a help line.
# The reader walks the lists (TomlReader.read) and the key tables in docs/site-profile.md are
# written from them (python -m firewatch.settings.keydocs), so adding a key is one line here.
# Checks that relate several keys or tables follow in _read.

_FRACTION = in_range(0.0, 1.0, lo_open=True)
_NONNEG = in_range(0.0)
_POSITIVE = in_range(0.0, lo_open=True)


def _name_check(value: str) -> str | None:
    if not re.fullmatch(r"[A-Za-z0-9_\-]{1,32}", value):
        return f"channel names use letters, digits, '_' or '-' (1-32 characters), got {value!r}"
    return None


def _zone_check(value: str) -> str | None:
    """An IANA time zone name that this computer's zone database knows ("" is the computer's own zone)."""
    import zoneinfo

    if value == "":
        return None
    try:
        zoneinfo.ZoneInfo(value)
    except (ValueError, zoneinfo.ZoneInfoNotFoundError):
        return f"unknown time zone {value!r}; expected an IANA name such as \"Europe/London\""
    return None


def _is_number(value: Any) -> bool:
    return isinstance(value, (int, float)) and not isinstance(value, bool)


def _number_or_name(what: str) -> Callable[[Any], str | None]:
    def check(value: Any) -> str | None:
        return None if isinstance(value, str) or _is_number(value) else f"expected {what} or a temperature in degC, got {value!r}"

    return check


def _float_unless_name(value: Any) -> Any:
    return value if isinstance(value, str) else float(value)


def _pair(template: str, ordered: Callable[[float, float], bool]) -> Callable[[Any], str | None]:
    """A check for a two-number array ``[a, b]`` with ``ordered(a, b)``."""

    def check(value: Any) -> str | None:
        if not isinstance(value, list) or len(value) != 2 or not all(_is_number(v) for v in value) or not ordered(value[0], value[1]):
            return f"expected {template}, got {value!r}"
        return None

    return check


def _floats(value: list[Any]) -> tuple[float, float]:
    return float(value[0]), float(value[1])


def _tc_type(value: str) -> str | None:
    return None if value.upper() in TC_TYPES else f"unknown thermocouple type {value!r}; expected one of {', '.join(TC_TYPES)}"


def _window(value: str) -> str | None:
    return None if value in MATERIALS else f"unknown window material {value!r}; expected one of {', '.join(sorted(MATERIALS))}"


def _kiln_id(value: str) -> str | None:
    return None if not value or _name_check(value) is None else "use letters, digits, '_' or '-'"


TOP_LEVEL = ("site", "input", "thermocouple", "pyrometer", "cold_junction", "alarms", "mqtt")
"""The tables a site profile may have."""

SITE_FIELDS = (
    Field("name", str, "unnamed site", help="the works"),
    Field("kiln", str, "", help="the kiln"),
    Field("timezone", str, "", _zone_check, shown_default="the computer's zone",
          help="an IANA zone name such as `\"Europe/London\"`, for the clock times people read (the dashboard, `inspect`, "
               "`replay --headless`, the firing report; `--utc` overrides it); the log itself keeps UTC"),
)

INPUT_FORMATS = ("native", "csv", "keyvalue", *MODBUS_FORMATS)
"""The line formats ``[input] format`` accepts; each has its parser in ``services.recorder.make_parser``."""
GENERIC_FORMATS = ("csv", "keyvalue")
"""The formats read through ``[input.channels.NAME]`` maps (:mod:`firewatch.transport.generic`)."""

INPUT_FIELDS = (
    Field("format", str, "native", one_of(*INPUT_FORMATS),
          help="`native` (see [line-format.md](line-format.md)), `csv`, `keyvalue`, or `modbus-rtu` / `modbus-tcp` (see [modbus.md](modbus.md))"),
    Field("baudrate", int, 9600, in_range(1, lo_open=False), help="serial speed, bits per second (ignored by `socket://`)"),
    Field("bytesize", int, 8, lambda v: None if v in (5, 6, 7, 8) else "must be 5, 6, 7 or 8", help="serial data bits: 5, 6, 7 or 8"),
    Field("parity", str, "N", one_of("N", "E", "O", "M", "S"), help="serial parity: `N`, `E`, `O`, `M` or `S`"),
    Field("stopbits", float, 1.0, lambda v: None if v in (1, 1.5, 2) else "must be 1, 1.5 or 2", help="serial stop bits: 1, 1.5 or 2"),
    Field("clock", str, "wall", one_of("wall", "device"), help="`wall`: time readings on receipt; `device`: by the line's own time"),
    # csv and keyvalue bridges (given keys only go to InputSettings.generic; the parser holds the defaults)
    Field("delimiter", str, None, shown_default='`","`', help="`csv`: the column separator"),
    Field("columns", None, None, strings("column names"), help="`csv`: the column names, in order"),
    Field("time_field", str, None, help="`csv`, `keyvalue`: the field holding the device's time, seconds"),
    Field("pair_separator", str, None, shown_default="white space", help="`keyvalue`: between pairs"),
    Field("kv_separator", str, None, shown_default='`"="`', help="`keyvalue`: between key and value"),
    Field("channels", dict, None,
          help="`csv`, `keyvalue`, Modbus: one `[input.channels.NAME]` table per channel (below; Modbus maps in [modbus.md](modbus.md))"),
    # Modbus (read and checked by settings/modbus_map.py; listed here so that they are known keys and documented)
    Field("port", str, None, help="Modbus: the serial device (`modbus-rtu`) or `HOST:PORT` (`modbus-tcp`) when `--port` is not given"),
    Field("poll_s", float, None, shown_default="1.0", help="Modbus: seconds between polls (one reading set per poll)"),
    Field("timeout_s", float, None, shown_default="0.5", help="Modbus: seconds to wait for an answer"),
    Field("retries", int, None, shown_default="2", help="Modbus: retries of a request before its channels are marked `ERR`"),
    Field("device_time", dict, None, help="Modbus: an optional register map of the device's clock (see [modbus.md](modbus.md))"),
)
"""``[input]``: how the line is read."""
_SERIAL_KEYS = ("format", "baudrate", "bytesize", "parity", "stopbits", "clock", *sorted(MODBUS_INPUT_KEYS))

CHANNEL_FIELDS = (
    Field("field", str, None, shown_default="NAME", help="the column (`csv`) or key (`keyvalue`) to read"),
    Field("unit", str, "C", one_of("mV", "C"), help="`mV` (thermocouple EMF) or `C`"),
    Field("scale", float, 1.0, help="value = raw × scale + offset"),
    Field("offset", float, 0.0, help="added after scaling"),
    Field("open", None, ("OPEN",), strings("raw tokens"), convert=tuple, help="raw tokens that mean an open thermocouple"),
    Field("under", None, ("UNDER",), strings("raw tokens"), convert=tuple, help="raw tokens that mean below range"),
    Field("over", None, ("OVER",), strings("raw tokens"), convert=tuple, help="raw tokens that mean above range"),
)
"""``[input.channels.NAME]``: which field of a bridge's line feeds channel NAME."""

COLD_JUNCTION_FIELDS = (
    Field("name", str, check=_name_check, help="the channel reporting the terminals' temperature, °C"),
    Field("label", str, "", help="where it is"),
)

ROLES = ("control", "reference", "monitor")
THERMOCOUPLE_FIELDS = (
    Field("name", str, check=_name_check, help="channel name"),
    Field("type", str, check=_tc_type, convert=str.upper, help=", ".join(TC_TYPES[:-1]) + f" or {TC_TYPES[-1]}"),
    Field("unit", str, "mV", one_of("mV", "C"), help="what the line carries: EMF, or °C from a converting bridge"),
    Field("cold_junction", None, 0.0, _number_or_name("a [[cold_junction]] name"), convert=_float_unless_name,
          help="a `[[cold_junction]]` name, or a fixed temperature in °C"),
    Field("role", str, "monitor", one_of(*ROLES), help="`control`, `reference` (the one the pyrometers are compared with) or `monitor`"),
    Field("tolerance_class", str, "astm-standard", one_of(*TOLERANCE_CLASSES), help=", ".join(f"`{c}`" for c in TOLERANCE_CLASSES)),
    Field("time_constant_s", float, 30.0, _NONNEG, help="the sheath's time constant: during ramps the divergence allowance grows by this × the rate"),
    Field("label", str, "", help="where it is"),
)

_BAND = _pair("[START_UM, END_UM] with 0 < START < END", lambda a, b: 0 < a < b)
PYROMETER_FIELDS = (
    Field("name", str, check=_name_check, help="channel name"),
    Field("kind", str, "single", one_of("single", "ratio"), help="`single` (one band) or `ratio` (two-colour)"),
    Field("band_um", None, None, _BAND, convert=_floats, missing="give [START_UM, END_UM]", help="`[start, end]` in µm (band 1 of a ratio instrument)"),
    Field("band2_um", None, None, _BAND, convert=_floats, missing="give [START_UM, END_UM]", help="ratio: the longer band"),
    Field("band_file", str, None, help="instead of `band_um`: a CSV of wavelength (µm) and relative response, beside the profile"),
    Field("set_emissivity", float, 1.0, _FRACTION,
          help="the instrument's own emissivity setting (single band); `firewatch tune --apply` writes the setting "
               "that makes the instrument read the reference, to be dialled into the instrument too"),
    Field("set_transmission", float, 1.0, _FRACTION, help="the instrument's own transmission setting (single band)"),
    Field("set_slope", float, 1.0, _POSITIVE, help="the instrument's emissivity slope setting (ratio)"),
    Field("emissivity", float, 1.0, _FRACTION, help="what is known of the ware's emissivity in the band (tune it with `firewatch tune`)"),
    Field("emissivity_uncertainty", float, 0.0, _NONNEG, help="its standard uncertainty"),
    Field("slope", float, 1.0, _POSITIVE, help="the ware's emissivity slope ε1/ε2 (ratio)"),
    Field("slope_uncertainty", float, 0.0, _NONNEG, help="its standard uncertainty"),
    Field("window", str, None, _window, help=", ".join(f"`{m}`" for m in MATERIALS) + ": a sight window, modelled spectrally"),
    Field("fouling", float, 1.0, _FRACTION, help="gray factor of deposits on the window"),
    Field("transmission", float, 1.0, _FRACTION, help="instead of `window`: a gray transmission of the sight path"),
    Field("transmission_uncertainty", float, 0.0, _NONNEG, help="its standard uncertainty"),
    Field("background", None, None, _number_or_name("a thermocouple name"), convert=_float_unless_name, shown_default="none",
          help="a thermocouple whose temperature the ware reflects (the walls of a closed kiln), or a fixed °C"),
    Field("accuracy_c", float, 0.0, _NONNEG, help="stated accuracy, °C: the greater of this and `accuracy_percent`, taken as a rectangular bound"),
    Field("accuracy_percent", float, 0.0, _NONNEG, help="stated accuracy, % of reading"),
    Field("range_c", None, (-math.inf, math.inf), _pair("[LOW_C, HIGH_C] with LOW < HIGH", lambda a, b: a < b), convert=_floats,
          shown_default="unlimited", help="`[low, high]` measuring range in °C"),
    Field("reference", str, None, help="the thermocouple to compare with (divergence)"),
    Field("label", str, "", help="where it is"),
)

ALARM_FIELDS = (
    Field("divergence_k", float, 3.0, _POSITIVE, help="alarm when the divergence exceeds this many combined standard uncertainties"),
    Field("divergence_clear_k", float, 2.0, _POSITIVE, help="clear below this many (not above `divergence_k`)"),
    Field("divergence_debounce_s", float, 180.0, _POSITIVE, help="for at least this long, seconds"),
    Field("over_temperature_c", float, None, shown_default="none", help="over-temperature alarm threshold, °C"),
    Field("deviation_c", float, 30.0, _POSITIVE, help="schedule deviation: temperature off plan by more than this, K ..."),
    Field("deviation_debounce_s", float, 900.0, _POSITIVE, help="... for longer than this, seconds"),
    Field("rate_window_s", float, 300.0, _POSITIVE, help="window of the rate-of-change estimate, seconds"),
    Field("no_data_s", float, 30.0, _POSITIVE, help="a line or channel silent this long raises `no-data`, seconds"),
    Field("frozen_s", float, 900.0, _POSITIVE, help="a value unchanged this long raises `sensor-fault`, seconds"),
    Field("latching", None, (), strings("alarm kinds"), convert=tuple, shown_default="`[]`", help="alarm kinds that stay active until acknowledged"),
    Field("cause_window_s", float, 3600.0, in_range(600.0, 7200.0),
          help="the likely cause of a divergence looks back this far, seconds (at most the 2 h the alarms keep)"),
    Field("cause_every_s", float, 60.0, in_range(10.0, 3600.0),
          help="while a divergence alarm's condition holds, its likely cause is decided again this often, seconds"),
    Field("lag_min_r2", float, 0.6, _FRACTION,
          help="thermocouple lag is named only when the rate explains more than this fraction of the divergence's variance (R²)"),
)

MQTT_FIELDS = (
    Field("kiln_id", str, "", _kiln_id, shown_default="from the names", help="the kiln's part of the topics (else a slug of the works and kiln names)"),
    Field("username", str, "", help="the broker user"),
    Field("password_env", str, "FIREWATCH_MQTT_PASSWORD", help="the name of the environment variable holding the password (never the password)"),
    Field("ca_file", str, "", help="CA certificate for `mqtts://`"),
    Field("accept_actions", bool, False, help="apply acknowledge and shelve requests arriving over MQTT"),
)

TABLES: dict[str, tuple[Field, ...]] = {
    "site": SITE_FIELDS,
    "input": INPUT_FIELDS,
    "input.channels.NAME": CHANNEL_FIELDS,
    "[cold_junction]": COLD_JUNCTION_FIELDS,
    "[thermocouple]": THERMOCOUPLE_FIELDS,
    "[pyrometer]": PYROMETER_FIELDS,
    "alarms": ALARM_FIELDS,
    "mqtt": MQTT_FIELDS,
}
"""Every table of a site profile and its fields, as the docs name them (``[x]`` for ``[[x]]``)."""


def _read_input(reader: TomlReader, channel_names: set[str]) -> InputSettings:
    path = ("input",)
    table = reader.table(path)
    v = reader.read(table, path, INPUT_FIELDS)
    fmt = v["format"]
    generic = {k: table[k] for k in v if k not in _SERIAL_KEYS and v[k] is not None}
    maps: dict[str, dict[str, Any]] = {}
    channels = v["channels"] or {}
    if fmt in MODBUS_FORMATS:  # register maps: read and checked by settings/modbus_map.py (in _read, with the channels)
        generic.pop("channels", None)
        channels = {}
    for name, spec in channels.items():
        where = path + ("channels", name)
        if not isinstance(spec, dict):
            reader.problem(where, "expected a table")
            continue
        m = reader.read(spec, where, CHANNEL_FIELDS)
        m["field"] = m["field"] if m["field"] is not None else name
        maps[name] = m
        if name not in channel_names:
            reader.problem(where, f"no channel named {name!r} in this profile")
        if fmt == "csv" and isinstance(generic.get("columns"), list) and m["field"] not in generic["columns"]:
            reader.problem(where + (("field",) if "field" in spec else ()), f"field {m['field']!r} is not among the columns")
    if channels:
        generic["channels"] = maps
    if fmt in GENERIC_FORMATS and not channels:
        reader.problem(path + ("channels",), f"format {fmt!r} needs [input.channels.NAME] tables mapping fields to channels")
    if fmt == "csv" and not isinstance(generic.get("columns"), list):
        reader.problem(path + ("columns",), "format 'csv' needs columns = [\"name\", ...] in column order")
    if fmt == "csv" and v["time_field"] is not None and isinstance(generic.get("columns"), list) and v["time_field"] not in generic["columns"]:
        reader.problem(path + ("time_field",), f"time_field {v['time_field']!r} is not among the columns")
    return InputSettings(
        format=fmt,
        baudrate=v["baudrate"],
        bytesize=v["bytesize"],
        parity=v["parity"],
        stopbits=v["stopbits"],
        clock=v["clock"],
        generic=generic,
    )


def _read(reader: TomlReader) -> SiteProfile | None:
    reader.unknown_keys((), reader.data, TOP_LEVEL)
    site = reader.read(reader.table(("site",), required=True), ("site",), SITE_FIELDS)

    cold_names: list[str] = []
    for i, cj in enumerate(reader.tables("cold_junction")):
        n = reader.read(cj, ("cold_junction", i), COLD_JUNCTION_FIELDS)["name"]
        if n:
            cold_names.append(n)

    tcs: list[Thermocouple] = []
    for i, table in enumerate(reader.tables("thermocouple", required=True)):
        path = ("thermocouple", i)
        v = reader.read(table, path, THERMOCOUPLE_FIELDS)
        cj = v["cold_junction"]
        if isinstance(cj, str):
            if cj not in cold_names:
                reader.problem(path + ("cold_junction",), f"no [[cold_junction]] named {cj!r}")
        elif isinstance(cj, float) and v["type"] in TC_TYPES:
            lo, hi = temperature_range(v["type"])
            if not lo <= cj <= hi:
                reader.problem(path + ("cold_junction",), f"{cj:g} degC is outside type {v['type']}'s range {lo:g}..{hi:g}")
        tcs.append(Thermocouple(**(v | {"name": v["name"] or f"tc{i + 1}", "type": v["type"] or "K"})))
    tc_names = [t.name for t in tcs]

    pys: list[Pyrometer] = []
    for i, table in enumerate(reader.tables("pyrometer")):
        path = ("pyrometer", i)
        v = reader.read(table, path, PYROMETER_FIELDS)
        kind, band, band2 = v["kind"], v["band_um"], v["band2_um"]
        if band is None and "band_um" not in table and (v["band_file"] is None or kind == "ratio"):
            reader.problem(path + ("band_um",), "missing: give [START_UM, END_UM]")
        if band2 is None and "band2_um" not in table and kind == "ratio":
            reader.problem(path + ("band2_um",), "missing: give [START_UM, END_UM]")
        if kind == "ratio" and band and band2 and not band[1] <= band2[0] + 1e-12 and not band[0] < band2[0]:
            reader.problem(path + ("band2_um",), "band2_um must lie at longer wavelengths than band_um")
        band_file = v["band_file"]
        if band_file is not None and reader.path.parent.joinpath(band_file).exists() is False and not Path(band_file).exists():
            reader.problem(path + ("band_file",), f"no such file {band_file!r}")
        if v["window"] is not None and "transmission" in table:
            reader.problem(path + ("transmission",), "give either window (modelled) or transmission (gray), not both")
        if isinstance(v["background"], str) and v["background"] not in tc_names:
            reader.problem(path + ("background",), f"no [[thermocouple]] named {v['background']!r}")
        if v["reference"] is not None and v["reference"] not in tc_names:
            reader.problem(path + ("reference",), f"no [[thermocouple]] named {v['reference']!r}")
        pys.append(Pyrometer(**(v | {"name": v["name"] or f"py{i + 1}", "kind": kind or "single", "band_um": band or (0.8, 1.1)})))

    names = tc_names + cold_names + [p.name for p in pys]
    seen: set[str] = set()
    for n in names:
        if n in seen:
            reader.problem((), f"channel name {n!r} is used twice")
        seen.add(n)
    input_settings = _read_input(reader, set(names))
    # Modbus register maps, checked against the channels above (firewatch/settings/modbus_map.py)
    input_settings = replace(input_settings, modbus=read_modbus_input(reader, reader.table(("input",)), input_settings.format, tcs, pys, cold_names))

    alarms = reader.read(reader.table(("alarms",)), ("alarms",), ALARM_FIELDS)
    if alarms["divergence_clear_k"] > alarms["divergence_k"]:
        reader.problem(("alarms", "divergence_clear_k"), "must not exceed divergence_k (the clear threshold is the lower one)")

    mq = reader.table(("mqtt",))
    mqtt = reader.read(mq, ("mqtt",), MQTT_FIELDS)
    if "password" in mq:
        reader.problem(("mqtt", "password"), "never put the password in the profile: set password_env to the name of an environment variable")

    if reader.problems:
        return None
    return SiteProfile(
        name=site["name"],
        kiln=site["kiln"],
        timezone=site["timezone"],
        input=input_settings,
        thermocouples=tuple(tcs),
        pyrometers=tuple(pys),
        cold_junctions=tuple(cold_names),
        alarms=AlarmSettings(**alarms),
        path=reader.path,
        text=reader.text,
        mqtt=MqttSettings(**mqtt),
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
