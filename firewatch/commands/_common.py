"""Helpers shared by the commands that read firing logs."""

from __future__ import annotations

import datetime as dt

from firewatch.cli import UsageError

__all__ = ["iso", "open_log"]


def iso(t: float | None) -> str | None:
    """UTC seconds as ISO 8601 with a Z, to the second (or None)."""
    if t is None:
        return None
    return dt.datetime.fromtimestamp(t, dt.timezone.utc).isoformat(timespec="seconds").replace("+00:00", "Z")


def open_log(path: str, option: str = "FILE.db"):
    from firewatch.store._common import LogError
    from firewatch.store.reader import LogReader

    try:
        return LogReader(path)
    except LogError as exc:
        raise UsageError(f"{option}: {exc}") from None
