"""``sim --to-log`` and ``export``: the same pipeline as the recorder, straight into a log, and back out as CSV."""

from __future__ import annotations

import csv
import sqlite3
from pathlib import Path

from tests.e2e.helpers import inspect, run


def test_to_log_and_export(tmp_path: Path) -> None:
    log = tmp_path / "short.db"
    out = run("sim", "--to-log", str(log), "--minutes", "30", "--fault", "tc-open@20:channel=tc2", "--fault", "dropout@10:seconds=20")
    assert out.returncode == 0, out.stderr
    info = inspect(log)
    assert info["samples"]["tc1"] == 1800 - 20  # 30 min at 1 Hz less a 20 s dropout (the scenario's settings)
    assert [g["seconds"] for g in info["gaps"]] == [21.0]
    csv_path = tmp_path / "short.csv"
    exp = run("export", str(log), "--csv", str(csv_path))
    assert exp.returncode == 0, exp.stderr
    with csv_path.open() as fh:
        rows = list(csv.reader(fh))
    header = rows[0]
    assert header[:2] == ["time_utc", "elapsed_s"] and "tc1 [C]" in header and "py1.reconciled [C]" in header and "tc1.rate [C/h]" in header
    assert header[-1] == "flags" and len(rows) == 1 + 1780
    late = rows[-1]
    assert "tc2:open" in late[-1] and late[header.index("tc2 [C]")] == ""
    assert float(late[header.index("tc1 [C]")]) > 30.0


def test_to_log_refuses_existing_recorder_lock(tmp_path: Path) -> None:
    log = tmp_path / "x.db"
    assert run("sim", "--to-log", str(log), "--minutes", "2").returncode == 0
    con = sqlite3.connect(log)
    assert con.execute("SELECT count(*) FROM session").fetchone()[0] == 1
