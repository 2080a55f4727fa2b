"""A short firing recorded the way the recorder records one, with an operator at work and a recorder restart.

The simulated kiln's lines go through the recorder's own ``Ingest``, alarm
engine and operator-action path (the side channel a viewer writes to), so
the firing log holds what a real one would: acknowledgements and shelves
with their source and reason, notes, a second session and its gap.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

from firewatch.firing.pipeline import Pipeline, channel_table
from firewatch.services.recorder import Ingest, Recorder, attach_alarms, warm_start
from firewatch.simulator.run import Simulation
from firewatch.simulator.scenario import load_scenario, parse_fault
from firewatch.store.actions import ActionQueue
from firewatch.store.writer import LogWriter
from firewatch.transport.native import NativeParser

DATA = Path(__file__).resolve().parents[1] / "data"
SCENARIO = DATA / "report-scenario.toml"
FAULTS = ("garbage@20:seconds=30,fraction=0.5", "dropout@40:seconds=45", "window-fouling@75:rate=0.6")
OPERATOR = "Mara Quill@kiln-room (viewer pid 4242)"  # an invented operator
ENGINEER = "Tobin Ashgrove@office (viewer pid 77)"  # an invented process engineer
RESTART_AT_S = 6000.0
RESTART_LOST_S = 90.0


@dataclass
class Step:
    """An operator action due at ``at_s`` simulated seconds: ``act(queue, engine)`` submits it."""

    at_s: float
    act: Callable[[ActionQueue, object], None]
    done: bool = False


def _first(engine, kind: str) -> int:
    return next(a.id for a in engine.alarms.values() if a.kind == kind)


def operator_steps() -> list[Step]:
    return [
        Step(1500.0, lambda q, e: q.submit("acknowledge", alarm_id=_first(e, "sensor-fault"), source=OPERATOR)),
        Step(1600.0, lambda q, e: q.submit("note", text="Cones 6 and 7 on the middle shelf; bottom shelf empty", source=OPERATOR)),
        Step(2700.0, lambda q, e: q.submit("acknowledge", alarm_id=_first(e, "no-data"), source=OPERATOR)),
        Step(6300.0, lambda q, e: q.submit("shelve", alarm_id=_first(e, "divergence"), reason="window fouled; cleaning it after the firing",
                                           duration_s=1800.0, source=ENGINEER)),
        Step(6400.0, lambda q, e: q.submit("note", text="Sight window looks smoky (see py1)", source=ENGINEER)),
    ]


def record_firing(log: Path, minutes: float | None = None, restart: bool = True, steps: list[Step] | None = None) -> dict:
    """Record the report's test firing into ``log``; return what was done (for the tests' expectations)."""
    scenario = load_scenario(SCENARIO)
    scenario = scenario.with_changes(faults=tuple(parse_fault(f) for f in FAULTS),
                                     **({"duration_s": minutes * 60.0} if minutes is not None else {}))
    sim = Simulation(scenario)
    site, schedule = sim.site, scenario.schedule
    steps = operator_steps() if steps is None else steps
    start = scenario.start_utc

    def open_writer() -> tuple[LogWriter, Ingest, object, Recorder]:
        writer = LogWriter(log, channel_table(site, schedule), site_name=site.name, kiln=site.kiln, site_text=site.text,
                           schedule_name=schedule.name, schedule_text=schedule.text, clock="device",
                           port=f"simulator (seed {scenario.seed})", durable=False, clock_fn=lambda: start + sim.t)
        pipeline = Pipeline(site, schedule, "device")
        if writer.continuing:
            warm_start(pipeline, writer)
        ingest = Ingest(pipeline, writer, NativeParser())
        engine = attach_alarms(ingest, site, schedule)
        # the recorder's own action path, without its threads
        rec = Recorder("simulator", site, schedule, log, clock="device", clock_fn=lambda: start + sim.t)
        rec.actions, rec.engine = ActionQueue(log), engine
        return writer, ingest, engine, rec

    writer, ingest, engine, rec = open_writer()
    sessions = 1
    skipping_until = None
    for chunk in sim.chunks():
        lines = []
        for line in chunk:
            if line.dropped or (skipping_until is not None and line.sim_s < skipping_until):
                continue
            lines.append((start + line.sim_s, line.data))
        if lines:
            ingest.feed(lines)
        now = start + sim.t
        for step in steps:
            if not step.done and sim.t >= step.at_s:
                step.act(rec.actions, engine)
                step.done = True
        rec._apply_actions(writer, now)
        engine.tick(now)
        writer.commit()
        if restart and sessions == 1 and sim.t >= RESTART_AT_S:
            rec.actions.close()
            writer.close("stopped (SIGTERM)")
            skipping_until = sim.t + RESTART_LOST_S
            writer, ingest, engine, rec = open_writer()
            sessions = 2
    rec.actions.close()
    writer.close("simulation ended")
    return {"sessions": sessions, "start": start, "steps": steps}
