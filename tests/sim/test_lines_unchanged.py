"""The simulator's lines stay byte for byte what they were before its generation was vectorised (issue 15).

The digests are regression values: made by the simulator as it was before issue 15 (a Value and an
f-string per value, the instruments evaluated chunk by chunk), over two hours of each built-in
scenario with every fault that shows on the line.
"""

from __future__ import annotations

import hashlib

import pytest

from firewatch.simulator.run import CHUNK, Simulation
from firewatch.simulator.scenario import load_scenario, parse_fault
from firewatch.transport.native import NativeParser

FAULTS = (
    "tc-open@10:channel=tc2", "garbage@20:seconds=60,fraction=1", "garbage@21:seconds=600,fraction=0.3",
    "dropout@25:seconds=30,disconnect=1", "tc-drift@5", "loop-break@40", "emissivity-step@50", "window-fouling@60",
    "dropout@70:seconds=90", "tc-open@100",
)

DIGESTS = {
    # regression values (the simulator before issue 15)
    "closed-kiln": "1e1c1f39a9508f5e96c795f7ed73e0dd276f3f6b536c57b146567e8a10dfa8e4",
    "open-port": "610b3b6e648859ceb70dc2163a6c297da3793c4bcf17bf5f7ae467b30c9ae5d8",
}


@pytest.mark.parametrize("name", sorted(DIGESTS))
def test_lines_are_byte_for_byte_unchanged(name: str) -> None:
    scenario = load_scenario(name).with_changes(duration_s=2 * 3600.0, faults=tuple(parse_fault(f) for f in FAULTS))
    digest = hashlib.sha256()
    for chunk in Simulation(scenario).chunks():
        for line in chunk:
            digest.update(b"%.3f %d %d " % (line.sim_s, line.dropped, line.disconnect) + line.data)
    assert digest.hexdigest() == DIGESTS[name]


def test_time_done_and_state_answer_for_the_last_chunk_handed_out() -> None:
    """The kiln is stepped ahead of the lines handed out; what a caller sees is the last chunk's."""
    scenario = load_scenario().with_changes(duration_s=30 * CHUNK + 7.0)
    sim = Simulation(scenario)
    assert sim.t == 0.0 and not sim.done and sim.state["t"] == 0.0
    chunks = 0
    for chunk in sim.chunks():
        chunks += 1
        assert sim.t == chunk[-1].sim_s == sim.state["t"]
        assert sim.done == (chunks == 31)  # 30 full chunks and one of 7 lines
        # the line carries the device time the state says
        parsed = NativeParser().parse(chunk[-1].data, 0.0)
        assert parsed.device_time == pytest.approx(scenario.start_utc + sim.t, abs=1e-3)
    assert chunks == 31 and len(chunk) == 7
