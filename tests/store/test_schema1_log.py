"""Old logs keep working (issue 15, item 2; also guards issue 10's heartbeat, which moved the schema to version 2).

``tests/data/schema1-firing.db`` is a true schema-1 log, written by firewatch at commit 9b01da5 with
``sim --to-log --minutes 20 --seed 7 --fault tc-open@10 --fault garbage@5``. The expected counts are
regression values read from that file with the sqlite3 shell when it was committed.
"""

from __future__ import annotations

import hashlib
import json
import shutil
import sqlite3
from pathlib import Path

import pytest

from firewatch.store.view import FiringView
from tests.e2e.helpers import run

FIXTURE = Path(__file__).parents[1] / "data" / "schema1-firing.db"
SAMPLES = 1180  # regression value: SELECT count(*) FROM sample
LINES, MALFORMED = 1200, 20  # regression values: raw_line rows, and those with ok = 0
ALARMS = 2  # regression value: SELECT count(*) FROM alarm


@pytest.fixture
def old(tmp_path: Path) -> Path:
    path = tmp_path / "old.db"
    shutil.copy(FIXTURE, path)
    return path


def sha(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_the_fixture_is_a_schema_1_log() -> None:
    con = sqlite3.connect(f"file:{FIXTURE}?mode=ro", uri=True)
    try:
        assert con.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchone() == ("1",)
        columns = {r[1] for r in con.execute("PRAGMA table_info(session)")}
        assert "heartbeat_utc" not in columns
    finally:
        con.close()


def test_readers_read_it_and_leave_it_as_it_was(old: Path, tmp_path: Path) -> None:
    before = sha(old)
    out = run("inspect", str(old), "--json")
    assert out.returncode == 0, out.stderr
    info = json.loads(out.stdout)
    assert info["malformed_lines"] == MALFORMED and len(info["alarms"]) == ALARMS
    assert info["integrity"]["ok"] is True
    assert info["summary"] is not None and len(info["summary"]["readings_sha256"]) == 64
    csv_path = tmp_path / "old.csv"
    out = run("export", str(old), "--csv", str(csv_path))
    assert out.returncode == 0, out.stderr
    assert len(csv_path.read_text().splitlines()) == SAMPLES + 1  # a header and one row per sample
    out = run("replay", str(old), "--headless", "--json")
    assert out.returncode == 0, out.stderr
    assert json.loads(out.stdout)["lines"] == LINES
    out = run("report", str(old), "-o", str(tmp_path / "old.html"))
    assert out.returncode == 0, out.stderr
    assert info["summary"]["readings_sha256"] in (tmp_path / "old.html").read_text()  # the record names its log's readings
    out = run("tune", str(old), "--json")
    assert out.returncode in (0, 1) and "Traceback" not in out.stderr, out.stderr  # 20 min may hold no usable stretch
    view = FiringView(old)
    try:
        moment = view.moment()
        assert moment.value("tc1") == moment.value("tc1")  # a number, not NaN: the view reads schema-1 readings
    finally:
        view.close()
    assert sha(old) == before  # nothing that reads wrote into it


def test_a_writer_continuing_it_converts_it_and_keeps_the_original(old: Path) -> None:
    before = sha(old)
    out = run("sim", "--to-log", str(old), "--minutes", "2")
    assert out.returncode == 0, out.stderr
    kept = old.with_name(old.name + ".schema1")
    assert sha(kept) == before  # the original, byte for byte
    con = sqlite3.connect(f"file:{old}?mode=ro", uri=True)
    try:
        assert con.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchone() == ("3",)
        assert con.execute("SELECT type FROM sqlite_master WHERE name = 'reading'").fetchone() == ("view",)
        assert con.execute("SELECT count(*) FROM session").fetchone()[0] == 2
        assert con.execute("SELECT count(*) FROM sample").fetchone()[0] > SAMPLES
    finally:
        con.close()


def test_a_recorder_continuing_it_converts_it_and_says_where_the_original_is(old: Path) -> None:
    before = sha(old)
    out = run("record", "--port", "loop://", "--log", str(old), "--for", "1")
    assert out.returncode == 0, out.stderr
    kept = old.with_name(old.name + ".schema1")
    assert sha(kept) == before
    assert f"the original is kept as {kept}" in out.stderr
    info = json.loads(run("inspect", str(old), "--json").stdout)
    assert info["layout"] == {"schema": 3, "converted_from_schema": None} and info["sessions"] == 2
    assert info["samples"]["tc1"] == SAMPLES  # loop:// sends nothing: every reading of the old log, none lost
    assert info["summary"]["readings_sha256"] == json.loads(run("inspect", str(kept), "--json").stdout)["summary"]["readings_sha256"]
