"""Where firewatch's log lines go: stderr, one line per record, timestamped in UTC.

Every module logs through ``logging.getLogger(__name__)``; only the command line
(``firewatch.cli.main``) installs a handler, so the library stays silent when
imported. The format suits a terminal and journald alike: one line per record,
no colour, an ISO 8601 UTC time, the level's name and the logger's name.
"""

from __future__ import annotations

import logging
import sys
import time

__all__ = ["FORMAT", "UtcFormatter", "configure", "level_for"]

FORMAT = "%(asctime)s %(levelname)s %(name)s: %(message)s"


class UtcFormatter(logging.Formatter):
    """ISO 8601 times in UTC with milliseconds, e.g. ``2024-05-01T12:00:00.250Z``."""

    def formatTime(self, record: logging.LogRecord, datefmt: str | None = None) -> str:  # noqa: N802 (logging's name)
        stamp = time.strftime("%Y-%m-%dT%H:%M:%S", time.gmtime(record.created))
        return f"{stamp}.{int(record.msecs):03d}Z"

    def format(self, record: logging.LogRecord) -> str:
        # one record, one line: journald and grep both read lines
        return super().format(record).replace("\n", " | ")


class _Stderr(logging.StreamHandler):
    """A handler writing to whatever ``sys.stderr`` is now (pytest and the demo replace it)."""

    def __init__(self) -> None:
        super().__init__(sys.stderr)

    @property
    def stream(self) -> object:
        return sys.stderr

    @stream.setter
    def stream(self, value: object) -> None:
        pass

    def handleError(self, record: logging.LogRecord) -> None:  # noqa: N802 (logging's name)
        pass  # the terminal went away: keep recording rather than print a traceback about it


_handler: logging.Handler | None = None


def level_for(verbosity: int) -> int:
    """The level for ``-v`` minus ``-q`` counts: 0 is INFO, 1 or more DEBUG, -1 WARNING, -2 or less ERROR."""
    if verbosity >= 1:
        return logging.DEBUG
    return {0: logging.INFO, -1: logging.WARNING}.get(verbosity, logging.ERROR)


def configure(verbosity: int = 0) -> None:
    """Send firewatch's log to stderr at the level ``verbosity`` asks for; other libraries' from WARNING.

    Calling it again replaces the handler it installed before (tests run several commands in one process).
    """
    global _handler
    root = logging.getLogger()
    if _handler is not None:
        root.removeHandler(_handler)
    _handler = _Stderr()
    _handler.setFormatter(UtcFormatter(FORMAT))
    root.addHandler(_handler)
    root.setLevel(max(logging.WARNING, level_for(verbosity)))
    logging.getLogger("firewatch").setLevel(level_for(verbosity))
