"""Starting firewatch processes for end-to-end tests: real sockets on 127.0.0.1, real pseudo-terminals."""

from __future__ import annotations

import json
import os
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]


def env() -> dict[str, str]:
    e = dict(os.environ)
    e["PYTHONPATH"] = str(ROOT) + os.pathsep + e.get("PYTHONPATH", "")
    e["PYTHONUNBUFFERED"] = "1"
    return e


def firewatch(*args: str, **kw) -> subprocess.Popen:
    return subprocess.Popen(
        [sys.executable, "-m", "firewatch", *args],
        cwd=ROOT, env=env(), stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, **kw,
    )


def run(*args: str, timeout: float = 120) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "firewatch", *args], cwd=ROOT, env=env(), capture_output=True, text=True, timeout=timeout)


def start_sim_tcp(*extra: str, port: int = 0) -> tuple[subprocess.Popen, int]:
    proc = firewatch("sim", "--tcp", f"127.0.0.1:{port}", *extra)
    first = proc.stdout.readline().strip()
    if not first:
        proc.kill()
        raise RuntimeError(f"simulator did not start: {proc.stderr.read()}")
    return proc, int(first.rsplit(":", 1)[1])


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def inspect(log: Path) -> dict:
    out = run("inspect", str(log), "--json")
    assert out.returncode == 0, out.stderr
    return json.loads(out.stdout)


def wait_for(predicate, timeout: float = 30.0, interval: float = 0.1):
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        value = predicate()
        if value:
            return value
        time.sleep(interval)
    raise AssertionError("condition not met in time")


def samples(log: Path) -> int:
    """Committed samples, read the way a viewer does (read-only, short transaction)."""
    from firewatch.store._common import LogError
    from firewatch.store.reader import LogReader

    try:
        with LogReader(log) as r:
            return r.query("SELECT count(*) FROM sample")[0][0]
    except (LogError, Exception):
        return 0


def readable(log: Path) -> bool:
    """The recorder has made ``log`` a firing log a reader opens: it writes the schema, then its version, in two
    transactions, and a reader between them (or before) finds no firing log yet."""
    from firewatch.store._common import LogError
    from firewatch.store.reader import LogReader

    try:
        with LogReader(log):
            return True
    except LogError:
        return False


def stop(proc: subprocess.Popen, sig: int = signal.SIGTERM, timeout: float = 20.0) -> tuple[str, str]:
    if proc.poll() is None:
        proc.send_signal(sig)
    try:
        out, err = proc.communicate(timeout=timeout)
    except subprocess.TimeoutExpired:
        proc.kill()
        out, err = proc.communicate()
    return out, err


RAW_LINES = "((SELECT coalesce(sum(n), 0) FROM raw_block) + (SELECT count(*) FROM raw_line))"
"""SQL: every raw line in the log, compressed in blocks or still waiting (docs/log-format.md)."""
RAW_BAD = "((SELECT coalesce(sum(bad), 0) FROM raw_block) + (SELECT count(*) FROM raw_line WHERE ok = 0))"
"""SQL: the raw lines that were rejected."""


def raw(log: Path) -> list[tuple[bytes, int, str | None]]:
    """Every raw line as the log keeps it: ``(line, ok, reason)``, in order."""
    from firewatch.store.reader import LogReader

    with LogReader(log) as r:
        return [(row[2], row[3], row[4]) for part in r.raw_rows() for row in part]
