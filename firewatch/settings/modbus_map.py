"""The site profile's Modbus input: ``[input]`` settings and the register maps in ``[input.channels.NAME]``.

Called by :mod:`firewatch.settings.profile` with the parsed ``[input]``
table and the :class:`~firewatch.settings._tomlcheck.TomlReader`, so that
every problem is reported with its file, line and key. See docs/modbus.md.

References (docs/references.md): Modbus2012 (register tables, 0-based
addresses, 125 registers per read), ModbusSerial2006 (device addresses 1 to
247 on a serial line), NAMURNE43 (4-20 mA loops).
"""

from __future__ import annotations

import math
import struct
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any, Protocol

from firewatch.settings._tomlcheck import TomlReader, in_range, one_of
from firewatch.settings._tomllines import KeyPath
from firewatch.transport.modbus import TABLES, TYPES, RegisterMap
from firewatch.transport.modbus_poll import parse_host_port

__all__ = ["MODBUS_FORMATS", "MODBUS_INPUT_KEYS", "CHANNEL_KEYS", "ModbusInput", "read_modbus_input"]

MODBUS_FORMATS = ("modbus-rtu", "modbus-tcp")
"""``[input] format`` values read over Modbus."""

MODBUS_INPUT_KEYS = {"port", "poll_s", "timeout_s", "retries", "device_time"}
"""``[input]`` keys that only Modbus formats read."""

CHANNEL_KEYS = {"unit_id", "table", "register", "type", "word_order", "scale", "offset", "unit", "range_c", "open", "under", "over", "error"}
"""Keys of an ``[input.channels.NAME]`` table for a Modbus format."""

_TIME_KEYS = {"unit_id", "table", "register", "type", "word_order", "scale", "offset"}
_STATUS_KEYS = ("error", "open", "under", "over")
_INT_RANGES = {"int16": (-(1 << 15), (1 << 15) - 1), "uint16": (0, (1 << 16) - 1), "int32": (-(1 << 31), (1 << 31) - 1), "uint32": (0, (1 << 32) - 1)}


class _Channel(Protocol):
    """A profile's channel as read (settings/profile.py's tables, which import this module)."""

    @property
    def name(self) -> str: ...


class _MeasuredChannel(_Channel, Protocol):
    """A thermocouple as read: its name and the unit its input gives (``"mV"`` or ``"C"``)."""

    @property
    def unit(self) -> str: ...


@dataclass(frozen=True)
class ModbusInput:
    """A site's Modbus input, validated."""

    protocol: str
    """``rtu`` or ``tcp``."""
    port: str | None
    """``[input] port``: a serial device (RTU) or ``HOST:PORT`` (TCP); ``--port`` overrides it."""
    poll_s: float
    timeout_s: float
    retries: int
    channels: tuple[RegisterMap, ...]
    device_time: RegisterMap | None = None


def _number_list(reader: TomlReader, table: dict[str, Any], path: KeyPath, key: str, kind: str) -> tuple[float, ...]:
    value = table.get(key, [])
    if not isinstance(value, list) or not all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in value):
        reader.problem(path + (key,), f"expected an array of raw register values, got {value!r}")
        return ()
    if kind in _INT_RANGES:
        lo, hi = _INT_RANGES[kind]
        bad = [v for v in value if not (isinstance(v, int) and lo <= v <= hi)]
        if bad:
            reader.problem(path + (key,), f"{bad[0]!r} can never be read as {kind} (whole numbers {lo} to {hi})")
            return ()
    elif not all(math.isfinite(v) for v in value):
        reader.problem(path + (key,), "expected finite numbers")
        return ()
    return tuple(float(v) if kind == "float32" else int(v) for v in value)


def _float32(x: float) -> float:
    value: float = struct.unpack(">f", struct.pack(">f", x))[0]
    return value


def _register_map(reader: TomlReader, spec: Any, path: KeyPath, name: str, protocol: str, keys: set[str]) -> RegisterMap | None:
    """One register map, every problem reported; None when unusable."""
    if not isinstance(spec, dict):
        reader.problem(path, "expected a table")
        return None
    before = len(reader.problems)
    reader.unknown_keys(path, spec, keys)
    unit_lo = 1 if protocol == "rtu" else 0
    unit_hi = 247 if protocol == "rtu" else 255
    unit_id = reader.get(spec, path, "unit_id", int, check=in_range(unit_lo, unit_hi))
    table = reader.get(spec, path, "table", str, default="input", check=one_of(*TABLES))
    kind = reader.get(spec, path, "type", str, default="int16", check=one_of(*TYPES))
    register = reader.get(spec, path, "register", int, check=in_range(0, 65535))
    word_order = reader.get(spec, path, "word_order", str, default="big", check=one_of("big", "little"))
    scale = reader.get(spec, path, "scale", float, default=1.0, check=lambda v: None if v != 0 else "must not be 0")
    offset = reader.get(spec, path, "offset", float, default=0.0)
    if register is not None and kind is not None and register + TYPES[kind][1] - 1 > 65535:
        reader.problem(path + ("register",), f"a {kind} at {register} runs past the last register, 65535")
    unit = "C"
    range_c = None
    codes: dict[str, tuple[float, ...]] = {}
    if "unit" in keys:
        unit = reader.get(spec, path, "unit", str, default="C", check=one_of("C", "mV", "mA"))
        if "range_c" in spec:
            value = spec["range_c"]
            if unit != "mA":
                reader.problem(path + ("range_c",), "range_c applies only to unit = \"mA\" (a 4-20 mA loop)")
            elif (
                not isinstance(value, list)
                or len(value) != 2
                or not all(isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v) for v in value)
                or not value[0] < value[1]
            ):
                reader.problem(path + ("range_c",), f"expected [LOW_C, HIGH_C] (the temperatures at 4 and 20 mA) with LOW < HIGH, got {value!r}")
            else:
                range_c = (float(value[0]), float(value[1]))
        elif unit == "mA":
            reader.problem(path, "unit = \"mA\" needs range_c = [LOW_C, HIGH_C]: the temperatures at 4 mA and 20 mA")
        if kind is not None:
            for key in _STATUS_KEYS:
                codes[key] = _number_list(reader, spec, path, key, kind)
            seen: dict[float, str] = {}
            for key in _STATUS_KEYS:
                for v in codes[key]:
                    v32 = _float32(v) if kind == "float32" else v
                    if v32 in seen:
                        reader.problem(path + (key,), f"raw value {v!r} is also in {seen[v32]}")
                    seen[v32] = key
    if len(reader.problems) > before:
        return None
    return RegisterMap(
        channel=name, unit_id=unit_id, register=register, table=table, type=kind, word_order=word_order,
        scale=scale, offset=offset, unit=unit, range_c=range_c,
        open=codes.get("open", ()), under=codes.get("under", ()), over=codes.get("over", ()), error=codes.get("error", ()),
    )


def _check_layout(reader: TomlReader, maps: list[tuple[RegisterMap, KeyPath]]) -> None:
    """Overlapping registers, and 32-bit values whose alignment differs from their neighbours'."""
    by_table: dict[tuple[int, str], list[tuple[RegisterMap, KeyPath]]] = {}
    for m, path in maps:
        by_table.setdefault((m.unit_id, m.table), []).append((m, path))
    for (unit, table), items in by_table.items():
        items.sort(key=lambda x: x[0].register)
        for (a, _), (b, path_b) in zip(items, items[1:]):
            if b.register < a.register + a.width:
                reader.problem(
                    path_b + ("register",),
                    f"registers {b.register}-{b.register + b.width - 1} of unit {unit} {table} overlap "
                    f"{a.channel}'s {a.register}-{a.register + a.width - 1}",
                )
        wide = [(m, path) for m, path in items if m.width == 2]
        even = [x for x in wide if x[0].register % 2 == 0]
        odd = [x for x in wide if x[0].register % 2 == 1]
        # devices lay 32-bit values out consistently; a mix is most often a manual's 1-based
        # number (30001, 40001) entered without subtracting one
        if even and odd:
            minority = odd if len(odd) <= len(even) else even
            for m, path in minority:
                reader.problem(
                    path + ("register",),
                    f"32-bit value at {'odd' if m.register % 2 else 'even'} register {m.register} while the other 32-bit values of "
                    f"unit {unit} {table} start at {'even' if m.register % 2 else 'odd'} ones; registers are 0-based: "
                    "a manual's 30001 or 40001 is register 0",
                )


def read_modbus_input(
    reader: TomlReader,
    inp: dict[str, Any],
    fmt: str | None,
    thermocouples: Sequence[_MeasuredChannel] = (),
    pyrometers: Sequence[_Channel] = (),
    cold_junctions: Sequence[str] = (),
) -> ModbusInput | None:
    """Read and check a Modbus ``[input]``; None for other formats (whose stray Modbus keys are reported).

    ``thermocouples`` and ``pyrometers`` are the profile's tables as read (objects
    with ``name``, and ``unit`` for thermocouples); every measured channel
    must be mapped, with a unit that agrees with its table.
    """
    path = ("input",)
    if fmt not in MODBUS_FORMATS:
        for key in sorted(MODBUS_INPUT_KEYS & set(inp)):
            reader.problem(path + (key,), f"applies only to format {' or '.join(repr(f) for f in MODBUS_FORMATS)}")
        return None
    protocol = "rtu" if fmt == "modbus-rtu" else "tcp"
    port = reader.get(inp, path, "port", str, default=None)
    if port is not None and protocol == "tcp":
        try:
            parse_host_port(port)
        except ValueError as exc:
            reader.problem(path + ("port",), str(exc))
    poll_s = reader.get(inp, path, "poll_s", float, default=1.0, check=in_range(0.0, 3600.0, lo_open=True))
    timeout_s = reader.get(inp, path, "timeout_s", float, default=0.5, check=in_range(0.0, 60.0, lo_open=True))
    retries = reader.get(inp, path, "retries", int, default=2, check=in_range(0, 10))
    channels = inp.get("channels")
    maps: list[tuple[RegisterMap, KeyPath]] = []
    if not isinstance(channels, dict) or not channels:
        reader.problem(path + ("channels",), f"format {fmt!r} needs [input.channels.NAME] tables mapping registers to channels")
        channels = {}
    for name, spec in channels.items():
        cpath = path + ("channels", name)
        m = _register_map(reader, spec, cpath, name, protocol, CHANNEL_KEYS)
        if m is not None:
            maps.append((m, cpath))
    device_time = None
    if "device_time" in inp:
        tpath = path + ("device_time",)
        device_time = _register_map(reader, inp["device_time"], tpath, "device_time", protocol, _TIME_KEYS)
        if device_time is not None and device_time.type not in ("int32", "uint32"):
            reader.problem(tpath + ("type",), "the device's clock needs int32 or uint32 (UTC seconds); 16 bits overflow and float32 rounds to minutes")
            device_time = None
    if inp.get("clock") == "device" and "device_time" not in inp:
        reader.problem(path + ("clock",), "clock = \"device\" needs [input.device_time], the register holding the device's clock: "
                       "a poll carries no time of its own")
    _check_layout(reader, maps + ([(device_time, path + ("device_time",))] if device_time is not None else []))
    _check_channels(reader, maps, set(channels), thermocouples, pyrometers, cold_junctions)
    return ModbusInput(
        protocol=protocol, port=port, poll_s=poll_s, timeout_s=timeout_s, retries=retries,
        channels=tuple(m for m, _ in maps), device_time=device_time,
    )


def _check_channels(reader: TomlReader, maps: list[tuple[RegisterMap, KeyPath]], given: set[str],
                    thermocouples: Sequence[_MeasuredChannel], pyrometers: Sequence[_Channel], cold_junctions: Sequence[str]) -> None:
    """Every map names a channel of the profile with a unit that agrees; every measured channel is mapped."""
    tcs = {t.name: t for t in thermocouples}
    pys = {p.name for p in pyrometers}
    cjs = set(cold_junctions)
    for m, path in maps:
        if m.channel in tcs:
            want = tcs[m.channel].unit
            if want == "mV" and m.unit != "mV":
                reader.problem(path + ("unit",), f"unit {m.unit!r} disagrees with [[thermocouple]] {m.channel}'s unit 'mV' (EMF); "
                               "the map's unit is what the register holds")
            elif want == "C" and m.unit == "mV":
                reader.problem(path + ("unit",), f"unit 'mV' disagrees with [[thermocouple]] {m.channel}'s unit 'C'; the map's unit is what the register holds")
        elif m.channel in pys or m.channel in cjs:
            if m.unit == "mV":
                kind = "pyrometer" if m.channel in pys else "cold_junction"
                reader.problem(path + ("unit",), f"unit 'mV' disagrees with [[{kind}]] {m.channel}, which reads degC: use \"C\" or \"mA\"")
        else:
            reader.problem(path, f"no [[thermocouple]], [[pyrometer]] or [[cold_junction]] named {m.channel!r}")
    for name in list(tcs) + sorted(pys) + sorted(cjs):
        if name not in given:
            reader.problem(("input", "channels"), f"{name!r} has no [input.channels.{name}] map: its readings would always be missing")
