"""``replay --headless``: the same alarms again, other settings give other alarms, and the log is untouched."""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

from firewatch.settings.profile import profiles_dir
from tests.e2e.helpers import inspect, run


def test_replay_headless(tmp_path: Path) -> None:
    log = tmp_path / "drift.db"
    assert run("sim", "--to-log", str(log), "--minutes", "780", "--fault", "tc-drift@600:channel=tc2,rate=6").returncode == 0
    before = hashlib.sha256(log.read_bytes()).hexdigest()
    recorded = inspect(log)["alarms"]
    out = run("replay", str(log), "--headless", "--json")
    assert out.returncode == 0, out.stderr
    again = json.loads(out.stdout)
    key = lambda a: (a["kind"], a["channel"], a["cause"], round(a["raised_s"]))  # noqa: E731
    assert [key(a) for a in again["alarms"]] == [key(a) for a in recorded]
    assert again["recorded_alarms"] == len(recorded) and again["lines"] == 780 * 60
    # a tighter band: would it have caught the drift sooner?
    tight = tmp_path / "tight.toml"
    tight.write_text((profiles_dir() / "demo-site.toml").read_text().replace("divergence_k = 3.0", "divergence_k = 2.0").replace("divergence_clear_k = 2.0", "divergence_clear_k = 1.5"))
    out = run("replay", str(log), "--headless", "--json", "--site", str(tight))
    sooner = json.loads(out.stdout)["alarms"]
    first = lambda alarms: min(a["raised_s"] for a in alarms if a["kind"] == "divergence")  # noqa: E731
    assert first(sooner) < first(recorded)
    people = run("replay", str(log), "--headless")
    assert people.returncode == 0 and "The log was not changed" in people.stdout
    assert hashlib.sha256(log.read_bytes()).hexdigest() == before


def test_inspect_alarm_fields(tmp_path: Path) -> None:
    log = tmp_path / "open.db"
    assert run("sim", "--to-log", str(log), "--minutes", "40", "--fault", "tc-open@30:channel=tc2").returncode == 0
    alarms = inspect(log)["alarms"]
    assert len(alarms) == 1
    a = alarms[0]
    assert set(a) >= {"kind", "cause", "channel", "priority", "raised_s", "cleared_s", "states"}
    assert (a["kind"], a["channel"], a["cause"], a["priority"]) == ("sensor-fault", "tc2", "open-circuit", "high")
    assert 1800 <= a["raised_s"] <= 1810 and a["cleared_s"] is None
    assert a["states"][0]["state"] == "active-unacknowledged"


def test_replay_bad_input(tmp_path: Path) -> None:
    out = run("replay", str(tmp_path / "missing.db"), "--headless")
    assert out.returncode == 2 and "no such firing log" in out.stderr
