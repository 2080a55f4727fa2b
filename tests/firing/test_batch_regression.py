"""Short simulated firings re-run through progress and alarms: the same plan.* arrays, bit for bit, and the
same alarms, transitions, causes and evidence as before issue 15 made them batch-wise (issue 15, item 3).

The expected values in data/short_firings.json are regression values: what the per-sample code gave on
these firings (``python -m tests.firing.test_batch_regression --save`` on that code wrote them), except the
line-noise alarm's raise, saved again when that condition came to judge every second whatever the batch
(it now rises 2 s sooner, at 13 of 60 lines rather than 14: the recorder's moment, which replay's long
batches used to skip). The long
firings are compared by benchmarks/replay_regression.py, run by hand.
"""

from __future__ import annotations

import json
import sys
from pathlib import Path
from typing import Any

import pytest

from tests.firing.replay_dump import dump, make_log, replay_json

DATA = Path(__file__).parent / "data" / "short_firings.json"
CASES: dict[str, tuple[str, ...]] = {
    # Kiln 3: an open thermocouple, a broken loop, two silences (the second long enough to place the kiln again)
    # and a burst of garbage on the line
    "closed-kiln": ("--scenario", "closed-kiln", "--minutes", "45", "--fault", "tc-open@8:channel=tc2",
                    "--fault", "loop-break@12", "--fault", "dropout@18:seconds=150", "--fault", "dropout@26:seconds=20",
                    "--fault", "garbage@30:seconds=400,fraction=0.5"),
    # Furnace 5: a silence the tracker resumes after
    "open-port": ("--scenario", "open-port", "--minutes", "30", "--fault", "dropout@10:seconds=120"),
}


def observe(tmp: Path) -> dict[str, Any]:
    out = {}
    for name, args in CASES.items():
        log = make_log(tmp / f"{name}.db", *args)
        replay = json.loads(replay_json(log))
        replay.pop("log")
        out[name] = {"replay": replay, **dump(log)}
    return out


@pytest.fixture(scope="module")
def observed(tmp_path_factory: pytest.TempPathFactory) -> dict[str, Any]:
    return observe(tmp_path_factory.mktemp("short"))


@pytest.mark.parametrize("case", list(CASES))
def test_same_as_before(observed: dict[str, Any], case: str) -> None:
    want = json.loads(DATA.read_text())[case]  # regression values (see the module's docstring)
    got = observed[case]
    assert got["samples"] == want["samples"] and got["times"] == want["times"]
    assert got["plan"] == want["plan"]
    assert got["transitions"] == want["transitions"]
    assert got["replay"] == want["replay"]


def test_the_firings_exercise_the_alarms(observed: dict[str, Any]) -> None:
    """The comparison means something only where there are alarms and resumes to compare."""
    kinds = {tr["kind"] for tr in observed["closed-kiln"]["transitions"]}
    assert {"sensor-fault", "no-data"} <= kinds
    assert any(tr["state"] == "returned-unacknowledged" for tr in observed["closed-kiln"]["transitions"])


if __name__ == "__main__" and sys.argv[1:] == ["--save"]:
    import tempfile

    DATA.write_text(json.dumps(observe(Path(tempfile.mkdtemp())), indent=1) + "\n")
