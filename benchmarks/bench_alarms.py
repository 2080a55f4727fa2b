"""Benchmark: alarm and progress evaluation per reading, and replay --headless over a 72 h, 1 Hz, 8-channel firing.

Run by hand: ``python benchmarks/bench_alarms.py``. Baselines measured in the
same run: parsing the raw lines, and reading them out of the log.
Target (issue 4): replay --headless under 5 s.
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


def make_log(tmp: Path) -> Path:
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
    log = tmp / "72h.db"
    t0 = time.perf_counter()
    out = subprocess.run([sys.executable, "-m", "firewatch", "sim", "--scenario", str(tmp / "bench.toml"), "--to-log", str(log)],
                         cwd=ROOT, capture_output=True, text=True)
    assert out.returncode == 0, out.stderr
    print(f"made a 72 h firing log in {time.perf_counter() - t0:.1f} s: {log.stat().st_size / 1e6:.0f} MB")
    return log


def main() -> None:
    tmp = Path(tempfile.mkdtemp(prefix="fw-bench-"))
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
    parser = NativeParser()
    t0 = time.perf_counter()
    for received, line, _ in lines:
        parser.parse(line, received)
    t_parse = time.perf_counter() - t0

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


if __name__ == "__main__":
    main()
