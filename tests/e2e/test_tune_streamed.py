"""``firewatch tune`` reads the log a window at a time and answers as a whole-series read does (issue 15)."""

from __future__ import annotations

import math
import shutil
import sqlite3
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from firewatch.firing.tuning import READ_WINDOW_S, TuneData, TuneError, TuneResult, load_data, tune
from firewatch.services.replay import profiles_from_log
from firewatch.simulator import serve
from firewatch.simulator.run import Simulation
from firewatch.simulator.scenario import load_scenario
from firewatch.store.reader import LogReader, Series

WINDOW_S = 1800.0
"""Half-hour windows: the firings below span 30 or more of them."""


class CountingReader:
    """A firing log's reader that notes every series read: the span asked for and the readings returned."""

    def __init__(self, reader: LogReader) -> None:
        self.reader = reader
        self.reads: list[tuple[str, float | None, float | None, int]] = []

    def series(self, channel: str, start_t: float | None = None, end_t: float | None = None) -> Series:
        s = self.reader.series(channel, start_t, end_t)
        self.reads.append((channel, start_t, end_t, int(s.t.size)))
        return s

    def alarms(self) -> list[dict[str, Any]]:
        return self.reader.alarms()

    def firing(self) -> dict[str, Any]:
        return self.reader.firing()


@pytest.fixture(scope="module")
def logs(tmp_path_factory) -> dict[str, Path]:
    """The closed demo kiln (its background a thermocouple), 1000 min, and the open-port furnace's trial (a fixed
    cold background): both span many half-hour windows."""
    where = tmp_path_factory.mktemp("streamed")
    closed, open_port = where / "closed.db", where / "open-port.db"
    serve.to_log(Simulation(load_scenario("closed-kiln").with_changes(emissivity=0.80, duration_s=1000 * 60.0)), closed)
    serve.to_log(Simulation(load_scenario("open-port")), open_port)
    return {"closed-kiln": closed, "open-port": open_port}


def _both(log: Path, window_s: float, **options: Any) -> tuple[TuneData, TuneResult, CountingReader]:
    with LogReader(log) as r:
        site, _ = profiles_from_log(r)
        counting = CountingReader(r)
        data = load_data(counting, site, window_s=window_s)
    return data, tune(data, **options), counting


def _assert_same(whole: tuple[TuneData, TuneResult], streamed: tuple[TuneData, TuneResult]) -> None:
    (a, ra), (b, rb) = whole, streamed
    assert a.start_t == b.start_t and a.t.size == b.t.size
    for name in ("t", "indicated", "ref", "background", "valid"):
        x, y = getattr(a, name), getattr(b, name)
        assert (x is None) == (y is None), name
        if x is not None:
            np.testing.assert_array_equal(x, y, err_msg=name)
    # the reference's rate: the trailing slope's cumulative sums run over one window at a time rather than the whole
    # span, so they round differently (a few uK/h here, against limits of 10 and 90 K/h; common practice, no source)
    np.testing.assert_allclose(a.rate, b.rate, rtol=0.0, atol=1e-4, equal_nan=True)
    assert a.windows == b.windows
    assert a.u_ref == pytest.approx(b.u_ref, rel=1e-12) and a.u_lag == pytest.approx(b.u_lag, rel=1e-9)
    # the answers the command prints: the instrument setting with its interval and every stretch, the ware's
    # emissivity or the sentence why not
    assert ra.instrument.emissivity == rb.instrument.emissivity and ra.instrument.ci95 == rb.instrument.ci95
    assert ra.instrument.basis == rb.instrument.basis and ra.instrument.by_stretch == rb.instrument.by_stretch
    assert ra.hidden_reason == rb.hidden_reason
    assert (ra.ware is None) == (rb.ware is None)
    if ra.ware is not None and rb.ware is not None:
        for name in ("emissivity", "ci95", "transmission", "transmission_ci95", "points_used", "blocks", "residual_c",
                     "model_fits", "note", "emissivity_held"):
            assert getattr(ra.ware, name) == getattr(rb.ware, name), name


@pytest.mark.parametrize("scenario", ["closed-kiln", "open-port"])
def test_streamed_tune_equals_the_whole_series_answer(logs: dict[str, Path], scenario: str) -> None:
    # issue 15: tune reads in windows and keeps only the span where the pyrometer read; the answers are those of
    # one read of each whole series (the reading before issue 15), on a firing spanning many windows
    whole = _both(logs[scenario], math.inf)
    streamed = _both(logs[scenario], WINDOW_S)
    _assert_same(whole[:2], streamed[:2])
    assert whole[1].instrument.by_stretch  # an answer to compare, not two refusals
    windows_read = {(a, b) for _, a, b, _ in streamed[2].reads}
    assert len(windows_read) > 20  # the comparison crossed many window edges
    # at least one reading lies exactly on an edge (the simulator's clock ticks whole seconds): read once, not twice
    edges = {b for _, _, b, _ in streamed[2].reads if b is not None}
    assert edges & set(streamed[0].t.tolist())
    # no read asks for more than one window of firing, nor gets more than its readings (1 Hz, both ends included)
    for channel, a, b, n in streamed[2].reads:
        if a is not None and b is not None:
            assert b - a <= WINDOW_S and n <= WINDOW_S + 1, (channel, a, b, n)
    # with no window, each is one read: the pyrometer whole, then it, its reference and its background over the span
    assert whole[2].reads[0][1:3] == (None, None) and len(whole[2].reads) <= 4


@pytest.mark.parametrize("options", [{"fit_transmission": True}, {"model": "linear"}])
def test_streamed_tune_equals_the_whole_series_answer_with_options(logs: dict[str, Path], options: dict[str, Any]) -> None:
    # issue 15: the ware's fit with the transmission, or linear in temperature, on the open-port trial
    whole = _both(logs["open-port"], math.inf, **options)
    _assert_same(whole[:2], _both(logs["open-port"], READ_WINDOW_S, **options)[:2])


@pytest.mark.parametrize("record", [(None, None), ("+3600", "+7200"), ("-86400", "-86000")])
def test_a_wrong_firing_record_changes_only_the_windows(logs: dict[str, Path], tmp_path: Path,
                                                        record: tuple[str | None, str | None]) -> None:
    # issue 15: the firing record's start and end only place the window edges; a record without them (one window)
    # or one that disagrees with the readings (the first and last windows are open-ended) loses no reading
    log = tmp_path / "record.db"
    shutil.copy(logs["closed-kiln"], log)
    with sqlite3.connect(log) as con:
        (started,) = con.execute("SELECT started_t FROM firing").fetchone()
        values = [None if v is None else started + float(v) for v in record]
        con.execute("UPDATE firing SET started_t = ?, ended_t = ?", values)
    con.close()
    _assert_same(_both(logs["closed-kiln"], math.inf)[:2], _both(log, WINDOW_S)[:2])


def test_a_pyrometer_that_never_read_is_refused_alike_and_nothing_is_kept(tmp_path: Path) -> None:
    # issue 15: a firing that never reaches the pyrometer's range keeps no readings, and says what it said before
    log = tmp_path / "cold.db"
    serve.to_log(Simulation(load_scenario("closed-kiln").with_changes(duration_s=200 * 60.0)), log)
    refusals = []
    for window_s in (math.inf, WINDOW_S):
        with LogReader(log) as r:
            site, _ = profiles_from_log(r)
            data = load_data(r, site, window_s=window_s)
        with pytest.raises(TuneError) as refused:
            tune(data)
        refusals.append(str(refused.value))
        kept = data.t.size
    assert "never read in its range" in refusals[0] and refusals[0] == refusals[1]
    assert kept == 0
