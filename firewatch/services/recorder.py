"""The recorder: the headless process that reads the line and is the firing log's only writer.

It survives viewers coming and going, SSH drops (SIGHUP is ignored) and
serial loss (the port reader reconnects with backoff and the gap is
recorded), commits at least once a second, and closes the firing cleanly
on SIGTERM or Ctrl-C. Restarted on the same log it continues the firing
and records the gap.
"""

from __future__ import annotations

import json
import logging
import signal
import sqlite3
import threading
import time
import traceback
from collections import deque
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from firewatch.firing.pipeline import Batch, Pipeline
from firewatch.settings.profile import SiteProfile
from firewatch.settings.schedule import Schedule
from firewatch.store.actions import ActionFileError, ActionQueue, apply_action, mqtt_action
from firewatch.store.outbox import Outbox
from firewatch.store.writer import HOLD_LINES, BriefWrite, LogWriter
from firewatch.transport.generic import ChannelMap, GenericParser
from firewatch.transport.modbus import ModbusParser, plan_requests
from firewatch.transport.modbus_poll import LinkSettings, ModbusPoller
from firewatch.transport.native import NativeParser
from firewatch.transport.ports import PortEvent, PortReader, PortSettings

if TYPE_CHECKING:  # paho-mqtt is optional: imported only when publishing
    from firewatch.services.mqtt import Publisher

__all__ = ["Ingest", "LineQueue", "Overflow", "Recorder", "make_parser", "GAP_S", "SQLITE_WAL_FIX", "QUEUE_BYTES", "BATCH_LINES",
           "sqlite_note", "AlarmLog", "attach_alarms", "COMMIT_LINES"]

log = logging.getLogger(__name__)

GAP_S = 5.0
"""A silence longer than this between readings is recorded as a gap, seconds (after a restart or a
disconnect the gap is recorded whatever its length)."""

SQLITE_WAL_FIX = (3, 51, 3)
"""First SQLite release without the WAL-reset bug (SQLite's documentation: 3.7.0 to 3.51.2)."""

QUEUE_BYTES = 64 * 1024 * 1024
"""Bound of the line queue between the port reader and the recorder, bytes (lines plus
:data:`ITEM_BYTES` each): about half an hour of 16 channels at 100 lines/s, days at 1 line/s, while a
flood of input costs no more."""
ITEM_BYTES = 120
"""What a queued line costs beyond its bytes (the tuple, the float, the bytes object's header)."""
BATCH_LINES = 20_000
"""Most lines parsed and computed at once, so that a backlog is worked off in bounded pieces."""
ERROR_REPEAT_S = 60.0
"""A batch failure with the same reason as the last is logged again only after this long, s."""
COMMIT_LINES = 2000
"""The most lines one transaction holds: a flood is written as many short transactions, none of which
the WAL must hold whole (at 100 lines a second a cycle has 50)."""



@dataclass(frozen=True)
class Overflow:
    """Lines the queue refused since the last drain."""

    lines: int
    bytes: int
    first: float
    last: float


class LineQueue:
    """Lines and port events from the reader thread to the recorder, bounded in bytes (issue 10).

    A line that would take the queue past ``max_bytes`` is refused and
    counted; :meth:`drain` hands the recorder everything queued with an
    :class:`Overflow` of what was refused, which it logs as an event. Port
    events are never refused (there are few).
    """

    def __init__(self, max_bytes: int = QUEUE_BYTES) -> None:
        self.max_bytes = max_bytes
        self._items: deque[tuple[float, bytes] | PortEvent] = deque()
        self._lock = threading.Lock()
        self._bytes = 0
        self._refused = 0
        self._refused_bytes = 0
        self._refused_span: tuple[float, float] | None = None

    def put_line(self, received: float, line: bytes) -> None:
        size = len(line) + ITEM_BYTES
        with self._lock:
            if self._bytes + size > self.max_bytes:
                self._refused += 1
                self._refused_bytes += len(line)
                first = received if self._refused_span is None else self._refused_span[0]
                self._refused_span = (first, received)
                return
            self._bytes += size
            self._items.append((received, line))

    def put_event(self, event: PortEvent) -> None:
        with self._lock:
            self._items.append(event)

    def drain(self) -> tuple[list[tuple[float, bytes] | PortEvent], Overflow | None]:
        """Everything queued, in order, and what was refused since the last drain (None if nothing)."""
        with self._lock:
            items = list(self._items)
            self._items.clear()
            self._bytes = 0
            overflow = None
            if self._refused and self._refused_span is not None:
                overflow = Overflow(self._refused, self._refused_bytes, *self._refused_span)
            self._refused = self._refused_bytes = 0
            self._refused_span = None
        return items, overflow


def sqlite_note(version: str) -> str:
    """What to say about an SQLite version: empty if it has the WAL-reset fix, else why firewatch is still safe."""
    try:
        parts = tuple(int(x) for x in version.split("."))
    except ValueError:
        return ""
    if parts >= SQLITE_WAL_FIX:
        return ""
    return "older than 3.51.3, which fixed a WAL-reset bug; firewatch keeps to one writing connection"


def make_parser(site: SiteProfile, clock: str | None = None) -> NativeParser | GenericParser | ModbusParser:
    """The parser the site profile's ``[input]`` asks for (``clock``: the firing's, default the profile's)."""
    inp = site.input
    if inp.format == "native":
        return NativeParser()
    if inp.modbus is not None:  # poll records from the Modbus poller (docs/modbus.md)
        return ModbusParser(inp.modbus.channels, inp.modbus.device_time, need_time=(clock or inp.clock) == "device")
    g = inp.generic
    maps = []
    for channel, spec in (g.get("channels") or {}).items():
        maps.append(
            ChannelMap(
                channel=channel,
                field=str(spec.get("field", channel)),
                unit=str(spec.get("unit", "C")),
                scale=float(spec.get("scale", 1.0)),
                offset=float(spec.get("offset", 0.0)),
                open_tokens=tuple(spec.get("open", ["OPEN"])),
                under_tokens=tuple(spec.get("under", ["UNDER"])),
                over_tokens=tuple(spec.get("over", ["OVER"])),
            )
        )
    return GenericParser(
        format=inp.format,
        channels=tuple(maps),
        delimiter=str(g.get("delimiter", ",")),
        columns=tuple(g.get("columns", ())),
        time_field=g.get("time_field"),
        pair_separator=g.get("pair_separator"),
        kv_separator=str(g.get("kv_separator", "=")),
    )


class Ingest:
    """Lines to the firing log: parse, run the pipeline, find gaps, write. Shared by every writer of a log."""

    def __init__(self, pipeline: Pipeline, writer: LogWriter, parser: NativeParser | GenericParser | ModbusParser) -> None:
        self.pipeline = pipeline
        self.writer = writer
        self.parser = parser
        self.pending_reason = "recorder restart" if writer.continuing else None
        self.lines = 0
        self.malformed = 0
        self.failed_batches = 0
        """Batches whose processing failed; their lines were kept raw."""
        self.dropped = 0
        """Lines refused by a full line queue (counted by the recorder)."""
        self.hooks: list[Callable[[Batch], None]] = []
        self._offset: float | None = None
        self._last_error: tuple[str, float, int] | None = None

    def timeline(self, received: float) -> float:
        """A wall-clock moment on the firing's time line (device time when the clock is the device's)."""
        return received if self._offset is None else received + self._offset

    def counts(self) -> str:
        """Lines, malformed lines, and any dropped lines or failed batches, for the stop event."""
        text = f"{self.lines} lines, {self.malformed} malformed"
        if self.dropped:
            text += f", {self.dropped} dropped (line queue full)"
        if self.failed_batches:
            text += f", {self.failed_batches} batches failed (kept raw)"
        return text

    def feed(self, lines: list[tuple[float, bytes]]) -> Batch:
        """Parse, compute and write one batch of lines.

        Nothing in a batch ends the recorder (issue 10): if processing fails,
        whatever the batch had written is rolled back, its lines are kept
        raw with the reason, the failure is logged as an event and counted,
        and the next batch starts afresh. Errors of the database itself
        (``sqlite3.OperationalError``: a full disk, an I/O error) are left
        to the caller's commit handling, after the batch is rolled back.
        """
        pipeline = self.pipeline
        batch = self._guarded(lines, lambda: pipeline.process_columns(self.parser.parse_batch(lines, pipeline.site.channel_names, pipeline.clock)))
        self.lines += len(lines)
        return batch

    def flush(self) -> Batch:
        """Write the lines the pipeline still holds (out of step, awaiting the lines after them): at a stop."""
        return self._guarded([], self.pipeline.flush)

    def _guarded(self, lines: list[tuple[float, bytes]], compute: Callable[[], Batch]) -> Batch:
        held = self.pipeline.held_raw()
        self.writer.batch_begin()
        try:
            batch = self._write(compute())
        except sqlite3.OperationalError:
            self.writer.batch_undo()
            raise
        except Exception as exc:  # noqa: BLE001 - whatever went wrong, the lines are kept and recording goes on
            self.writer.batch_undo()
            self.pipeline.drop_held()
            batch = self._failed(held + [(received, line, True, "") for received, line in lines], exc)
        self.writer.batch_end()
        self.malformed += batch.malformed
        return batch

    def _write(self, batch: Batch) -> Batch:
        if batch.samples:
            times = batch.times
            last = batch.samples[-1]
            self._offset = last[1] - last[2]
            previous = self.writer.last_t
            # a new stretch of the clock (a reset) is a gap in its own right
            stretch_ends = set()
            for start, end, why in batch.gaps:
                self.writer.gap(start, end, f"{self.pending_reason}; {why}" if self.pending_reason and end == times[0] else why)
                stretch_ends.add(end)
            # after a restart or a disconnect readings were certainly lost: record the
            # gap however short; otherwise only a silence longer than GAP_S is a gap
            first = float(times[0])
            if previous is not None and first not in stretch_ends and (first - previous > GAP_S or (self.pending_reason and first > previous)):
                self.writer.gap(previous, first, self.pending_reason or "no data")
            steps = np.diff(times)
            for i in np.flatnonzero(steps > GAP_S):
                if float(times[i + 1]) not in stretch_ends:
                    self.writer.gap(float(times[i]), float(times[i + 1]), "no data")
            self.pending_reason = None
        for hook in self.hooks:
            hook(batch)
        self.writer.write(batch)
        return batch

    def _failed(self, lines: list[tuple[float, bytes, bool, str]], exc: Exception) -> Batch:
        """Keep a failed batch's raw lines (with those the pipeline held), log the failure, count it."""
        frame = traceback.extract_tb(exc.__traceback__)[-1] if exc.__traceback__ else None
        where = f" at {Path(frame.filename).name}:{frame.lineno}" if frame else ""
        message = str(exc).splitlines()[0] if str(exc) else ""
        reason = (f"{type(exc).__name__}: {message}" if message else type(exc).__name__)[:300] + where
        raw = [(r[0], r[1], False, r[3] if not r[2] else f"not processed: {reason}") for r in lines]
        self.failed_batches += 1
        t = self.timeline(raw[-1][0] if raw else time.time())
        batch = Batch(raw=raw)
        last = self._last_error
        if last is None or last[0] != reason or t - last[1] >= ERROR_REPEAT_S:
            again = f" ({last[2]} more failed batches since the last report)" if last and last[2] else ""
            batch.events.append((t, "error", None, f"a batch of {len(raw)} lines could not be processed ({reason}); "
                                 f"its lines are kept raw, recording goes on{again}"))
            self._last_error = (reason, t, 0)
        else:
            self._last_error = (last[0], last[1], last[2] + 1)
        self.writer.write(batch)
        return batch


class Recorder:
    """Record a port into a firing log until stopped (or for ``duration_s``).

    Parameters
    ----------
    url : str
        A serial URL (device path, socket://, rfc2217://, loop://); for Modbus
        input a serial device (RTU) or HOST:PORT (TCP).
    site : SiteProfile
    schedule : Schedule or None
    log_path : path
    clock : str, optional
        ``wall`` or ``device``; default from the site profile.
    duration_s : float, optional
        Stop after this many seconds of wall-clock time.
    commit_interval_s : float
        How often to commit (at most 1 s: the durability promise).
    hold_lines : int
        The bound on readings held in memory while the log cannot be written (see
        :mod:`firewatch.store.writer`).
    """

    def __init__(
        self,
        url: str,
        site: SiteProfile,
        schedule: Schedule | None,
        log_path: str | Path,
        clock: str | None = None,
        duration_s: float | None = None,
        commit_interval_s: float = 0.5,
        clock_fn: Callable[[], float] = time.time,
        mqtt_url: str | None = None,
        queue_bytes: int = QUEUE_BYTES,
        hold_lines: int = HOLD_LINES,
    ) -> None:
        self.url = url
        self.hold_lines = hold_lines
        self.site = site
        self.schedule = schedule
        self.log_path = Path(log_path)
        self.clock = clock or site.input.clock
        self.duration_s = duration_s
        self.commit_interval_s = min(commit_interval_s, 1.0)
        self.clock_fn = clock_fn
        self.stop_event = threading.Event()
        self.stop_reason = "signal"
        """Why :meth:`stop` was called (a signal, unless a caller says otherwise)."""
        self.mqtt_url = mqtt_url
        self._unmarked: dict[int | None, str] = {}
        self.publisher: Publisher | None = None
        self._handed = 0
        self.latencies: list[float] = []
        self._queue = LineQueue(queue_bytes)
        self._overflow_said = -float("inf")
        self.poller: ModbusPoller | None = None
        self._gap_reason = "serial disconnect"
        self._failed_before = 0
        self._failed_written = -1

    def stop(self, reason: str = "signal") -> None:
        """Stop recording, from a signal handler or another thread; ``reason`` ends the session."""
        if not self.stop_event.is_set():
            self.stop_reason = reason
        self.stop_event.set()

    def _handle_signal(self, signum, frame) -> None:
        self.stop("signal")

    def run(self, install_signals: bool = True) -> str:
        """Record until stopped; return the reason it stopped."""
        from firewatch.firing.pipeline import channel_table

        writer = LogWriter(
            self.log_path,
            channel_table(self.site, self.schedule),
            site_name=self.site.name,
            kiln=self.site.kiln,
            site_text=self.site.text,
            schedule_name=self.schedule.name if self.schedule else "",
            schedule_text=self.schedule.text if self.schedule else "",
            clock=self.clock,
            port=self.url,
            clock_fn=self.clock_fn,
            hold_lines=self.hold_lines,
        )
        if install_signals:
            signal.signal(signal.SIGTERM, self._handle_signal)
            signal.signal(signal.SIGINT, self._handle_signal)
            if hasattr(signal, "SIGHUP"):
                signal.signal(signal.SIGHUP, signal.SIG_IGN)
        if writer.converted is not None:
            log.warning(f"{self.log_path} was a log of the earlier layout: converted to the compact one to continue it; "
                        f"the original is kept as {writer.converted}")
        pipeline = Pipeline(self.site, self.schedule, self.clock)
        if writer.continuing:
            warm_start(pipeline, writer)
        ingest = Ingest(pipeline, writer, make_parser(self.site, self.clock))
        self.ingest = ingest
        self.engine = attach_alarms(ingest, self.site, self.schedule)
        if self.mqtt_url:
            self._start_mqtt(writer, ingest)
        try:
            self.actions: ActionQueue | None = ActionQueue(self.log_path)
        except (ActionFileError, sqlite3.Error) as exc:
            self.actions = None
            log.warning(f"operator actions unavailable ({exc}); recording goes on")
        # the SQLite note is kept with the session (and shown by inspect), not printed at every start
        note = sqlite_note(sqlite3.sqlite_version)
        sqlite_text = f"SQLite {sqlite3.sqlite_version}" + (f" ({note})" if note else "")
        now = self.clock_fn()
        writer.event(ingest.timeline(now), "start", f"recording {self.url}; {sqlite_text}")
        self._commit(writer, ingest.timeline(now))
        log.info(
            f"recording {self.url} to {self.log_path} ({'continuing the firing' if writer.continuing else 'new firing'}). "
            "Stop with Ctrl-C or SIGTERM."
        )
        log.debug(sqlite_text)
        reader = self._input_reader(writer)
        reader.start()
        started = time.monotonic()
        reason = "stopped"
        due = time.monotonic() + self.commit_interval_s
        try:
            while not self.stop_event.is_set():
                # cycles start every commit interval, whatever the last one took, so that what a kill can lose is
                # bounded by the interval and one cycle's work, not their sum (issue 15: at most 1 s lost)
                self.stop_event.wait(max(due - time.monotonic(), 0.0))
                due = max(due + self.commit_interval_s, time.monotonic())
                self._cycle(writer, ingest)
                if self.duration_s is not None and time.monotonic() - started >= self.duration_s:
                    reason = f"--for {self.duration_s:g} s elapsed"
                    break
            else:
                reason = self.stop_reason
        finally:
            reader.stop()
            self._cycle(writer, ingest)
            ingest.flush()
            if self.publisher is not None:
                self.publisher.close()
                self._mqtt_cycle(writer, ingest.timeline(self.clock_fn()))
                self._commit(writer, ingest.timeline(self.clock_fn()))
            lat = np.array(self.latencies) if self.latencies else np.zeros(1)
            polled = f", {self.poller.failed_polls} of {self.poller.polls} polls failed" if self.poller is not None else ""
            detail = (
                f"{reason}; {ingest.counts()}{polled}; commit latency "
                f"p50 {np.percentile(lat, 50):.3f} s, p99 {np.percentile(lat, 99):.3f} s"
            )
            writer.event(ingest.timeline(self.clock_fn()), "stop", detail)
            # on a log that cannot be written, close still ends the session with its reason (the writer's reserve)
            for text in writer.close(reason, ingest.timeline(self.clock_fn())):
                log.warning(text)
            log.info(f"stopped: {detail}")
        return reason

    def _input_reader(self, writer: LogWriter) -> PortReader | ModbusPoller:
        """The thread that reads the input: the serial line's reader, or the Modbus poller."""
        inp = self.site.input
        on_line = self._queue.put_line
        if inp.modbus is None:
            return PortReader(
                self.url, on_line=on_line, on_event=self._queue.put_event,
                settings=PortSettings(inp.baudrate, inp.bytesize, inp.parity, inp.stopbits), clock=self.clock_fn,
            )
        mb = inp.modbus
        link = LinkSettings(mb.protocol, self.url, inp.baudrate, inp.bytesize, inp.parity, inp.stopbits, mb.timeout_s, mb.retries)
        self.poller = ModbusPoller(link, plan_requests(mb.channels, mb.device_time), mb.poll_s, on_line, self._queue.put_event, clock=self.clock_fn)
        self._gap_reason = "modbus link lost"
        row = writer.query("SELECT value FROM meta WHERE key = 'failed_polls'").fetchone()
        self._failed_before = int(row[0]) if row else 0  # a continued log adds to its count
        return self.poller

    def _count_failed_polls(self, writer: LogWriter) -> None:
        """Keep the log's count of failed Modbus polls (shown by inspect) in the batch's transaction."""
        if self.poller is None:
            return
        n = self._failed_before + self.poller.failed_polls
        if n != self._failed_written:
            writer.execute("INSERT INTO meta(key, value) VALUES ('failed_polls', ?) ON CONFLICT(key) DO UPDATE SET value = excluded.value", (str(n),))
            self._failed_written = n

    def _start_mqtt(self, writer: LogWriter, ingest: Ingest) -> None:
        """Publish through the outbox: messages are written with the readings, sent by a thread."""
        from firewatch.services import mqtt

        if self.mqtt_url is None:
            return
        url = mqtt.parse_mqtt_url(self.mqtt_url)
        kiln = mqtt.kiln_id_for(self.site)
        self.outbox = outbox = Outbox(writer)
        engine = self.engine

        def enqueue(messages) -> None:
            outbox.enqueue(messages, ingest.timeline(self.clock_fn()))

        def on_batch(batch: Batch) -> None:
            enqueue(mqtt.batch_messages(url, kiln, batch, engine, writer.next_sample_id, self.site))

        log_sink = engine.sink

        def on_transition(tr) -> None:
            log_sink(tr)
            enqueue([mqtt.alarm_message(url, kiln, tr)])

        engine.sink = on_transition
        ingest.hooks.append(on_batch)
        self.publisher = mqtt.Publisher(url, kiln, self.site)
        log.info(f"publishing to {'mqtts' if url.tls else 'mqtt'}://{url.host}:{url.port}/{url.prefix}/{kiln}/ (store and forward)")

    def _mqtt_cycle(self, writer: LogWriter, now: float) -> None:
        """Hand new outbox rows to the publisher, mark what the broker acknowledged, apply plant actions."""
        pub = self.publisher
        if pub is None:
            return
        acked = pub.acked()
        if acked:
            self.outbox.mark_sent(acked, self.clock_fn())
        rows = self.outbox.unsent_after(self._handed)
        if rows:
            pub.hand(rows)
            self._handed = rows[-1][0]
        for topic, body in pub.actions():
            action, refused = mqtt_action(topic, body)
            if not self.site.mqtt.accept_actions:
                refused = "actions over MQTT are not enabled in the site profile"
            apply_action(action, self.engine, writer.event, now, self.clock_fn(), refused=refused)

    def _apply_actions(self, writer: LogWriter, now: float) -> None:
        """Apply what viewers asked for (acknowledge, shelve, note) and log each with its source."""
        if self.actions is None:
            return
        try:
            pending = self.actions.pending()
        except sqlite3.Error as exc:
            log.warning(f"cannot read operator actions: {exc}")
            return
        for action in pending:
            if action.id in self._unmarked:
                result = self._unmarked[action.id]  # applied already; only its mark failed
            else:
                result = apply_action(action, self.engine, writer.event, now, self.clock_fn())
            try:
                if action.id is not None:
                    self.actions.mark_applied(action.id, result)
                self._unmarked.pop(action.id, None)
            except sqlite3.Error as exc:  # a busy side file must not end the recorder, nor apply twice
                self._unmarked[action.id] = result
                log.warning(f"cannot mark operator action {action.id} applied ({exc}); retrying")

    def _commit(self, writer: LogWriter, now: float) -> None:
        """Commit; say once on stderr when the log cannot be written, and when it can again."""
        for text in writer.commit(now):
            log.warning(text)

    def _feed(self, writer: LogWriter, ingest: Ingest, lines: list[tuple[float, bytes]]) -> None:
        """Feed lines at most COMMIT_LINES to a transaction, so that a flood never makes one the WAL must hold whole."""
        for i in range(0, len(lines), COMMIT_LINES):
            if i:
                self._commit(writer, ingest.timeline(self.clock_fn()))
            ingest.feed(lines[i : i + COMMIT_LINES])

    def _cycle(self, writer: LogWriter, ingest: Ingest) -> None:
        lines: list[tuple[float, bytes]] = []
        drained: list[tuple[float, bytes]] = []
        items, overflow = self._queue.drain()
        for item in items:
            if len(lines) >= BATCH_LINES:  # a backlog is worked off in bounded pieces
                self._feed(writer, ingest, lines)
                drained += lines
                lines = []
            if isinstance(item, PortEvent):
                if lines:  # keep order: lines before an event are written first
                    self._feed(writer, ingest, lines)
                    drained += lines
                    lines = []
                writer.event(ingest.timeline(item.t), item.kind, item.detail)
                if item.kind == "disconnect":
                    ingest.pending_reason = self._gap_reason
                    log.warning(f"lost the port: {item.detail}; reconnecting")
                elif item.kind == "reconnect":
                    log.info(f"reconnected to {self.url}")
                elif item.kind == "open-failed":
                    log.warning(item.detail + "; retrying")
                elif item.kind == "poll-failed":
                    log.warning(item.detail)
                elif item.kind == "poll-ok":
                    log.info(item.detail)
            else:
                lines.append(item)
        if lines:
            self._feed(writer, ingest, lines)
            drained += lines
        if overflow is not None:
            self._overflowed(writer, ingest, overflow)
        lines = drained
        now = ingest.timeline(self.clock_fn())
        self.engine.tick(now)
        if writer.outage is None:  # while the log cannot be written, actions wait in their file
            self._apply_actions(writer, now)
        if self.publisher is not None:
            self._mqtt_cycle(writer, now)
        writer.heartbeat()  # lines or not: viewers tell a silent line from a stopped recorder by it
        if self.poller is not None:
            self._count_failed_polls(writer)
        self._commit(writer, now)
        done = self.clock_fn()
        if lines and len(self.latencies) < 2_000_000:
            self.latencies.extend(done - received for received, _ in lines)

    def _overflowed(self, writer: LogWriter, ingest: Ingest, overflow: Overflow) -> None:
        """Log lines the full queue refused: an event each time, a word on the terminal at most once a minute."""
        ingest.dropped += overflow.lines
        detail = (
            f"{overflow.lines} lines ({overflow.bytes} bytes) received from {self.url} were dropped: the line queue "
            f"was full ({self._queue.max_bytes / 2**20:.3g} MiB), input came faster than it could be recorded"
        )
        writer.event(ingest.timeline(overflow.first), "overflow", detail)
        if time.monotonic() - self._overflow_said >= 60.0:
            self._overflow_said = time.monotonic()
            log.warning(f"{detail}; {ingest.dropped} dropped so far")


class AlarmLog:
    """Writes alarm transitions into the firing log (``alarm``, ``alarm_state`` and an event each)."""

    def __init__(self, writer: LogWriter | BriefWrite) -> None:
        self.writer = writer  # the recorder's writer, or a viewer's brief write (firewatch.services.desk)
        row = writer.query("SELECT coalesce(max(id), 0) FROM alarm").fetchone()
        self._next = int(row[0]) + 1

    def next_id(self) -> int:
        i = self._next
        self._next += 1
        return i

    def sink(self, tr) -> None:
        from firewatch.firing.alarms import evidence_json

        a = tr.alarm
        w = self.writer
        if tr.state == "cause-changed":  # a new likely cause: the ISA-18.2 state stays as it is (docs/log-format.md)
            w.execute("UPDATE alarm SET cause = ?, evidence = ? WHERE id = ?", (a.cause, evidence_json(a.evidence), a.id))
            w.execute("INSERT INTO alarm_state(alarm_id, t, state, detail) VALUES (?, ?, ?, ?)", (a.id, tr.t, tr.state, tr.detail))
            step = a.cause_steps[-1] if a.cause_steps else None
            was = f", was {step.was}" + (f" until {step.because}" if step and step.because else "") if step else ""
            w.event(tr.t, "alarm", f"#{a.id} {a.kind} {a.channel_name or ''}: likely cause {a.cause}{was}: "
                    f"{(a.evidence or {}).get('reason', '')}", a.channel_name)
            return
        if tr.new:
            w.execute(
                "INSERT INTO alarm(id, kind, channel, cause, priority, raised_t, cleared_t, state, message, evidence) VALUES (?, ?, ?, ?, ?, ?, NULL, ?, ?, ?)",
                (a.id, a.kind, a.channel_name, a.cause, a.priority, a.raised_t, tr.state, a.message, evidence_json(a.evidence)),
            )
        else:
            w.execute("UPDATE alarm SET state = ?, cleared_t = ? WHERE id = ?", (tr.state, a.cleared_t, a.id))
        w.execute("INSERT INTO alarm_state(alarm_id, t, state, detail) VALUES (?, ?, ?, ?)", (a.id, tr.t, tr.state, tr.detail))
        label = a.kind + (f" {a.channel_name}" if a.channel_name else "") + (f" ({a.cause})" if a.cause else "")
        w.event(tr.t, "alarm", f"#{a.id} {label}: {tr.state}: {tr.detail}", a.channel_name)

    def restore_into(self, engine) -> int:
        """Give the engine back the alarms still open in the log; return how many."""
        from firewatch.firing.alarms import Alarm

        rows = self.writer.query(
            "SELECT id, kind, channel, cause, priority, raised_t, cleared_t, state, message, evidence FROM alarm WHERE state != 'normal'"
        ).fetchall()
        from firewatch.firing.alarms.causes import cause_steps

        for r in rows:
            channel = r[2]
            if r[1] == "sensor-fault" and r[3]:
                channel = f"{channel}:{r[3]}" if channel else None
            steps = cause_steps(self.writer.query(
                "SELECT t, state, detail FROM alarm_state WHERE alarm_id = ? AND state = 'cause-changed' ORDER BY t, id", (r[0],)).fetchall())
            engine.restore(Alarm(r[0], r[1], channel, r[4], r[5], r[8] or "", r[3], json.loads(r[9]) if r[9] else None, state=r[7],
                                 cleared_t=r[6], cause_steps=steps))
        return len(rows)


def attach_alarms(ingest: Ingest, site: SiteProfile, schedule: Schedule | None):
    """Evaluate alarms on every batch the ingest writes; return the engine."""
    from firewatch.firing.alarms import AlarmEngine

    log = AlarmLog(ingest.writer)
    engine = AlarmEngine(site, schedule, sink=log.sink, next_id=log.next_id)
    if ingest.writer.continuing:
        log.restore_into(engine)

    def hook(batch: Batch) -> None:
        malformed = [ingest.timeline(r[0]) for r in batch.raw if not r[2]]
        engine.evaluate(batch.times, batch.values, batch.status, malformed)

    ingest.hooks.append(hook)
    return engine


def warm_start(pipeline: Pipeline, writer: LogWriter) -> int:
    """Feed a continued log's readings back through the pipeline's trends and progress; return the samples read.

    The rates need their window and the progress tracker the control
    thermocouple's history: the thermocouples are read from the sample rows,
    and their rates taken as the pipeline recomputes them.
    """
    from firewatch.store.layout import column

    ids = {name: cid for cid, name in writer.query("SELECT id, name FROM channel WHERE kind = 'thermocouple'").fetchall()}
    names = [tc.name for tc in pipeline.site.thermocouples if tc.name in ids]
    if not names:
        return 0
    cols = ", ".join(column(ids[n]) for n in names)
    rows = writer.query(f"SELECT t, {cols} FROM sample ORDER BY id").fetchall()
    if not rows:
        return 0
    arr = np.array(rows, dtype=float)  # NULL becomes NaN
    times = arr[:, 0]
    values = {name: arr[:, 1 + k] for k, name in enumerate(names)}
    last = writer.query("SELECT last_received_utc, last_device_time FROM session WHERE last_received_utc IS NOT NULL ORDER BY id DESC LIMIT 1").fetchone()
    received = float(last[0]) if last is not None else float(times[-1])
    pipeline.warm_start(times, values, (float(times[-1]), received, None if last is None else last[1]))
    return int(times.size)
