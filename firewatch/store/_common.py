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

__all__ = ["SCHEMA_VERSION", "LogError", "LogLocked", "LogWriteError", "schema_sql"]

SCHEMA_VERSION = 1
"""The schema this firewatch writes and the newest it reads."""


def schema_sql() -> str:
    """The schema's SQL, shipped beside this module as ``schema.sql``."""
    return resources.files("firewatch.store").joinpath("schema.sql").read_text(encoding="utf-8")


class LogError(Exception):
    """A firing log that cannot be used: the message names the file and the reason."""


class LogLocked(LogError):
    """Another recorder is writing this log."""


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
