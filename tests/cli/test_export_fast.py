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

from firewatch.commands import _export_csv as pages
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
    monkeypatch.setattr(pages, "PAGE", 700)  # several pages, so the rate history crosses page boundaries
    with LogReader(log) as reader:
        buf = io.StringIO(newline="")
        rows = pages.export_csv(reader, buf)
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
    assert pages._times(np.array([t, whole])) == [iso(t)[:-1], iso(whole)[:-1]]


def test_a_page_formats_as_per_value_formatting_nan_empty_even_side_by_side() -> None:
    nan = math.nan
    times = ["2026-03-14T05:00:01", "2026-03-14T05:00:02", "2026-03-14T05:00:03"]
    values = np.array([[0.0, nan, nan, nan, 1e-7], [1.0, 0.1 + 0.2, nan, 123456.789, nan], [2.5, -0.0, 5e-324, nan, 1e300]])
    flags = (["", "tc2:open", "odd%sname:under"], np.array([1, 0, 2]))
    text = pages._rows(times, values, "frggr", flags)
    want = "".join(",".join([f"{t}Z", f"{a:.3f}", "" if b != b else repr(b), "" if c != c else f"{c:.6g}",
                             "" if d != d else f"{d:.6g}", "" if e != e else repr(e), flags[0][k]]) + "\r\n"
                   for t, (a, b, c, d, e), k in zip(times, values.tolist(), flags[1].tolist()))
    assert text == want
    assert text.split("\r\n")[1].split(",")[2] == "0.30000000000000004"  # shortest repr, not rounded (Python float repr)
    assert text.split("\r\n")[2].endswith(",odd%sname:under")  # a "%" in a name is text, not a conversion


WORKERS_RUN = """
import sys
from firewatch.commands import _export_csv as pages
from firewatch.cli import main
pages.PAGE, pages.TASK = 300, 900
made = []
real = pages.multiprocessing.get_context
pages.multiprocessing.get_context = lambda how: made.append(how) or real(how)
pages.os.cpu_count = lambda: 2  # the workers' path whatever the machine
status = main(["export", sys.argv[1], "--csv", sys.argv[2], "-q"])
print(made)
sys.exit(status)
"""


def test_forked_workers_write_the_same_file_as_one_process(log: Path, tmp_path: Path) -> None:
    """In a command's own process (one thread, where forking is safe) the pages go to two forked workers, in
    whatever order they finish, each recomputing its rates from the window before it: the file is the one a
    single process writes (issue 15). A test runner's process has threads: there the export stays in process."""
    import subprocess
    import sys

    from tests.e2e.helpers import env

    out = tmp_path / "out.csv"
    proc = subprocess.run([sys.executable, "-c", WORKERS_RUN, str(log), str(out)], capture_output=True, text=True, env=env(), timeout=120)
    assert proc.returncode == 0, proc.stderr
    assert proc.stdout.strip() == "['fork']"  # the workers' path was taken
    with LogReader(log) as reader:
        one = io.StringIO(newline="")
        assert pages.export_csv(reader, one, workers=1) == 45 * 60
    assert out.read_bytes() == one.getvalue().encode("utf-8")


def test_a_damaged_log_is_refused_before_any_output(log: Path, tmp_path: Path) -> None:
    from tests.damage import overwrite_middle

    bad = overwrite_middle(log, tmp_path / "bad.db")
    proc = run("export", str(bad), "--csv", str(tmp_path / "bad.csv"))
    assert proc.returncode == 2 and "damaged" in proc.stderr and proc.stderr.count("\n") == 1
    assert not (tmp_path / "bad.csv").exists()  # the integrity check comes before any worker starts (issue 10)
