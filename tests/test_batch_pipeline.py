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


STACK_SITE = """
[site]
name = "Stack test"
[input]
clock = "wall"
[[cold_junction]]
name = "cj"
[[thermocouple]]
name = "k1"
type = "K"
cold_junction = "cj"
[[thermocouple]]
name = "n1"
type = "N"
cold_junction = 20.0
[[thermocouple]]
name = "k2"
type = "K"
cold_junction = "cj"
[[thermocouple]]
name = "c1"
type = "K"
unit = "C"
[[thermocouple]]
name = "n2"
type = "N"
cold_junction = 20.0
[[thermocouple]]
name = "k3"
type = "K"
cold_junction = "cj"
"""


def test_thermocouples_converted_by_type_in_one_call_as_channel_by_channel(tmp_path) -> None:
    # issue 15: every thermocouple of a type is converted in one call over the channels stacked; each
    # channel's values and statuses must be those of a call per channel, to the bit (regression check)
    import warnings

    from firewatch.physics.thermocouples import emf_to_temperature
    from firewatch.settings.profile import load_site
    from firewatch.transport.native import encode
    from firewatch.transport.records import Status, Value

    path = tmp_path / "site.toml"
    path.write_text(STACK_SITE)
    site = load_site(path)
    rng = np.random.default_rng(15)
    lines = []
    for i in range(400):
        cj_status = Status.ERROR if i % 37 == 0 else Status.OK
        values = [Value("cj", float(rng.uniform(15, 35)), "C", cj_status)]
        for name in ("k1", "n1", "k2", "c1", "n2", "k3"):
            unit = "C" if name == "c1" else "mV"
            v = float(rng.uniform(-1.0, 60.0)) if unit == "mV" else float(rng.uniform(0, 1300))  # some past 54.9 mV (K)
            status = Status.OPEN if (i + len(name) * 7) % 23 == 0 else Status.OK
            values.append(Value(name, v, unit, status))
        lines.append((1_770_000_000.0 + i * 0.01, encode(values, i)))
    parser = NativeParser()
    cols = parser.parse_batch(lines, site.channel_names, "wall")
    given = {name: (cols.values[name].copy(), cols.status[name].copy()) for name in cols.values}
    batch = Pipeline(site, None, "wall").process_columns(cols)
    assert len(batch.samples) == 400
    # the measured channels keep the site's order: cold junction, thermocouples, pyrometers
    assert list(batch.values)[:7] == ["cj", "k1", "n1", "k2", "c1", "n2", "k3"]
    cj_v, cj_s = given["cj"]
    seen = set()
    for tc in site.thermocouples:
        raw, status = given[tc.name]
        if tc.unit == "mV":
            cold = cj_v if tc.cold_junction == "cj" else np.full(raw.size, float(tc.cold_junction))
            if tc.cold_junction == "cj":
                status = np.where((status == Status.OK) & (cj_s != Status.OK), int(Status.ERROR), status)
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                want = emf_to_temperature(np.where(status == Status.OK, raw, np.nan), tc.type, np.nan_to_num(cold, nan=0.0))
        else:
            want = np.where(status == Status.OK, raw, np.nan)
        status = np.where((status == Status.OK) & np.isnan(want), int(Status.OUT_OF_RANGE), status)
        assert batch.values[tc.name].view(np.int64).tolist() == want.view(np.int64).tolist(), tc.name
        assert batch.status[tc.name].tolist() == status.tolist(), tc.name
        seen.update(status.tolist())
    # the batch did hold every case: good, open, a cold junction in error, out of range
    assert {0, 1, 4, 5} <= seen
