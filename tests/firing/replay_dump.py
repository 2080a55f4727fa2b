"""A recorded firing run through the model again, dumped for comparison (issue 15, item 3).

What a batch-wise change to progress or alarms must leave unchanged: every
plan.* array, bit for bit, and every alarm transition (time, state, detail,
likely cause and evidence). :func:`dump` re-runs a log the way ``replay
--headless`` does (the pipeline over its raw lines in batches, then the alarm
engine) and returns both; ``benchmarks/replay_regression.py`` runs it over
long firings, ``test_batch_regression.py`` over short ones.
"""

from __future__ import annotations

import hashlib
import subprocess
import sys
from pathlib import Path
from typing import Any

import numpy as np

from firewatch.firing.alarms import AlarmEngine
from firewatch.firing.pipeline import Pipeline
from firewatch.firing.progress import PLAN_CHANNELS
from firewatch.services.recorder import make_parser
from firewatch.services.replay import profiles_from_log
from firewatch.store.reader import LogReader

ROOT = Path(__file__).resolve().parents[2]
PLAN = tuple(name for name, _, _ in PLAN_CHANNELS)


def make_log(log: Path, *args: str) -> Path:
    """``firewatch sim --to-log LOG ARGS`` in a subprocess; the log."""
    out = subprocess.run([sys.executable, "-m", "firewatch", "sim", "--to-log", str(log), "-q", *args], cwd=ROOT,
                         capture_output=True, text=True, timeout=600)
    assert out.returncode == 0, out.stderr
    return log


def replay_json(log: Path) -> str:
    """``firewatch replay --headless --json LOG`` in a subprocess; its output."""
    out = subprocess.run([sys.executable, "-m", "firewatch", "replay", "--headless", "--json", str(log)], cwd=ROOT,
                         capture_output=True, text=True, timeout=600)
    assert out.returncode == 0, out.stderr
    return out.stdout


def rerun(log: Path, lines_per_batch: int = 3000) -> tuple[np.ndarray, dict[str, np.ndarray], list[dict[str, Any]]]:
    """The log's raw lines through a fresh pipeline and alarm engine: times, plan.* arrays, transitions."""
    with LogReader(log) as r:
        site, schedule = profiles_from_log(r)
        clock = r.firing().get("clock") or "wall"
        parser = make_parser(site, clock)
        pipeline = Pipeline(site, schedule, clock)
        engine = AlarmEngine(site, schedule)
        times: list[np.ndarray] = []
        plan: dict[str, list[np.ndarray]] = {name: [] for name in PLAN}
        batches = [pipeline.process([parser.parse(bytes(line), received) for received, line, _ in rows])
                   for rows in r.raw_lines(batch_size=lines_per_batch)]
    batches.append(pipeline.flush())
    last = None
    for batch in batches:
        malformed_t = [raw[0] for raw in batch.raw if not raw[2]]
        if clock == "device" and batch.samples:
            offset = batch.samples[-1][1] - batch.samples[-1][2]
            malformed_t = [t + offset for t in malformed_t]
        engine.evaluate(batch.times, batch.values, batch.status, malformed_t)
        if batch.samples:
            times.append(batch.times)
            last = float(batch.times[-1])
            for name in PLAN:
                if name in batch.values:
                    plan[name].append(batch.values[name])
    if last is not None:
        engine.tick(last + 5.0)
    transitions = [
        {"id": tr.alarm.id, "kind": tr.alarm.kind, "channel": tr.alarm.channel, "t": tr.t.hex(), "state": tr.state,
         "detail": tr.detail, "new": tr.new, "cause": tr.alarm.cause, "evidence": tr.alarm.evidence,
         "cause_steps": [repr(step) for step in tr.alarm.cause_steps]}
        for tr in engine.transitions
    ]
    t_all = np.concatenate(times) if times else np.empty(0)
    return t_all, {k: np.concatenate(v) if v else np.empty(0) for k, v in plan.items()}, transitions


def digest(a: np.ndarray) -> str:
    """SHA-256 of an array's float64 bytes: equal digests, equal arrays bit for bit (NaNs included)."""
    return hashlib.sha256(np.ascontiguousarray(a, dtype=np.float64).tobytes()).hexdigest()


def dump(log: Path) -> dict[str, Any]:
    """What must not change: plan.* digests and sizes, every transition."""
    t, plan, transitions = rerun(log)
    return {"samples": int(t.size), "times": digest(t), "plan": {k: digest(v) for k, v in plan.items()},
            "transitions": transitions}
