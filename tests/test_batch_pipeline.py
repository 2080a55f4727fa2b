"""The pipeline gives the same batches from a parser's columns as from lines parsed one by one (issue 15, item 3).

The simulated firing carries every fault that shows on the line (an open thermocouple, garbage, a
dropout, a lost pyrometer loop), so status words and malformed lines are among the batches.
"""

from __future__ import annotations

import numpy as np

from firewatch.firing.pipeline import Pipeline
from firewatch.simulator.run import Simulation
from firewatch.simulator.scenario import load_scenario, parse_fault
from firewatch.transport.native import NativeParser

FAULTS = ("tc-open@10:channel=tc2", "garbage@20:seconds=120,fraction=0.5", "dropout@25:seconds=30", "loop-break@40", "tc-drift@5")


def test_columns_and_per_line_paths_give_the_same_batches() -> None:
    scenario = load_scenario().with_changes(duration_s=3600.0, faults=tuple(parse_fault(f) for f in FAULTS))
    sim = Simulation(scenario)
    lines = [(scenario.start_utc + line.sim_s, line.data) for chunk in sim.chunks() for line in chunk if not line.dropped]
    site, schedule = scenario.site, scenario.schedule
    by_line, by_batch = Pipeline(site, schedule, "device"), Pipeline(site, schedule, "device")
    one, batch_parser = NativeParser(), NativeParser()
    statuses = set()
    malformed = 0
    for start in range(0, len(lines), 600):
        part = lines[start : start + 600]
        a = by_line.process([one.parse(line, received) for received, line in part])
        b = by_batch.process_columns(batch_parser.parse_batch(part, site.channel_names, "device"))
        assert a.raw == b.raw and a.samples == b.samples and a.events == b.events and a.gaps == b.gaps
        assert set(a.values) == set(b.values)
        for name in a.values:
            assert a.values[name].view(np.int64).tolist() == b.values[name].view(np.int64).tolist(), name
            assert a.status[name].tolist() == b.status[name].tolist(), name
            statuses.update(b.status[name].tolist())
        malformed += b.malformed
    # the faults did show: open and error statuses, and garbage kept raw
    assert {0, 1, 4} <= statuses and malformed > 0
