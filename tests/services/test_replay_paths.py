"""Replay from the measured values as kept, and from the raw lines parsed again: the same alarms (issue 15).

A replay whose site converts lines as the recorder's did takes the log's measured values as they are
(they are exactly what parsing and converting the raw lines again would give) and computes derived
channels, progress and alarms on from them; another site's replay parses the raw lines again.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from firewatch.services import replay
from firewatch.settings.profile import load_site
from firewatch.store.reader import LogReader
from tests.e2e.helpers import inspect, run


@pytest.fixture(scope="module")
def log(tmp_path_factory: pytest.TempPathFactory) -> Path:
    path = tmp_path_factory.mktemp("replay") / "k.db"
    out = run("sim", "--to-log", str(path), "--minutes", "60", "--fault", "garbage@10:seconds=300,fraction=0.4",
              "--fault", "tc-open@30:channel=tc2", "--fault", "dropout@40:seconds=120")
    assert out.returncode == 0, out.stderr
    return path


def test_both_paths_give_the_recorders_alarms(log: Path) -> None:
    with LogReader(log) as reader:
        site, schedule = replay.profiles_from_log(reader)
        assert replay.as_recorded(reader, site)
        kept = replay._from_kept(reader, site, schedule)
        raw = replay._from_raw(reader, site, schedule)
    assert (kept.lines, kept.malformed, kept.samples, kept.start_t, kept.end_t) == (raw.lines, raw.malformed, raw.samples, raw.start_t, raw.end_t)
    assert replay.alarm_summary(kept) == replay.alarm_summary(raw)
    recorded = [(a["kind"], a["channel"], a["raised_s"], a["message"]) for a in inspect(log)["alarms"]]
    replayed = [(a["kind"], a["channel"], a["raised_s"], a["message"]) for a in replay.alarm_summary(kept)]
    assert recorded == replayed and {k for k, *_ in recorded} >= {"sensor-fault", "no-data"}


def test_another_conversion_parses_the_raw_lines_again(log: Path, tmp_path: Path) -> None:
    with LogReader(log) as reader:
        text = reader.firing()["site_profile"]
    # tc1 read as type N rather than K: the kept values no longer say what this site would measure
    changed = text.replace('type = "K"', 'type = "N"', 1)
    assert changed != text
    path = tmp_path / "n-site.toml"
    path.write_text(changed)
    with LogReader(log) as reader:
        assert not replay.as_recorded(reader, load_site(path))
        assert replay.as_recorded(reader, load_site(f"{log} (site profile in the log)", text=text))
