"""Modbus register decoding, 4-20 mA loops, request planning and poll records (issue 13).

Decoding is checked against pymodbus's own converters (a general-purpose
library from the package index, an implementation independent of
firewatch's ``struct`` decoding).
"""

from __future__ import annotations

import math

import pytest
from hypothesis import given
from hypothesis import strategies as st
from pymodbus.client import ModbusTcpClient

from firewatch.transport.modbus import (
    BlockResult,
    ModbusParser,
    RegisterMap,
    Request,
    decode,
    encode_poll,
    loop_status,
    loop_to_celsius,
    plan_requests,
)
from firewatch.transport.records import Malformed, ReadingSet, Status

DT = ModbusTcpClient.DATATYPE
PYMODBUS_TYPES = {"int16": DT.INT16, "uint16": DT.UINT16, "int32": DT.INT32, "uint32": DT.UINT32, "float32": DT.FLOAT32}
RANGES = {"int16": (-(2**15), 2**15 - 1), "uint16": (0, 2**16 - 1), "int32": (-(2**31), 2**31 - 1), "uint32": (0, 2**32 - 1)}


@pytest.mark.parametrize("kind", sorted(PYMODBUS_TYPES))
@pytest.mark.parametrize("order", ["big", "little"])
@given(data=st.data())
def test_decode_agrees_with_pymodbus(kind: str, order: str, data) -> None:
    """Every type and word order: firewatch's decoding of registers equals pymodbus's (the reference library)."""
    if kind == "float32":
        value = data.draw(st.floats(width=32, allow_nan=False, allow_infinity=False))
    else:
        lo, hi = RANGES[kind]
        value = data.draw(st.integers(lo, hi))
    words = ModbusTcpClient.convert_to_registers(value, PYMODBUS_TYPES[kind], word_order=order)
    assert decode(words, kind, order) == value
    assert decode(words, kind, order) == ModbusTcpClient.convert_from_registers(words, PYMODBUS_TYPES[kind], word_order=order)


def test_word_order_known_values() -> None:
    # worked by hand: 0x00010002 = 65538, high word first ("big") or low word first ("little");
    # IEEE 754 single precision: 0x44968000 = +1.17578125 x 2^10 = 1204.0
    assert decode([1, 2], "uint32", "big") == 65538 and decode([2, 1], "uint32", "little") == 65538
    assert decode([0xFFFF, 0xFFFE], "int32") == -2
    assert decode([0x4496, 0x8000], "float32", "big") == 1204.0 and decode([0x8000, 0x4496], "float32", "little") == 1204.0
    assert decode([0x8000], "int16") == -32768 and decode([0x8000], "uint16") == 32768
    with pytest.raises(ValueError, match="takes 2"):
        decode([1], "int32")


def test_loop_limits_namur_ne43() -> None:
    """NAMUR NE 43 (from memory of the recommendation's figures): below 3.6 mA or above 21 mA a failure;
    3.8-4 mA under range, 20-20.5 mA over range; 4-20 mA the measurement."""
    cases = [(0.0, Status.ERROR), (3.59, Status.ERROR), (3.6, Status.UNDER), (3.8, Status.UNDER), (3.999, Status.UNDER), (4.0, Status.OK),
             (12.0, Status.OK), (20.0, Status.OK), (20.001, Status.OVER), (20.5, Status.OVER), (21.0, Status.OVER), (21.01, Status.ERROR),
             (math.nan, Status.ERROR)]
    for current, status in cases:
        assert loop_status(current) == status, current
    # value = low + (I - 4 mA) / 16 mA x (high - low): common practice, no source
    assert loop_to_celsius(4.0, (550.0, 1600.0)) == 550.0
    assert loop_to_celsius(20.0, (550.0, 1600.0)) == 1600.0
    assert loop_to_celsius(8.0, (0.0, 1600.0)) == pytest.approx(400.0)


def _parse(maps, record: bytes, **kw) -> ReadingSet | Malformed:
    return ModbusParser(maps, **kw).parse(record, 1000.0)


def test_scaling_and_status_codes() -> None:
    tc = RegisterMap("tc1", 1, 0, type="int32", scale=0.0001, unit="mV", open=(2147483647,), under=(-2147483648,))
    cj = RegisterMap("cj", 1, 2, scale=0.01, error=(-32768,))
    off = RegisterMap("t3", 1, 3, type="uint16", scale=0.1, offset=-50.0)
    loop = RegisterMap("py1", 1, 4, type="uint16", scale=0.001, unit="mA", range_c=(550.0, 1600.0))
    py = RegisterMap("py2", 2, 0, "holding", type="float32", word_order="little", under=(-1.0,))
    maps = [tc, cj, off, loop, py]
    words_tc = ModbusTcpClient.convert_to_registers(412760, DT.INT32)
    words_py = ModbusTcpClient.convert_to_registers(1198.4, DT.FLOAT32, word_order="little")
    record = encode_poll(5, 0.003, [
        BlockResult(Request(1, "input", 0, 5), tuple(words_tc) + (2480, 1234, 12000)),
        BlockResult(Request(2, "holding", 0, 2), tuple(words_py)),
    ])
    got = _parse(maps, record)
    assert isinstance(got, ReadingSet) and got.seq == 5 and got.device_time is None
    assert got.get("tc1").value == pytest.approx(41.276) and got.get("tc1").unit == "mV"
    assert got.get("cj").value == pytest.approx(24.80) and got.get("cj").unit == "C"
    assert got.get("t3").value == pytest.approx(73.4)
    assert got.get("py1").value == pytest.approx(550.0 + 8.0 / 16.0 * 1050.0) and got.get("py1").unit == "C"
    assert got.get("py2").value == pytest.approx(1198.4, abs=1e-4)  # float32 carries about 7 digits
    # codes: open, error, under (float32 compared at float32 precision), failed loop, under-range loop
    record = encode_poll(6, 0.003, [
        BlockResult(Request(1, "input", 0, 5), tuple(ModbusTcpClient.convert_to_registers(2147483647, DT.INT32)) + (0x8000, 1234, 3500)),
        BlockResult(Request(2, "holding", 0, 2), tuple(ModbusTcpClient.convert_to_registers(-1.0, DT.FLOAT32, word_order="little"))),
    ])
    got = _parse(maps, record)
    assert [got.get(n).status for n in ("tc1", "cj", "t3", "py1", "py2")] == [Status.OPEN, Status.ERROR, Status.OK, Status.ERROR, Status.UNDER]
    assert all(math.isnan(got.get(n).value) for n in ("tc1", "cj", "py1", "py2"))
    record = encode_poll(7, 0.003, [BlockResult(Request(1, "input", 4, 1), (3900,))])
    got = _parse(maps, record)
    assert got.get("py1").status == Status.UNDER
    assert got.get("tc1") is None  # not in the record: missing downstream, not an error


def test_failed_blocks_mark_their_channels_err() -> None:
    maps = [RegisterMap("a", 1, 0), RegisterMap("b", 1, 1), RegisterMap("c", 2, 0, "holding")]
    clock = RegisterMap("device_time", 1, 100, type="uint32")
    for reason in ("timeout", "x02", "x06", "bad"):
        record = encode_poll(1, 0.5, [
            BlockResult(Request(1, "input", 0, 2), (1, 2)),
            BlockResult(Request(2, "holding", 0, 1), None, reason),
            BlockResult(Request(1, "input", 100, 2), (0x69B4, 0xE650)),
        ])
        got = _parse(maps, record, device_time=clock)
        assert [got.get(n).status for n in "abc"] == [Status.OK, Status.OK, Status.ERROR]
        assert got.device_time == 0x69B4E650
    # on the device's clock, a record whose clock could not be read cannot be placed in time
    record = encode_poll(2, 0.5, [BlockResult(Request(1, "input", 0, 2), (1, 2)), BlockResult(Request(1, "input", 100, 2), None, "x06")])
    assert _parse(maps, record, device_time=clock).device_time is None
    got = _parse(maps, record, device_time=clock, need_time=True)
    assert isinstance(got, Malformed) and "clock" in got.reason


def test_planning_merges_contiguous_registers_only() -> None:
    maps = [
        RegisterMap("a", 1, 0, type="int32"), RegisterMap("b", 1, 2, type="int32"), RegisterMap("c", 1, 4),
        RegisterMap("d", 1, 6), RegisterMap("e", 1, 0, "holding"), RegisterMap("f", 2, 0),
    ]
    clock = RegisterMap("device_time", 1, 100, type="uint32")
    plan = plan_requests(maps, clock)
    assert [(r.unit_id, r.table, r.start, r.count) for r in plan] == [
        (1, "holding", 0, 1), (1, "input", 0, 5), (1, "input", 6, 1), (2, "input", 0, 1), (1, "input", 100, 2),
    ]
    # at most 125 registers a read (MODBUS Application Protocol Specification V1.1b3, 6.3 and 6.4), never splitting a value
    many = [RegisterMap(f"v{i}", 1, 2 * i, type="float32") for i in range(100)]
    plan = plan_requests(many)
    assert [(r.start, r.count) for r in plan] == [(0, 124), (124, 76)]


def test_bad_records_are_malformed_never_raised() -> None:
    parser = ModbusParser([RegisterMap("a", 1, 0)])
    for bad, reason in [
        (b"FW1 1 2 a=1C *0000", "not a Modbus poll record"),
        (b"MB1 x 1.0", "bad poll number"),
        (b"MB1 1 1.0 1:i0=12", "bad block"),
        (b"MB1 1 1.0 1:q0=0001", "bad block"),
        (b"MB1 1 1.0 1:i0=GGGG", "bad registers"),
        (b"MB1 1 1.0 1:i0+2!melted", "bad failure reason"),
        (b"MB1 1 1.0 \xff", "non-ASCII"),
    ]:
        got = parser.parse(bad, 0.0)
        assert isinstance(got, Malformed) and reason in got.reason, (bad, got)


@given(st.binary(max_size=200))
def test_garbage_never_raises(data: bytes) -> None:
    parser = ModbusParser([RegisterMap("a", 1, 0, type="float32"), RegisterMap("b", 1, 2, unit="mA", range_c=(0.0, 100.0))],
                          RegisterMap("t", 1, 100, type="uint32"), need_time=True)
    assert isinstance(parser.parse(b"MB1 1 2.0 " + data, 0.0), (ReadingSet, Malformed))
    assert isinstance(parser.parse(data, 0.0), (ReadingSet, Malformed))


@given(st.lists(st.integers(0, 0xFFFF), min_size=2, max_size=2))
def test_records_round_trip(words: list[int]) -> None:
    """Whatever registers are read, the record keeps them exactly (replay decodes the same values)."""
    m = RegisterMap("a", 3, 10, "holding", type="uint32")
    record = encode_poll(0, 0.0, [BlockResult(Request(3, "holding", 10, 2), tuple(words))])
    assert ModbusParser([m]).parse(record, 0.0).get("a").value == words[0] * 65536 + words[1]
