"""The simulator as Modbus devices: its documented register map, faults as codes, exceptions and silence (issue 13)."""

from __future__ import annotations

import threading

import pytest
from pymodbus.client import ModbusTcpClient
from pymodbus.exceptions import ModbusException, ModbusIOException

from firewatch.settings.profile import load_site, profiles_dir
from firewatch.simulator.modbus import CLOCK_REGISTER, KilnImage, register_map, serve_tcp
from firewatch.simulator.run import Simulation
from firewatch.simulator.scenario import load_scenario, parse_fault
from firewatch.transport.modbus import decode
from firewatch.transport.native import NativeParser
from firewatch.transport.records import Malformed

SITE = load_site(profiles_dir() / "demo-site.toml")


def test_register_map_of_the_demo_site() -> None:
    """The layout the module docstring documents (and docs/modbus.md): unit 1 input, unit 2 holding."""
    got = {(s.channel, s.kind): (s.unit_id, s.table, s.register, s.type, s.word_order) for s in register_map(SITE)}
    assert got == {
        ("tc1", "emf"): (1, "input", 0, "int32", "big"),
        ("tc2", "emf"): (1, "input", 2, "int32", "big"),
        ("cj", "cj"): (1, "input", 4, "int16", "big"),
        ("py1", "loop"): (1, "input", 5, "uint16", "big"),
        ("py2", "loop"): (1, "input", 6, "uint16", "big"),
        ("py1", "float"): (2, "holding", 0, "float32", "little"),
        ("py2", "float"): (2, "holding", 2, "float32", "little"),
    }


def _first_line(*faults: str):
    sc = load_scenario().with_changes(duration_s=10.0, faults=tuple(parse_fault(f) for f in faults))
    return next(iter(Simulation(sc).chunks()))


def test_faults_become_codes_exceptions_and_silence() -> None:
    lines = _first_line("tc-open@0:channel=tc2", "loop-break@0:channel=py2")
    image = KilnImage(SITE)
    image.load(lines[0])
    regs = image.read(1, "input", 0, 7)
    # the codes documented in firewatch/simulator/modbus.py
    assert decode(regs[2:4], "int32") == 2147483647  # tc2 open
    assert abs(decode(regs[0:2], "int32")) < 20_000  # tc1 near room temperature: under 2 mV in 0.1 uV steps
    assert 2000 < decode(regs[4:5], "int16") < 3000  # the cold junction, 0.01 degC steps
    assert regs[5] == 3800  # py1 below its range: 3.8 mA (NAMUR NE 43 under-range saturation, from memory)
    assert regs[6] == 0  # py2's loop broken: no current
    hold = image.read(2, "holding", 0, 4)
    assert decode(hold[0:2], "float32", "little") == -1.0 and decode(hold[2:4], "float32", "little") == -3.0
    assert decode(image.read(1, "input", CLOCK_REGISTER, 2), "uint32") == int(load_scenario().start_utc) + 1
    assert image.read(1, "input", 7, 1) == 2 and image.read(2, "input", 0, 1) == 2  # illegal data address
    garbage = _first_line("garbage@0:seconds=60,fraction=1")
    bad = next(line for line in garbage if isinstance(NativeParser().parse(line.data, 0.0), Malformed))
    spoiled = KilnImage(SITE)
    spoiled.load(bad)
    assert spoiled.read(1, "input", 0, 2) == 6  # server device busy
    dropout = _first_line("dropout@0:seconds=60")
    quiet = KilnImage(SITE)
    quiet.load(dropout[0])
    assert dropout[0].dropped and quiet.read(1, "input", 0, 2) is None  # silence


@pytest.mark.timeout(60)
def test_lock_step_server_reads_refuses_writes_and_ends() -> None:
    sc = load_scenario().with_changes(duration_s=3.0)
    ready = threading.Event()
    where: list[str] = []

    def announce(text: str) -> None:
        where.append(text)
        ready.set()

    thread = threading.Thread(target=serve_tcp, args=(Simulation(sc), 0.0, "127.0.0.1", 0, announce), daemon=True)
    thread.start()
    assert ready.wait(30)
    host, port = where[0].split(":")
    assert host == "127.0.0.1"
    # no retries: in lock-step a retried clock read would move the simulation on twice; a generous timeout instead
    client = ModbusTcpClient(host, port=int(port), timeout=3.0, retries=0)
    try:
        times = []
        for k in range(3):  # lock-step: each read of the clock moves on one reading
            assert not client.read_input_registers(0, count=7, device_id=1).isError()
            if k == 2:
                assert client.write_register(0, 1, device_id=2).isError()  # a write is refused
                with pytest.raises(ModbusIOException):
                    client.read_input_registers(0, count=1, device_id=9)  # no device at address 9: silence
            times.append(decode(client.read_input_registers(CLOCK_REGISTER, count=2, device_id=1).registers, "uint32"))
        assert times == [int(sc.start_utc) + k for k in (1, 2, 3)]
        with pytest.raises(ModbusException):
            client.read_input_registers(0, count=1, device_id=1)  # the last reading was read: the simulation has ended
    finally:
        client.close()
    thread.join(10)
    assert not thread.is_alive()
