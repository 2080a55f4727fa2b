"""Benchmark: recorder CPU and commit latency at N channels x 100 readings/s, log size, and sim --to-log speed.

Run by hand: ``python benchmarks/bench_recorder.py [--seconds 30] [--channels 64]
[--only recorder|ingest|to-log]``. Baselines are measured in the same run: a
bare reader that only reads and discards the same stream; for the parsing and
the pipeline, the per-line path (``parse`` line by line, then
``Pipeline.process``) on the same lines; and the simulator running the same 24
hours without a log.

Targets: recorder under 10 % of one core at 16 channels (issue 3) and under
5 % at 64 channels (issue 15); p99 from line received to committed row
<= 1.2 s; ``sim --to-log`` of the 24-hour demo under 20 s (issue 3), 4 s
(issue 15). The writer is measured with everything else in the recorder's
figure, so the parse + pipeline share is printed on its own as well (no
writer: in-process, CPU time per second of stream), and ``sim --to-log`` is
split into its stages.
"""

from __future__ import annotations

import argparse
import os
import re
import socket
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from firewatch.transport.native import encode  # noqa: E402
from firewatch.transport.records import Value  # noqa: E402

CHANNELS_PY = 3
RATE_HZ = 100
CHANNELS_TC = 12
"""Thermocouples in the feed: the channels asked for less one cold junction and the pyrometers (set by --channels)."""


def bench_site(path: Path) -> None:
    lines = ['[site]\nname = "Bench"\n[input]\nclock = "wall"\n[[cold_junction]]\nname = "cj"\n']
    for i in range(CHANNELS_TC):
        lines.append(f'[[thermocouple]]\nname = "tc{i + 1}"\ntype = "K"\ncold_junction = "cj"\nrole = "{"reference" if i == 0 else "monitor"}"\n')
    for i in range(CHANNELS_PY):
        lines.append(f'[[pyrometer]]\nname = "py{i + 1}"\nband_um = [0.8, 1.1]\nemissivity = 0.9\nwindow = "sapphire"\nbackground = "tc1"\nreference = "tc1"\nrange_c = [500, 1600]\n')
    path.write_text("\n".join(lines))


def line(seq: int) -> bytes:
    values = [Value("cj", 24.0 + (seq % 10) * 0.01, "C")]
    values += [Value(f"tc{i + 1}", 41.0 + 0.001 * ((seq + i) % 50), "mV") for i in range(CHANNELS_TC)]
    values += [Value(f"py{i + 1}", 1000.0 + 0.1 * ((seq + i) % 20), "C") for i in range(CHANNELS_PY)]
    return encode(values, seq)


def serve(port_holder: list[int], stop: threading.Event, seconds: float) -> None:
    server = socket.create_server(("127.0.0.1", 0))
    port_holder.append(server.getsockname()[1])
    conn, _ = server.accept()
    t0 = time.monotonic()
    seq = 0
    while not stop.is_set() and time.monotonic() - t0 < seconds:
        due = t0 + seq / RATE_HZ
        delay = due - time.monotonic()
        if delay > 0:
            time.sleep(delay)
        try:
            conn.sendall(line(seq))
        except OSError:
            break
        seq += 1
    conn.close()
    server.close()


def cpu_seconds(pid: int) -> float:
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


def measure(cmd: list[str], seconds: float, warmup: float = 3.0) -> tuple[float, str]:
    """CPU fraction of one core used by ``cmd`` while fed the stream, after a warm-up."""
    stop = threading.Event()
    holder: list[int] = []
    feeder = threading.Thread(target=serve, args=(holder, stop, seconds + warmup + 5), daemon=True)
    feeder.start()
    while not holder:
        time.sleep(0.01)
    proc = subprocess.Popen([c.replace("PORT", str(holder[0])) for c in cmd], stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=ROOT)
    time.sleep(warmup)
    c0, w0 = cpu_seconds(proc.pid), time.monotonic()
    time.sleep(seconds)
    c1, w1 = cpu_seconds(proc.pid), time.monotonic()
    proc.terminate()
    _, err = proc.communicate(timeout=30)
    stop.set()
    return (c1 - c0) / (w1 - w0), err


BARE_READER = (
    "import serial,sys\n"
    "p=serial.serial_for_url(sys.argv[1],timeout=0.2)\n"
    "while True: p.read(4096)\n"
)


def ingest_share(site_path: Path, seconds: float) -> None:
    """CPU per second of stream for parsing and the pipeline alone (no writer): batch path against per-line."""
    from firewatch.firing.pipeline import Pipeline
    from firewatch.settings.profile import load_site
    from firewatch.transport.native import NativeParser

    site = load_site(site_path)
    t0 = 1_770_000_000.0
    lines = [(t0 + i / RATE_HZ, line(i)) for i in range(int(seconds * RATE_HZ))]
    per_commit = RATE_HZ // 2  # the recorder commits every 0.5 s
    batches = [lines[i : i + per_commit] for i in range(0, len(lines), per_commit)]

    def run(batch_path: bool) -> tuple[float, float]:
        pipeline, parser = Pipeline(site, None, "wall"), NativeParser()
        parse_s = compute_s = 0.0
        for part in batches:
            c0 = time.process_time()
            if batch_path:
                cols = parser.parse_batch(part, site.channel_names, "wall")
                c1 = time.process_time()
                pipeline.process_columns(cols)
            else:
                items = [parser.parse(data, received) for received, data in part]
                c1 = time.process_time()
                pipeline.process(items)
            c2 = time.process_time()
            parse_s += c1 - c0
            compute_s += c2 - c1
        return parse_s / seconds, compute_s / seconds

    run(True)  # warm-up: imports, band tables, compiled shapes
    old_parse, old_compute = run(False)
    new_parse, new_compute = run(True)
    print(f"parse + pipeline, no writer ({len(lines)} lines, {seconds:g} s of stream, CPU per second of stream):")
    print(f"  per-line parse + process (baseline): parse {old_parse * 100:5.2f} %  pipeline {old_compute * 100:5.2f} %  "
          f"total {(old_parse + old_compute) * 100:5.2f} % of one core")
    print(f"  parse_batch + process_columns:       parse {new_parse * 100:5.2f} %  pipeline {new_compute * 100:5.2f} %  "
          f"total {(new_parse + new_compute) * 100:5.2f} % of one core   parse ratio {new_parse / max(old_parse, 1e-9):.2f}")
    print(f"  parsing per line: {old_parse / RATE_HZ * 1e6:.1f} us per-line, {new_parse / RATE_HZ * 1e6:.1f} us batch")


def recorder_stages(site_path: Path, tmp: Path, seconds: float, fill_s: float) -> None:
    """The recorder's work in-process, stage by stage (CPU per second of stream): parsing, the pipeline, the
    alarm hook, the writer's write and commit, on half-second batches as the recorder takes them, after
    ``fill_s`` of stream has filled the rates' window (whose cost once grew with it, issue 15)."""
    from firewatch.firing.alarms.engine import AlarmEngine
    from firewatch.firing.pipeline import Pipeline, channel_table
    from firewatch.services.recorder import Ingest, attach_alarms, make_parser
    from firewatch.settings.profile import load_site
    from firewatch.store.writer import LogWriter

    site = load_site(site_path)
    writer = LogWriter(tmp / "stages.db", channel_table(site, None), site_name=site.name, kiln=site.kiln, site_text=site.text,
                       schedule_name="", schedule_text="", clock="wall", port="bench", hold_lines=None)
    pipeline = Pipeline(site, None, "wall")
    ingest = Ingest(pipeline, writer, make_parser(site, "wall"))
    attach_alarms(ingest, site, None)
    t0 = 1_770_000_000.0
    per_commit = RATE_HZ // 2
    total = int((fill_s + seconds) * RATE_HZ)
    spent: dict[str, float] = {}
    measuring = False

    def timed(owner: object, attr: str, label: str) -> None:
        inner = getattr(owner, attr)

        def wrapper(*a, **k):
            c = time.process_time()
            try:
                return inner(*a, **k)
            finally:
                if measuring:
                    spent[label] = spent.get(label, 0.0) + time.process_time() - c

        setattr(owner, attr, wrapper)

    parser = ingest.parser
    timed(parser, "parse_batch", "parsing")
    timed(pipeline, "process_columns", "pipeline")
    timed(AlarmEngine, "evaluate", "alarms")
    timed(writer, "write", "writer: write")
    timed(writer, "commit", "writer: commit")
    whole = 0.0
    for start in range(0, total, per_commit):
        measuring = start >= fill_s * RATE_HZ
        part = [(t0 + i / RATE_HZ, line(i)) for i in range(start, min(start + per_commit, total))]
        c = time.process_time()
        ingest.feed(part)
        writer.commit(part[-1][0])
        if measuring:
            whole += time.process_time() - c
    writer.close()
    print(f"recorder in-process, stage by stage, after {fill_s:g} s of stream filled the rates' window "
          f"({seconds:g} s measured, CPU per second of stream):")
    for label, s in spent.items():
        print(f"  {label:<16} {s / seconds * 100:5.2f} % of one core")
    rest = whole - sum(spent.values())
    print(f"  {'the rest':<16} {rest / seconds * 100:5.2f} %")
    print(f"  {'total':<16} {whole / seconds * 100:5.2f} % of one core (no port, no line queue)")


def to_log_stages(tmp: Path) -> None:
    """``sim --to-log`` of the 24-hour demo: the simulator alone (baseline), then the whole, split into stages."""
    from firewatch.firing.alarms.engine import AlarmEngine
    from firewatch.firing.pipeline import Pipeline
    from firewatch.firing.progress import ProgressTracker
    from firewatch.simulator import run as sim_run
    from firewatch.simulator.run import Simulation
    from firewatch.simulator.scenario import load_scenario
    from firewatch.store.writer import LogWriter
    from firewatch.transport.native import NativeParser

    t0 = time.perf_counter()
    n = sum(len(c) for c in Simulation(load_scenario()).chunks())
    t_sim = time.perf_counter() - t0
    demo_log = tmp / "demo.db"
    t0 = time.perf_counter()
    out = subprocess.run([sys.executable, "-m", "firewatch", "sim", "--to-log", str(demo_log), "--minutes", "1440", "-q"], cwd=ROOT, capture_output=True, text=True)
    t_log = time.perf_counter() - t0
    assert out.returncode == 0, out.stderr
    print(f"simulate 24 h demo alone:        {t_sim:6.2f} s ({n} lines)")
    print(f"sim --to-log 24 h demo:          {t_log:6.2f} s   ratio to simulation alone {t_log / t_sim:.2f} (targets < 20 s, issue 15: <= 4 s)")
    print(f"demo log: {demo_log.stat().st_size / 1e6:.1f} MB")

    # the stages, timed in-process by wrapping each stage's entry (a few hundred calls, so the wrappers cost nothing)
    spent: dict[str, float] = {}

    def timed(owner: object, attr: str, label: str) -> None:
        inner = getattr(owner, attr)

        def wrapper(*a, **k):
            t = time.perf_counter()
            try:
                return inner(*a, **k)
            finally:
                spent[label] = spent.get(label, 0.0) + time.perf_counter() - t

        setattr(owner, attr, wrapper)

    timed(sim_run.Simulation, "_step_ahead", "simulation")
    timed(sim_run.Simulation, "_emit", "simulation")
    timed(NativeParser, "parse_batch", "parsing")
    timed(Pipeline, "process_columns", "pipeline (with progress)")
    timed(ProgressTracker, "update", "progress")
    timed(AlarmEngine, "evaluate", "alarms")
    timed(LogWriter, "write", "writer: write")
    timed(LogWriter, "commit", "writer: commit")
    timed(LogWriter, "close", "writer: close")
    from firewatch.simulator.serve import to_log

    staged = tmp / "demo-staged.db"
    t0 = time.perf_counter()
    sim = Simulation(load_scenario().with_changes(duration_s=1440 * 60.0))
    to_log(sim, staged)
    total = time.perf_counter() - t0
    spent["pipeline (with progress)"] -= spent.get("progress", 0.0)
    print(f"sim --to-log in-process, {total:.2f} s; stages:")
    for label, s in spent.items():
        print(f"  {label.replace(' (with progress)', ''):<16} {s:6.2f} s  {s / total * 100:5.1f} %")
    rest = total - sum(spent.values())
    print(f"  {'the rest':<16} {rest:6.2f} s  {rest / total * 100:5.1f} %")


def main() -> None:
    global CHANNELS_TC
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=30.0)
    parser.add_argument("--channels", type=int, default=16, help="measured channels in the feed: 1 cold junction, 3 pyrometers, the rest thermocouples")
    parser.add_argument("--only", choices=("recorder", "ingest", "to-log"), help="run one part")
    parser.add_argument("--fill", type=float, default=330.0, help="seconds of stream fed in-process before the stages are measured (the rates' window is 300 s)")
    args = parser.parse_args()
    if args.channels < 5:
        parser.error("--channels: at least 5 (a cold junction, a thermocouple, 3 pyrometers)")
    CHANNELS_TC = args.channels - 1 - CHANNELS_PY
    tmp = Path(tempfile.mkdtemp(prefix="fw-bench-"))
    site = tmp / "bench-site.toml"
    bench_site(site)
    log = tmp / "bench.db"
    if args.only in (None, "ingest"):
        ingest_share(site, min(args.seconds, 60.0))
        recorder_stages(site, tmp, min(args.seconds, 60.0), args.fill)
    if args.only in (None, "to-log"):
        to_log_stages(tmp)
    if args.only not in (None, "recorder"):
        return

    bare, _ = measure([sys.executable, "-c", BARE_READER, "socket://127.0.0.1:PORT"], args.seconds)
    rec, err = measure(
        [sys.executable, "-m", "firewatch", "record", "--port", "socket://127.0.0.1:PORT", "--site", str(site), "--log", str(log)],
        args.seconds,
    )
    latency = re.search(r"p50 ([0-9.]+) s, p99 ([0-9.]+) s", err)
    import sqlite3

    con = sqlite3.connect(log)
    samples = con.execute("SELECT count(*) FROM sample").fetchone()[0]
    channels = con.execute("SELECT count(*) FROM channel").fetchone()[0]
    measured = CHANNELS_TC + CHANNELS_PY + 1
    con.close()
    size = sum(f.stat().st_size for f in tmp.glob("bench.db*") if f.suffix not in (".lock", ".reserve"))
    hours = samples / RATE_HZ / 3600.0
    print(f"feed: {measured} channels x {RATE_HZ} readings/s ({measured * RATE_HZ} values/s), {args.seconds:g} s measured")
    print(f"bare reader (read and discard):  {bare * 100:6.2f} % of one core")
    print(f"recorder:                        {rec * 100:6.2f} % of one core   ratio to bare reader {rec / max(bare, 1e-9):.1f} (target < 10 % at 16 channels, < 5 % at 64)")
    if latency:
        print(f"received -> committed latency:   p50 {latency.group(1)} s, p99 {latency.group(2)} s (target p99 <= 1.2 s)")
    print(f"log size: {size / 1e6:.1f} MB for {samples} samples of {channels} channels ({measured} measured + derived)")
    print(f"  per measured channel-hour at {RATE_HZ} Hz (derived included): {size / (measured * hours) / 1e6:.2f} MB; at 1 Hz about {size / (measured * hours * RATE_HZ) / 1e3:.0f} kB")


if __name__ == "__main__":
    main()
