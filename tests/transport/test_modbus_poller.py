"""The Modbus poller against real pymodbus servers: on 127.0.0.1 over TCP, over a pseudo-terminal pair as RTU (issue 13).

Each test drives the poller one poll at a time (``step``), with an injected
clock, so nothing waits on a timer except the devices' real timeouts.
"""

from __future__ import annotations

import itertools
import threading

import pytest
from pymodbus.client import ModbusTcpClient

from firewatch.cli import main
from firewatch.transport.modbus import ModbusParser, RegisterMap, plan_requests
from firewatch.transport.modbus_poll import LinkSettings, ModbusPoller
from firewatch.transport.records import ReadingSet, Status
from tests.transport.modbus_server import TestServer

DT = ModbusTcpClient.DATATYPE


def words(value, kind: str, order: str = "big") -> list[int]:
    """Registers for a value, encoded by pymodbus (the reference library)."""
    return ModbusTcpClient.convert_to_registers(value, getattr(DT, kind.upper()), word_order=order)


class Rig:
    """A poller over some maps, collecting its records and events."""

    def __init__(self, link: LinkSettings, maps: list[RegisterMap], clock_map: RegisterMap | None = None) -> None:
        self.lines: list[tuple[float, bytes]] = []
        self.events = []
        self.parser = ModbusParser(maps, clock_map)
        ticks = itertools.count(1_773_464_400)
        self.poller = ModbusPoller(
            link, plan_requests(maps, clock_map), 0.1, lambda t, line: self.lines.append((t, line)), self.events.append,
            clock=lambda: float(next(ticks)),
        )

    def poll(self) -> ReadingSet | None:
        n = len(self.lines)
        self.poller.step()
        if len(self.lines) == n:
            return None
        received, line = self.lines[-1]
        got = self.parser.parse(line, received)
        assert isinstance(got, ReadingSet), got
        return got

    def kinds(self) -> list[str]:
        return [e.kind for e in self.events]


def tcp(server: TestServer, timeout: float = 0.2, retries: int = 0) -> LinkSettings:
    return LinkSettings("tcp", f"127.0.0.1:{server.port}", timeout_s=timeout, retries=retries)


# every type and word order, with the value each should read as: raw x scale + offset, worked by hand
VALUES = [
    ("int16", "big", -1234, 0.1, 0.0, -123.4),
    ("uint16", "big", 51234, 0.01, -100.0, 412.34),
    ("int32", "big", -412760, 0.0001, 0.0, -41.276),
    ("int32", "little", 412760, 0.0001, 0.0, 41.276),
    ("uint32", "big", 3_000_000_000, 1e-6, 0.0, 3000.0),
    ("uint32", "little", 123_456, 0.01, 0.0, 1234.56),
    ("float32", "big", 1198.25, 1.0, 0.0, 1198.25),
    ("float32", "little", -3.5, 2.0, 1.0, -6.0),
]


def test_values_of_every_type_and_word_order_over_tcp() -> None:
    with TestServer() as server:
        maps, register = [], 0
        for i, (kind, order, raw, scale, offset, _) in enumerate(VALUES):
            server.set(1, "holding", register, words(raw, kind, order))
            maps.append(RegisterMap(f"c{i}", 1, register, "holding", kind, order, scale, offset))
            register += len(words(raw, kind, order))
        server.set(2, "input", 7, [12_000])
        maps.append(RegisterMap("loop", 2, 7, type="uint16", scale=0.001, unit="mA", range_c=(700.0, 1800.0)))
        rig = Rig(tcp(server), maps)
        got = rig.poll()
        for i, (*_, expected) in enumerate(VALUES):
            assert got.get(f"c{i}").value == pytest.approx(expected, rel=1e-9), VALUES[i]
            assert got.get(f"c{i}").status == Status.OK
        assert got.get("loop").value == pytest.approx(700.0 + 8.0 / 16.0 * 1100.0)  # (12 - 4) / 16 of the span
        assert got.received == 1_773_464_400.0  # stamped with the computer's clock at the poll
        # contiguous registers of one device and table in one request: two requests in all
        assert [(u, fc, a, c) for u, fc, a, c in server.requests] == [(1, 3, 0, register), (2, 4, 7, 1)]
        assert rig.kinds() == ["open"] and rig.poller.failed_polls == 0


def test_status_codes_and_loop_limits_from_a_device() -> None:
    with TestServer() as server:
        maps = [
            RegisterMap("tc", 1, 0, type="int16", scale=0.1, open=(32767,), over=(32766,), under=(-32768,), error=(-32767,)),
            RegisterMap("loop", 1, 1, type="uint16", scale=0.001, unit="mA", range_c=(0.0, 1000.0)),
        ]
        rig = Rig(tcp(server), maps)
        # raw codes from the map; loop currents in uA: NAMUR NE 43 (from memory of the recommendation's figures)
        for code, current, tc_status, loop_status in [
            (32767, 0, Status.OPEN, Status.ERROR), (32766, 3_700, Status.OVER, Status.UNDER), (-32768, 3_900, Status.UNDER, Status.UNDER),
            (-32767, 20_300, Status.ERROR, Status.OVER), (1000, 21_500, Status.OK, Status.ERROR), (1000, 4_000, Status.OK, Status.OK),
        ]:
            server.set(1, "input", 0, words(code, "int16") + [current])
            got = rig.poll()
            assert (got.get("tc").status, got.get("loop").status) == (tc_status, loop_status), (code, current)
        assert got.get("tc").value == pytest.approx(100.0) and got.get("loop").value == 0.0


def test_exception_responses_fail_their_channels_and_are_counted() -> None:
    with TestServer() as server:
        maps = [RegisterMap("a", 1, 0), RegisterMap("b", 2, 0)]
        server.set(1, "input", 0, [7])
        server.set(2, "input", 0, [9])
        rig = Rig(tcp(server), maps)
        assert rig.poll().get("b").value == 9
        server.units[2].mode = 6  # server device busy
        for _ in range(3):
            got = rig.poll()
            assert got.get("a").value == 7 and got.get("b").status == Status.ERROR
        assert b"2:i0+1!x06" in rig.lines[-1][1]
        server.units[2].mode = 2  # illegal data address: a different failure, reported again
        rig.poll()
        server.units[2].mode = "ok"
        assert rig.poll().get("b").value == 9
        assert rig.poller.failed_polls == 4
        details = [e.detail for e in rig.events if e.kind.startswith("poll-")]
        assert details == [
            "unit 2 input 0-0: exception 0x06 (server device busy)",  # MODBUS Application Protocol Specification V1.1b3, section 7
            "unit 2 input 0-0: exception 0x02 (illegal data address)",
            "unit 2 input 0-0 answers again after 4 failed polls",
        ]
        assert "disconnect" not in rig.kinds()  # devices answering is no lost link


def test_timeout_of_one_device_and_a_malformed_reply() -> None:
    with TestServer() as server:
        maps = [RegisterMap("a", 1, 0, type="int32"), RegisterMap("b", 2, 0)]
        rig = Rig(tcp(server, timeout=0.2, retries=1), maps)
        server.units[2].mode = "silent"
        got = rig.poll()
        assert got.get("a").status == Status.OK and got.get("b").status == Status.ERROR
        assert b"2:i0+1!timeout" in rig.lines[-1][1]
        assert server.requests.count((2, 4, 0, 1)) == 2  # the first try and one retry
        server.units[2].mode = "ok"
        server.units[1].mode = "short"  # a reply one register short of the two asked for
        got = rig.poll()
        assert got.get("a").status == Status.ERROR and got.get("b").status == Status.OK
        assert b"1:i0+2!bad" in rig.lines[-1][1]
        assert rig.poller.failed_polls == 2
        assert [e.detail for e in rig.events if e.kind == "poll-failed"] == [
            "unit 2 input 0-0: no answer within 0.2 s (2 tries)",
            "unit 1 input 0-1: malformed reply",
        ]


def test_silence_everywhere_is_a_lost_link_then_recovery() -> None:
    with TestServer() as server:
        maps = [RegisterMap("a", 1, 0), RegisterMap("b", 2, 0)]
        rig = Rig(tcp(server, timeout=0.1), maps)
        assert rig.poll() is not None
        server.units[1].mode = server.units[2].mode = "silent"
        assert rig.poll() is None and rig.poll() is None
        assert rig.kinds() == ["open", "disconnect"]  # one event for the loss, none per retry
        assert "no device answered" in rig.events[1].detail
        server.units[1].mode = server.units[2].mode = "ok"
        assert rig.poll() is not None
        assert rig.kinds() == ["open", "disconnect", "reconnect"]
        assert rig.poller.failed_polls == 2


def test_server_killed_and_restarted() -> None:
    server = TestServer().start()
    maps = [RegisterMap("a", 1, 0)]
    server.set(1, "input", 0, [42])
    rig = Rig(tcp(server), maps)
    try:
        assert rig.poll().get("a").value == 42
        port = server.port
        server.stop()  # the device server goes away
        delays = []
        for _ in range(3):
            n = len(rig.lines)
            delays.append(rig.poller.step())
            assert len(rig.lines) == n
        assert rig.kinds()[:2] == ["open", "disconnect"]
        assert rig.kinds()[2:] == ["open-failed"]  # refused connections: one event, not one per attempt
        assert delays == [0.25, 0.5, 1.0]  # backoff (common practice, no source)
        server = TestServer()
        server.set(1, "input", 0, [43])
        server.start(port)
        assert rig.poll().get("a").value == 43
        assert rig.kinds()[-1] == "reconnect" and rig.poller.failed_polls == 3
    finally:
        server.stop()


def test_rtu_over_a_pseudo_terminal_pair() -> None:
    with TestServer(rtu=True) as server:
        server.set(1, "input", 0, words(412760, "int32") + [2480])
        server.set(2, "holding", 4, words(1198.25, "float32", "little"))
        maps = [RegisterMap("tc1", 1, 0, type="int32", scale=0.0001, unit="mV"), RegisterMap("cj", 1, 2, scale=0.01),
                RegisterMap("py", 2, 4, "holding", "float32", "little")]
        rig = Rig(LinkSettings("rtu", server.device, baudrate=115200, timeout_s=0.3, retries=0), maps)
        got = rig.poll()
        assert got.get("tc1").value == pytest.approx(41.276) and got.get("cj").value == pytest.approx(24.8) and got.get("py").value == 1198.25
        server.units[2].mode = 3  # illegal data value
        got = rig.poll()
        assert got.get("py").status == Status.ERROR and got.get("tc1").status == Status.OK
        server.units[2].mode = "silent"  # nothing on the bus at that address: a timeout
        got = rig.poll()
        assert got.get("py").status == Status.ERROR and b"2:h4+2!timeout" in rig.lines[-1][1]


def test_poller_thread_runs_until_stopped() -> None:
    with TestServer() as server:
        server.set(1, "input", 0, [5])
        got = threading.Event()
        lines = []

        def on_line(t, line) -> None:
            lines.append(line)
            if len(lines) >= 3:
                got.set()

        poller = ModbusPoller(tcp(server), plan_requests([RegisterMap("a", 1, 0)]), 0.01, on_line, lambda e: None)
        poller.start()
        assert got.wait(10)
        poller.stop()
        assert all(line.startswith(b"MB1 ") and line.endswith(b" 1:i0=0005") for line in lines)


def test_probe_prints_registers_and_never_writes(capsys) -> None:
    with TestServer() as server:
        server.set(1, "holding", 10, words(412760, "int32") + [0xFFFF])
        args = ["probe", "--port", f"127.0.0.1:{server.port}", "--table", "holding", "--register", "10", "--count", "2", "--type", "int32"]
        assert main(args) == 0
        out = capsys.readouterr().out.splitlines()
        assert out[0].startswith("unit 1, holding registers (function 3) 10-11 as int32, high word first")
        # register, the 1-based number a manual prints, raw decimal, raw hex, decoded
        assert out[2].split() == ["10", "40011", "6", "0x0006", "412760"]
        assert out[3].split() == ["11", "40012", "19544", "0x4C58"]
        assert main(["probe", "--port", f"127.0.0.1:{server.port}", "--register", "12", "--count", "1", "--table", "holding"]) == 0
        assert capsys.readouterr().out.splitlines()[-1].split() == ["12", "40013", "65535", "0xFFFF", "-1"]
        server.units[1].mode = 2
        assert main(["probe", "--port", f"127.0.0.1:{server.port}"]) == 1
        err = capsys.readouterr().err
        assert err == "unit 1 input 0-7: exception 0x02 (illegal data address)\n"
        assert {fc for _, fc, _, _ in server.requests} <= {3, 4}  # read functions only, never a write


@pytest.mark.parametrize(
    ("argv", "fragment"),
    [
        (["--port", "127.0.0.1:502", "--type", "int32", "--count", "3"], "count them in pairs"),
        (["--port", "127.0.0.1:502", "--count", "126"], "must be 1 to 125"),
        (["--port", "127.0.0.1:502", "--register", "65535", "--count", "2"], "run past the last one"),
        (["--port", "/dev/ttyUSB9", "--unit", "0"], "1 to 247"),
        (["--port", "127.0.0.1:502", "--table", "coils"], "invalid choice"),
    ],
)
def test_probe_bad_command_lines(capsys, argv: list[str], fragment: str) -> None:
    with pytest.raises(SystemExit) as exit_info:
        status = main(["probe", *argv])
        raise SystemExit(status)
    assert exit_info.value.code == 2
    err = capsys.readouterr().err
    assert fragment in err and err.count("\n") == 1 and "Traceback" not in err
