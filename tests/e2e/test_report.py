"""``firewatch report`` (issue 14, item 4): the firing record's numbers against the log, and the PDF read back.

The log is a short firing recorded through the recorder's own path with an
operator at work (tests/e2e/report_firing.py). Expected numbers are
computed here straight from the log's readings with sqlite3 and numpy,
independently of firewatch's record; the PDF is read back with Debian's
poppler-utils (pdftotext, pdftoppm, pdfinfo), which .ci/run installs.
"""

from __future__ import annotations

import contextlib
import io
import re
import shutil
import sqlite3
import subprocess
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest

from firewatch.firing.record import FiringRecord
from firewatch.store.reader import LogReader
from firewatch.store.record import load_record
from tests.e2e.helpers import ROOT, inspect, run
from tests.e2e.report_firing import ENGINEER, OPERATOR, RESTART_LOST_S, record_firing

BERLIN_START = "Sat 14 Mar 2026, 06:00:01 CET"
"""The scenario starts at 05:00:00Z (tests/data/report-scenario.toml) and the first reading is 1 s later; Berlin keeps
CET, UTC+01:00, until the last Sunday of March (EU summer-time rule, as the IANA tz database encodes it)."""


@pytest.fixture(scope="module")
def firing(tmp_path_factory: pytest.TempPathFactory) -> Path:
    log = tmp_path_factory.mktemp("report") / "kiln3-test.db"
    record_firing(log)
    return log


@pytest.fixture(scope="module")
def berlin(tmp_path_factory: pytest.TempPathFactory) -> Path:
    site = tmp_path_factory.mktemp("site") / "berlin-site.toml"
    text = (ROOT / "profiles" / "demo-site.toml").read_text()
    site.write_text(text.replace("[site]\n", '[site]\ntimezone = "Europe/Berlin"\n', 1))
    return site


@pytest.fixture(scope="module")
def record(firing: Path) -> FiringRecord:
    return load_record(firing)


def readings(log: Path, channel: str) -> tuple[np.ndarray, np.ndarray]:
    """A channel as the log gives it: measured ones as kept, derived ones recomputed (docs/log-format.md)."""
    with LogReader(log) as reader:
        series = reader.series(channel)
    return series.t, series.value


def sql(log: Path, query: str, params: tuple = ()) -> list[tuple]:
    con = sqlite3.connect(f"file:{log}?mode=ro", uri=True)
    try:
        return con.execute(query, params).fetchall()
    finally:
        con.close()


# -- the numbers, against the log -----------------------------------------------------------
def test_peak_time_above_and_hold_against_the_readings(firing: Path, record: FiringRecord) -> None:
    t, ref = readings(firing, "tc2")
    i = int(np.nanargmax(ref))
    assert record.peak is not None and (record.peak.value_c, record.peak.t) == (ref[i], t[i])
    threshold = 760.0 - 10.0  # the schedule's top target (tests/data/report-schedule.toml) less 10 K, as issue 14 asks
    dt_ = np.diff(t)
    above_both = np.sum(np.where((ref[:-1] > threshold) & (ref[1:] > threshold) & (dt_ <= 5.0), dt_, 0.0))
    above_either = np.sum(np.where(((ref[:-1] > threshold) | (ref[1:] > threshold)) & (dt_ <= 5.0), dt_, 0.0))
    assert record.time_above_s is not None and above_both <= record.time_above_s <= above_either and above_both > 600.0
    (hold,) = record.holds
    assert hold.name == "soak" and hold.planned_s == 15 * 60.0 and hold.reached
    inside = (t >= hold.start_t) & (t <= hold.end_t)
    assert np.nanmax(np.abs(ref[inside] - 760.0)) <= 5.0  # the whole stretch within 5 K of the target
    before, after = np.flatnonzero(t < hold.start_t)[-1], np.flatnonzero(t > hold.end_t)[0]
    assert abs(ref[before] - 760.0) > 5.0 and abs(ref[after] - 760.0) > 5.0  # and no longer
    assert hold.achieved_s == hold.end_t - hold.start_t >= hold.planned_s


def test_rates_through_the_critical_range_against_the_readings(firing: Path, record: FiringRecord) -> None:
    t, ref = readings(firing, "tc2")
    heat, cool = record.passages
    assert (heat.direction, cool.direction) == ("heating", "cooling")
    for p, outside_before, outside_after in ((heat, ref < 550.0, ref >= 600.0), (cool, ref > 600.0, ref <= 550.0)):
        last_out = t[np.flatnonzero((t < p.enter_t) & outside_before)[-1]]
        first_out = t[np.flatnonzero((t > p.leave_t) & outside_after)[0]]
        # the crossing times lie between the readings either side of them, so the mean rate is bracketed
        assert last_out <= p.enter_t and p.leave_t <= first_out
        assert 50.0 / (first_out - last_out) * 3600.0 <= p.mean_rate_c_per_h
        assert p.mean_rate_c_per_h == pytest.approx(50.0 / (p.leave_t - p.enter_t) * 3600.0)
    # the small test kiln climbs through at full power, far over the 400 degC/h limit, and cools within it
    assert not heat.within and heat.mean_rate_c_per_h > 400.0
    assert cool.within and cool.fastest_c_per_h < 400.0
    # the recorder's own rate-limit alarm agrees with the verdict
    raised = sql(firing, "SELECT raised_t FROM alarm WHERE kind = 'rate-limit'")
    assert raised and heat.enter_t <= raised[0][0] <= heat.leave_t + 300.0


def test_deviation_divergence_gaps_and_lines_against_the_log(firing: Path, record: FiringRecord) -> None:
    value, t = sql(firing, "SELECT value, t FROM readings WHERE channel = 'plan.deviation' AND value IS NOT NULL ORDER BY abs(value) DESC LIMIT 1")[0]
    assert record.deviation is not None and (record.deviation.value_k, record.deviation.t) == (value, t)
    for stats in record.divergence:
        _, div = readings(firing, f"{stats.pyrometer}.divergence")
        _, allowed = readings(firing, f"{stats.pyrometer}.allowed")
        ok = np.isfinite(div) & np.isfinite(allowed)
        assert stats.n == ok.sum() and stats.mean_k == pytest.approx(div[ok].mean()) and stats.sd_k == pytest.approx(div[ok].std(ddof=1))
        assert stats.largest_k == div[ok][np.argmax(np.abs(div[ok]))]
        # one reading a second: time outside is the count of readings outside, less those just before a gap
        outside = int((np.abs(div[ok]) > allowed[ok]).sum())
        assert outside - 2 <= stats.outside_s <= outside
    py1 = next(d for d in record.divergence if d.pyrometer == "py1")
    assert py1.outside_s > 600.0  # the fouling window pushes py1 out of its allowance for a long time
    gaps = sql(firing, "SELECT start_t, end_t, reason FROM gap ORDER BY start_t")
    assert [(g.start_t, g.end_t, g.reason) for g in record.gaps] == gaps
    assert [g.reason for g in record.gaps] == ["no data", "recorder restart"]
    assert record.gaps[1].seconds == pytest.approx(RESTART_LOST_S + 1.0, abs=1.0)
    lines, malformed = sql(firing, "SELECT (SELECT coalesce(sum(n), 0) FROM raw_block) + (SELECT count(*) FROM raw_line), "
                                   "(SELECT coalesce(sum(bad), 0) FROM raw_block) + (SELECT count(*) FROM raw_line WHERE ok = 0)")[0]
    assert (record.lines, record.malformed) == (lines, malformed) and malformed > 0
    assert [s.end_reason for s in record.sessions] == ["stopped (SIGTERM)", "simulation ended"]


def test_segments_follow_the_recorded_progress(firing: Path, record: FiringRecord) -> None:
    for seg in record.segments:
        first = sql(firing, "SELECT min(t) FROM readings WHERE channel = 'plan.segment' AND value >= ?", (seg.index,))[0][0]
        assert seg.entered_t == first
    done = sql(firing, "SELECT min(t) FROM readings WHERE channel = 'plan.segment' AND value >= 3")[0][0]
    assert record.schedule_done_t == done is not None


def test_alarm_lifecycles_and_notes(record: FiringRecord) -> None:
    by_kind = {a.kind: a for a in record.alarms}
    assert [s.by for s in by_kind["sensor-fault"].acknowledged] == [OPERATOR]
    assert [s.by for s in by_kind["no-data"].acknowledged] == [OPERATOR]
    (shelf,) = by_kind["divergence"].shelves
    assert (shelf.by, shelf.reason) == (ENGINEER, "window fouled; cleaning it after the firing")
    assert shelf.until_t == pytest.approx(shelf.t + 1800.0, abs=1.0)  # shelved for 30 minutes (report_firing.py)
    assert [(n.text, n.source) for n in record.notes] == [
        ("Cones 6 and 7 on the middle shelf; bottom shelf empty", OPERATOR),
        ("Sight window looks smoky (see py1)", ENGINEER),
    ]


# -- the digest ---------------------------------------------------------------------------
def _documented_recipe() -> str:
    doc = (ROOT / "docs" / "log-format.md").read_text()
    section = doc.split("## The readings digest", 1)[1]
    return re.search(r"```python\n(.*?)```", section, re.DOTALL).group(1)


def test_digest_is_the_documented_one_and_covers_only_measured_readings(firing: Path, record: FiringRecord, tmp_path: Path) -> None:
    out = io.StringIO()
    with contextlib.redirect_stdout(out):
        exec(_documented_recipe().replace("kiln3.db", str(firing)), {})  # the recipe in docs/log-format.md, as printed
    assert out.getvalue().strip() == record.digest
    assert inspect(firing)["summary"]["readings_sha256"] == record.digest

    copy = tmp_path / "copy.db"
    shutil.copy(firing, copy)
    con = sqlite3.connect(copy)
    # what firewatch derived is not a reading the instruments gave: no change (the same readings in the earlier
    # layout give the same digest too: tests/store/test_compact_layout.py)
    con.execute("UPDATE latest SET value = value + 1")
    for (col,) in con.execute("SELECT 'p' || id FROM channel WHERE kind = 'progress'").fetchall():
        con.execute(f"UPDATE step SET {col} = {col} + 1")
    con.execute("UPDATE trend_minute SET lo = lo + 1")
    con.commit()
    assert load_record(copy).digest == record.digest
    # one measured value changed by a thousandth of a degree: a different digest
    (col,) = con.execute("SELECT 'm' || id FROM channel WHERE name = 'tc2'").fetchone()
    con.execute(f"UPDATE sample SET {col} = {col} + 0.001 WHERE id = 100")
    con.commit()
    con.close()
    assert load_record(copy).digest != record.digest


# -- the report files -----------------------------------------------------------------------
def _pdf_text(pdf: Path) -> str:
    return subprocess.run(["pdftotext", "-layout", str(pdf), "-"], capture_output=True, text=True, check=True).stdout


def _page_png(pdf: Path, page: int, out: Path) -> np.ndarray:
    """A page rendered with pdftoppm at 50 dpi, as grey levels 0..1."""
    subprocess.run(["pdftoppm", "-r", "50", "-gray", "-png", "-f", str(page), "-l", str(page), "-singlefile", str(pdf), str(out)], check=True)
    from matplotlib import image

    img = image.imread(f"{out}.png")
    return img if img.ndim == 2 else img[..., 0]


def _plot_frame(page: np.ndarray) -> tuple[int, int, int, int]:
    """Rows and columns of the chart's frame: the first two long dark lines below the title's rule, and the sides between them."""
    h = page.shape[0]
    rows = [int(r) for r in np.flatnonzero((page < 0.5).mean(axis=1) > 0.6) if 0.12 * h < r < 0.7 * h]
    top, bottom = rows[0], rows[1]
    cols = np.flatnonzero((page[top:bottom] < 0.5).mean(axis=0) > 0.9)
    return top, bottom, int(cols[0]), int(cols[-1])


def test_pdf_reads_back_with_everything_issue_14_lists(firing: Path, berlin: Path, record: FiringRecord, tmp_path: Path) -> None:
    pdf = tmp_path / "record.pdf"
    out = run("report", str(firing), "-o", str(pdf), "--site", str(berlin))
    assert out.returncode == 0, out.stderr
    assert "Traceback" not in out.stderr and str(pdf) in out.stderr
    text = _pdf_text(pdf)
    flat = " ".join(text.split())
    assert text.count("\f") == 2  # two pages
    for expected in (
        "Firing record", "Larchmoor Clayworks", "Kiln 3, 0.4 m3 electric front-loader", "Short test firing",
        BERLIN_START, "Europe/Berlin (CET, UTC+01:00)",
        "Schedule as planned and as fired", "climb", "soak", "cool",
        "Recorder sessions", "stopped (SIGTERM)", "Gaps in the record", "recorder restart",
        "Summary", "Peak (tc2)", "Time above 750 °C", "Hold 'soak' at 760 °C", "OVER", "OUTSIDE",
        "Alarms and what was done about them", "window fouled; cleaning it after the firing", "Mara Quill@kiln-room",
        "Cones 6 and 7 on the middle shelf", "Sight window looks smoky",
        "monitoring aid, never a safety device", "independent over-temperature cut-out", "local codes", "licensed practice",
        record.digest, "page 1 of 2", "page 2 of 2",
    ):
        assert expected in flat, expected
    assert f"{record.peak.value_c:.1f} °C" in flat
    for alarm in record.alarms:  # every alarm is listed with its number and message
        assert alarm.message.split(" (")[0] in flat
    # durations always carry their units (issue 14): every h:mm:ss on the pages is a clock time after its date
    for m in re.finditer(r"\d{1,2}:\d{2}:\d{2}", flat):
        assert re.search(r"(\d{2} [A-Z][a-z]{2} |\d{4}, )$", flat[:m.start()]), flat[m.start() - 30:m.end()]
    assert "planned 15 min" in flat

    page = _page_png(pdf, 1, tmp_path / "page1")
    top, bottom, left, right = _plot_frame(page)
    assert 0.15 < top / page.shape[0] < bottom / page.shape[0] < 0.6  # a framed plot on the upper half of page 1
    inside = page[top + 3:bottom - 2, left + 3:right - 2]
    margin = page[top:bottom, : left // 3]  # the paper's margin beside it
    assert margin.std() < 0.01 and margin.mean() > 0.99  # blank paper reads as blank ...
    assert inside.std() > 0.08 and (inside < 0.5).mean() > 0.01  # ... and the plot area does not: traces, plan, bands


def test_html_and_png(firing: Path, berlin: Path, record: FiringRecord, tmp_path: Path) -> None:
    html_path, png_path = tmp_path / "record.html", tmp_path / "chart.png"
    assert run("report", str(firing), "-o", str(html_path), "--site", str(berlin)).returncode == 0
    assert run("report", str(firing), "-o", str(png_path)).returncode == 0
    page = html_path.read_text(encoding="utf-8")

    class Strict(HTMLParser):
        text = ""

        def handle_data(self, data: str) -> None:
            self.text += data

    parser = Strict()
    parser.feed(page)
    assert "<svg" in page and f'content="{record.digest}"' in page
    text = parser.text.replace("\xa0", " ")  # a value and its unit are kept together with non-breaking spaces
    for expected in (BERLIN_START, "Sight window looks smoky (see py1)", "window fouled; cleaning it after the firing", record.digest):
        assert expected in text
    from matplotlib import image

    img = image.imread(png_path)
    assert img.shape[1] == pytest.approx(180 / 25.4 * 200, abs=2)  # 180 mm at 200 dpi
    assert img[..., :3].std() > 0.08


def test_utc_letter_and_fahrenheit(firing: Path, berlin: Path, tmp_path: Path) -> None:
    pdf = tmp_path / "utc.pdf"
    out = run("report", str(firing), "-o", str(pdf), "--site", str(berlin), "--utc", "--paper", "letter", "--units", "F")
    assert out.returncode == 0, out.stderr
    info = subprocess.run(["pdfinfo", str(pdf)], capture_output=True, text=True, check=True).stdout
    assert re.search(r"Page size:\s+612 x 792 pts", info)  # US Letter, 8.5 x 11 in at 72 pt/in
    flat = " ".join(_pdf_text(pdf).split())
    assert "Sat 14 Mar 2026, 05:00:01 UTC" in flat and "Clock times UTC" in flat
    assert "Hold 'soak' at 1400 °F" in flat  # 760 degC = 1400 degF (9/5 x 760 + 32, arithmetic)


def test_default_output_is_a_pdf_beside_the_log(firing: Path, tmp_path: Path) -> None:
    log = tmp_path / "kiln.db"
    shutil.copy(firing, log)
    out = run("report", str(log))
    assert out.returncode == 0, out.stderr
    assert (tmp_path / "kiln.pdf").read_bytes().startswith(b"%PDF-")


def test_a_log_without_readings_still_reports(tmp_path: Path) -> None:
    from firewatch.firing.pipeline import channel_table
    from firewatch.settings.profile import load_site
    from firewatch.store.writer import LogWriter

    site = load_site()
    log = tmp_path / "empty.db"
    LogWriter(log, channel_table(site, None), site_name=site.name, kiln=site.kiln, site_text=site.text).close("stopped")
    pdf = tmp_path / "empty.pdf"
    out = run("report", str(log), "-o", str(pdf))
    assert out.returncode == 0, out.stderr
    flat = " ".join(_pdf_text(pdf).split())
    assert "no readings in this log" in flat and "Firing start no readings" in flat


@pytest.mark.parametrize(("args", "words"), [
    (["missing.db"], ["missing.db", "no such firing log"]),
    (["garbage.db"], ["garbage.db", "not a firing log"]),
    (["LOG", "-o", "out.txt"], ["-o", "unknown report type .txt"]),
    (["LOG", "-o", "nowhere/out.pdf"], ["-o", "does not exist"]),
    (["LOG", "--site", "badzone.toml"], ["--site", "site.timezone", "unknown time zone 'Mars/Olympus'"]),
    (["LOG", "--paper", "a3"], ["--paper", "invalid choice"]),
    (["LOG", "-o", "adir.pdf"], ["-o", "cannot write"]),
])
def test_bad_input_is_one_line_and_status_2(firing: Path, berlin: Path, tmp_path: Path, args: list[str], words: list[str]) -> None:
    (tmp_path / "garbage.db").write_bytes(b"\x00garbage" * 100)
    (tmp_path / "badzone.toml").write_text(berlin.read_text().replace("Europe/Berlin", "Mars/Olympus"))
    (tmp_path / "adir.pdf").mkdir()
    argv = [str(firing) if a == "LOG" else (str(tmp_path / a) if a.endswith((".db", ".toml", ".pdf", ".txt")) else a) for a in args]
    out = run("report", *argv)
    assert out.returncode == 2, out.stderr
    err = out.stderr.strip()
    assert "\n" not in err and "Traceback" not in err
    for w in words:
        assert w in err, err


def test_a_damaged_log_is_named_not_a_traceback(firing: Path, tmp_path: Path) -> None:
    damaged = tmp_path / "damaged.db"
    data = bytearray(firing.read_bytes())
    page = sql(firing, "PRAGMA page_size")[0][0]
    for at in range(len(data) // 3 // page * page, len(data), page * 7):  # whole pages spoilt, past the schema
        data[at:at + page] = b"\xff" * page
    damaged.write_bytes(bytes(data))
    out = run("report", str(damaged), "-o", str(tmp_path / "d.pdf"))
    assert out.returncode == 2, out.stderr
    assert "damaged.db" in out.stderr and "Traceback" not in out.stderr and out.stderr.strip().count("\n") == 0
    assert firing.stat().st_size > 0  # the original is untouched


def test_timezone_key_in_the_site_profile(berlin: Path, tmp_path: Path) -> None:
    out = run("check", str(berlin))
    assert out.returncode == 0, out.stderr
    bad = tmp_path / "bad.toml"
    bad.write_text(berlin.read_text().replace("Europe/Berlin", "Mars/Olympus"))
    out = run("check", str(bad))
    assert out.returncode != 0 and "site.timezone" in out.stderr + out.stdout
