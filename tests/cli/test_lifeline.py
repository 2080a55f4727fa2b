"""Children that end with the process that started them (issue 10, item 6), with real processes.

A middle process starts a child that watches it, then the middle one is SIGKILLed: no handler of
its runs, so the child has only the kernel's parent-death signal, or its own polling, to notice.
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
from pathlib import Path

import pytest

from tests.e2e.helpers import ROOT, env, wait_for

# the middle process: starts the child, says its pid, then waits to be killed
MIDDLE = """
import os, subprocess, sys, time
child = subprocess.Popen([sys.executable, "-c", sys.argv[1], sys.argv[2], sys.argv[3], str(os.getpid())])
print(child.pid, flush=True)
time.sleep(600)
"""

# the child: watches its parent (by the kernel's signal or by polling only), writes when it noticed
CHILD = """
import os, signal, sys, time
from firewatch.commands._lifeline import stop_with_parent
out, mode, parent = sys.argv[1], sys.argv[2], int(sys.argv[3])
def gone(*_):
    with open(out, "w") as f:
        f.write(mode)
    os._exit(0)
if mode == "kernel":
    signal.signal(signal.SIGUSR2, gone)
    stop_with_parent(parent, lambda: None, sig=signal.SIGUSR2, poll_s=3600)  # so the kernel's signal is what tells
else:
    stop_with_parent(parent, gone, sig=None, poll_s=0.1)
open(out + ".ready", "w").close()
time.sleep(600)
"""


def alive(pid: int) -> bool:
    try:
        with open(f"/proc/{pid}/stat") as f:
            return f.read().rsplit(")", 1)[1].split()[0] != "Z"
    except OSError:
        return False


@pytest.mark.parametrize("mode", ["poll", pytest.param("kernel", marks=pytest.mark.skipif(
    not sys.platform.startswith("linux"), reason="PR_SET_PDEATHSIG is Linux's"))])
def test_child_notices_its_parent_killed(tmp_path: Path, mode: str) -> None:
    out = tmp_path / "noticed"
    middle = subprocess.Popen([sys.executable, "-c", MIDDLE, CHILD, str(out), mode], cwd=ROOT, env=env(),
                              stdout=subprocess.PIPE, text=True)
    child = int(middle.stdout.readline())
    try:
        wait_for(lambda: Path(f"{out}.ready").exists(), timeout=30)  # watching: the parent is still there
        assert not out.exists()
        os.kill(middle.pid, signal.SIGKILL)
        middle.wait(10)
        wait_for(lambda: out.exists() and out.read_text() == mode, timeout=5)
        wait_for(lambda: not alive(child), timeout=5)
    finally:
        if alive(child):
            os.kill(child, signal.SIGKILL)


def test_a_parent_gone_before_the_watch_began_is_noticed_at_once() -> None:
    from firewatch.commands._lifeline import stop_with_parent

    noticed = []
    not_my_parent = os.getpid()  # certainly not this process's parent
    stop_with_parent(not_my_parent, lambda: noticed.append(True), sig=None, poll_s=3600)
    assert noticed == [True]
