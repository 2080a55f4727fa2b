"""Every command that takes a profile, schedule or scenario, given a hostile one (issue 10 item 5).

A device, a named pipe, a directory, a 50 MiB file, thousands of levels of
nesting, text that is not UTF-8: each command answers with one line naming
the file and the problem and exit status 2 (``check``: 2 for a file it cannot
read, 1 for one it read and found invalid), never a traceback or a hang.
``demo`` takes no profile (it runs the shipped demo scenario), so it is not here.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

from firewatch.cli import main
from firewatch.simulator import serve
from firewatch.simulator.run import Simulation
from firewatch.simulator.scenario import load_scenario
from tests.e2e.helpers import ROOT, env

# hostile file -> (what the one line says, is it a file check cannot read at all)
HOSTILE = {
    "device": ("is a character device, not a regular file", True),
    "fifo": ("is a named pipe (FIFO), not a regular file", True),
    "directory": ("is a directory, not a regular file", True),
    "huge": ("50 MiB, larger than the 1 MiB a profile may be", True),
    "deep-arrays": ("nested deeper than 32 levels", False),
    "deep-tables": ("nested deeper than 32 levels", False),
    "not-utf8": ("not UTF-8 text (byte 0xff)", False),
}


def hostile(tmp_path: Path, kind: str) -> Path:
    """A hostile file of ``kind`` under ``tmp_path``."""
    path = tmp_path / f"{kind}.toml"
    if kind == "device":
        path.symlink_to("/dev/zero")  # read to the end, it never ends
    elif kind == "fifo":
        os.mkfifo(path)  # nobody writes: a blocking open waits for ever
    elif kind == "directory":
        path.mkdir()
    elif kind == "huge":
        with path.open("wb") as f:
            f.truncate(50 * 1024 * 1024)
    elif kind == "deep-arrays":
        path.write_text('[site]\nname = "x"\nvalue = ' + "[" * 5000 + "]" * 5000 + "\n")
    elif kind == "deep-tables":
        path.write_text("[" + ".".join(["site"] * 5000) + "]\n")
    elif kind == "not-utf8":
        path.write_bytes(b'[site]\nname = "\xff"\n')
    return path


@pytest.fixture(scope="module")
def log(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """A short simulated firing: 10 minutes of the demo scenario."""
    path = tmp_path_factory.mktemp("log") / "firing.db"
    serve.to_log(Simulation(load_scenario().with_changes(duration_s=600.0)), path)
    return path


def commands(p: Path, log: Path, tmp_path: Path) -> dict[str, list[str]]:
    scenario = tmp_path / "scenario.toml"
    scenario.write_text(f'[scenario]\nsite = "{p}"\nschedule = "demo-glaze.toml"\n')
    return {
        "record --site": ["record", "--port", "loop://", "--site", str(p), "--log", str(tmp_path / "new.db")],
        "record --schedule": ["record", "--port", "loop://", "--schedule", str(p), "--log", str(tmp_path / "new.db")],
        "sim --scenario": ["sim", "--scenario", str(p), "--stdout"],
        "sim --scenario naming it": ["sim", "--scenario", str(scenario), "--stdout"],
        "replay --site": ["replay", str(log), "--headless", "--site", str(p)],
        "replay --schedule": ["replay", str(log), "--headless", "--schedule", str(p)],
        "tune --site": ["tune", str(log), "--site", str(p)],
        "tune --apply": ["tune", str(log), "--apply", str(p)],
        "watch --site": ["watch", str(log), "--site", str(p)],
    }


@pytest.mark.parametrize("kind", list(HOSTILE))
def test_check(tmp_path: Path, capsys, kind: str) -> None:
    p = hostile(tmp_path, kind)
    message, unusable = HOSTILE[kind]
    assert main(["check", str(p)]) == (2 if unusable else 1)
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith(f"{p}") and message in err[0], err


@pytest.mark.parametrize("kind", list(HOSTILE))
def test_every_command_refuses_in_one_line(tmp_path: Path, capsys, log: Path, kind: str) -> None:
    p = hostile(tmp_path, kind)
    message = HOSTILE[kind][0]
    for name, argv in commands(p, log, tmp_path).items():
        assert main(argv) == 2, name
        out = capsys.readouterr()
        err = out.err.strip().splitlines()
        assert len(err) == 1 and str(p) in err[0] and message in err[0], (name, err)
        assert err[0].startswith(f"firewatch {argv[0]}: "), (name, err)
    assert not (tmp_path / "new.db").exists()  # the recorder never started


@pytest.mark.parametrize("kind", ["fifo", "device"])
def test_real_processes_neither_hang_nor_trace(tmp_path: Path, log: Path, kind: str) -> None:
    # the way an operator meets it: a real process, its exit status and its stderr
    p = hostile(tmp_path, kind)
    runs = {"check": ["check", str(p)], **commands(p, log, tmp_path)}
    for name, argv in runs.items():
        r = subprocess.run([sys.executable, "-m", "firewatch", *argv], cwd=ROOT, env=env(), capture_output=True, text=True, timeout=60, check=False)
        assert r.returncode == 2, (name, r.stderr)
        assert "Traceback" not in r.stderr and len(r.stderr.strip().splitlines()) == 1, (name, r.stderr)
        assert HOSTILE[kind][0] in r.stderr, (name, r.stderr)
