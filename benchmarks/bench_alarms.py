"""Benchmark: alarm and progress evaluation per reading, and replay --headless over a 72 h, 1 Hz, 8-channel firing;
the likely cause's evaluation per reading set on a 72 h firing with its divergence alarms open for most of it.

Run by hand: ``python benchmarks/bench_alarms.py``. Baselines measured in the
same run: parsing the raw lines, and reading them out of the log; for the
causes, the same alarm evaluation with the causes decided only when an alarm
is raised (no re-evaluation).
Targets: replay --headless under 5 s (issue 4); cause evaluation under 5 µs per reading set (issue 12).
"""

from __future__ import annotations

import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))


from firewatch.firing.alarms import AlarmEngine  # noqa: E402
from firewatch.firing.progress import ProgressTracker  # noqa: E402
from firewatch.services.replay import profiles_from_log  # noqa: E402
from firewatch.settings.profile import profiles_dir  # noqa: E402
from firewatch.store.reader import LogReader  # noqa: E402
from firewatch.transport.native import NativeParser  # noqa: E402


def time_parsing(lines: list) -> float:
    """The parsing baseline: seconds to parse every raw line once with the native parser."""
    parser = NativeParser()
    t0 = time.perf_counter()
    for received, line, _ in lines:
        parser.parse(line, received)
    return time.perf_counter() - t0


def make_log(tmp: Path, faults: tuple[str, ...] = (), name: str = "72h") -> Path:
    site = (profiles_dir() / "demo-site.toml").read_text()
    extra = "".join(
        f'\n[[thermocouple]]\nname = "tc{i}"\ntype = "N"\ncold_junction = "cj"\nrole = "monitor"\ntime_constant_s = 40\n'
        for i in (3, 4, 5)
    )
    site = site.replace("[[pyrometer]]", extra + "\n[[pyrometer]]", 1)
    (tmp / "bench-site.toml").write_text(site)
    (tmp / "demo-glaze.toml").write_text((profiles_dir() / "demo-glaze.toml").read_text())
    (tmp / "bench.toml").write_text(
        '[scenario]\nname = "bench, 72 h"\nsite = "bench-site.toml"\nschedule = "demo-glaze.toml"\n'
        'start = "2026-03-14T05:00:00Z"\nduration_min = 4320\nseed = 5\n'
    )
    log = tmp / f"{name}.db"
    t0 = time.perf_counter()
    fault_args = [a for f in faults for a in ("--fault", f)]
    out = subprocess.run([sys.executable, "-m", "firewatch", "sim", "--scenario", str(tmp / "bench.toml"), *fault_args, "--to-log", str(log)],
                         cwd=ROOT, capture_output=True, text=True)
    assert out.returncode == 0, out.stderr
    print(f"made a 72 h firing log{' with ' + ', '.join(faults) if faults else ''} in {time.perf_counter() - t0:.1f} s: "
          f"{log.stat().st_size / 1e6:.0f} MB")
    return log


def bench_causes(tmp: Path) -> None:
    """Cause evaluation per reading set: at each raise and, while a divergence alarm's condition holds, once a minute.

    The firing has window fouling from 5 h and drift of the reference from 10 h (issue 12's combination), so both
    pyrometers' divergence alarms stay open for most of the 72 h. The baseline is the same alarm evaluation with
    the cause decided only at the raise (the re-evaluation's cadence pushed beyond the firing).
    """
    import dataclasses

    from firewatch.firing.alarms import causes
    from firewatch.firing.alarms.learning import CauseLearner

    log = make_log(tmp, ("window-fouling@300:rate=0.05", "tc-drift@600:channel=tc2,rate=6"), "72h-faults")
    with LogReader(log) as r:
        site, schedule = profiles_from_log(r)
        series = {c.name: r.series(c.name) for c in r.channels()}
        lines = [row for rows in r.raw_lines() for row in rows]
    t_parse = time_parsing(lines)
    times = series[site.control.name].t
    values = {k: s.value for k, s in series.items()}
    status = {k: s.status for k, s in series.items()}
    n = times.size

    spent = {"raise": 0.0, "again": 0.0}
    raise_cause = AlarmEngine.likely_cause
    evaluate_again = CauseLearner._evaluate

    def timed_raise(self, name, t):  # type: ignore[no-untyped-def]
        t1 = time.perf_counter()
        try:
            return raise_cause(self, name, t)
        finally:
            spent["raise"] += time.perf_counter() - t1

    def timed_again(self, alarm, w, t):  # type: ignore[no-untyped-def]
        t1 = time.perf_counter()
        try:
            return evaluate_again(self, alarm, w, t)
        finally:
            spent["again"] += time.perf_counter() - t1

    def run(engine: AlarmEngine) -> float:
        t1 = time.perf_counter()
        for i in range(0, n, 600):
            sl = slice(i, i + 600)
            engine.evaluate(times[sl], {k: v[sl] for k, v in values.items()}, {k: v[sl] for k, v in status.items()})
        return time.perf_counter() - t1

    th = causes.CauseThresholds.for_site(site.alarms)
    baseline = AlarmEngine(site, schedule, thresholds=dataclasses.replace(th, every_s=1e9))
    t_base = run(baseline)
    AlarmEngine.likely_cause, CauseLearner._evaluate = timed_raise, timed_again  # type: ignore[method-assign]
    try:
        engine = AlarmEngine(site, schedule, thresholds=th)
        t_learn = run(engine)
    finally:
        AlarmEngine.likely_cause, CauseLearner._evaluate = raise_cause, evaluate_again  # type: ignore[method-assign]
    div = [a for a in engine.alarms.values() if a.kind == "divergence"]
    open_h = sum(((a.cleared_t or times[-1]) - a.raised_t) for a in div) / 3600.0
    evals = engine.learner.evaluations
    cause_s = spent["raise"] + spent["again"]
    print(f"fault firing: {n} reading sets; {len(div)} divergence alarms ({', '.join(f'{a.channel} {a.cause}' for a in div)}), "
          f"open {open_h:.0f} alarm-hours in all; {evals} re-evaluations")
    print(f"baseline: parse the lines                {t_parse:6.2f} s ({t_parse / len(lines) * 1e6:.1f} us/line)")
    print(f"baseline: alarms, cause only at raise    {t_base:6.2f} s ({t_base / n * 1e6:.2f} us/reading set)")
    print(f"alarms with causes that learn            {t_learn:6.2f} s ({t_learn / n * 1e6:.2f} us/reading set, "
          f"ratio to the baseline {t_learn / t_base:.2f})")
    print(f"cause evaluation (raise and again)       {cause_s:6.2f} s ({cause_s / n * 1e6:.2f} us/reading set (target < 5), "
          f"{spent['again'] / max(evals, 1) * 1e6:.0f} us per re-evaluation, ratio to parsing {cause_s / t_parse:.3f})")
    for p in tmp.glob("72h-faults.db*"):
        p.unlink()  # 0.2 GB


def main() -> None:
    tmp = Path(tempfile.mkdtemp(prefix="fw-bench-"))
    if "--causes" in sys.argv[1:]:
        bench_causes(tmp)
        return
    log = make_log(tmp)
    with LogReader(log) as r:
        site, schedule = profiles_from_log(r)
        channels = [c.name for c in r.channels()]
        measured = [c.name for c in r.channels() if c.kind in ("thermocouple", "cold_junction", "pyrometer")]
        t0 = time.perf_counter()
        lines = [row for rows in r.raw_lines() for row in rows]
        t_read = time.perf_counter() - t0
        series = {name: r.series(name) for name in channels}
    n = len(lines)
    t_parse = time_parsing(lines)

    times = series[site.control.name].t
    values = {k: s.value for k, s in series.items()}
    status = {k: s.status for k, s in series.items()}
    tracker = ProgressTracker(schedule)
    ctl = site.control.name
    t0 = time.perf_counter()
    for i in range(0, times.size, 600):
        tracker.update(times[i : i + 600], values[ctl][i : i + 600], values[f"{ctl}.rate"][i : i + 600])
    t_progress = time.perf_counter() - t0
    engine = AlarmEngine(site, schedule)
    t0 = time.perf_counter()
    for i in range(0, times.size, 600):
        sl = slice(i, i + 600)
        engine.evaluate(times[sl], {k: v[sl] for k, v in values.items()}, {k: v[sl] for k, v in status.items()})
    t_alarms = time.perf_counter() - t0

    t0 = time.perf_counter()
    out = subprocess.run([sys.executable, "-m", "firewatch", "replay", str(log), "--headless", "--json"], cwd=ROOT, capture_output=True, text=True)
    t_replay = time.perf_counter() - t0
    assert out.returncode == 0, out.stderr
    print(f"firing: {n} lines, {len(measured)} measured channels ({', '.join(measured)}), {len(channels)} channels in all")
    print(f"baseline: read raw lines from the log  {t_read:6.2f} s ({t_read / n * 1e6:.1f} us/line)")
    print(f"baseline: parse the lines              {t_parse:6.2f} s ({t_parse / n * 1e6:.1f} us/line)")
    print(f"progress evaluation                    {t_progress:6.2f} s ({t_progress / n * 1e6:.1f} us/reading set, ratio to parsing {t_progress / t_parse:.2f})")
    print(f"alarm evaluation                       {t_alarms:6.2f} s ({t_alarms / n * 1e6:.1f} us/reading set = {t_alarms / (n * len(measured)) * 1e6:.2f} us/reading, ratio to parsing {t_alarms / t_parse:.2f})")
    print(f"replay --headless (whole process)      {t_replay:6.2f} s (target < 5 s), ratio to reading + parsing {t_replay / (t_read + t_parse):.2f}")
    bench_causes(tmp)


if __name__ == "__main__":
    main()
