"""``firewatch demo`` in a real terminal under tmux: the screen shows readings that change, and q cleans up."""

from __future__ import annotations

import re
import shutil
import subprocess
import sys
import time
from pathlib import Path

import pytest

from tests.e2e.helpers import ROOT, env

pytestmark = pytest.mark.skipif(shutil.which("tmux") is None, reason="tmux is installed by .ci/run")


def tmux(*args: str) -> str:
    return subprocess.run(["tmux", "-L", "fwtest", *args], capture_output=True, text=True, timeout=30).stdout


def screen() -> str:
    return tmux("capture-pane", "-t", "demo", "-p")


def wait_screen(pattern: str, timeout: float = 60.0) -> str:
    deadline = time.monotonic() + timeout
    text = ""
    while time.monotonic() < deadline:
        text = screen()
        if re.search(pattern, text):
            return text
        time.sleep(0.3)
    raise AssertionError(f"never showed {pattern!r}:\n{text}")


def test_demo_under_tmux(tmp_path: Path) -> None:
    e = env()
    e["XDG_STATE_HOME"] = str(tmp_path / "state")
    e["TERM"] = "xterm-256color"
    log = tmp_path / "demo.db"
    command = f"cd {ROOT} && {sys.executable} -m firewatch demo --speed 120 --log {log}"
    tmux("kill-server")
    subprocess.run(["tmux", "-L", "fwtest", "new-session", "-d", "-s", "demo", "-x", "100", "-y", "30", command],
                   env=e, check=True, timeout=30)
    try:
        wait_screen(r"Cautions")  # the first start on this account
        tmux("send-keys", "-t", "demo", "Enter")
        first = wait_screen(r"LIVE .*tc1|tc1 .*°C")
        wait_screen(r"tc1\s+[0-9.]+ °C")

        def tc1(text: str) -> str:
            match = re.search(r"tc1\s+([0-9.]+) °C", text)
            return match.group(1) if match else ""

        before = tc1(screen())
        deadline = time.monotonic() + 30
        while time.monotonic() < deadline and tc1(screen()) in ("", before):
            time.sleep(0.5)
        after = screen()
        assert tc1(after) not in ("", before), after  # readings change on screen
        assert "monitoring aid" in after and "LIVE" in after
        assert first
        tmux("send-keys", "-t", "demo", "q")
        deadline = time.monotonic() + 20
        while time.monotonic() < deadline and "demo" in tmux("list-sessions"):
            time.sleep(0.3)
        assert "demo" not in tmux("list-sessions")
    finally:
        tmux("kill-server")
    # the demo stopped its simulator and recorder: the log was closed cleanly
    time.sleep(1.0)
    out = subprocess.run(["pgrep", "-f", str(log)], capture_output=True, text=True)
    assert out.stdout.strip() == ""
    import sqlite3

    con = sqlite3.connect(log)
    assert con.execute("SELECT end_reason FROM session").fetchone()[0] == "signal"
