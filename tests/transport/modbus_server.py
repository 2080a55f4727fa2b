"""A real pymodbus server for tests, on 127.0.0.1 (TCP) or a pseudo-terminal pair (RTU), in a background thread.

Each unit's registers can be set from the test, and each unit can be told
to answer, stay silent, answer an exception code, or send a malformed
reply (one register short). Every request the server receives is logged
with its function code, so a test can show that nothing was written.
"""

from __future__ import annotations

import asyncio
import logging
import os
import threading
import tty
from dataclasses import dataclass, field

from pymodbus.constants import ExcCodes
from pymodbus.exceptions import NoSuchIdException
from pymodbus.framer import FramerType
from pymodbus.server import ModbusSerialServer, ModbusTcpServer
from pymodbus.simulator import DataType, SimData, SimDevice

logging.getLogger("pymodbus").setLevel(logging.CRITICAL)
logging.getLogger("pymodbus").addHandler(logging.NullHandler())

SIZE = 200


@dataclass
class Unit:
    input: list[int] = field(default_factory=lambda: [0] * SIZE)
    holding: list[int] = field(default_factory=lambda: [0] * SIZE)
    mode: str | int = "ok"
    """``ok``, ``silent``, ``short`` (a reply one register short) or an exception code."""


class TestServer:
    """Units 1..n on a pymodbus server; unknown units are silent, as on a bus."""

    __test__ = False  # not a test class

    def __init__(self, units: int = 2, rtu: bool = False) -> None:
        self.units = {i: Unit() for i in range(1, units + 1)}
        self.rtu = rtu
        self.requests: list[tuple[int, int, int, int]] = []
        self.port = 0
        self.device = ""
        self._loop: asyncio.AbstractEventLoop | None = None
        self._thread: threading.Thread | None = None
        self._server = None
        self._ready = threading.Event()
        self._done: asyncio.Event | None = None
        self._error: BaseException | None = None
        self._fds: list[int] = []

    # -- what the devices hold ------------------------------------------------------
    def set(self, unit: int, table: str, register: int, words: list[int]) -> None:
        getattr(self.units[unit], table)[register : register + len(words)] = words

    def _devices(self) -> list[SimDevice]:
        def blocks():
            bits = [SimData(0, count=16, values=False, datatype=DataType.BITS)]
            regs = [SimData(0, count=SIZE, values=0, datatype=DataType.REGISTERS)]
            return bits, list(bits), regs, list(regs)

        def action_for(unit_id: int):
            async def action(function_code, start_address, address, count, registers, set_values):
                self.requests.append((unit_id, function_code, address, count))
                unit = self.units[unit_id]
                if unit.mode == "silent":
                    raise NoSuchIdException("silent")
                if isinstance(unit.mode, int):
                    return ExcCodes(unit.mode)
                source = unit.input if function_code == 4 else unit.holding
                registers[address - start_address : address - start_address + count] = source[address : address + count]
                return None

            return action

        async def nobody(*_args):
            raise NoSuchIdException("no such unit")

        devices = [SimDevice(i, simdata=blocks(), action=action_for(i)) for i in self.units]
        return devices + [SimDevice(0, simdata=blocks(), action=nobody)]

    def _short(self, sending: bool, pdu):
        """A malformed reply: one register fewer than asked for, from a unit in ``short`` mode."""
        if sending and getattr(pdu, "registers", None) and self.units.get(pdu.dev_id, Unit()).mode == "short":
            pdu.registers = pdu.registers[:-1]
        return pdu

    # -- running ----------------------------------------------------------------------
    def start(self, port: int | None = None) -> TestServer:
        self._ready.clear()
        self._thread = threading.Thread(target=self._run, args=(port if port is not None else self.port,), daemon=True)
        self._thread.start()
        self._ready.wait(10)
        if self._error is not None:
            raise self._error
        return self

    def _run(self, port: int) -> None:
        loop = self._loop = asyncio.new_event_loop()
        try:
            loop.run_until_complete(self._main(port))
        except BaseException as exc:  # reported to start()
            self._error = exc
            self._ready.set()
        finally:
            loop.close()

    async def _main(self, port: int) -> None:
        self._done = asyncio.Event()
        if self.rtu:
            loop = asyncio.get_running_loop()
            ends = []
            for _ in range(2):
                master, slave = os.openpty()
                tty.setraw(master)
                tty.setraw(slave)
                os.set_blocking(master, False)
                ends.append((master, slave, os.ttyname(slave)))
                self._fds += [master, slave]
            (m1, _, name1), (m2, _, name2) = ends

            def copy(src: int, dst: int) -> None:
                try:
                    os.write(dst, os.read(src, 4096))
                except OSError:
                    pass

            loop.add_reader(m1, copy, m1, m2)
            loop.add_reader(m2, copy, m2, m1)
            server = ModbusSerialServer(self._devices(), framer=FramerType.RTU, port=name1, baudrate=115200,
                                        ignore_missing_devices=True, trace_pdu=self._short)
            self.device = name2
        else:
            server = ModbusTcpServer(self._devices(), address=("127.0.0.1", port), ignore_missing_devices=True, trace_pdu=self._short)
        self._server = server
        if not await server.listen():
            raise OSError(f"cannot listen on 127.0.0.1:{port}")
        if not self.rtu:
            self.port = server.transport.sockets[0].getsockname()[1]
        self._ready.set()
        await self._done.wait()
        server.close()
        if self.rtu:
            for fd in self._fds[0::2]:
                asyncio.get_running_loop().remove_reader(fd)
            for fd in self._fds:
                os.close(fd)
            self._fds = []

    def stop(self) -> None:
        """Stop serving and close every connection (the device server goes away)."""
        if self._loop is not None and self._done is not None and self._thread is not None and self._thread.is_alive():
            self._loop.call_soon_threadsafe(self._done.set)
            self._thread.join(10)

    def __enter__(self) -> TestServer:
        return self.start()

    def __exit__(self, *exc) -> None:
        self.stop()
