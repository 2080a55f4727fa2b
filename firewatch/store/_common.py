"""What the firing log's writer and readers share: schema version, errors, connections.

The firing log: one SQLite file per firing, WAL mode, one writer, any number of readers.

The schema is documented in docs/log-format.md and versioned in
``meta.schema_version``. The recorder (and ``sim --to-log``) is the only
writer; a lock file beside the log (``FILE.db.lock``, held with ``flock``,
released by the kernel even on SIGKILL) refuses a second one. Readers open
the file read-only and keep their transactions short.

Durability: the recorder commits at least once a second with
``synchronous=FULL``, so a crash or power cut loses at most what was not yet
committed; SQLite's WAL keeps the file intact through SIGKILL. When the log
cannot be written (a full disk), the writer holds what it has not committed
in memory and retries (see :mod:`firewatch.store.writer`).
"""

from __future__ import annotations

import sqlite3
from importlib import resources
from pathlib import Path

__all__ = [
    "SCHEMA_VERSION", "LogError", "LogLocked", "LogDamaged", "LogWriteError", "LogUnavailable", "STORAGE_CODES", "sqlite_code", "log_error",
    "damage_error", "schema_sql",
]

SCHEMA_VERSION = 3
"""The schema this firewatch writes and the newest it reads."""


def schema_sql() -> str:
    """The schema's SQL, shipped beside this module as ``schema.sql``."""
    return resources.files("firewatch.store").joinpath("schema.sql").read_text(encoding="utf-8")


class LogError(Exception):
    """A firing log that cannot be used: the message names the file and the reason."""


class LogLocked(LogError):
    """Another recorder is writing this log."""


class LogDamaged(LogError):
    """SQLite finds the firing log damaged inside its pages (SQLITE_CORRUPT, or a failed integrity check)."""


# SQLite's primary result codes (SQLite's documentation, "Result and Error Codes")
SQLITE_CORRUPT = 11
SQLITE_NOTADB = 26


def sqlite_code(exc: BaseException) -> int:
    """SQLite's primary result code of an error (the extended bits dropped); 0 when it carries none."""
    return (getattr(exc, "sqlite_errorcode", None) or 0) & 0xFF


def log_error(path: Path, exc: sqlite3.Error) -> LogError:
    """A :class:`LogError` naming ``path`` and what SQLite said; :class:`LogDamaged` when it found damage."""
    code = sqlite_code(exc)
    if code == SQLITE_CORRUPT:
        return LogDamaged(f"{path}: the firing log is damaged ({exc})")
    if code == SQLITE_NOTADB:
        return LogError(f"{path}: not a firing log ({exc})")
    return LogError(f"{path}: cannot use the firing log ({exc})")


def damage_error(path: Path | str, problems: list[str]) -> LogDamaged:
    """The one-line error for a log whose integrity check found ``problems`` (the first is named)."""
    listed = f"; {len(problems)} problems listed" if len(problems) > 1 else ""
    return LogDamaged(f"{path}: the firing log is damaged (SQLite's quick_check: {problems[0]}{listed})")


class LogUnavailable(LogError):
    """The storage under the log failed while opening it (a full disk, an I/O error): no verdict on the log itself."""


STORAGE_CODES = frozenset({7, 8, 10, 13, 14})
"""SQLite primary result codes that speak of the storage, not the file (SQLite's documentation, "Result and Error
Codes"): NOMEM, READONLY, IOERR, FULL, CANTOPEN."""


class LogWriteError(LogError):
    """The log cannot be written: a full disk, a file-size limit, an I/O error (the message says which)."""


def _connect(path: Path, read_only: bool) -> sqlite3.Connection:
    if read_only:
        uri = f"file:{path.resolve()}?mode=ro"
        try:
            con = sqlite3.connect(uri, uri=True, timeout=5.0, check_same_thread=False)
            con.execute("SELECT count(*) FROM sqlite_master").fetchone()
        except sqlite3.OperationalError:
            # A WAL log whose -shm file cannot be made read-only: open normally, never write.
            con = sqlite3.connect(str(path), timeout=5.0, check_same_thread=False)
            con.execute("PRAGMA query_only=1")
        return con
    return sqlite3.connect(str(path), timeout=5.0, isolation_level=None, check_same_thread=False)
