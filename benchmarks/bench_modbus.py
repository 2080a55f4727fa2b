"""Benchmark: the recorder polling 32 channels on 3 Modbus TCP devices at 10 Hz over loopback.

Run by hand: ``python benchmarks/bench_modbus.py [--seconds 30]``. Measures
the recorder's CPU (% of one core) and its poll-to-commit latency (p50 and
p99, from the moment a poll starts to the commit of its readings), against
a baseline measured in the same run: a bare pymodbus client reading the
same three blocks at the same rate and discarding them (its CPU, and its
request-to-answer latency).

Targets (issue 13): recorder under 5 % of one core; poll-to-commit p99 under 1 s.

The devices are a pymodbus server in a third process, so that neither
measured process pays for serving. Layout (all 0-based):

* unit 1, input registers 0-15: 16 thermocouples reported in 0.1 °C (int16)
* unit 2, input registers 0-23: 12 thermocouples' EMF in 0.1 µV (int32, high
  word first), and register 24 their cold junction in 0.01 °C (int16)
* unit 3, holding registers 0-5: 3 pyrometers in °C (float32, low word first)
"""

from __future__ import annotations

import argparse
import math
import os
import re
import subprocess
import sys
import tempfile
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

RATE_HZ = 10.0
TC_C, TC_MV, PY = 16, 12, 3


def bench_site(path: Path, port: int) -> None:
    """A site profile mapping the 32 channels (and 0.1 s polls)."""
    parts = [f'[site]\nname = "Bench"\n[input]\nformat = "modbus-tcp"\nport = "127.0.0.1:{port}"\npoll_s = {1 / RATE_HZ}\ntimeout_s = 0.5\nretries = 0\n']
    for i in range(TC_C):
        parts.append(f'[input.channels.t{i + 1}]\nunit_id = 1\nregister = {i}\ntype = "int16"\nscale = 0.1\nunit = "C"\nopen = [32767]\n')
    for i in range(TC_MV):
        parts.append(f'[input.channels.m{i + 1}]\nunit_id = 2\nregister = {2 * i}\ntype = "int32"\nscale = 0.0001\nunit = "mV"\n')
    parts.append(f'[input.channels.cj]\nunit_id = 2\nregister = {2 * TC_MV}\ntype = "int16"\nscale = 0.01\nunit = "C"\n')
    for i in range(PY):
        parts.append(f'[input.channels.py{i + 1}]\nunit_id = 3\ntable = "holding"\nregister = {2 * i}\ntype = "float32"\nword_order = "little"\nunit = "C"\n')
    parts.append('[[cold_junction]]\nname = "cj"\n')
    for i in range(TC_C):
        parts.append(f'[[thermocouple]]\nname = "t{i + 1}"\ntype = "K"\nunit = "C"\nrole = "{"reference" if i == 0 else "monitor"}"\n')
    for i in range(TC_MV):
        parts.append(f'[[thermocouple]]\nname = "m{i + 1}"\ntype = "K"\nunit = "mV"\ncold_junction = "cj"\n')
    for i in range(PY):
        parts.append(f'[[pyrometer]]\nname = "py{i + 1}"\nband_um = [0.8, 1.1]\nemissivity = 0.9\nwindow = "sapphire"\nbackground = "t1"\nreference = "t1"\nrange_c = [500, 1600]\n')
    path.write_text("\n".join(parts))


SERVER = r'''
import asyncio, logging, math, sys, time
logging.getLogger("pymodbus").setLevel(logging.CRITICAL)
from pymodbus.client import ModbusTcpClient as C
from pymodbus.server import ModbusTcpServer
from pymodbus.simulator import DataType, SimData, SimDevice

regs = {1: [0] * 16, 2: [0] * 25, 3: [0] * 6}

def update():
    t = time.time()
    for i in range(16):
        regs[1][i] = C.convert_to_registers(int(8000 + 50 * math.sin(t / 30 + i)), C.DATATYPE.INT16)[0]
    for i in range(12):
        regs[2][2 * i:2 * i + 2] = C.convert_to_registers(int(332800 + 2000 * math.sin(t / 30 + i)), C.DATATYPE.INT32)
    regs[2][24] = 2500
    for i in range(3):
        regs[3][2 * i:2 * i + 2] = C.convert_to_registers(800.0 + 5 * math.sin(t / 30 + i), C.DATATYPE.FLOAT32, word_order="little")

def device(unit):
    async def action(fc, start, address, count, registers, values):
        registers[address - start:address - start + count] = regs[unit][address:address + count]
    bits = [SimData(0, count=16, values=False, datatype=DataType.BITS)]
    block = [SimData(0, count=len(regs[unit]), values=0, datatype=DataType.REGISTERS)]
    return SimDevice(unit, simdata=(bits, list(bits), block, list(block)), action=action)

async def main():
    server = ModbusTcpServer([device(1), device(2), device(3)], address=("127.0.0.1", 0))
    await server.listen()
    print(server.transport.sockets[0].getsockname()[1], flush=True)
    while True:
        update()
        await asyncio.sleep(0.1)

asyncio.run(main())
'''

BARE_CLIENT = r'''
import sys, time, logging
logging.getLogger("pymodbus").setLevel(logging.CRITICAL)
from pymodbus.client import ModbusTcpClient
c = ModbusTcpClient("127.0.0.1", port=int(sys.argv[1]), timeout=0.5, retries=0)
c.connect()
period = float(sys.argv[2])
lat = []
t_next = time.monotonic()
stop_at = t_next + float(sys.argv[3])
while time.monotonic() < stop_at:
    t0 = time.monotonic()
    c.read_input_registers(0, count=16, device_id=1)
    c.read_input_registers(0, count=25, device_id=2)
    c.read_holding_registers(0, count=6, device_id=3)
    lat.append(time.monotonic() - t0)
    t_next += period
    time.sleep(max(0.0, t_next - time.monotonic()))
lat.sort()
print(lat[len(lat) // 2], lat[int(len(lat) * 0.99)], len(lat), flush=True)
'''


def cpu_seconds(pid: int) -> float:
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


def measure(cmd: list[str], seconds: float, warmup: float, finishes: bool = False) -> tuple[float, str, str]:
    """CPU fraction of one core used by ``cmd`` over ``seconds`` after ``warmup``; its output (``finishes``: let it end by itself)."""
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=ROOT, env=env)
    time.sleep(warmup)
    c0, w0 = cpu_seconds(proc.pid), time.monotonic()
    time.sleep(seconds)
    c1, w1 = cpu_seconds(proc.pid), time.monotonic()
    if proc.poll() is None and not finishes:
        proc.terminate()
    out, err = proc.communicate(timeout=60)
    return (c1 - c0) / (w1 - w0), out, err


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=30.0)
    args = parser.parse_args()
    warmup = 4.0
    server = subprocess.Popen([sys.executable, "-c", SERVER], stdout=subprocess.PIPE, text=True)
    try:
        port = int(server.stdout.readline())
        tmp = Path(tempfile.mkdtemp(prefix="fw-bench-modbus-"))
        site = tmp / "bench-modbus.toml"
        bench_site(site, port)
        bare, out, _ = measure([sys.executable, "-c", BARE_CLIENT, str(port), str(1 / RATE_HZ), str(warmup + args.seconds + 1)], args.seconds, warmup, finishes=True)
        bare_p50, bare_p99, bare_polls = (float(x) for x in out.split())
        log = tmp / "bench.db"
        rec, _, err = measure([sys.executable, "-m", "firewatch", "record", "--site", str(site), "--log", str(log)], args.seconds, warmup)
    finally:
        server.terminate()
        server.wait(10)
    latency = re.search(r"p50 ([0-9.]+) s, p99 ([0-9.]+) s", err)
    polls = re.search(r"(\d+) of (\d+) polls failed", err)
    import sqlite3

    con = sqlite3.connect(log)
    samples = con.execute("SELECT count(*) FROM sample").fetchone()[0]
    con.close()
    channels = TC_C + TC_MV + 1 + PY
    print(f"feed: {channels} channels on 3 Modbus TCP devices (3 requests a poll), polled at {RATE_HZ:g} Hz on loopback, {args.seconds:g} s measured")
    print(f"bare pymodbus client (read and discard): {bare * 100:6.2f} % of one core; request-to-answer p50 {bare_p50 * 1000:.1f} ms, p99 {bare_p99 * 1000:.1f} ms ({int(bare_polls)} polls)")
    print(f"recorder:                                {rec * 100:6.2f} % of one core   ratio to the bare client {rec / max(bare, 1e-9):.1f} (target < 5 %)")
    if latency:
        print(f"poll -> committed latency:               p50 {latency.group(1)} s, p99 {latency.group(2)} s (target p99 < 1 s)")
    if polls:
        print(f"polls: {polls.group(2)}, failed {polls.group(1)}; samples in the log {samples} (expected about {math.floor((warmup + args.seconds) * RATE_HZ)})")


if __name__ == "__main__":
    main()
