"""Benchmark: 50 kilns at 1 Hz through one Mosquitto: plant-view staleness, and what publishing costs a recorder.

Run by hand: ``python benchmarks/bench_mqtt.py`` (needs mosquitto, Debian's package). Targets (issue 7): the plant
view within 1 s of the newest reading; publishing under 5 % of one core for the recorder. Baselines in the same run:
a bare subscriber's delivery latency, and the recorder's CPU without --mqtt on the same feed.
"""

from __future__ import annotations

import json
import shutil
import socket
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(ROOT / "benchmarks"))

import numpy as np  # noqa: E402
import paho.mqtt.client as mqtt  # noqa: E402
from bench_recorder import cpu_seconds  # noqa: E402

from firewatch.services.mqtt import parse_mqtt_url  # noqa: E402
from firewatch.services.plant import PlantState  # noqa: E402

KILNS = 50


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def start_broker(port: int) -> subprocess.Popen:
    conf = Path(tempfile.mkdtemp()) / "m.conf"
    conf.write_text(f"listener {port} 127.0.0.1\nallow_anonymous true\npersistence false\n")
    proc = subprocess.Popen([shutil.which("mosquitto") or "/usr/sbin/mosquitto", "-c", str(conf)], stderr=subprocess.DEVNULL)
    time.sleep(0.5)
    return proc


def fleet(port: int, prefix: str, seconds: float, stop: threading.Event) -> None:
    """50 kilns' state messages at 1 Hz, shaped like a recorder's, stamped with the wall clock."""
    client = mqtt.Client(mqtt.CallbackAPIVersion.VERSION2)
    client.connect("127.0.0.1", port)
    client.loop_start()
    t0 = time.time()
    k = 0
    while not stop.is_set() and time.time() - t0 < seconds:
        now = time.time()
        for i in range(KILNS):
            body = {"v": 1, "kiln": f"kiln{i}", "t": now, "values": {f"tc{j}": 1000.0 + j for j in range(8)},
                    "summary": {"temperature_c": 1000.0, "segment": 3, "divergence_k": 0.4, "remaining_s": 3600.0}, "alarms": []}
            client.publish(f"{prefix}/kiln{i}/state", json.dumps(body), qos=1, retain=True)
        k += 1
        time.sleep(max(0.0, t0 + k - time.time()))
    client.loop_stop()
    client.disconnect()


def plant_latency(port: int) -> tuple[np.ndarray, np.ndarray]:
    prefix = "bench"
    url = parse_mqtt_url(f"mqtt://127.0.0.1:{port}/{prefix}")
    bare: list[float] = []

    def on_message(c, u, msg):
        bare.append(time.time() - json.loads(msg.payload)["t"])

    sub = mqtt.Client(mqtt.CallbackAPIVersion.VERSION2)
    sub.on_message = on_message
    sub.connect("127.0.0.1", port)
    sub.subscribe(f"{prefix}/+/state", qos=1)
    sub.loop_start()
    plant = PlantState(url)
    time.sleep(1.0)
    stop = threading.Event()
    feeder = threading.Thread(target=fleet, args=(port, prefix, 25.0, stop))
    feeder.start()
    ages: list[float] = []
    time.sleep(3.0)
    end = time.time() + 20.0
    while time.time() < end:  # what the overview would show, sampled at its 2 Hz refresh
        now = time.time()
        for v in plant.snapshot():
            ages.append(now - v.state.get("t", now))
        time.sleep(0.5)
    stop.set()
    feeder.join()
    plant.close()
    sub.loop_stop()
    return np.array(ages), np.array(bare[len(bare) // 10 :])


def recorder_cpu(port: int, with_mqtt: bool, seconds: float) -> float:
    tmp = Path(tempfile.mkdtemp())
    sim = subprocess.Popen([sys.executable, "-m", "firewatch", "sim", "--tcp", "127.0.0.1:0", "--speed", "1"], stdout=subprocess.PIPE, text=True, cwd=ROOT)
    sim_port = sim.stdout.readline().strip().rsplit(":", 1)[1]
    cmd = [sys.executable, "-m", "firewatch", "record", "--port", f"socket://127.0.0.1:{sim_port}", "--log", str(tmp / "r.db")]
    if with_mqtt:
        cmd += ["--mqtt", f"mqtt://127.0.0.1:{port}/benchrec"]
    rec = subprocess.Popen(cmd, stderr=subprocess.DEVNULL, cwd=ROOT)
    try:
        time.sleep(4.0)
        c0, w0 = cpu_seconds(rec.pid), time.monotonic()
        time.sleep(seconds)
        return (cpu_seconds(rec.pid) - c0) / (time.monotonic() - w0)
    finally:
        rec.terminate()
        sim.terminate()
        rec.wait(10)
        sim.wait(10)


def main() -> None:
    port = free_port()
    broker = start_broker(port)
    try:
        ages, bare = plant_latency(port)
        print(f"{KILNS} kilns at 1 Hz: plant view data age p50 {np.percentile(ages, 50):.2f} s, p99 {np.percentile(ages, 99):.2f} s, "
              f"max {ages.max():.2f} s (target within 1 s of the newest reading; a 1 Hz kiln is up to 1 s old by itself)")
        print(f"baseline: bare subscriber delivery latency p50 {np.percentile(bare, 50) * 1e3:.1f} ms, p99 {np.percentile(bare, 99) * 1e3:.1f} ms")
        without = recorder_cpu(port, False, 30.0)
        with_ = recorder_cpu(port, True, 30.0)
        print(f"recorder at 1 Hz (demo kiln): {without * 100:.2f} % of one core without MQTT, {with_ * 100:.2f} % with; "
              f"publishing costs {(with_ - without) * 100:.2f} % (target < 5 %)")
    finally:
        broker.terminate()


if __name__ == "__main__":
    main()
