"""Every command survives a damaged, foreign or missing log (issue 10, item 5).

Real logs made by ``firewatch sim --to-log``, spoiled on disk (tests/damage.py), and every
command run as a subprocess: one line on stderr naming the file and the problem, exit status 2,
no traceback, and the file itself left exactly as it was (nothing is written into a damaged log).
Before issue 10 inspect, replay, export, tune and record gave a Python traceback here.
"""

from __future__ import annotations

import hashlib
import json
import shutil
import subprocess
import sys
import time
from pathlib import Path

import pytest

from tests.damage import not_sqlite, overwrite_middle, spoil_table, truncate_half
from tests.e2e.helpers import ROOT, env, run


@pytest.fixture(scope="module")
def sound(tmp_path_factory) -> Path:
    """Thirty simulated minutes of the demo firing, made as a user would."""
    log = tmp_path_factory.mktemp("damage") / "sound.db"
    out = run("sim", "--to-log", str(log), "--minutes", "30")
    assert out.returncode == 0, out.stderr
    return log


def make(kind: str, sound: Path, where: Path) -> Path:
    path = where / f"{kind}.db"
    if kind == "middle":
        overwrite_middle(sound, path)
    elif kind == "truncated":
        truncate_half(sound, path)
    elif kind == "not-sqlite":
        not_sqlite(path)
    elif kind == "empty":
        path.write_bytes(b"")
    elif kind == "directory":
        path.mkdir()
    elif kind != "missing":
        raise ValueError(kind)
    return path


# what the one line must say, by kind of damage
SAYS = {
    "middle": "the firing log is damaged",
    "truncated": "the firing log is damaged",
    "not-sqlite": "not a firing log",
    "empty": "an empty file, not a firing log",
    "directory": "not a regular file",
    "missing": "no such firing log",
}

READERS = [
    ["inspect"],
    ["inspect", "--json"],
    ["export", "--csv", "{out}"],
    ["replay", "--headless"],
    ["replay", "--headless", "--json"],
    ["replay"],  # the dashboard: refused before any screen opens
    ["tune"],
    ["tune", "--json"],
]


def fingerprint(path: Path) -> str:
    if path.is_dir():
        return "directory"
    if not path.exists():
        return "missing"
    return hashlib.sha256(path.read_bytes()).hexdigest()


def one_line_refusal(out: subprocess.CompletedProcess, path: Path, says: str, argv: list[str]) -> None:
    assert out.returncode == 2, (argv, out.returncode, out.stderr)
    assert "Traceback" not in out.stderr, (argv, out.stderr)
    lines = out.stderr.strip().splitlines()
    assert len(lines) == 1, (argv, out.stderr)
    assert str(path) in lines[0] and says in lines[0], (argv, lines[0])


@pytest.mark.parametrize("kind", list(SAYS))
def test_every_reader_refuses_with_one_line(kind: str, sound: Path, tmp_path: Path) -> None:
    log = make(kind, sound, tmp_path)
    before = fingerprint(log)
    for argv in READERS:
        argv = [a.format(out=tmp_path / "out.csv") for a in argv]
        out = run(argv[0], str(log), *argv[1:], timeout=60)
        one_line_refusal(out, log, SAYS[kind], argv)
        if argv == ["inspect", "--json"] and kind == "middle":
            # inspect still reports the integrity check, in JSON too
            report = json.loads(out.stdout)
            assert report["integrity"]["ok"] is False and report["integrity"]["problems"]
    if kind != "middle":  # watch opens its screen on a log that opens; those cases are under tmux below
        one_line_refusal(run("watch", str(log), timeout=60), log, SAYS[kind], ["watch"])
    assert fingerprint(log) == before


@pytest.mark.parametrize("kind", ["middle", "truncated", "not-sqlite", "directory"])
def test_writers_refuse_to_continue_a_damaged_log(kind: str, sound: Path, tmp_path: Path) -> None:
    log = make(kind, sound, tmp_path)
    before = fingerprint(log)
    for argv in (["record", "--port", "loop://", "--for", "1", "--log", str(log)], ["sim", "--to-log", str(log), "--minutes", "1"]):
        one_line_refusal(run(*argv, timeout=60), log, SAYS[kind], argv)
    assert fingerprint(log) == before  # nothing written into it


def test_inspect_reports_integrity_beside_what_it_can_read(sound: Path, tmp_path: Path) -> None:
    out = run("inspect", str(sound), "--json")
    assert out.returncode == 0, out.stderr
    assert json.loads(out.stdout)["integrity"] == {"check": "PRAGMA quick_check", "ok": True, "problems": []}
    text = run("inspect", str(sound))
    assert text.returncode == 0 and "ok (SQLite quick_check)" in text.stdout
    # damage in a table the summary does not read: the summary and the damage, exit status 2
    log = spoil_table(sound, tmp_path / "trend.db", "trend_minute")
    out = run("inspect", str(log), "--json")
    report = json.loads(out.stdout)
    assert out.returncode == 2 and report["samples"]["tc1"] == 1800  # regression value: 30 min at 1 Hz
    assert report["integrity"]["ok"] is False and report["integrity"]["problems"]
    assert len(out.stderr.strip().splitlines()) == 1 and "the firing log is damaged" in out.stderr
    text = run("inspect", str(log))
    assert text.returncode == 2 and "DAMAGED (SQLite quick_check)" in text.stdout


# -- watch, in a real terminal ----------------------------------------------------------------

def tmux(*args: str) -> str:
    return subprocess.run(["tmux", "-L", "fwdamage", *args], capture_output=True, text=True, timeout=30).stdout


@pytest.mark.skipif(shutil.which("tmux") is None, reason="tmux is installed by .ci/run")
def test_watch_on_a_damaged_log_ends_with_the_message(sound: Path, tmp_path: Path) -> None:
    # issue 10: watch waited for readings forever on a damaged log
    log = spoil_table(sound, tmp_path / "readings.db", "sample")
    e = env()
    e["XDG_STATE_HOME"] = str(tmp_path / "state")  # the cautions show first, over the dashboard
    e["TERM"] = "xterm-256color"
    tmux("kill-server")
    # the pane stays after the command ends, so that its last words and exit status can be read
    # (the shell says the status: tmux 3.3's own #{pane_dead_status} is sometimes empty)
    subprocess.run(["tmux", "-L", "fwdamage", "new-session", "-d", "-s", "w", "-x", "100", "-y", "30",
                    f"cd {ROOT} && {sys.executable} -m firewatch watch {log}; echo \"exit status $?\"", ";",
                    "set-option", "-t", "w", "remain-on-exit", "on"], env=e, check=True, timeout=30)
    try:
        deadline = time.monotonic() + 30
        screen = ""
        while time.monotonic() < deadline and "exit status" not in screen:
            time.sleep(0.2)
            screen = tmux("capture-pane", "-p", "-J", "-S", "-", "-t", "w")
    finally:
        tmux("kill-server")
    assert "exit status 2" in screen, screen
    assert f"firewatch watch: {log}: the firing log is damaged" in screen and "Traceback" not in screen
