"""The compact log (issue 15): measured readings exact and at full rate from SQL, derived ones recomputed as the
recorder computed them, statuses as runs, raw lines in blocks, times found by bisection, old logs upgraded."""

from __future__ import annotations

import hashlib
import shutil
import sqlite3
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from firewatch.firing.pipeline import Pipeline, channel_table
from firewatch.services.recorder import Ingest, attach_alarms
from firewatch.settings.profile import load_site, profiles_dir
from firewatch.settings.schedule import load_schedule
from firewatch.simulator.run import Simulation
from firewatch.simulator.scenario import load_scenario, parse_fault
from firewatch.store.layout import RAW_BLOCK_LINES, STEP_S, pack_raw, unpack_raw
from firewatch.store.reader import LogReader
from firewatch.store.record import load_record
from firewatch.store.view import FiringView
from firewatch.store.writer import LogWriter
from firewatch.transport.native import NativeParser
from tests.e2e.helpers import run

FIXTURE = Path(__file__).parents[1] / "data" / "schema1-firing.db"
MINUTES = 40


@pytest.fixture(scope="module")
def firing(tmp_path_factory: pytest.TempPathFactory) -> tuple[Path, dict[str, np.ndarray], dict[str, np.ndarray], np.ndarray]:
    """40 simulated minutes written the recorder's way in 2-line batches, a thermocouple open from minute 20,
    and what the pipeline computed for every sample (values, statuses, times)."""
    path = tmp_path_factory.mktemp("compact") / "k.db"
    site = load_site(None)
    schedule = load_schedule(profiles_dir() / "demo-glaze.toml")
    sc = load_scenario()
    sc = sc.with_changes(duration_s=MINUTES * 60.0, faults=sc.faults + (parse_fault("tc-open@20:channel=tc2"),))
    opened = [(sc.start_utc + line.sim_s, line.data) for chunk in Simulation(sc).chunks() for line in chunk if not line.dropped]
    writer = LogWriter(path, channel_table(site, schedule), site_text=site.text, schedule_text=schedule.text, clock="device",
                       clock_fn=lambda: sc.start_utc)
    ingest = Ingest(Pipeline(site, schedule, "device"), writer, NativeParser())
    attach_alarms(ingest, site, schedule)
    seen: list = []
    ingest.hooks.append(seen.append)
    for i in range(0, len(opened), 2):
        ingest.feed(opened[i : i + 2])
        writer.commit()
    ingest.flush()
    writer.close()
    batches = [b for b in seen if b.samples]
    values = {name: np.concatenate([b.values[name] for b in batches]) for name in batches[0].values}
    status = {name: np.concatenate([b.status[name] for b in batches]) for name in batches[0].values}
    times = np.concatenate([b.times for b in seen if b.samples])
    return path, values, status, times


def test_every_measured_reading_is_kept_exactly_and_sql_gives_it_at_full_rate(firing) -> None:
    path, values, status, times = firing
    con = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
    try:
        for name in ("cj", "tc1", "tc2", "py1", "py2"):
            rows = con.execute("SELECT t, value, status FROM readings WHERE channel = ? ORDER BY t", (name,)).fetchall()
            got = np.array([(t, np.nan if v is None else v, s) for t, v, s in rows], dtype=float)
            assert got.shape[0] == times.size == MINUTES * 60  # full rate: one a simulated second
            assert np.array_equal(got[:, 0], times)
            assert np.array_equal(got[:, 1], values[name], equal_nan=True)  # bit for bit: float64 kept as float64
            assert np.array_equal(got[:, 2].astype(int), status[name])
    finally:
        con.close()


def test_statuses_are_runs_a_long_open_is_one(firing) -> None:
    path, _, status, _ = firing
    con = sqlite3.connect(f"file:{path}?mode=ro", uri=True)
    try:
        runs = con.execute("SELECT f.first_id, f.last_id, f.status FROM flag f JOIN channel c ON c.id = f.channel_id WHERE c.name = 'tc2'").fetchall()
    finally:
        con.close()
    # one run for the 20 minutes open, written across 600 batches of two lines
    assert len(runs) == 1 and runs[0][2] == 1 and runs[0][1] - runs[0][0] + 1 == int((status["tc2"] == 1).sum()) > 1100


def test_derived_channels_are_recomputed_as_the_recorder_computed_them(firing) -> None:
    path, values, status, _ = firing
    with LogReader(path) as reader:
        for name in ("py1.reconciled", "py1.u", "py1.divergence", "py1.allowed", "py2.reconciled", "tc1.rate", "tc2.rate"):
            s = reader.series(name)
            assert np.array_equal(s.status, status[name]), name
            if name.endswith(".rate"):
                # the trailing sums start where the read starts: equal to rounding (regression tolerance, no source)
                np.testing.assert_allclose(s.value, values[name], rtol=1e-9, atol=1e-6)
            else:
                assert np.array_equal(s.value, values[name], equal_nan=True), name
        # progress: every STEP_S seconds of the time line, exactly as computed
        seg = reader.series("plan.setpoint")
        assert seg.t.size == np.unique(np.floor(firing[3] / STEP_S)).size  # the first sample of every STEP_S seconds
        idx = np.searchsorted(firing[3], seg.t)
        assert np.array_equal(seg.value, values["plan.setpoint"][idx], equal_nan=True)


def test_a_moment_in_replay_and_the_live_moment_show_the_recorders_values(firing) -> None:
    path, values, _, times = firing
    view = FiringView(path)
    try:
        i = 1500
        m = view.moment(float(times[i]))
        for name in ("tc1", "tc2", "tc1.rate", "py1", "py1.reconciled", "py1.u", "plan.segment"):
            np.testing.assert_allclose(m.value(name), values[name][i], rtol=1e-12, err_msg=name)  # NaN matches NaN
        live = view.live(now_utc=float(times[-1]))
        for name in values:
            assert np.array_equal(live.value(name), values[name][-1], equal_nan=True), name  # the recorder's newest, as written
    finally:
        view.close()


def test_raw_lines_are_compressed_in_blocks_and_read_back_in_order(firing) -> None:
    path, *_ = firing
    with LogReader(path) as reader:
        blocks = reader.query("SELECT n FROM raw_block ORDER BY id")
        waiting = reader.query("SELECT count(*) FROM raw_line")[0][0]
        rows = [r for part in reader.raw_rows() for r in part]
        lo, hi = reader.raw_span()
        middle = [r for part in reader.raw_rows(100, 2000) for r in part]
    assert [n for (n,) in blocks][:-1] == [RAW_BLOCK_LINES] * (len(blocks) - 1) and waiting == 0  # the writer's close packs the rest
    assert [r[0] for r in rows] == list(range(1, MINUTES * 60 + 1)) == list(range(lo + 1, hi + 1))
    assert all(r[2].startswith(b"FW1 ") and r[3] == 1 for r in rows)
    assert [r[0] for r in middle] == list(range(101, 2001))


def test_a_raw_block_keeps_bytes_reasons_and_empty_lines() -> None:
    rows = [(7, 1.5, b"FW1 0 x *0000", 1, None), (8, 2.25, b"", 0, "empty line"), (9, 3.0, b"\xff\x00garbage", 0, "not text"),
            (10, 4.0, b"has\na newline", 1, None)]
    packed = pack_raw(rows)
    assert packed[:4] == (7, 10, 4, 2)
    assert unpack_raw(packed[0], packed[4], packed[5], packed[6], packed[8], packed[9]) == rows


@settings(max_examples=60, deadline=None)
@given(st.lists(st.floats(min_value=0.0, max_value=5.0), min_size=1, max_size=40), st.floats(min_value=-2.0, max_value=120.0),
       st.sets(st.integers(min_value=0, max_value=39), max_size=10))
def test_a_time_is_found_by_bisection_as_a_scan_would(tmp_path_factory, steps: list[float], probe: float, holes: set[int]) -> None:
    path = tmp_path_factory.mktemp("bisect") / "b.db"
    con = sqlite3.connect(path)
    con.executescript("CREATE TABLE meta(key TEXT PRIMARY KEY, value TEXT); INSERT INTO meta VALUES ('schema_version', '3');"
                      "CREATE TABLE sample(id INTEGER PRIMARY KEY, session_id INTEGER, t REAL);")
    t = np.cumsum(steps)  # the time line never runs back; equal times happen
    rows = [(i + 1, 1, float(x)) for i, x in enumerate(t) if i not in holes or i == 0]
    con.executemany("INSERT INTO sample VALUES (?, ?, ?)", rows)
    con.commit()
    con.close()
    with LogReader(path) as reader:
        before = [r[0] for r in rows if r[2] <= probe]
        after = [r[0] for r in rows if r[2] >= probe]
        assert reader.sample_at(probe) == (before[-1] if before else None)
        assert reader.sample_at(probe, after=True) == (after[0] if after else None)


def test_upgrade_log_keeps_every_reading_and_the_digest_and_never_touches_the_original(tmp_path: Path) -> None:
    old = tmp_path / "old.db"
    shutil.copy(FIXTURE, old)
    before = hashlib.sha256(old.read_bytes()).hexdigest()
    new = tmp_path / "new.db"
    out = run("upgrade-log", str(old), str(new))
    assert out.returncode == 0, out.stderr
    assert hashlib.sha256(old.read_bytes()).hexdigest() == before
    assert load_record(old).digest == load_record(new).digest
    src = sqlite3.connect(f"file:{old}?mode=ro", uri=True)
    dst = sqlite3.connect(f"file:{new}?mode=ro", uri=True)
    try:
        q = ("SELECT c.name, r.t, r.value, r.status FROM reading r JOIN channel c ON c.id = r.channel_id "
             "WHERE c.kind IN ('thermocouple', 'cold_junction', 'pyrometer') ORDER BY c.name, r.sample_id")
        assert src.execute(q).fetchall() == dst.execute(q).fetchall()
        for table in ("event", "gap", "alarm", "alarm_state", "session"):
            assert src.execute(f"SELECT count(*) FROM {table}").fetchone() == dst.execute(f"SELECT count(*) FROM {table}").fetchone(), table
        charted = ("SELECT c.name, m.minute, m.lo, m.hi, m.n FROM trend_minute m JOIN channel c ON c.id = m.channel_id "
                   "WHERE c.kind IN ('thermocouple', 'cold_junction', 'pyrometer') OR c.name LIKE '%.reconciled' ORDER BY c.name, m.minute")
        assert src.execute(charted).fetchall() == dst.execute(charted).fetchall()  # the envelopes the charts draw
    finally:
        src.close()
        dst.close()
    with LogReader(new) as reader:
        assert [r[2] for part in reader.raw_rows() for r in part] == [bytes(r[0]) for r in
                                                                     sqlite3.connect(f"file:{old}?mode=ro", uri=True).execute(
                                                                         "SELECT line FROM raw_line ORDER BY id")]
    again = run("upgrade-log", str(old), str(new))
    assert again.returncode == 2 and "already exists" in again.stderr and again.stderr.count("\n") == 1
    compact = run("upgrade-log", str(new), str(tmp_path / "x.db"))
    assert compact.returncode == 2 and "already in the compact layout" in compact.stderr
    missing = run("upgrade-log", str(tmp_path / "nope.db"), str(tmp_path / "y.db"))
    assert missing.returncode == 2 and "no such firing log" in missing.stderr
