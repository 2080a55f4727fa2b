"""End to end over Modbus (issue 13): the simulator as Modbus devices, the recorder polling them, the firing log.

Real subprocesses, TCP on 127.0.0.1 and pseudo-terminals for RTU.
"""

from __future__ import annotations

import json
import signal
import subprocess
from pathlib import Path

import numpy as np
import pytest

from firewatch.settings.profile import profiles_dir
from firewatch.store.reader import LogReader
from tests.e2e.helpers import firewatch, free_port, inspect, run, samples, stop, wait_for

PROFILES = profiles_dir()
INTERVAL_S = 5.0

SCENARIO = f"""
[scenario]
name = "Larchmoor Kiln 3, glaze firing, read over Modbus"
site = "{PROFILES / 'demo-site.toml'}"
schedule = "{PROFILES / 'demo-glaze.toml'}"
start = "2026-03-14T05:00:00Z"
interval_s = {INTERVAL_S}
duration_min = 1440
seed = 7

[[fault]]
kind = "window-fouling"
at_min = 600
rate = 0.05

[[fault]]
kind = "dropout"
at_min = 700
seconds = 90

[[fault]]
kind = "loop-break"
at_min = 900
channel = "py1"

[[fault]]
kind = "tc-open"
at_min = 1000
channel = "tc1"
"""


def modbus_site(tmp_path: Path, **changes: str | None) -> Path:
    """The demo Modbus profile with [input] keys changed (key -> TOML value; None removes the key)."""
    text = (PROFILES / "demo-site-modbus.toml").read_text()
    head, sep, rest = text.partition("[input.device_time]")
    top, marker, section = head.partition("[input]\n")
    lines = [line for line in section.splitlines() if line.split("=", 1)[0].strip() not in changes]
    lines = [f"{key} = {value}" for key, value in changes.items() if value is not None] + lines
    path = tmp_path / "site-modbus.toml"
    path.write_text(top + marker + "\n".join(lines) + "\n" + sep + rest)
    return path


def start_sim(*args: str) -> tuple[subprocess.Popen, str]:
    proc = firewatch("sim", *args)
    first = proc.stdout.readline().strip()
    if not first:
        proc.kill()
        raise RuntimeError(f"simulator did not start: {proc.stderr.read()}")
    return proc, first


def readings(log: Path, name: str) -> np.ndarray:
    """A channel as the log gives it (derived ones recomputed): rows of time, value, status."""
    with LogReader(log) as reader:
        series = reader.series(name)
    return np.column_stack([series.t, series.value, series.status.astype(float)])


@pytest.mark.timeout(600)
def test_whole_demo_firing_over_modbus_tcp_matches_the_line_format(tmp_path: Path) -> None:
    """The same scenario, faults included, recorded over Modbus TCP (lock-step) and over the line format."""
    scenario = tmp_path / "scenario.toml"
    scenario.write_text(SCENARIO)
    line_log, modbus_log = tmp_path / "line.db", tmp_path / "modbus.db"
    out = run("sim", "--scenario", str(scenario), "--to-log", str(line_log), timeout=300)
    assert out.returncode == 0, out.stderr

    # lock-step: no retries (a retried clock read would move the simulation on twice), a generous timeout instead
    site = modbus_site(tmp_path, poll_s="0.001", timeout_s="5.0", retries="0")
    sim, address = start_sim("--scenario", str(scenario), "--modbus-tcp", "127.0.0.1:0", "--speed", "0", "--minutes", "1440")
    rec = firewatch("record", "--site", str(site), "--port", address, "--clock", "device", "--log", str(modbus_log))
    try:
        sim.wait(500)  # lock-step: the simulator ends once the last reading has been polled
        n = samples(modbus_log)
        wait_for(lambda: samples(modbus_log) == n and samples(modbus_log) > 0, timeout=30)
    finally:
        _, err = stop(rec)
        stop(sim)
    assert rec.returncode == 0, err

    line, modbus = inspect(line_log), inspect(modbus_log)
    assert modbus["samples"] == line["samples"] and min(line["samples"].values()) > 17000
    assert modbus["malformed_lines"] == 0
    # the same gap (the dropout's readings never arrive) and the same alarms, causes and times
    assert [(g["start"], g["end"], g["reason"]) for g in modbus["gaps"]] == [(g["start"], g["end"], g["reason"]) for g in line["gaps"]]

    def alarms(info: dict) -> list[tuple]:
        return [(a["kind"], a["channel"], a["cause"], a["raised_s"]) for a in info["alarms"]]

    assert alarms(modbus) == alarms(line)
    # replay decodes the poll records kept raw in the log, and finds the same
    out = run("replay", str(modbus_log), "--headless", "--json", timeout=300)
    assert out.returncode == 0, out.stderr
    assert alarms(json.loads(out.stdout)) == alarms(line)
    assert {(k, c, why) for k, c, why, _ in alarms(line)} == {
        ("divergence", "py1", "window-attenuation"), ("no-data", None, None),
        ("sensor-fault", "py1", "signal-failure"), ("sensor-fault", "tc1", "open-circuit"),
    }
    # the same conversions: thermocouples and cold junction exactly (EMF to 0.1 uV either way), py1 through its
    # loop to half a microamp (1050 degC / 16000 uA / 2), py2 to float32's resolution; the same status everywhere
    for name, tolerance in [("cj", 1e-9), ("tc1", 1e-9), ("tc2", 1e-9), ("tc1.rate", 1e-6), ("py1", 0.033), ("py1.reconciled", 0.04),
                            ("py2", 2e-4), ("py2.reconciled", 2e-4), ("py1.divergence", 0.04), ("py2.divergence", 2e-4)]:
        a, b = readings(line_log, name), readings(modbus_log, name)
        assert np.array_equal(a[:, 0], b[:, 0]) and np.array_equal(a[:, 2], b[:, 2]), name
        assert np.array_equal(np.isnan(a[:, 1]), np.isnan(b[:, 1])), name
        assert np.nanmax(np.abs(a[:, 1] - b[:, 1])) <= tolerance, name


@pytest.mark.timeout(300)
def test_server_killed_and_restarted_records_a_gap_and_resumes(tmp_path: Path) -> None:
    port = free_port()
    site = modbus_site(tmp_path, poll_s="0.2", timeout_s="1.0", retries="0", port=f'"127.0.0.1:{port}"')
    log = tmp_path / "restart.db"
    sim, _ = start_sim("--modbus-tcp", f"127.0.0.1:{port}", "--speed", "1")
    rec = firewatch("record", "--site", str(site), "--log", str(log))  # the port from the profile's [input]
    try:
        wait_for(lambda: samples(log) > 10)
        stop(sim, signal.SIGKILL)  # the device server goes away
        wait_for(lambda: "disconnect" in _event_kinds(log) and "open-failed" in _event_kinds(log), timeout=30)
        sim, _ = start_sim("--modbus-tcp", f"127.0.0.1:{port}", "--speed", "1")
        n = samples(log)
        wait_for(lambda: samples(log) > n + 10, timeout=60)
    finally:
        _, err = stop(rec)
        stop(sim)
    assert rec.returncode == 0, err
    assert "lost the port" in err and "reconnected" in err
    info = inspect(log)
    assert [g["reason"] for g in info["gaps"]] == ["modbus link lost"]
    assert info["failed_polls"] >= 1 and info["malformed_lines"] == 0
    kinds = _event_kinds(log)
    assert kinds.index("disconnect") < kinds.index("reconnect") and kinds[-1] == "stop"
    with LogReader(log) as r:
        stop_event = r.query("SELECT detail FROM event WHERE kind = 'stop'")[0][0]
    assert "polls failed" in stop_event


def _event_kinds(log: Path) -> list[str]:
    try:
        with LogReader(log) as r:
            return [e["kind"] for e in r.events()]
    except Exception:  # not created yet
        return []


@pytest.mark.timeout(300)
def test_rtu_over_a_pseudo_terminal(tmp_path: Path) -> None:
    site = modbus_site(tmp_path, format='"modbus-rtu"', port=None, poll_s="0.001", baudrate="19200", timeout_s="5.0", retries="0")
    assert run("check", str(site)).returncode == 0
    sim, device = start_sim("--modbus-rtu", "--pty", "--speed", "0", "--minutes", "5")
    log = tmp_path / "rtu.db"
    rec = firewatch("record", "--site", str(site), "--port", device, "--clock", "device", "--log", str(log))
    try:
        assert device.startswith("/dev/"), device
        sim.wait(120)
        wait_for(lambda: samples(log) == 300, timeout=30)
    finally:
        _, err = stop(rec)
        stop(sim)
    info = inspect(log)
    assert info["samples"] == {"cj": 300, "tc1": 300, "tc2": 300, "py1": 300, "py2": 300}  # 5 min at 1 s, one per poll
    assert info["malformed_lines"] == 0 and info["gaps"] == [] and info["duration_s"] == 299.0
    tc1 = readings(log, "tc1")
    assert np.all(tc1[:, 2] == 0) and 15.0 < tc1[0, 1] < 40.0  # room temperature at the start of the demo firing


def test_paced_faults_are_exception_responses_and_silence(tmp_path: Path) -> None:
    """--speed > 0: a garbage window is answered with exception 06, a dropout with silence, each seen by the probe."""
    probe = ("probe", "--count", "2", "--timeout", "1.0", "--retries", "0", "--port")
    sim, address = start_sim("--modbus-tcp", "127.0.0.1:0", "--speed", "1", "--fault", "garbage@0:seconds=3600,fraction=1")
    try:
        out = run(*probe, address)
        assert out.returncode == 1 and out.stderr == "unit 1 input 0-1: exception 0x06 (server device busy)\n"
    finally:
        stop(sim)
    sim, address = start_sim("--modbus-tcp", "127.0.0.1:0", "--speed", "1", "--fault", "dropout@0:seconds=3600")
    try:
        out = run(*probe, address)
        assert out.returncode == 1 and out.stderr == "unit 1 input 0-1: no answer within 1 s (1 try)\n"
    finally:
        stop(sim)
    sim, address = start_sim("--modbus-tcp", "127.0.0.1:0", "--speed", "1")
    try:
        out = run(*probe, address)
        assert out.returncode == 0 and len(out.stdout.splitlines()) == 4, out.stderr
        watch = firewatch("probe", "--port", address, "--count", "2", "--watch", "0.2")
        header = watch.stdout.readline()
        stamps = [watch.stdout.readline() for _ in range(8)]  # two rounds: a time, the column heads, two registers
        watch.send_signal(signal.SIGINT)  # Ctrl-C ends the watch quietly
        _, err = watch.communicate(timeout=30)
        assert header.startswith("unit 1, input registers (function 4) 0-1 as int16")
        assert stamps[0][:2] == "20" and stamps[4][:2] == "20" and stamps[1].split()[0] == "register"
        assert watch.returncode == 0 and "Traceback" not in err
    finally:
        stop(sim)


def test_bad_command_lines(tmp_path: Path) -> None:
    site = modbus_site(tmp_path)
    no_clock = tmp_path / "no-clock.toml"
    text = site.read_text()
    start, end = text.index("[input.device_time]"), text.index("[input.channels.tc1]")
    no_clock.write_text(text[:start] + text[end:])
    cases = [
        (["sim", "--modbus-rtu", "--stdout"], "--modbus-rtu: serves on a pseudo-terminal; add --pty"),
        (["sim", "--modbus-tcp", "nowhere"], "expected HOST:PORT"),
        (["record", "--site", str(site), "--port", "kiln3", "--log", str(tmp_path / "x.db")], "--port: expected HOST:PORT"),
        (["record", "--site", str(no_clock), "--clock", "device", "--log", str(tmp_path / "x.db")], "--clock device: the site profile maps no [input.device_time]"),
        (["record", "--log", str(tmp_path / "x.db")], "--port: give the serial URL"),
        (["probe", "--port", "127.0.0.1:502", "--type", "int32", "--count", "5"], "count them in pairs"),
    ]
    for argv, fragment in cases:
        out = run(*argv, timeout=60)
        assert out.returncode == 2, (argv, out.stderr)
        assert fragment in out.stderr and out.stderr.count("\n") == 1 and "Traceback" not in out.stderr, (argv, out.stderr)
