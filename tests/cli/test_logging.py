"""Logging and the global options (issue 11 item 4): -v/-q on every command, --debug for the traceback."""

from __future__ import annotations

import logging
import re
import subprocess
import sys
from pathlib import Path

import pytest

from firewatch import cli
from firewatch.commands import _logging

# ISO 8601 in UTC with milliseconds, level, logger: the journald-friendly line
LINE = re.compile(r"^\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\.\d{3}Z (DEBUG|INFO|WARNING|ERROR) firewatch\.[\w.]+: \S")


def _record(tmp_path: Path, *options: str) -> subprocess.CompletedProcess[str]:
    log = tmp_path / "k.db"
    argv = [sys.executable, "-m", "firewatch", *options, "record", "--port", "loop://", "--log", str(log), "--for", "1"]
    return subprocess.run(argv, capture_output=True, text=True, timeout=60, cwd=Path(__file__).resolve().parents[2])


def test_recorder_lines_are_timestamped_one_per_record(tmp_path: Path) -> None:
    out = _record(tmp_path)
    assert out.returncode == 0, out.stderr
    lines = out.stderr.splitlines()
    assert len(lines) == 2 and all(LINE.match(line) for line in lines), out.stderr
    assert " INFO firewatch.services.recorder: recording loop://" in lines[0]
    assert " INFO firewatch.services.recorder: stopped: --for 1 s elapsed" in lines[1]


def test_quiet_before_or_after_the_subcommand_keeps_only_warnings(tmp_path: Path) -> None:
    before = _record(tmp_path, "-q")
    assert before.returncode == 0 and before.stderr == "", before.stderr
    log = tmp_path / "k.db"
    after = subprocess.run([sys.executable, "-m", "firewatch", "record", "--port", "loop://", "--log", str(log), "--for", "1", "-q"],
                           capture_output=True, text=True, timeout=60, cwd=Path(__file__).resolve().parents[2])
    assert after.returncode == 0 and after.stderr == "", after.stderr


@pytest.mark.parametrize(("verbosity", "level"), [(2, logging.DEBUG), (1, logging.DEBUG), (0, logging.INFO),
                                                   (-1, logging.WARNING), (-2, logging.ERROR)])
def test_verbosity_levels(verbosity: int, level: int) -> None:
    assert _logging.level_for(verbosity) == level  # the mapping documented in cli's --help; common practice, no source


def test_a_newline_in_a_message_stays_on_one_line() -> None:
    record = logging.LogRecord("firewatch.x", logging.WARNING, __file__, 1, "first\nsecond", None, None)
    record.created = 0.0
    record.msecs = 0.0
    text = _logging.UtcFormatter(_logging.FORMAT).format(record)
    assert text == "1970-01-01T00:00:00.000Z WARNING firewatch.x: first | second"  # the Unix epoch in ISO 8601


def _broken(args: object) -> int:
    raise RuntimeError("a bug, not the user's input")


def test_an_internal_error_is_one_line_without_debug(monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]) -> None:
    import firewatch.commands.calc

    monkeypatch.setattr(firewatch.commands.calc, "run", _broken)
    assert cli.main(["calc", "tc", "--type", "K", "--emf", "1"]) == 1
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "Traceback" not in err
    assert "internal error: RuntimeError: a bug, not the user's input" in err and "--debug" in err


@pytest.mark.parametrize("where", ["before", "after"])
def test_debug_re_raises(monkeypatch: pytest.MonkeyPatch, where: str) -> None:
    import firewatch.commands.calc

    monkeypatch.setattr(firewatch.commands.calc, "run", _broken)
    argv = ["calc", "tc", "--type", "K", "--emf", "1"]
    with pytest.raises(RuntimeError, match="a bug"):
        cli.main(["--debug", *argv] if where == "before" else [*argv, "--debug"])


def test_debug_re_raises_a_usage_error(monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]) -> None:
    import firewatch.commands.calc

    def usage(args: object) -> int:
        raise cli.UsageError("--emf: not a number")

    monkeypatch.setattr(firewatch.commands.calc, "run", usage)
    argv = ["calc", "tc", "--type", "K", "--emf", "1"]
    assert cli.main(argv) == 2 and capsys.readouterr().err == "firewatch calc: --emf: not a number\n"
    with pytest.raises(cli.UsageError):
        cli.main([*argv, "--debug"])
