"""Serial sources by URL, and a reader that survives unplugging.

Every source is a URL for :func:`serial.serial_for_url`: a device path
(``/dev/ttyUSB0``), ``socket://host:port``, ``rfc2217://host:port`` or
``loop://``. pyserial 3.5 raises ``SerialException`` from ``read()`` on
unplug while ``is_open`` stays true, so the reader closes the port, backs
off and reopens it, reporting each change as a :class:`PortEvent`.

``socket://host:port`` (without options) is read by :class:`TcpPort`
rather than pyserial's handler, which discards the bytes of a read in
progress when the far end closes, and empties the socket when it opens:
both lose lines silently.
"""

from __future__ import annotations

import socket
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass
from urllib.parse import urlsplit

import serial

from firewatch.transport.framing import LineFramer

__all__ = ["PortSettings", "PortEvent", "PortReader", "open_port", "PortError", "TcpPort"]


class PortError(Exception):
    """A port could not be opened: the message names the port and the reason."""


@dataclass(frozen=True)
class PortSettings:
    """Serial settings from the site profile's ``[input]`` table."""

    baudrate: int = 9600
    bytesize: int = 8
    parity: str = "N"
    stopbits: float = 1
    read_timeout_s: float = 0.2


@dataclass(frozen=True)
class PortEvent:
    """Something that happened to the port: ``open``, ``disconnect``, ``reconnect``, ``open-failed``."""

    t: float
    kind: str
    detail: str


class TcpPort:
    """A serial device server at ``socket://host:port``, read as pyserial reads one, without losing bytes.

    Written by hand because pyserial 3.5's ``socket://`` handler accumulates
    several ``recv`` calls into one ``read`` and raises on end of stream,
    discarding what it had already received (the last lines before a device
    server closes), and empties the socket on open (a partial first line).
    ``read`` here returns each ``recv`` as it comes and reports the end of the
    stream only when nothing is left.
    """

    def __init__(self, host: str, port: int, timeout_s: float) -> None:
        self._sock = socket.create_connection((host, port), timeout=5.0)
        self._sock.settimeout(timeout_s)

    def read(self, size: int) -> bytes:
        try:
            data = self._sock.recv(size)
        except TimeoutError:
            return b""
        except OSError as exc:
            raise serial.SerialException(f"read failed: {exc}") from None
        if not data:
            raise serial.SerialException("socket disconnected")
        return data

    def close(self) -> None:
        self._sock.close()


def open_port(url: str, settings: PortSettings = PortSettings()) -> serial.SerialBase | TcpPort:
    """Open a serial URL, or raise :class:`PortError` with a one-line reason."""
    if url.startswith("socket://"):
        parts = urlsplit(url)
        if not parts.query and not parts.path:
            try:
                host, port = parts.hostname, parts.port
            except ValueError as exc:
                raise PortError(f"could not open port {url!r}: {exc}") from None
            if not host or port is None:
                raise PortError(f"could not open port {url!r}: expected socket://HOST:PORT")
            try:
                return TcpPort(host, port, settings.read_timeout_s)
            except OSError as exc:
                reason = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
                raise PortError(f"could not open port {url!r}: {reason}") from None
    try:
        return serial.serial_for_url(
            url,
            baudrate=settings.baudrate,
            bytesize=settings.bytesize,
            parity=settings.parity,
            stopbits=settings.stopbits,
            timeout=settings.read_timeout_s,
        )
    except (serial.SerialException, OSError, ValueError) as exc:
        reason = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise PortError(f"could not open port {url!r}: {reason}") from None


class PortReader:
    """Read lines from a URL in a thread, reconnecting with backoff, until stopped.

    Parameters
    ----------
    url : str
        The source.
    on_line : callable(received_utc_s, line_bytes)
        Called from the reader thread for each complete line (and for a
        partial line left at a disconnect, which the parser will reject).
    on_event : callable(PortEvent)
        Called for port events.
    clock : callable, optional
        Wall clock, UTC seconds (injectable for tests).
    backoff_s : tuple of float
        Successive waits between reopen attempts; the last repeats.
    """

    def __init__(
        self,
        url: str,
        on_line: Callable[[float, bytes], None],
        on_event: Callable[[PortEvent], None],
        settings: PortSettings = PortSettings(),
        clock: Callable[[], float] = time.time,
        backoff_s: tuple[float, ...] = (0.25, 0.5, 1.0, 2.0, 5.0, 10.0),
    ) -> None:
        self.url = url
        self._on_line = on_line
        self._on_event = on_event
        self._settings = settings
        self._clock = clock
        self._backoff = backoff_s
        self._stop = threading.Event()
        self._thread: threading.Thread | None = None
        self.connected = threading.Event()

    def start(self) -> None:
        self._thread = threading.Thread(target=self._run, name=f"port {self.url}", daemon=True)
        self._thread.start()

    def stop(self, timeout: float = 5.0) -> None:
        self._stop.set()
        if self._thread is not None:
            self._thread.join(timeout)

    def _wait(self, attempt: int) -> None:
        self._stop.wait(self._backoff[min(attempt, len(self._backoff) - 1)])

    def _run(self) -> None:
        attempt = 0
        ever_open = False
        last_failure = ""
        while not self._stop.is_set():
            try:
                port = open_port(self.url, self._settings)
            except PortError as exc:
                if str(exc) != last_failure:  # one event per distinct failure, not one per retry
                    self._on_event(PortEvent(self._clock(), "open-failed", str(exc)))
                    last_failure = str(exc)
                self._wait(attempt)
                attempt += 1
                continue
            last_failure = ""
            self._on_event(PortEvent(self._clock(), "reconnect" if ever_open else "open", self.url))
            ever_open = True
            attempt = 0
            self.connected.set()
            framer = LineFramer()
            try:
                while not self._stop.is_set():
                    data = port.read(4096)
                    if not data:
                        continue
                    now = self._clock()
                    lines, overlong = framer.feed(data)
                    for line in lines:
                        self._on_line(now, line)
                    for fragment in overlong:
                        self._on_line(now, fragment)  # rejected by the parser, so counted
            except (serial.SerialException, OSError) as exc:
                reason = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
                self.connected.clear()
                rest = framer.flush()
                if rest:
                    self._on_line(self._clock(), rest)
                self._on_event(PortEvent(self._clock(), "disconnect", f"{self.url}: {reason}"))
            finally:
                try:
                    port.close()
                except Exception:  # closing a vanished device may fail again; nothing to keep
                    pass
            if not self._stop.is_set():
                self._wait(attempt)
                attempt += 1
