"""The recorder: the headless process that reads the line and is the firing log's only writer.

It survives viewers coming and going, SSH drops (SIGHUP is ignored) and
serial loss (the port reader reconnects with backoff and the gap is
recorded), commits at least once a second, and closes the firing cleanly
on SIGTERM or Ctrl-C. Restarted on the same log it continues the firing
and records the gap.
"""

from __future__ import annotations

import json
import queue
import signal
import sqlite3
import sys
import threading
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np

from firewatch.store.outbox import Outbox
from firewatch.store.writer import HOLD_LINES, LogWriter
from firewatch.firing.pipeline import Batch, Pipeline
from firewatch.settings.profile import SiteProfile
from firewatch.settings.schedule import Schedule
from firewatch.transport.generic import ChannelMap, GenericParser
from firewatch.transport.native import NativeParser
from firewatch.transport.ports import PortEvent, PortReader, PortSettings
from firewatch.transport.records import Malformed, ReadingSet

__all__ = ["Ingest", "Recorder", "make_parser", "GAP_S", "SQLITE_WAL_FIX", "COMMIT_LINES"]

GAP_S = 5.0
"""A silence longer than this between readings is recorded as a gap, seconds (after a restart or a
disconnect the gap is recorded whatever its length)."""

SQLITE_WAL_FIX = (3, 51, 3)
"""First SQLite release without the WAL-reset bug (SQLite's documentation: 3.7.0 to 3.51.2)."""

COMMIT_LINES = 2000
"""The most lines one transaction holds: a flood is written as many short transactions, none of which
the WAL must hold whole (at 100 lines a second a cycle has 50)."""


def make_parser(site: SiteProfile) -> NativeParser | GenericParser:
    """The parser the site profile's ``[input]`` asks for."""
    inp = site.input
    if inp.format == "native":
        return NativeParser()
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

    def __init__(self, pipeline: Pipeline, writer: LogWriter, parser: NativeParser | GenericParser) -> None:
        self.pipeline = pipeline
        self.writer = writer
        self.parser = parser
        self.pending_reason = "recorder restart" if writer.continuing else None
        self.lines = 0
        self.malformed = 0
        self.hooks: list[Callable[[Batch], None]] = []
        self._offset: float | None = None

    def timeline(self, received: float) -> float:
        """A wall-clock moment on the firing's time line (device time when the clock is the device's)."""
        return received if self._offset is None else received + self._offset

    def feed(self, lines: list[tuple[float, bytes]]) -> Batch:
        items: list[ReadingSet | Malformed] = [self.parser.parse(line, received) for received, line in lines]
        batch = self.pipeline.process(items)
        self.lines += len(items)
        self.malformed += batch.malformed
        if batch.samples:
            times = batch.times
            last = batch.samples[-1]
            self._offset = last[1] - last[2]
            previous = self.writer.last_t
            # after a restart or a disconnect readings were certainly lost: record the
            # gap however short; otherwise only a silence longer than GAP_S is a gap
            if previous is not None and (times[0] - previous > GAP_S or (self.pending_reason and times[0] > previous)):
                self.writer.gap(previous, float(times[0]), self.pending_reason or "no data")
            steps = np.diff(times)
            for i in np.flatnonzero(steps > GAP_S):
                self.writer.gap(float(times[i]), float(times[i + 1]), "no data")
            self.pending_reason = None
        for hook in self.hooks:
            hook(batch)
        self.writer.write(batch)
        return batch


class Recorder:
    """Record a port into a firing log until stopped (or for ``duration_s``).

    Parameters
    ----------
    url : str
        A serial URL (device path, socket://, rfc2217://, loop://).
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
        out=sys.stderr,
        mqtt_url: str | None = None,
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
        self.out = out
        self.stop_event = threading.Event()
        self.mqtt_url = mqtt_url
        self.publisher = None
        self._handed = 0
        self.latencies: list[float] = []
        self._queue: queue.Queue[tuple[float, bytes] | PortEvent] = queue.Queue()

    def _say(self, text: str) -> None:
        try:
            self.out.write(f"firewatch record: {text}\n")
            self.out.flush()
        except (OSError, ValueError):  # the terminal went away; keep recording
            pass

    def _handle_signal(self, signum, frame) -> None:
        self.stop_event.set()

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
        pipeline = Pipeline(self.site, self.schedule, self.clock)
        if writer.continuing:
            warm_start(pipeline, writer)
        ingest = Ingest(pipeline, writer, make_parser(self.site))
        self.ingest = ingest
        self.engine = attach_alarms(ingest, self.site, self.schedule)
        if self.mqtt_url:
            self._start_mqtt(writer, ingest)
        from firewatch.store.actions import ActionQueue

        try:
            self.actions: ActionQueue | None = ActionQueue(self.log_path)
        except sqlite3.Error as exc:
            self.actions = None
            self._say(f"operator actions unavailable ({exc}); recording goes on")
        version = tuple(int(x) for x in sqlite3.sqlite_version.split("."))
        note = "" if version >= SQLITE_WAL_FIX else " (older than 3.51.3, which fixed a WAL-reset bug; firewatch keeps to one writing connection)"
        now = self.clock_fn()
        writer.event(ingest.timeline(now), "start", f"recording {self.url}; SQLite {sqlite3.sqlite_version}{note}")
        self._commit(writer, ingest.timeline(now))
        self._say(
            f"recording {self.url} to {self.log_path} ({'continuing the firing' if writer.continuing else 'new firing'}); "
            f"SQLite {sqlite3.sqlite_version}{note}. Stop with Ctrl-C or SIGTERM."
        )
        inp = self.site.input
        reader = PortReader(
            self.url,
            on_line=lambda received, line: self._queue.put((received, line)),
            on_event=self._queue.put,
            settings=PortSettings(inp.baudrate, inp.bytesize, inp.parity, inp.stopbits),
            clock=self.clock_fn,
        )
        reader.start()
        started = time.monotonic()
        reason = "stopped"
        try:
            while not self.stop_event.is_set():
                self.stop_event.wait(self.commit_interval_s)
                self._cycle(writer, ingest)
                if self.duration_s is not None and time.monotonic() - started >= self.duration_s:
                    reason = f"--for {self.duration_s:g} s elapsed"
                    break
            else:
                reason = "signal"
        finally:
            reader.stop()
            self._cycle(writer, ingest)
            if self.publisher is not None:
                self.publisher.close()
                self._mqtt_cycle(writer, ingest.timeline(self.clock_fn()))
                self._commit(writer, ingest.timeline(self.clock_fn()))
            lat = np.array(self.latencies) if self.latencies else np.zeros(1)
            detail = (
                f"{reason}; {ingest.lines} lines, {ingest.malformed} malformed; commit latency "
                f"p50 {np.percentile(lat, 50):.3f} s, p99 {np.percentile(lat, 99):.3f} s"
            )
            writer.event(ingest.timeline(self.clock_fn()), "stop", detail)
            # on a log that cannot be written, close still ends the session with its reason (the writer's reserve)
            for text in writer.close(reason, ingest.timeline(self.clock_fn())):
                self._say(text)
            self._say(f"stopped: {detail}")
        return reason

    def _start_mqtt(self, writer: LogWriter, ingest: Ingest) -> None:
        """Publish through the outbox: messages are written with the readings, sent by a thread."""
        from firewatch.services import mqtt

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
        self._say(f"publishing to {'mqtts' if url.tls else 'mqtt'}://{url.host}:{url.port}/{url.prefix}/{kiln}/ (store and forward)")

    def _mqtt_cycle(self, writer: LogWriter, now: float) -> None:
        """Hand new outbox rows to the publisher, mark what the broker acknowledged, apply plant actions."""
        pub = self.publisher
        acked = pub.acked()
        if acked:
            self.outbox.mark_sent(acked, self.clock_fn())
        rows = self.outbox.unsent_after(self._handed)
        if rows:
            pub.hand(rows)
            self._handed = rows[-1][0]
        for topic, body in pub.actions():
            source = f"mqtt {topic} ({body.get('source', 'unnamed')})"
            if not self.site.mqtt.accept_actions:
                writer.event(now, "action", f"refused from {source}: actions over MQTT are not enabled in the site profile")
                continue
            kind = body.get("action")
            alarm_id = body.get("alarm_id")
            try:
                if kind == "acknowledge":
                    result = self.engine.acknowledge(int(alarm_id), now, by=source)
                elif kind == "shelve":
                    result = self.engine.shelve(int(alarm_id), now, str(body.get("reason", "")), now + float(body.get("minutes", 0)) * 60.0, by=source)
                else:
                    result = f"refused: unknown action {kind!r}"
            except (KeyError, TypeError, ValueError) as exc:
                result = f"refused: {exc}"
            writer.event(now, "action", f"{kind} from {source}: {result}")

    def _apply_actions(self, writer: LogWriter, now: float) -> None:
        """Apply what viewers asked for (acknowledge, shelve, note) and log each with its source."""
        if self.actions is None:
            return
        try:
            pending = self.actions.pending()
        except sqlite3.Error as exc:
            self._say(f"cannot read operator actions: {exc}")
            return
        for action in pending:
            try:
                if action.kind == "acknowledge":
                    result = self.engine.acknowledge(action.alarm_id, now, by=action.source)
                elif action.kind == "shelve":
                    result = self.engine.shelve(action.alarm_id, now, action.reason, now + float(action.duration_s), by=action.source)
                elif action.kind == "unshelve":
                    result = self.engine.unshelve(action.alarm_id, now, by=action.source)
                else:
                    writer.event(now, "note", f"{action.text} ({action.source})")
                    result = "note logged"
            except KeyError:
                result = f"no alarm {action.alarm_id}"
            except (ValueError, TypeError) as exc:
                result = f"refused: {exc}"
            writer.event(now, "action", f"{action.kind} from {action.source}: {result}")
            self.actions.mark_applied(action.id, result)

    def _commit(self, writer: LogWriter, now: float) -> None:
        """Commit; say once on stderr when the log cannot be written, and when it can again."""
        for text in writer.commit(now):
            self._say(text)

    def _feed(self, writer: LogWriter, ingest: Ingest, lines: list[tuple[float, bytes]]) -> None:
        """Feed lines at most COMMIT_LINES to a transaction, so that a flood never makes one the WAL must hold whole."""
        for i in range(0, len(lines), COMMIT_LINES):
            if i:
                self._commit(writer, ingest.timeline(self.clock_fn()))
            ingest.feed(lines[i : i + COMMIT_LINES])

    def _cycle(self, writer: LogWriter, ingest: Ingest) -> None:
        lines: list[tuple[float, bytes]] = []
        while True:
            try:
                item = self._queue.get_nowait()
            except queue.Empty:
                break
            if isinstance(item, PortEvent):
                if lines:  # keep order: lines before an event are written first
                    self._feed(writer, ingest, lines)
                    lines = []
                writer.event(ingest.timeline(item.t), item.kind, item.detail)
                if item.kind == "disconnect":
                    ingest.pending_reason = "serial disconnect"
                    self._say(f"lost the port: {item.detail}; reconnecting")
                elif item.kind == "reconnect":
                    self._say(f"reconnected to {self.url}")
                elif item.kind == "open-failed":
                    self._say(item.detail + "; retrying")
            else:
                lines.append(item)
        if lines:
            self._feed(writer, ingest, lines)
        now = ingest.timeline(self.clock_fn())
        self.engine.tick(now)
        if writer.outage is None:  # while the log cannot be written, actions wait in their file
            self._apply_actions(writer, now)
        if self.publisher is not None:
            self._mqtt_cycle(writer, now)
        self._commit(writer, now)
        done = self.clock_fn()
        if lines and len(self.latencies) < 2_000_000:
            self.latencies.extend(done - received for received, _ in lines)


class AlarmLog:
    """Writes alarm transitions into the firing log (``alarm``, ``alarm_state`` and an event each)."""

    def __init__(self, writer: LogWriter) -> None:
        self.writer = writer
        row = writer.execute("SELECT coalesce(max(id), 0) FROM alarm").fetchone()
        self._next = int(row[0]) + 1

    def next_id(self) -> int:
        i = self._next
        self._next += 1
        return i

    def sink(self, tr) -> None:
        from firewatch.firing.alarms import evidence_json

        a = tr.alarm
        w = self.writer
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

        rows = self.writer.execute(
            "SELECT id, kind, channel, cause, priority, raised_t, cleared_t, state, message, evidence FROM alarm WHERE state != 'normal'"
        ).fetchall()
        for r in rows:
            channel = r[2]
            if r[1] == "sensor-fault" and r[3]:
                channel = f"{channel}:{r[3]}" if channel else None
            engine.restore(Alarm(r[0], r[1], channel, r[4], r[5], r[8] or "", r[3], json.loads(r[9]) if r[9] else None, state=r[7], cleared_t=r[6]))
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
    """Feed a continued log's readings back through the pipeline's trends and progress; return the samples read."""
    names = [tc.name for tc in pipeline.site.thermocouples] + [f"{tc.name}.rate" for tc in pipeline.site.thermocouples]
    values: dict[str, np.ndarray] = {}
    times = None
    for name in names:
        rows = writer.execute(
            "SELECT r.t, r.value FROM reading r JOIN channel c ON c.id = r.channel_id WHERE c.name = ? ORDER BY r.sample_id", (name,)
        ).fetchall()
        if not rows:
            continue
        arr = np.array([(t, np.nan if v is None else v) for t, v in rows], dtype=float)
        if times is None:
            times = arr[:, 0]
        if arr.shape[0] == times.size:
            values[name] = arr[:, 1]
    if times is None:
        return 0
    pipeline.warm_start(times, values)
    return int(times.size)
