"""The site profile's Modbus maps: the shipped demo is valid, every problem is reported with file:line (issue 13)."""

from __future__ import annotations

from pathlib import Path

import pytest

from firewatch.cli import main
from firewatch.settings.profile import load_site, profiles_dir
from firewatch.simulator.modbus import register_map
from firewatch.transport.modbus import TYPES

DEMO = profiles_dir() / "demo-site-modbus.toml"
GOOD = DEMO.read_text()


def test_demo_profile_is_valid_and_matches_the_simulator(capsys) -> None:
    assert main(["check", str(DEMO)]) == 0
    assert "valid site profile" in capsys.readouterr().out
    site = load_site(DEMO)
    mb = site.input.modbus
    assert site.input.format == "modbus-tcp" and mb.protocol == "tcp" and mb.port == "127.0.0.1:5020"
    assert (mb.poll_s, mb.timeout_s, mb.retries) == (1.0, 0.5, 2)
    # the simulator's documented registers (firewatch/simulator/modbus.py) for the channels the profile maps
    slots = {(s.channel, s.unit_id, s.table, s.register): s for s in register_map(load_site(profiles_dir() / "demo-site.toml"))}
    for m in mb.channels:
        slot = slots.get((m.channel, m.unit_id, m.table, m.register))
        assert slot is not None, m
        assert (slot.type, slot.word_order if TYPES[slot.type][1] == 2 else "big") == (m.type, m.word_order)
    assert {m.channel for m in mb.channels} == {"tc1", "tc2", "cj", "py1", "py2"}
    assert (mb.device_time.unit_id, mb.device_time.register, mb.device_time.type) == (1, 100, "uint32")


def _problems(tmp_path: Path, capsys, text: str) -> list[str]:
    path = tmp_path / "site.toml"
    path.write_text(text)
    assert main(["check", str(path)]) == 1
    err = capsys.readouterr().err.strip().splitlines()
    assert err and all(line.startswith(f"{path}:") for line in err), err
    return err


def _line(text: str, needle: str) -> int:
    return next(i for i, line in enumerate(text.splitlines(), start=1) if line.split("#")[0].strip() == needle)


CASES = [
    # (replace, with, key named, message, the line the message names holds)
    ("register = 2\ntype = \"int32\"", "register = 1\ntype = \"int32\"", "input.channels.tc2.register", "overlap tc1's 0-1", "register = 1"),
    ("register = 4\ntype = \"int16\"", "register = 4\ntype = \"int16\"\nregistr = 5", "input.channels.cj.registr", "unknown key", "registr = 5"),
    ("range_c = [550, 1600]    # the", "#", "input.channels.py1", "needs range_c", "[input.channels.py1]"),
    ("range_c = [550, 1600]", "range_c = [1600, 550]", "input.channels.py1.range_c", "LOW < HIGH", "range_c = [1600, 550]"),
    ("scale = 0.01\nunit = \"C\"", "scale = 0.01\nunit = \"C\"\nrange_c = [0, 100]", "input.channels.cj.range_c", "applies only to unit", "range_c = [0, 100]"),
    ("error = [-32768]", "error = [40000]", "input.channels.cj.error", "can never be read as int16", "error = [40000]"),
    ("error = [-32768]", "error = [-32768]\nopen = [-32768]", "input.channels.cj.open", "also in error", "open = [-32768]"),
    ("type = \"uint16\"", "type = \"uint24\"", "input.channels.py1.type", "must be one of", "type = \"uint24\""),
    ("table = \"holding\"", "table = \"coils\"", "input.channels.py2.table", "must be one of", "table = \"coils\""),
    ("unit_id = 2", "unit_id = 256", "input.channels.py2.unit_id", "must be <= 255", "unit_id = 256"),
    ("scale = 0.0001\nunit = \"mV\"\nopen", "scale = 0.0001\nunit = \"C\"\nopen", "input.channels.tc1.unit", "disagrees with [[thermocouple]] tc1's unit 'mV'", "unit = \"C\""),
    ("[input.channels.py2]", "[input.channels.py9]", "input.channels.py9", "no [[thermocouple]], [[pyrometer]] or [[cold_junction]] named 'py9'", "[input.channels.py9]"),
    ("port = \"127.0.0.1:5020\"", "port = \"kiln3\"", "input.port", "expected HOST:PORT", "port = \"kiln3\""),
    ("poll_s = 1.0", "poll_s = 0", "input.poll_s", "must be > 0", "poll_s = 0"),
    ("[input.device_time]      # the simulator's clock, UTC seconds (real modules may have none: then leave this out)\nunit_id = 1\ntable = \"input\"\nregister = 100\ntype = \"uint32\"",
     "[input.device_time]\nunit_id = 1\ntable = \"input\"\nregister = 100\ntype = \"float32\"", "input.device_time.type", "needs int32 or uint32", "type = \"float32\""),
]


@pytest.mark.parametrize(("old", "new", "key", "message", "line_text"), CASES)
def test_map_problems_name_file_line_and_key(tmp_path: Path, capsys, old: str, new: str, key: str, message: str, line_text: str) -> None:
    assert old in GOOD, old
    text = GOOD.replace(old, new, 1)
    err = _problems(tmp_path, capsys, text)
    hits = [line for line in err if f": {key}: " in line and message in line]
    assert hits, err
    assert hits[0].split(":")[1] == str(_line(text, line_text)), (hits[0], line_text)


def test_32bit_alignment_mix_is_reported(tmp_path: Path, capsys) -> None:
    """A 32-bit value at an odd register among even ones: most often a 1-based manual number entered as is."""
    text = GOOD.replace("register = 2\ntype = \"int32\"", "register = 3\ntype = \"int32\"", 1).replace("register = 4\ntype = \"int16\"", "register = 5\ntype = \"int16\"", 1)
    text = text.replace("register = 5\ntype = \"uint16\"", "register = 6\ntype = \"uint16\"", 1)
    err = _problems(tmp_path, capsys, text)
    hits = [line for line in err if ": input.channels.tc2.register: " in line and "odd register 3" in line and "30001" in line]
    assert hits and len(err) == 1, err
    # all odd (a device laid out so) is accepted
    text = GOOD.replace("register = 0\ntype = \"int32\"", "register = 11\ntype = \"int32\"", 1)
    text = text.replace("register = 2\ntype = \"int32\"", "register = 13\ntype = \"int32\"", 1).replace("register = 100", "register = 101", 1)
    path = tmp_path / "odd.toml"
    path.write_text(text)
    assert main(["check", str(path)]) == 0


def test_unmapped_channel_and_device_clock(tmp_path: Path, capsys) -> None:
    start = GOOD.index("[input.channels.cj]")
    end = GOOD.index("[input.channels.py1]")
    text = GOOD[:start] + GOOD[end:]
    err = _problems(tmp_path, capsys, text)
    assert any(": input.channels: " in e and "'cj' has no [input.channels.cj] map" in e for e in err), err
    start = GOOD.index("[input.device_time]")
    end = GOOD.index("[input.channels.tc1]")
    text = (GOOD[:start] + GOOD[end:]).replace('clock = "wall"', 'clock = "device"')
    err = _problems(tmp_path, capsys, text)
    assert any(": input.clock: " in e and "needs [input.device_time]" in e for e in err), err


def test_modbus_keys_in_a_line_format_are_reported(tmp_path: Path, capsys) -> None:
    text = (profiles_dir() / "demo-site.toml").read_text().replace('baudrate = 9600', 'baudrate = 9600\npoll_s = 0.5', 1)
    err = _problems(tmp_path, capsys, text)
    assert any(": input.poll_s: " in e and "applies only to format 'modbus-rtu' or 'modbus-tcp'" in e for e in err), err


def test_rtu_unit_range(tmp_path: Path, capsys) -> None:
    """A serial line's devices are 1 to 247 (MODBUS over Serial Line Specification V1.02, 2.2)."""
    text = GOOD.replace('format = "modbus-tcp"', 'format = "modbus-rtu"').replace('port = "127.0.0.1:5020"', 'port = "/dev/ttyUSB0"')
    text = text.replace("unit_id = 2", "unit_id = 248", 1)
    err = _problems(tmp_path, capsys, text)
    assert any(": input.channels.py2.unit_id: " in e and "must be <= 247" in e for e in err), err
