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
