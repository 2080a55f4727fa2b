"""``export --csv`` formatted a page at a time (issue 15): the text is what per-value formatting gave, and every
measured value reads back to the float64 kept."""

from __future__ import annotations

import io
import math
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from firewatch.commands import export
from firewatch.commands._common import iso
from firewatch.store.reader import LogReader
from firewatch.transport.records import Status
from tests.e2e.helpers import run


@pytest.fixture(scope="module")
def log(tmp_path_factory: pytest.TempPathFactory) -> Path:
    """45 simulated minutes written by ``sim --to-log``, a thermocouple open from minute 20 (statuses to flag)."""
    path = tmp_path_factory.mktemp("export") / "k.db"
    out = run("sim", "--to-log", str(path), "--minutes", "45", "--fault", "tc-open@20:channel=tc2", "-q")
    assert out.returncode == 0, out.stderr
    return path


def test_every_measured_value_reads_back_exactly_and_times_and_flags_are_as_per_value(log: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr(export, "PAGE", 700)  # several pages, so the rate history crosses page boundaries
    with LogReader(log) as reader:
        buf = io.StringIO(newline="")
        rows = export.export_csv(reader, buf)
        measured = list(reader._channels()[0])
        span = reader.sample_span()
        assert span is not None
        block = reader.block(*span)
        header = [c[1] for c in reader.query("SELECT id, name FROM channel ORDER BY id")]
    lines = buf.getvalue().split("\r\n")
    assert lines[-1] == "" and rows == len(lines) - 2 == block.ids.size == 45 * 60
    table = [line.split(",") for line in lines[1:-1]]
    words = {int(s): Status(s).name.lower() for s in Status}
    for name in measured:
        col = 2 + header.index(name)
        for i, fields in enumerate(table):
            v = float(block.values[name][i])
            if not block.has[name][i] or math.isnan(v):
                assert fields[col] == "", (name, i)
            else:
                assert float(fields[col]) == v and fields[col] == repr(v), (name, i)  # exact: float64 read back bit for bit
    for i, fields in enumerate(table):
        assert fields[0] == iso(float(block.t[i]))
        want = " ".join(f"{n}:{words[int(block.status[n][i])]}" for n in measured if block.has[n][i] and block.status[n][i] != 0)
        assert fields[-1] == want, i
    assert any("tc2:open" in f[-1] for f in table)  # the fault is there to be flagged


@settings(max_examples=200, deadline=None)
@given(st.floats(min_value=0.0, max_value=4e9), st.sampled_from([0.0, 0.4999994, 0.4999996, 0.9999994, 0.9999995, 0.9999996]))
def test_times_a_page_at_once_are_iso_per_value(whole: float, frac: float) -> None:
    # datetime.fromtimestamp rounds to the microsecond, half to even (Python documentation, datetime): near a whole second too
    t = math.floor(whole) + frac
    assert export._times(np.array([t, whole])) == [iso(t)[:-1], iso(whole)[:-1]]


def test_a_page_formats_as_per_value_formatting_nan_empty_even_side_by_side() -> None:
    nan = math.nan
    times = ["2026-03-14T05:00:01", "2026-03-14T05:00:02", "2026-03-14T05:00:03"]
    values = np.array([[0.0, nan, nan, nan, 1e-7], [1.0, 0.1 + 0.2, nan, 123456.789, nan], [2.5, -0.0, 5e-324, nan, 1e300]])
    flags = (["", "tc2:open", "odd%sname:under"], np.array([1, 0, 2]))
    text = export._rows(times, values, "frggr", flags)
    want = "".join(",".join([f"{t}Z", f"{a:.3f}", "" if b != b else repr(b), "" if c != c else f"{c:.6g}",
                             "" if d != d else f"{d:.6g}", "" if e != e else repr(e), flags[0][k]]) + "\r\n"
                   for t, (a, b, c, d, e), k in zip(times, values.tolist(), flags[1].tolist()))
    assert text == want
    assert text.split("\r\n")[1].split(",")[2] == "0.30000000000000004"  # shortest repr, not rounded (Python float repr)
    assert text.split("\r\n")[2].endswith(",odd%sname:under")  # a "%" in a name is text, not a conversion


def test_worker_processes_give_the_same_text_as_one_process(log: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    # the tasks fall to forked workers in whatever order they finish; each recomputes its rates from the window before it
    monkeypatch.setattr(export, "PAGE", 300)
    monkeypatch.setattr(export, "TASK", 900)
    with LogReader(log) as reader:
        one, two = io.StringIO(newline=""), io.StringIO(newline="")
        assert export.export_csv(reader, one, workers=1) == export.export_csv(reader, two, workers=2) == 45 * 60
    assert one.getvalue() == two.getvalue()


def test_the_command_with_workers_writes_the_same_file_and_a_damaged_log_leaves_none(log: Path, tmp_path: Path,
                                                                                     monkeypatch: pytest.MonkeyPatch) -> None:
    import argparse

    from firewatch.store._common import LogDamaged
    from tests.damage import overwrite_middle

    monkeypatch.setattr(export, "PAGE", 300)
    monkeypatch.setattr(export, "TASK", 900)
    monkeypatch.setattr(export.os, "cpu_count", lambda: 2)  # the workers' path whatever the machine
    out = tmp_path / "out.csv"
    assert export.run(argparse.Namespace(log=str(log), csv=str(out))) == 0
    with LogReader(log) as reader:
        one = io.StringIO(newline="")
        export.export_csv(reader, one, workers=1)
    assert out.read_bytes() == one.getvalue().encode("utf-8")
    # the integrity check runs while the workers begin: its refusal still comes before any output (issue 10)
    bad = overwrite_middle(log, tmp_path / "bad.db")
    with pytest.raises(LogDamaged, match="damaged"):
        export.run(argparse.Namespace(log=str(bad), csv=str(tmp_path / "bad.csv")))
    assert not (tmp_path / "bad.csv").exists()
