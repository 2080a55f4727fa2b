"""Helpers shared by the commands that read firing logs."""

from __future__ import annotations

import datetime as dt
from pathlib import Path
from typing import TYPE_CHECKING

from firewatch.store._common import LogUnavailable

if TYPE_CHECKING:
    from firewatch.store.reader import LogReader

__all__ = ["iso", "open_log", "refuse_damaged"]


def iso(t: float | None) -> str | None:
    """UTC seconds as ISO 8601 with a Z, to the second (or None)."""
    if t is None:
        return None
    return dt.datetime.fromtimestamp(t, dt.UTC).isoformat(timespec="seconds").replace("+00:00", "Z")


def open_log(path: str | Path, check: bool = True) -> LogReader:
    """A reader of the firing log at ``path``, for a command that reads it.

    With ``check`` SQLite's ``quick_check`` runs first, so a damaged log is refused with one line
    wherever its damage lies, rather than giving a result read around it (0.2 to 0.7 s for a
    day's log, about a seventh of a headless replay of it). A missing, empty, foreign or damaged file raises :class:`LogError` naming it,
    which the command line prints as one line with exit status 2.
    """
    from firewatch.store._common import damage_error
    from firewatch.store.reader import LogReader

    reader = LogReader(path)
    if check:
        try:
            problems = reader.integrity(limit=20)
        except BaseException:
            reader.close()
            raise
        if problems:
            reader.close()
            raise damage_error(path, problems)
    return reader


def refuse_damaged(path: Path) -> None:
    """Before a writer continues the log at ``path``: a foreign or damaged file raises :class:`LogError`.

    Writing on into a damaged file could spread the damage over pages that still hold readings;
    a missing or empty file is a new log and passes.
    """
    if path.is_file() and path.stat().st_size == 0:
        return
    if path.exists():
        try:
            open_log(path).close()
        except LogUnavailable:
            return  # the disk, not the log: the writer says what is wrong in its own words
