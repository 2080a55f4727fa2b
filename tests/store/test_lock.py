"""The writer's lock file ``FILE.db.lock`` cannot be turned against the user (issue 10, item 4).

A symbolic link planted at the lock's name used to have its target truncated and overwritten
with the writer's pid. Real files in a temporary directory; nothing is mocked.
"""

from __future__ import annotations

import os
from pathlib import Path

import pytest

from firewatch.firing.pipeline import ChannelInfo
from firewatch.store._common import LogError, LogLocked
from firewatch.store.writer import LogWriter

CHANNELS = [ChannelInfo("tc1", "thermocouple", "C", "tc1", "a thermocouple")]
PRECIOUS = b"somebody's file: must never be written by firewatch\n"


def victim(tmp_path: Path) -> Path:
    path = tmp_path / "victim.txt"
    path.write_bytes(PRECIOUS)
    return path


def test_a_plain_lock_file_works_and_names_its_holder(tmp_path: Path) -> None:
    log = tmp_path / "kiln.db"
    writer = LogWriter(log, CHANNELS)
    try:
        assert f"pid {os.getpid()}" in (tmp_path / "kiln.db.lock").read_text()
        with pytest.raises(LogLocked):
            LogWriter(log, CHANNELS)
    finally:
        writer.close()
    LogWriter(log, CHANNELS).close()  # released: the next writer continues the log


def test_symlinked_lock_is_refused_and_its_target_untouched(tmp_path: Path) -> None:
    # issue 10: a symlink X.db.lock -> other-file got other-file overwritten
    target = victim(tmp_path)
    log = tmp_path / "kiln.db"
    (tmp_path / "kiln.db.lock").symlink_to(target)
    with pytest.raises(LogError, match="symbolic link") as err:
        LogWriter(log, CHANNELS)
    assert str(tmp_path / "kiln.db.lock") in str(err.value) and "\n" not in str(err.value)
    assert target.read_bytes() == PRECIOUS
    assert not log.exists()  # refused before the log was touched


def test_dangling_symlinked_lock_creates_nothing(tmp_path: Path) -> None:
    # issue 10: a link to a file that does not exist yet would have been created by the writer
    target = tmp_path / "elsewhere" / "planted"
    target.parent.mkdir()
    (tmp_path / "kiln.db.lock").symlink_to(target)
    with pytest.raises(LogError, match="symbolic link"):
        LogWriter(tmp_path / "kiln.db", CHANNELS)
    assert not target.exists()


def test_hard_linked_lock_is_refused_and_the_other_name_untouched(tmp_path: Path) -> None:
    target = victim(tmp_path)
    os.link(target, tmp_path / "kiln.db.lock")
    with pytest.raises(LogError, match="hard links"):
        LogWriter(tmp_path / "kiln.db", CHANNELS)
    assert target.read_bytes() == PRECIOUS


def test_fifo_at_the_lock_is_refused_without_blocking(tmp_path: Path) -> None:
    os.mkfifo(tmp_path / "kiln.db.lock")
    with pytest.raises(LogError, match="not a regular file"):
        LogWriter(tmp_path / "kiln.db", CHANNELS)


def test_directory_at_the_lock_is_refused(tmp_path: Path) -> None:
    (tmp_path / "kiln.db.lock").mkdir()
    with pytest.raises(LogError, match="cannot open the lock file"):
        LogWriter(tmp_path / "kiln.db", CHANNELS)


def test_directory_at_the_log_is_refused_before_any_lock(tmp_path: Path) -> None:
    (tmp_path / "kiln.db").mkdir()
    with pytest.raises(LogError, match="not a regular file"):
        LogWriter(tmp_path / "kiln.db", CHANNELS)
    assert not (tmp_path / "kiln.db.lock").exists()
