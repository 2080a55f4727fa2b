"""The simulated kiln as Modbus devices: a thermocouple input module (unit 1) and a pyrometer (unit 2).

Served with pymodbus over TCP or over a pseudo-terminal as RTU. The values
are the simulator's native lines, parsed and written into registers, so a
firing read over Modbus carries the same numbers as over the line format
(to the registers' resolution: 0.1 µV for EMF, 0.01 °C for the cold
junction, 1 µA for a loop, float32 for the pyrometer).

Register map (0-based addresses; a manual would print input register 0 as
30001 and holding register 0 as 40001)
----------------------------------------------------------------------

Unit 1, thermocouple input module, input registers (function 4):

================= ======== ===================================================
registers         type     value
================= ======== ===================================================
2i, 2i+1          int32    thermocouple i (site profile order), high word
                           first: EMF in 0.1 µV (``scale = 0.0001``, mV), or
                           for a ``unit = "C"`` thermocouple 0.001 °C.
                           Open circuit 2147483647, over range 2147483646,
                           under range -2147483648, error 2147483645.
2n+j              int16    cold junction j, 0.01 °C; error -32768
2n+m+k            uint16   analogue input k: pyrometer k's 4-20 mA loop in
                           µA (``scale = 0.001``, mA) over its ``range_c``;
                           below its range 3800 µA, above 20500 µA (NAMUR
                           NE 43 saturation), a broken loop 0 µA
100, 101          uint32   the simulated clock, UTC seconds, high word first
================= ======== ===================================================

(n thermocouples, m cold junctions.) Unit 2, pyrometer, holding registers
(function 3): pyrometer k's reading at 2k, 2k+1 as float32 °C, *low word
first*; below range -1.0, above range -2.0, error -3.0.

For the demo site (profiles/demo-site-modbus.toml): tc1 at 0-1, tc2 at 2-3,
cj at 4, py1's loop at 5, py2's loop at 6, the clock at 100-101; on unit 2
py1 at 0-1 and py2 at 2-3. Any other unit address goes unanswered, as on a
bus where nothing has that address; registers outside the map answer
exception 02 (illegal data address); writes are refused.

Faults and time
---------------

``--speed S`` (S > 0) runs the simulation against the wall clock, S
simulated seconds per real second: a poll sees the latest simulated
reading, and the clock registers say when it was. Record with ``--clock
device`` so that rates and debounce times are simulated ones, and poll at
least once per simulated ``interval_s`` divided by S to keep every
reading: a slower poll still records, with gaps wherever successive polls
are more than 5 simulated seconds apart. ``--speed 0`` is *lock-step*: the
simulation advances one reading each time the clock registers are read,
which the recorder does last in every poll, so each poll gets the next
reading, as fast as the recorder polls.

A malformed line (the ``garbage`` fault) is served as exception 06 (server
device busy) while it lasts. A ``dropout`` is silence, no answer at all,
for its simulated length; with ``disconnect=1`` TCP connections are also
closed as it starts. In lock-step a dropout's readings are skipped rather
than waited out (a jump of the clock, as the line format's lost lines
make), and ``disconnect=1`` closes the connections.
"""

from __future__ import annotations

import asyncio
import math
import os
import tty
from collections.abc import Callable, Coroutine, Iterator
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any, Literal

from firewatch.settings.profile import SiteProfile
from firewatch.simulator.run import Line, Simulation
from firewatch.transport.native import NativeParser
from firewatch.transport.records import Malformed, Status

if TYPE_CHECKING:
    from pymodbus.constants import ExcCodes

    # pymodbus's SimDevice action: (function code, start address, address, count, registers, values to set)
    _Action = Callable[[int, int, int, int, list[int], list[int] | list[bool] | None], Coroutine[None, None, ExcCodes | None]]

__all__ = ["Slot", "register_map", "KilnImage", "serve_tcp", "serve_rtu_pty", "CLOCK_REGISTER"]

CLOCK_REGISTER = 100
"""First of the two input registers of unit 1 holding the simulated clock."""

EMF_CODES = {Status.OPEN: 2147483647, Status.OVER: 2147483646, Status.UNDER: -2147483648, Status.ERROR: 2147483645}
CJ_ERROR = -32768
LOOP_UA = {Status.UNDER: 3800, Status.OVER: 20500}
FLOAT_CODES = {Status.UNDER: -1.0, Status.OVER: -2.0, Status.ERROR: -3.0}


@dataclass(frozen=True)
class Slot:
    """Where the simulated devices put one channel (see the module docstring)."""

    channel: str
    kind: str
    """``emf`` (int32, 0.1 µV), ``tc-c`` (int32, 0.001 °C), ``cj`` (int16, 0.01 °C), ``loop`` (uint16 µA), ``float`` (float32 °C)."""
    unit_id: int
    table: str
    register: int
    type: str
    word_order: Literal["big", "little"] = "big"
    range_c: tuple[float, float] | None = None


def register_map(site: SiteProfile) -> list[Slot]:
    """The simulated devices' registers for a site (the clock excluded)."""
    slots: list[Slot] = []
    n = len(site.thermocouples)
    for i, tc in enumerate(site.thermocouples):
        slots.append(Slot(tc.name, "emf" if tc.unit == "mV" else "tc-c", 1, "input", 2 * i, "int32"))
    for j, cj in enumerate(site.cold_junctions):
        slots.append(Slot(cj, "cj", 1, "input", 2 * n + j, "int16"))
    base = 2 * n + len(site.cold_junctions)
    for k, py in enumerate(site.pyrometers):
        span = py.range_c if all(math.isfinite(x) for x in py.range_c) else None
        slots.append(Slot(py.name, "loop", 1, "input", base + k, "uint16", range_c=span))
        slots.append(Slot(py.name, "float", 2, "holding", 2 * k, "float32", word_order="little"))
    return slots


def _to_registers(value: int | float, type: str, word_order: Literal["big", "little"]) -> list[int]:
    """Registers for a value, encoded by pymodbus (an implementation independent of firewatch's decoding)."""
    from pymodbus.client import ModbusTcpClient

    kind = getattr(ModbusTcpClient.DATATYPE, type.upper())
    return ModbusTcpClient.convert_to_registers(value, kind, word_order=word_order)


class KilnImage:
    """The registers the simulated devices serve, loaded from the simulator's lines.

    ``state`` is ``ok``, ``busy`` (a malformed line: exception 06) or
    ``silent`` (a dropout: no answer).
    """

    def __init__(self, site: SiteProfile) -> None:
        self.site = site
        self.slots = register_map(site)
        self._parser = NativeParser()
        size: dict[tuple[int, str], int] = {(1, "input"): CLOCK_REGISTER + 2, (2, "holding"): 2}
        for s in self.slots:
            key = (s.unit_id, s.table)
            size[key] = max(size.get(key, 0), s.register + (2 if s.type in ("int32", "uint32", "float32") else 1))
        self.tables: dict[tuple[int, str], list[int]] = {key: [0] * n for key, n in size.items()}
        self.used: dict[tuple[int, str], list[tuple[int, int]]] = {
            (1, "input"): [
                (0, max([s.register + (2 if s.type == "int32" else 1) for s in self.slots if s.unit_id == 1] or [0])),
                (CLOCK_REGISTER, CLOCK_REGISTER + 2),
            ],
            (2, "holding"): [(0, size[(2, "holding")])],
        }
        self.state = "ok"
        self.sim_s = 0.0

    def load(self, line: Line) -> None:
        """Take the values of one simulated line (or its fault)."""
        self.sim_s = line.sim_s
        if line.dropped:
            self.state = "silent"
            return
        parsed = self._parser.parse(line.data, 0.0)
        if isinstance(parsed, Malformed):
            self.state = "busy"
            return
        self.state = "ok"
        values = {v.channel: v for v in parsed.values}
        for s in self.slots:
            v = values.get(s.channel)
            status = Status.MISSING if v is None else Status(v.status)
            self._put(s, self._raw(s, status, v.value if v is not None else math.nan))
        if parsed.device_time is not None:
            self._put(Slot("clock", "clock", 1, "input", CLOCK_REGISTER, "uint32"), int(math.floor(parsed.device_time)))

    @staticmethod
    def _raw(s: Slot, status: Status, value: float) -> int | float:
        if s.kind == "emf":
            return round(value * 10_000) if status == Status.OK else EMF_CODES.get(status, EMF_CODES[Status.ERROR])
        if s.kind == "tc-c":
            return round(value * 1000) if status == Status.OK else EMF_CODES.get(status, EMF_CODES[Status.ERROR])
        if s.kind == "cj":
            return round(value * 100) if status == Status.OK else CJ_ERROR
        if s.kind == "loop":
            if s.range_c is None or status in (Status.ERROR, Status.OPEN, Status.MISSING):
                return 0
            if status != Status.OK:
                return LOOP_UA.get(status, 0)
            low, high = s.range_c
            return min(20_000, max(4_000, round(4_000 + 16_000 * (value - low) / (high - low))))
        return float(value) if status == Status.OK else FLOAT_CODES.get(status, FLOAT_CODES[Status.ERROR])

    def _put(self, s: Slot, raw: int | float) -> None:
        words = _to_registers(raw, s.type, s.word_order)
        table = self.tables[(s.unit_id, s.table)]
        table[s.register : s.register + len(words)] = words

    def read(self, unit_id: int, table: str, address: int, count: int) -> list[int] | int | None:
        """Registers, an exception code, or None for silence."""
        if self.state == "silent":
            return None
        if self.state == "busy":
            return 6
        spans = self.used.get((unit_id, table))
        if not spans or not any(lo <= address and address + count <= hi for lo, hi in spans):
            return 2
        return self.tables[(unit_id, table)][address : address + count]


class _Devices:
    """The pymodbus devices over a :class:`KilnImage`, and what drives it (pacing or lock-step)."""

    def __init__(self, sim: Simulation, speed: float) -> None:
        self.sim = sim
        self.speed = speed
        self.image = KilnImage(sim.site)
        self.lines: Iterator[Line] = (line for chunk in sim.chunks() for line in chunk)
        self.finished = asyncio.Event()
        self.server: Any = None
        """The pymodbus server, once made (for closing connections at a dropout)."""
        self._ended = False

    def device_list(self) -> list[Any]:
        """Units 1 and 2, and a catch-all unit 0 that never answers (pymodbus ``SimDevice`` objects)."""
        from pymodbus.constants import ExcCodes
        from pymodbus.exceptions import NoSuchIdException
        from pymodbus.simulator import DataType, SimData, SimDevice

        codes = {2: ExcCodes.ILLEGAL_ADDRESS, 6: ExcCodes.DEVICE_BUSY}

        def blocks(unit: int) -> tuple[list[Any], list[Any], list[Any], list[Any]]:
            bits = [SimData(0, count=16, values=False, datatype=DataType.BITS)]
            regs = {}
            for table in ("holding", "input"):
                # the catch-all device 0 spans every address, so that its action (silence) is reached
                n = len(self.image.tables.get((unit, table), [0])) if unit else 65535
                regs[table] = [SimData(0, count=n, values=0, datatype=DataType.REGISTERS, readonly=True)]
            return bits, list(bits), regs["holding"], regs["input"]

        def action_for(unit: int) -> _Action:
            async def action(
                function_code: int, start_address: int, address: int, count: int, registers: list[int],
                set_values: list[int] | list[bool] | None,
            ) -> ExcCodes | None:
                if self._ended:  # the last reading has been read (its poll is over): the kiln goes quiet
                    self.finished.set()
                    raise NoSuchIdException("the simulation has ended")
                if set_values is not None:
                    return ExcCodes.ILLEGAL_FUNCTION
                table = "input" if function_code == 4 else "holding"
                got = self.image.read(unit, table, address, count)
                # lock-step: reading the clock, answered or not, moves the simulation on by one reading
                if self.speed == 0 and unit == 1 and table == "input" and address <= CLOCK_REGISTER < address + count:
                    self._advance()
                if got is None:
                    raise NoSuchIdException(f"unit {unit} is silent (dropout)")
                if isinstance(got, int):
                    return codes.get(got, ExcCodes.DEVICE_FAILURE)
                registers[address - start_address : address - start_address + count] = got
                return None

            return action

        async def nobody(*_args: Any) -> None:
            raise NoSuchIdException("no device at this address")

        return [
            SimDevice(1, simdata=blocks(1), action=action_for(1)),
            SimDevice(2, simdata=blocks(2), action=action_for(2)),
            SimDevice(0, simdata=blocks(0), action=nobody),
        ]

    def _drop_connections(self) -> None:
        server = self.server
        if server is not None and hasattr(server, "active_connections"):
            for conn in list(server.active_connections.values()):
                conn.close()

    def _advance(self) -> bool:
        """Lock-step: the next reading; a dropout's readings are skipped. False when the simulation has ended."""
        for line in self.lines:
            if line.dropped:
                if line.disconnect:
                    self._drop_connections()
                continue
            self.image.load(line)
            return True
        # stop at the next request rather than now, so that the answer to this read still goes out
        self._ended = True
        return False

    async def run_paced(self) -> None:
        """Advance against the wall clock at ``speed`` simulated seconds per real second."""
        loop = asyncio.get_running_loop()
        wall0 = loop.time()
        sim0: float | None = None
        for line in self.lines:
            if sim0 is None:
                sim0 = line.sim_s
            delay = wall0 + (line.sim_s - sim0) / self.speed - loop.time()
            if delay > 0:
                await asyncio.sleep(delay)
            if line.disconnect:
                self._drop_connections()
            self.image.load(line)
        self.finished.set()


def _bound(server: Any, host: str) -> str:
    sockets = getattr(server.transport, "sockets", None) or ()
    if sockets:
        addr = sockets[0].getsockname()
        return f"{addr[0]}:{addr[1]}"
    return host


def serve_tcp(sim: Simulation, speed: float, host: str, port: int, announce: Callable[[str], None]) -> None:
    """Serve the kiln as Modbus TCP devices on HOST:PORT (port 0 picks a free one; its address is announced first)."""
    from firewatch.transport.modbus_poll import _quiet_pymodbus

    _quiet_pymodbus()

    async def main() -> None:
        from pymodbus.server import ModbusTcpServer

        devices = _Devices(sim, speed)
        server = ModbusTcpServer(devices.device_list(), address=(host, port), ignore_missing_devices=True)
        devices.server = server
        if not await server.listen():
            raise OSError(f"cannot listen on {host}:{port}")
        announce(_bound(server, f"{host}:{port}"))
        await _drive(devices)
        server.close()

    asyncio.run(main())


async def _drive(devices: _Devices) -> None:
    if devices.speed == 0:
        devices._advance()
        await devices.finished.wait()
    else:
        await devices.run_paced()


def serve_rtu_pty(sim: Simulation, speed: float, announce: Callable[[str], None], baudrate: int = 19200) -> None:
    """Serve the kiln as Modbus RTU devices on a new pseudo-terminal; its path is announced first.

    pymodbus's serial server opens its port by name, and a pseudo-terminal
    has a name only at its slave end, so two pseudo-terminals are joined
    back to back (bytes copied between their master ends, as a null-modem
    cable would): the server opens one slave, the recorder the other.
    """
    from firewatch.transport.modbus_poll import _quiet_pymodbus

    _quiet_pymodbus()

    async def main() -> None:
        from pymodbus.framer import FramerType
        from pymodbus.server import ModbusSerialServer

        loop = asyncio.get_running_loop()
        ends = []
        for _ in range(2):
            master, slave = os.openpty()
            tty.setraw(master)
            tty.setraw(slave)
            os.set_blocking(master, False)
            ends.append((master, slave, os.ttyname(slave)))
        (m_server, s_server, server_name), (m_client, s_client, client_name) = ends

        def copy(src: int, dst: int) -> None:
            try:
                data = os.read(src, 4096)
                os.write(dst, data)
            except (BlockingIOError, OSError):
                pass  # nobody at the other end yet: the bytes are lost, as on a bus

        loop.add_reader(m_server, copy, m_server, m_client)
        loop.add_reader(m_client, copy, m_client, m_server)
        devices = _Devices(sim, speed)
        server = ModbusSerialServer(devices.device_list(), framer=FramerType.RTU, port=server_name, baudrate=baudrate, ignore_missing_devices=True)
        devices.server = server
        try:
            if not await server.listen():
                raise OSError(f"cannot open {server_name}")
            announce(client_name)
            await _drive(devices)
        finally:
            server.close()
            loop.remove_reader(m_server)
            loop.remove_reader(m_client)
            for fd in (m_server, s_server, m_client, s_client):
                os.close(fd)

    asyncio.run(main())
