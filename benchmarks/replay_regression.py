"""Regression harness for issue 15, item 3: long firings re-run before and after a change to progress or alarms.

Run by hand, once on the code before the change and once after::

    python benchmarks/replay_regression.py --save DIR     # before: writes DIR/CASE.json
    python benchmarks/replay_regression.py --check DIR    # after: compares, prints what differs

Each case is a simulated firing (``firewatch sim --to-log``) with one of the
simulator's faults, on both built-in scenarios. What is compared: the output of
``replay --headless --json``, and a re-run in this process (tests/firing/replay_dump.py)
giving every plan.* array's SHA-256 (bit for bit) and every alarm transition
with its exact time, detail, likely cause and evidence. The short firings of
tests/firing/test_batch_regression.py are the quick version of this.
"""

from __future__ import annotations

import json
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from tests.firing.replay_dump import dump, make_log, replay_json  # noqa: E402

CASES: dict[str, tuple[str, ...]] = {
    "closed-plain": ("--scenario", "closed-kiln", "--minutes", "1000"),
    "closed-window-fouling": ("--scenario", "closed-kiln", "--minutes", "1000", "--fault", "window-fouling@300:rate=0.05"),
    "closed-tc-open": ("--scenario", "closed-kiln", "--minutes", "900", "--fault", "tc-open@400:channel=tc2"),
    "closed-tc-drift": ("--scenario", "closed-kiln", "--minutes", "1000", "--fault", "tc-drift@600:channel=tc2,rate=6"),
    "closed-loop-break": ("--scenario", "closed-kiln", "--minutes", "900", "--fault", "loop-break@500"),
    "closed-emissivity-step": ("--scenario", "closed-kiln", "--minutes", "1000", "--fault", "emissivity-step@500:to=0.7"),
    "closed-dropout": ("--scenario", "closed-kiln", "--minutes", "900",
                       "--fault", "dropout@300:seconds=900", "--fault", "dropout@600:seconds=40"),
    "closed-garbage": ("--scenario", "closed-kiln", "--minutes", "600", "--fault", "garbage@200:seconds=3600,fraction=0.4"),
    "open-plain": ("--scenario", "open-port", "--minutes", "900"),
    "open-window-fouling": ("--scenario", "open-port", "--minutes", "900", "--fault", "window-fouling@200:rate=0.1"),
    "open-emissivity-step": ("--scenario", "open-port", "--minutes", "900", "--fault", "emissivity-step@300:to=0.6"),
}


def run_case(name: str, args: tuple[str, ...], tmp: Path) -> dict:
    log = make_log(tmp / f"{name}.db", *args)
    out = {"args": list(args), "replay": json.loads(replay_json(log)), **dump(log)}
    out["replay"].pop("log", None)  # the temporary path
    for p in tmp.glob(f"{name}.db*"):
        p.unlink()
    return out


def main() -> int:
    if len(sys.argv) != 3 or sys.argv[1] not in ("--save", "--check"):
        print(__doc__)
        return 2
    mode, folder = sys.argv[1], Path(sys.argv[2])
    folder.mkdir(parents=True, exist_ok=True)
    tmp = Path(tempfile.mkdtemp(prefix="fw-regress-"))
    failed = 0
    for name, args in CASES.items():
        t0 = time.perf_counter()
        got = run_case(name, args, tmp)
        path = folder / f"{name}.json"
        alarms = len(got["replay"]["alarms"])
        if mode == "--save":
            path.write_text(json.dumps(got, indent=1))
            print(f"{name}: saved, {got['samples']} samples, {alarms} alarms, {len(got['transitions'])} transitions "
                  f"({time.perf_counter() - t0:.0f} s)")
            continue
        want = json.loads(path.read_text())
        diffs = [k for k in ("replay", "samples", "times", "transitions") if got[k] != want[k]]
        diffs += [k for k in want["plan"] if got["plan"].get(k) != want["plan"][k]]
        failed += bool(diffs)
        print(f"{name}: {'DIFFERS in ' + ', '.join(diffs) if diffs else 'same'} ({got['samples']} samples, {alarms} alarms, "
              f"{len(got['transitions'])} transitions, {time.perf_counter() - t0:.0f} s)")
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
