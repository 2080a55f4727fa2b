"""The declarative settings (issue 11): field lists walked by the reader, and the docs written from them."""

from __future__ import annotations

import dataclasses
import math
from pathlib import Path

import pytest

from firewatch.settings import keydocs, profile, schedule
from firewatch.settings._tomlcheck import Field, TomlReader, in_range
from firewatch.transport.generic import ChannelMap

DOCS = Path(__file__).resolve().parents[1] / "docs"


@pytest.mark.parametrize("name", list(keydocs.DOCS))
def test_docs_key_tables_are_written_from_the_field_lists(name: str) -> None:
    text = (DOCS / name).read_text(encoding="utf-8")
    assert keydocs.render(text, keydocs.DOCS[name]) == text, "run python -m firewatch.settings.keydocs"
    for table, fields in keydocs.DOCS[name].items():
        for f in fields:
            assert f"| `{f.key}` |" in text, (name, table, f.key)
            assert f.help, (table, f.key)


def test_keydocs_check_mode_reports_a_stale_table(tmp_path: Path) -> None:
    text = (DOCS / "schedules.md").read_text(encoding="utf-8")
    stale = text.replace("| `hold_min` |", "| `hold_minutes` |")
    assert keydocs.render(stale, schedule.TABLES) == text
    with pytest.raises(KeyError, match="no <!-- keys"):
        keydocs.render(text.replace("<!-- keys [critical] -->", "<!-- nothing -->"), schedule.TABLES)


def _defaults(cls: type) -> dict[str, object]:
    return {f.name: f.default for f in dataclasses.fields(cls) if f.default is not dataclasses.MISSING}


@pytest.mark.parametrize(
    ("fields", "cls"),
    [
        (profile.THERMOCOUPLE_FIELDS, profile.Thermocouple),
        (profile.PYROMETER_FIELDS, profile.Pyrometer),
        (profile.ALARM_FIELDS, profile.AlarmSettings),
        (profile.MQTT_FIELDS, profile.MqttSettings),
        (profile.INPUT_FIELDS, profile.InputSettings),
        (schedule.CRITICAL_FIELDS, schedule.CriticalRange),
    ],
)
def test_field_defaults_agree_with_the_dataclasses(fields: tuple[Field, ...], cls: type) -> None:
    # one truth for a default: what the reader gives an absent key is what the dataclass holds
    defaults = _defaults(cls)
    for f in fields:
        if f.name in defaults and not f.required:
            assert f.default == defaults[f.name], f.name


def test_schedule_and_channel_defaults_agree_with_their_users() -> None:
    s = {f.key: f.default for f in schedule.SCHEDULE_FIELDS}
    sched = schedule.Schedule("x", ())
    assert (s["start"], s["fast_rate"], s["cool_rate"]) == (sched.start_c, sched.fast_rate_c_per_h, sched.cool_rate_c_per_h)
    c = {f.key: f.default for f in profile.CHANNEL_FIELDS}
    m = ChannelMap("x", "x")
    assert (c["unit"], c["scale"], c["offset"], c["open"], c["under"], c["over"]) == (
        m.unit, m.scale, m.offset, m.open_tokens, m.under_tokens, m.over_tokens)


def test_a_new_key_is_one_line() -> None:
    fields = (Field("a", float, 1.0, in_range(0.0), help="a"),)
    text = "[t]\na = 2\n\nb = -3\n"
    reader = TomlReader("t.toml", text)
    assert reader.read(reader.data["t"], ("t",), fields) == {"a": 2.0}
    assert reader.problems == ["t.toml:4: t.b: unknown key; expected one of a"]
    # the one line: key, type, default, check, help; its message names file, line and key
    reader = TomlReader("t.toml", text)
    got = reader.read(reader.data["t"], ("t",), fields + (Field("b", float, 0.0, in_range(0.0), help="b"),))
    assert got == {"a": 2.0, "b": 0.0} and reader.problems == ["t.toml:4: t.b: must be >= 0, got -3.0"]


def test_quantities_convert_through_units_only_when_given() -> None:
    text = '[schedule]\nunits = "F"\nfast_rate = 180\n[[segment]]\nrate = "max"\ntarget = 212\n[[critical]]\nlow = 32\nhigh = 50\nmax_rate = 9\n'
    s = schedule.load_schedule("f.toml", text=text)
    # 212 degF = 100 degC, 32 degF = 0 degC, 50 degF = 10 degC, 9 degF/h = 5 degC/h, 180 degF/h = 100 degC/h
    # (t/degC = (t/degF - 32)/1.8, NIST SP 811 (2008), appendix B)
    assert s.segments[0].target_c == pytest.approx(100.0) and math.isinf(s.segments[0].rate_c_per_h)
    assert (s.critical[0].low_c, s.critical[0].high_c, s.critical[0].max_rate_c_per_h) == pytest.approx((0.0, 10.0, 5.0))
    assert s.fast_rate_c_per_h == pytest.approx(100.0)
    assert s.start_c == 20.0 and s.cool_rate_c_per_h == 80.0  # defaults are degC already: not converted again


def test_fahrenheit_target_range_speaks_fahrenheit() -> None:
    reader = TomlReader("f.toml", '[schedule]\nunits = "F"\n[[segment]]\nrate = 100\ntarget = 4000\n')
    schedule.check_schedule(reader)
    # 2000 degC = 3632 degF (t_F = 9/5 t_C + 32, NIST SP 811 (2008), appendix B)
    assert reader.problems == ["f.toml:5: segment[1].target: must be <= 3632, got 4000.0"]


def test_a_bad_units_value_is_reported_once() -> None:
    reader = TomlReader("u.toml", '[schedule]\nunits = "R"\n[[segment]]\nrate = 100\ntarget = 1000\n')
    schedule.check_schedule(reader)
    assert [p for p in reader.problems if "units" in p] == ["u.toml:2: schedule.units: must be one of 'C', 'F', got 'R'"]
