"""The configurable parser for third-party bridges."""

from __future__ import annotations

import pytest

from firewatch.transport.generic import ChannelMap, GenericParser
from firewatch.transport.records import Malformed, ReadingSet, Status


def test_csv_with_scale_offset_and_tokens() -> None:
    parser = GenericParser(
        "csv",
        (ChannelMap("tc1", "T1", "mV", scale=0.001), ChannelMap("py1", "PY", "C", offset=-0.5, under_tokens=("LO",)), ChannelMap("tc2", "T2", "mV", open_tokens=("-9999",))),
        columns=("time", "T1", "T2", "PY"),
        time_field="time",
    )
    got = parser.parse(b"12.5, 41276, -9999, 1200.5\r\n", 1.0)
    assert isinstance(got, ReadingSet)
    assert got.device_time == 12.5
    assert got.get("tc1").value == pytest.approx(41.276)
    assert got.get("tc2").status == Status.OPEN
    assert got.get("py1").value == 1200.0
    assert parser.parse(b"1,2,3,LO", 0).get("py1").status == Status.UNDER
    for bad, reason in [(b"1,2,3", "expected 4 columns"), (b"x,2,3,4", "time field"), (b"1,2,x,4", "not a number"), (b"\xff,1,2,3", "non-ASCII"), (b"", "empty")]:
        got = parser.parse(bad, 0.0)
        assert isinstance(got, Malformed) and reason in got.reason


def test_keyvalue() -> None:
    parser = GenericParser("keyvalue", (ChannelMap("tc1", "T1", "C"), ChannelMap("cj", "CJ", "C")))
    got = parser.parse(b"T1=1203.4 CJ=24.1 EXTRA=7", 0.0)
    assert isinstance(got, ReadingSet) and got.get("tc1").value == 1203.4 and got.get("cj").value == 24.1
    assert "missing field 'CJ'" in parser.parse(b"T1=1203.4", 0.0).reason
    assert "expected key=value" in parser.parse(b"T1=1 CJ", 0.0).reason


def test_bad_configuration() -> None:
    with pytest.raises(ValueError, match="not among the columns"):
        GenericParser("csv", (ChannelMap("tc1", "T9"),), columns=("T1",))
    with pytest.raises(ValueError, match="'csv' or 'keyvalue'"):
        GenericParser("xml", ())


def test_numbers_beyond_a_float_are_malformed() -> None:
    """Issue 10: values and times a float cannot hold (or that the scale pushes beyond the bound) are malformed lines."""
    parser = GenericParser("csv", (ChannelMap("tc1", "T1", "mV", scale=1e6),), columns=("time", "T1"), time_field="time")
    assert isinstance(parser.parse(b"12.5, 41.2", 0.0), ReadingSet)
    for line, reason in [
        (b"inf, 1", "not a finite number"),
        (b"1e12, 1", "beyond"),
        (b"1, 1e309", "not a finite number"),
        (b"1, nan", "not a finite number"),
        (b"1, 1e300", "beyond"),  # finite, but 1e306 mV after the scale
        (b"1, 1e4", "beyond"),  # 1e10 mV after the scale
    ]:
        got = parser.parse(line, 0.0)
        assert isinstance(got, Malformed) and reason in got.reason, (line, got)
