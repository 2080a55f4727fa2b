"""Polling Modbus devices over RTU or TCP (pymodbus), in a thread that survives a lost bus.

Each poll reads every planned block once and hands the recorder one poll
record (:func:`firewatch.transport.modbus.encode_poll`) stamped with the
computer's clock at the poll's start. A timeout, an exception response or
a malformed reply fails only its block (its channels read ``ERROR``); a
poll in which no device answers at all, or a connection or port that
fails, means the link is lost: the poller reports a ``disconnect``
:class:`~firewatch.transport.ports.PortEvent` (the recorder records a gap,
as for an unplugged serial line), closes the client and tries again with
backoff, reporting ``reconnect`` once a device answers. Every failed poll
is counted in :attr:`ModbusPoller.failed_polls`.

It only ever reads (functions 3 and 4): nothing here writes to a device.
pymodbus is imported when a link opens, so that the rest of firewatch
works without it.
"""

from __future__ import annotations

import logging
import threading
import time
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Any

from firewatch.transport.modbus import EXCEPTION_NAMES, BlockResult, Request, encode_poll
from firewatch.transport.ports import PortEvent

__all__ = ["LinkSettings", "LinkLost", "ModbusLink", "ModbusPoller", "parse_host_port", "describe_failure"]


def parse_host_port(text: str) -> tuple[str, int]:
    """``HOST:PORT`` to its parts; ``ValueError`` names the expected form.

    Examples
    --------
    >>> parse_host_port("127.0.0.1:5020")
    ('127.0.0.1', 5020)
    """
    host, sep, port = text.rpartition(":")
    if not sep or not host or not port.isdigit() or not 0 < int(port) <= 65535:
        raise ValueError(f"expected HOST:PORT such as 192.168.1.20:502, got {text!r}")
    return host, int(port)


@dataclass(frozen=True)
class LinkSettings:
    """How to reach the devices: ``tcp`` to ``HOST:PORT``, or ``rtu`` on a serial device."""

    protocol: str
    target: str
    baudrate: int = 9600
    bytesize: int = 8
    parity: str = "N"
    stopbits: float = 1
    timeout_s: float = 0.5
    retries: int = 2


class LinkLost(Exception):
    """The connection or the serial port failed; the message says why."""


def describe_failure(failure: str, settings: LinkSettings | None = None) -> str:
    """Words for a block's failure code (``timeout``, ``xNN``, ``bad``).

    Examples
    --------
    >>> describe_failure("x02")
    'exception 0x02 (illegal data address)'
    """
    if failure == "timeout":
        if settings is None:
            return "no answer"
        tries = settings.retries + 1
        return f"no answer within {settings.timeout_s:g} s ({tries} {'try' if tries == 1 else 'tries'})"
    if failure.startswith("x"):
        code = int(failure[1:], 16)
        return f"exception 0x{code:02X} ({EXCEPTION_NAMES.get(code, 'unknown code')})"
    return "malformed reply"


def _quiet_pymodbus() -> None:
    """pymodbus logs every timeout at ERROR level; firewatch reports failures itself, once per change."""
    log = logging.getLogger("pymodbus")
    if not any(isinstance(h, logging.NullHandler) for h in log.handlers):
        log.addHandler(logging.NullHandler())
    log.setLevel(logging.CRITICAL)


class ModbusLink:
    """A pymodbus client for one bus or one TCP connection; it reads and never writes."""

    def __init__(self, settings: LinkSettings) -> None:
        self.settings = settings
        self._client: Any = None

    def open(self) -> None:
        """Connect (TCP) or open the port (RTU); :class:`LinkLost` names the reason."""
        if self._client is not None:
            return
        _quiet_pymodbus()
        from pymodbus.client import ModbusSerialClient, ModbusTcpClient
        from pymodbus.framer import FramerType

        s = self.settings
        client: ModbusTcpClient | ModbusSerialClient
        if s.protocol == "tcp":
            host, port = parse_host_port(s.target)
            client = ModbusTcpClient(host, port=port, timeout=s.timeout_s, retries=s.retries)
            where = f"cannot connect to {s.target}"
        else:
            client = ModbusSerialClient(
                s.target, framer=FramerType.RTU, baudrate=s.baudrate, bytesize=s.bytesize,
                parity=s.parity, stopbits=int(s.stopbits), timeout=s.timeout_s, retries=s.retries,
            )
            where = f"cannot open {s.target}"
        # firewatch decides when the link is lost, not pymodbus's own count of unanswered requests
        client.set_max_no_responses(1 << 30)
        if not client.connect():
            client.close()
            raise LinkLost(where)
        self._client = client

    def read(self, request: Request) -> BlockResult:
        """One block: its registers, or a failed :class:`BlockResult`; :class:`LinkLost` if the link went."""
        from pymodbus.exceptions import ConnectionException, ModbusException, ModbusIOException

        if self._client is None:
            self.open()
        client = self._client
        read = client.read_input_registers if request.table == "input" else client.read_holding_registers
        try:
            response = read(request.start, count=request.count, device_id=request.unit_id)
        except ConnectionException as exc:
            self.close()
            # pymodbus's text repeats the client's repr; say what happened
            raise LinkLost("the connection was closed" if "closed" in str(exc) else "the connection failed") from None
        except ModbusIOException as exc:
            # pymodbus says "No response received" when every try timed out
            return BlockResult(request, None, "timeout" if "No response" in str(exc) else "bad")
        except ModbusException:
            return BlockResult(request, None, "bad")
        except OSError as exc:  # pyserial's SerialException is an OSError
            self.close()
            raise LinkLost(_first_line(exc) or type(exc).__name__) from None
        if response.isError():
            code = int(getattr(response, "exception_code", 0) or 0)
            return BlockResult(request, None, f"x{code:02X}")
        registers = getattr(response, "registers", None)
        if registers is None or len(registers) != request.count:
            return BlockResult(request, None, "bad")
        return BlockResult(request, tuple(int(r) & 0xFFFF for r in registers))

    def close(self) -> None:
        if self._client is not None:
            try:
                self._client.close()
            except Exception:  # closing a vanished port may fail again; nothing to keep
                pass
            self._client = None


def _first_line(exc: BaseException) -> str:
    text = str(exc)
    return text.splitlines()[0] if text else ""


class ModbusPoller:
    """Poll the planned blocks every ``poll_s`` seconds in a thread, reconnecting with backoff, until stopped.

    Parameters
    ----------
    link : LinkSettings
    requests : sequence of Request
        The reads of one poll, in order (:func:`~firewatch.transport.modbus.plan_requests`).
    poll_s : float
    on_line : callable(received_utc_s, record_bytes)
        Gets each poll record, from the poller's thread.
    on_event : callable(PortEvent)
        ``open``, ``disconnect``, ``reconnect``, ``open-failed``, and per
        block ``poll-failed`` / ``poll-ok`` when a block starts or stops failing.
    clock : callable
        Wall clock, UTC seconds (the poll's stamp).
    monotonic : callable
        For pacing and durations (injectable for tests).
    backoff_s : tuple of float
        Successive waits between attempts while the link is lost; the last repeats.
    link_factory : callable(LinkSettings) -> ModbusLink
    """

    def __init__(
        self,
        link: LinkSettings,
        requests: Sequence[Request],
        poll_s: float,
        on_line: Callable[[float, bytes], None],
        on_event: Callable[[PortEvent], None],
        clock: Callable[[], float] = time.time,
        monotonic: Callable[[], float] = time.monotonic,
        backoff_s: tuple[float, ...] = (0.25, 0.5, 1.0, 2.0, 5.0, 10.0),
        link_factory: Callable[[LinkSettings], ModbusLink] = ModbusLink,
    ) -> None:
        self.settings = link
        self.url = link.target
        self.requests = tuple(requests)
        self.poll_s = poll_s
        self._on_line = on_line
        self._on_event = on_event
        self._clock = clock
        self._mono = monotonic
        self._backoff = backoff_s
        self._link = link_factory(link)
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self.connected = threading.Event()
        self.polls = 0
        self.failed_polls = 0
        """Polls with any block failed, and polls that found the link lost (no device answering)."""
        self._seq = 0
        self._ever = False
        self._attempt = 0
        self._last_failure = ""
        self._next_due: float | None = None
        self._block_failures: dict[Request, tuple[str, int]] = {}

    def start(self) -> None:
        self._thread = threading.Thread(target=self._run, name=f"modbus {self.url}", daemon=True)
        self._thread.start()

    def stop(self, timeout: float = 10.0) -> None:
        self._stop.set()
        if self._thread is not None:
            self._thread.join(timeout)
        self._link.close()

    def _run(self) -> None:
        while not self._stop.is_set():
            delay = self.step()
            if delay > 0:
                self._stop.wait(delay)

    def poll(self) -> tuple[list[BlockResult] | None, str]:
        """Read every block once over the link (opening it if needed): the results, or None and why the link is lost."""
        try:
            self._link.open()
            return [self._link.read(r) for r in self.requests], ""
        except LinkLost as exc:
            self._link.close()
            return None, str(exc)

    def step(self) -> float:
        """One poll and what follows from it; returns how long to wait before the next."""
        if self._next_due is None:
            self._next_due = self._mono()
        received = self._clock()
        t0 = self._mono()
        results, reason = self.poll()
        duration = self._mono() - t0
        self.polls += 1
        if results is not None and any(r.answered for r in results):
            if not self.connected.is_set():
                self._on_event(PortEvent(self._clock(), "reconnect" if self._ever else "open", self.url))
                self.connected.set()
                self._ever = True
                self._attempt = 0
                self._last_failure = ""
            if any(r.failure for r in results):
                self.failed_polls += 1
            self._note_blocks(results)
            self._on_line(received, encode_poll(self._seq, duration, results))
            self._seq += 1
            now = self._mono()
            self._next_due += self.poll_s
            if self._next_due < now:  # fell behind (slow devices): start again from now rather than burst
                self._next_due = now
            return self._next_due - now
        self.failed_polls += 1
        if results is not None:
            reason = f"no device answered ({describe_failure('timeout', self.settings)})"
        self._link.close()
        if self.connected.is_set():
            self.connected.clear()
            self._on_event(PortEvent(self._clock(), "disconnect", f"{self.url}: {reason}"))
        elif reason != self._last_failure:  # one event per distinct failure, not one per retry
            self._on_event(PortEvent(self._clock(), "open-failed", f"{self.url}: {reason}"))
        self._last_failure = reason
        delay = self._backoff[min(self._attempt, len(self._backoff) - 1)]
        self._attempt += 1
        self._next_due = self._mono() + delay
        return delay

    def _note_blocks(self, results: list[BlockResult]) -> None:
        """Report a block that starts failing (or fails differently), and one that answers again."""
        for r in results:
            before = self._block_failures.get(r.request)
            if r.failure:
                if before is None or before[0] != r.failure:
                    self._on_event(PortEvent(self._clock(), "poll-failed", f"{r.request.label}: {describe_failure(r.failure, self.settings)}"))
                self._block_failures[r.request] = (r.failure, (before[1] if before else 0) + 1)
            elif before is not None:
                del self._block_failures[r.request]
                self._on_event(PortEvent(self._clock(), "poll-ok", f"{r.request.label} answers again after {before[1]} failed polls"))
