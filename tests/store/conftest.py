"""Real firing logs written with an injected clock, for the model's tests (no screen, no sleeping)."""

from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path

from firewatch.firing.pipeline import Pipeline, channel_table
from firewatch.services.recorder import Ingest, attach_alarms
from firewatch.settings.profile import load_site
from firewatch.settings.schedule import load_schedule
from firewatch.store.writer import LogWriter
from firewatch.transport.native import NativeParser, encode
from firewatch.transport.records import Value

SITE = """\
[site]
name = "Test bench"
kiln = "bench kiln"
[input]
clock = "wall"
[alarms]
no_data_s = {no_data_s}
[[cold_junction]]
name = "cj"
[[thermocouple]]
name = "tc1"
type = "K"
cold_junction = "cj"
role = "control"
"""

SCHEDULE = """\
[schedule]
name = "one quick ramp"
start = 20
[[segment]]
name = "up"
rate = "max"
target = 100
"""

T0 = 1_800_000_000.0
"""The fake clock's start, UTC seconds: 2027-01-15 08:00:00Z (Python's datetime); an arbitrary moment."""


class Clock:
    """A wall clock the test moves by hand."""

    def __init__(self, t: float = T0) -> None:
        self.t = t

    def __call__(self) -> float:
        return self.t


class Bench:
    """A recorder's writing half, driven by hand: lines at chosen times, heartbeats, ticks, a stop."""

    def __init__(self, path: Path, clock: Clock, no_data_s: float = 30.0, schedule: bool = False) -> None:
        self.path = path
        self.clock = clock
        self.site = load_site("bench-site.toml", text=SITE.format(no_data_s=no_data_s))
        self.schedule = load_schedule("bench-schedule.toml", text=SCHEDULE) if schedule else None
        self.writer = LogWriter(path, channel_table(self.site, self.schedule), site_name=self.site.name,
                                kiln=self.site.kiln, site_text=self.site.text, schedule_text=self.schedule.text if self.schedule else "",
                                schedule_name=self.schedule.name if self.schedule else "", clock="wall", clock_fn=clock)
        self.ingest = Ingest(Pipeline(self.site, self.schedule, "wall"), self.writer, NativeParser())
        self.engine = attach_alarms(self.ingest, self.site, self.schedule)
        self.seq = 0

    def lines(self, times: Iterable[float], mv: float = 4.096) -> None:
        """One line per time (received then), tc1 at ``mv`` (4.096 mV is 100 °C for type K, NIST Monograph 175)."""
        batch = []
        for t in times:
            batch.append((t, encode([Value("tc1", mv, "mV"), Value("cj", 22.0, "C")], self.seq)))
            self.seq += 1
        self.ingest.feed(batch)

    def cycle(self) -> None:
        """What the recorder does every half second after the lines: tick the alarms, beat, commit."""
        self.engine.tick(self.clock())
        self.writer.heartbeat()
        self.writer.commit()

    def stop(self, reason: str = "signal") -> None:
        self.writer.close(reason)
