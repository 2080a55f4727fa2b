"""Site profiles, schedules and scenarios: the shipped ones are valid, and every kind of error names file, line and key."""

from __future__ import annotations

from pathlib import Path

import pytest

from firewatch.cli import main
from firewatch.settings.profile import load_site, profiles_dir
from firewatch.settings.schedule import load_schedule

SHIPPED = sorted(p.name for p in profiles_dir().glob("*.toml"))

GOOD_SITE = (profiles_dir() / "demo-site.toml").read_text()


def test_shipped_profiles_are_valid(capsys) -> None:
    assert {"demo-site.toml", "demo-glaze.toml", "demo-bisque.toml", "demo-anneal.toml", "demo-scenario.toml"} <= set(SHIPPED)
    assert main(["check", *[str(profiles_dir() / n) for n in SHIPPED]]) == 0
    out = capsys.readouterr().out
    assert "valid site profile" in out and "valid schedule" in out and "valid scenario" in out


def _check(tmp_path: Path, capsys, text: str, name: str = "p.toml") -> list[str]:
    path = tmp_path / name
    path.write_text(text)
    assert main(["check", str(path)]) == 1
    err = capsys.readouterr().err.strip().splitlines()
    assert err and all(line.startswith(str(path)) for line in err)
    return err


def _line_of(text: str, needle: str) -> int:
    return next(i for i, line in enumerate(text.splitlines(), start=1) if line.strip().startswith(needle))


@pytest.mark.parametrize(
    ("old", "new", "key", "message"),
    [
        ('type = "S"', 'type = "Q"', "thermocouple[2].type", "unknown thermocouple type 'Q'"),
        ("set_emissivity = 0.90", "set_emissivity = 1.3", "pyrometer[1].set_emissivity", "must be <= 1"),
        ("emissivity = 0.88", "emissivity = 0", "pyrometer[1].emissivity", "must be > 0"),
        ('window = "fused-silica"', 'window = "quartz-glass"', "pyrometer[1].window", "unknown window material 'quartz-glass'"),
        ("band_um = [0.8, 1.1]", "band_um = [1.1, 0.8]", "pyrometer[1].band_um", "0 < START < END"),
        ('reference = "tc2"\n\n[[pyrometer]]', 'reference = "tc9"\n\n[[pyrometer]]', "pyrometer[1].reference", "no [[thermocouple]] named 'tc9'"),
        ('cold_junction = "cj"\nrole = "control"', 'cold_junction = "cold"\nrole = "control"', "thermocouple[1].cold_junction", "no [[cold_junction]] named 'cold'"),
        ("time_constant_s = 40", 'time_constant_s = "forty"', "thermocouple[1].time_constant_s", "expected a number"),
        ('clock = "wall"', 'clock = "sundial"', "input.clock", "must be one of"),
        ("divergence_clear_k = 2.0", "divergence_clear_k = 4.0", "alarms.divergence_clear_k", "must not exceed divergence_k"),
        ("frozen_s = 900", "frozen_s = 900\nfrozzen_s = 1", "alarms.frozzen_s", "unknown key"),
        ('name = "py2"', 'name = "tc1"', "(top level)", "channel name 'tc1' is used twice"),
    ],
)
def test_site_errors(tmp_path: Path, capsys, old: str, new: str, key: str, message: str) -> None:
    assert old in GOOD_SITE
    text = GOOD_SITE.replace(old, new, 1)
    err = _check(tmp_path, capsys, text)
    hit = [line for line in err if f": {key}: " in line and message in line]
    assert hit, err
    if key != "(top level)":
        expected_line = _line_of(text, new.splitlines()[-1] if key.endswith("frozzen_s") else new.splitlines()[0])
        assert f"p.toml:{expected_line}:" in hit[0]


def test_toml_syntax_error_names_line(tmp_path: Path, capsys) -> None:
    err = _check(tmp_path, capsys, '[site]\nname = "x"\nkiln = \n')
    assert ":3: TOML syntax error" in err[0]


def test_missing_file(tmp_path: Path, capsys) -> None:
    # a file that cannot be read at all is trouble, not an answer: status 2 (issue 10; docs/site-profile.md)
    assert main(["check", str(tmp_path / "nope.toml")]) == 2
    assert "no such file" in capsys.readouterr().err


@pytest.mark.parametrize(
    ("segment", "message"),
    [
        ("rate = 100\ntarget = 500\n", "heats, but target 500 is below the start; use a negative rate to cool"),
        ("rate = -100\ntarget = 1300\n", "cools, but target 1300 is above the start"),
        ("rate = 100\ntarget = 1100\nhold_min = -5\n", "a hold cannot be negative"),
        ("rate = 0\ntarget = 1100\n", "a rate of 0 never reaches the target"),
        ("rate = \"fast\"\ntarget = 1100\n", "expected degrees per hour or \"max\""),
        ("target = 1100\n", "rate: missing"),
    ],
)
def test_bad_schedules(tmp_path: Path, capsys, segment: str, message: str) -> None:
    text = '[schedule]\nname = "t"\nunits = "C"\n\n[[segment]]\nrate = 100\ntarget = 1000\n\n[[segment]]\n' + segment
    err = _check(tmp_path, capsys, text, "s.toml")
    assert any("segment[2]" in line and message in line for line in err), err


def test_bad_unit(tmp_path: Path, capsys) -> None:
    err = _check(tmp_path, capsys, '[schedule]\nunits = "R"\n[[segment]]\nrate = 100\ntarget = 1000\n', "s.toml")
    assert any("schedule.units" in line and "must be one of 'C', 'F'" in line for line in err)


def test_critical_range_faster_than_its_limit(tmp_path: Path, capsys) -> None:
    text = '[schedule]\n[[segment]]\nrate = 200\ntarget = 1000\n[[critical]]\nname = "quartz"\nlow = 550\nhigh = 600\nmax_rate = 100\n'
    err = _check(tmp_path, capsys, text, "s.toml")
    assert any("segment[1].rate" in line and "faster than its max_rate" in line for line in err)


def test_fahrenheit_schedule_converts() -> None:
    text = '[schedule]\nunits = "F"\nstart = 68\n[[segment]]\nrate = 180\ntarget = 1832\nhold_min = 10\n'
    sched = load_schedule("f.toml", text=text)
    seg = sched.segments[0]
    assert seg.target_c == pytest.approx(1000.0) and seg.rate_c_per_h == pytest.approx(100.0) and seg.hold_s == 600
    assert sched.start_c == pytest.approx(20.0)
    # 980 degC at 100 degC/h then a 10 min hold: 9.8 h + 600 s (arithmetic, no source)
    assert sched.planned_duration_s == pytest.approx(9.8 * 3600 + 600)


def test_generic_input_needs_channels(tmp_path: Path, capsys) -> None:
    text = GOOD_SITE.replace('format = "native"', 'format = "csv"')
    err = _check(tmp_path, capsys, text)
    assert any("input.channels" in line for line in err) and any("input.columns" in line for line in err)


def test_scenario_errors(tmp_path: Path, capsys) -> None:
    text = '[scenario]\nsite = "demo-site.toml"\nschedule = "demo-glaze.toml"\nstart = "yesterday"\n[[fault]]\nkind = "meltdown"\nat_min = 5\n'
    err = _check(tmp_path, capsys, text, "sc.toml")
    assert any("scenario.start" in line and "ISO 8601" in line for line in err)
    assert any("fault[1]" in line and "unknown fault kind 'meltdown'" in line for line in err)


def test_load_site_defaults_to_demo() -> None:
    site = load_site()
    assert site.control.name == "tc1" and site.reference.name == "tc2"
    assert [p.name for p in site.pyrometers] == ["py1", "py2"]


CSV_INPUT = 'format = "csv"\ncolumns = ["t", "T1", "T2", "CJ", "P1", "P2"]\ntime_field = "t"'
CSV_CHANNELS = (
    '\n[input.channels.tc1]\nfield = "T1"\nunit = "mV"\n[input.channels.tc2]\nfield = "T2"\nunit = "mV"\n'
    '[input.channels.cj]\nfield = "CJ"\n[input.channels.py1]\nfield = "P1"\n[input.channels.py2]\nfield = "P2"\n'
)


def test_generic_input_channel_maps_are_checked(tmp_path: Path, capsys) -> None:
    # all four passed check before; three of them then stopped the recorder at start (the parser raised ValueError),
    # and a map for a channel the profile lacks was silently ignored
    good = GOOD_SITE.replace('format = "native"', CSV_INPUT) + CSV_CHANNELS
    site = load_site("csv.toml", text=good)
    assert site.input.generic["channels"]["py2"] == {"field": "P2", "unit": "C", "scale": 1.0, "offset": 0.0,
                                                     "open": ("OPEN",), "under": ("UNDER",), "over": ("OVER",)}
    text = (good.replace('field = "P2"', 'field = "P9"').replace('time_field = "t"', 'time_field = "time"')
            .replace("[input.channels.cj]", "[input.channels.cj9]").replace('field = "T2"\nunit = "mV"', 'field = "T2"\nscale = "x"'))
    err = _check(tmp_path, capsys, text)
    expect = {
        "input.channels.py2.field": "field 'P9' is not among the columns",
        "input.time_field": "time_field 'time' is not among the columns",
        "input.channels.cj9": "no channel named 'cj9' in this profile",
        "input.channels.tc2.scale": "expected a number, got 'x'",
    }
    for key, message in expect.items():
        hit = [line for line in err if f": {key}: " in line and message in line]
        assert hit, (key, err)
    line = _line_of(text, 'scale = "x"')
    assert any(f"p.toml:{line}: input.channels.tc2.scale" in e for e in err)
