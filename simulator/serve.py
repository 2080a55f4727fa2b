"""Where the simulated kiln's lines go: standard output, a pseudo-terminal, a TCP port, or a firing log.

Streaming modes pace the simulation against the wall clock at ``speed``
times real time (0 for as fast as possible) and run until stopped. A
serial line drops what nobody reads, and so do these: with no reader on
the pseudo-terminal or no TCP client, lines are lost, as on a real port.
"""

from __future__ import annotations

import errno
import os
import select
import socket
import sys
import time
import tty
from collections.abc import Callable, Iterator
from pathlib import Path

from firewatch.simulator.run import Line, Simulation

__all__ = ["paced", "to_stdout", "to_pty", "to_tcp", "to_log"]


def paced(sim: Simulation, speed: float, stop: Callable[[], bool] = lambda: False) -> Iterator[Line]:
    """Lines at ``speed`` x real time (simulated seconds per wall second); 0 means unpaced."""
    wall0 = time.monotonic()
    sim0 = sim.t
    for chunk in sim.chunks():
        for line in chunk:
            if stop():
                return
            if speed > 0:
                due = wall0 + (line.sim_s - sim0) / speed
                delay = due - time.monotonic()
                if delay > 0:
                    time.sleep(delay)
            yield line


def to_stdout(sim: Simulation, speed: float) -> None:
    out = sys.stdout.buffer
    for line in paced(sim, speed):
        if line.dropped:
            continue
        out.write(line.data)
        out.flush()


def to_pty(sim: Simulation, speed: float, announce: Callable[[str], None]) -> None:
    """Serve on a new pseudo-terminal; ``announce`` gets the device path first."""
    master, slave = os.openpty()
    tty.setraw(slave)  # no echo, no line discipline: a plain serial line
    os.set_blocking(master, False)
    announce(os.ttyname(slave))
    try:
        for line in paced(sim, speed):
            if line.dropped:
                continue
            try:
                os.write(master, line.data)
            except BlockingIOError:
                pass  # nobody reading and the buffer is full: the line is lost, as on a real port
            except OSError as exc:
                if exc.errno != errno.EIO:
                    raise
            _drain(master)
    finally:
        os.close(master)
        os.close(slave)


def _drain(fd: int) -> None:
    """Discard anything the reader side wrote back (a raw line echoes nothing, but be safe)."""
    try:
        while select.select([fd], [], [], 0)[0]:
            if not os.read(fd, 4096):
                break
    except OSError:
        pass


def to_tcp(sim: Simulation, speed: float, host: str, port: int, announce: Callable[[str], None]) -> None:
    """Listen like a serial device server: one client at a time, the next accepted when one leaves."""
    server = socket.create_server((host, port), reuse_port=False)
    server.setblocking(False)
    bound = server.getsockname()
    announce(f"{bound[0]}:{bound[1]}")
    client: socket.socket | None = None
    try:
        for line in paced(sim, speed):
            if client is None:
                try:
                    client, _ = server.accept()
                    client.setblocking(True)
                    client.settimeout(1.0)
                except BlockingIOError:
                    client = None
            if client is None or line.dropped:
                if line.disconnect and client is not None:
                    client.close()
                    client = None
                continue
            try:
                client.sendall(line.data)
            except OSError:
                client.close()
                client = None
    finally:
        if client is not None:
            client.close()
        server.close()


def to_log(sim: Simulation, log_path: Path, progress: Callable[[float], None] | None = None) -> dict[str, float]:
    """Run the scenario as fast as possible through the recorder's pipeline into a firing log."""
    from firewatch.firing.pipeline import Pipeline, channel_table
    from firewatch.services.recorder import Ingest, attach_alarms
    from firewatch.store.writer import LogWriter
    from firewatch.transport.native import NativeParser

    site, schedule = sim.site, sim.scenario.schedule
    writer = LogWriter(
        log_path,
        channel_table(site, schedule),
        site_name=site.name,
        kiln=site.kiln,
        site_text=site.text,
        schedule_name=schedule.name,
        schedule_text=schedule.text,
        clock="device",
        port=f"simulator (seed {sim.scenario.seed})",
        durable=False,
        clock_fn=lambda: sim.scenario.start_utc + sim.t,
        hold_lines=None,  # a batch run: a write error ends it with a message (run it again)
    )
    ingest = Ingest(Pipeline(site, schedule, "device"), writer, NativeParser())
    engine = attach_alarms(ingest, site, schedule)
    writer.event(sim.scenario.start_utc, "start", f"simulated firing: {sim.scenario.name}")
    pending: list[tuple[float, bytes]] = []
    since_commit = 0
    try:
        for chunk in sim.chunks():
            for line in chunk:
                if not line.dropped:
                    pending.append((sim.scenario.start_utc + line.sim_s, line.data))
            if len(pending) >= 600 or sim.done:
                ingest.feed(pending)
                since_commit += len(pending)
                pending = []
                if since_commit >= 3600:
                    writer.commit()
                    since_commit = 0
                    if progress:
                        progress(sim.t)
        if pending:
            ingest.feed(pending)
        ingest.flush()
        engine.tick(sim.scenario.start_utc + sim.t)
        writer.event(sim.scenario.start_utc + sim.t, "stop", f"simulation ended after {sim.t / 3600:.2f} h")
    finally:
        writer.close("simulation ended")
    return {"lines": ingest.lines, "malformed": ingest.malformed, "simulated_s": sim.t, "alarms": len(engine.alarms)}
