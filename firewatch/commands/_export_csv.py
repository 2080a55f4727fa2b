"""The CSV of ``firewatch export``, streamed so a week-long log never sits in memory (kept apart from the command so
that ``firewatch --help`` loads no numpy)."""

from __future__ import annotations

import csv
import multiprocessing
import os
import threading
from collections import deque
from multiprocessing.pool import AsyncResult
from typing import TYPE_CHECKING, BinaryIO, Protocol

import numpy as np

if TYPE_CHECKING:
    from firewatch.store.derive import Deriver
    from firewatch.store.reader import LogReader

__all__ = ["export_csv", "Output"]

PAGE = 20_000
"""Samples read, recomputed and written at a time (bounded memory whatever the log's length)."""

TASK = 4 * PAGE
"""Samples a worker process turns into text at a time (its derived channels read from the rate window before)."""

WORKERS = 2
"""Worker processes at most: reading, recomputing and formatting share out evenly, and the writing is light."""


def _times(t: np.ndarray) -> list[str]:
    """ISO 8601 times to the second, as :func:`~firewatch.commands._common.iso` gives them, a page at once.

    ``datetime.fromtimestamp`` rounds the fraction to the microsecond, half to
    even, before ``isoformat`` drops it; so a time within half a microsecond of
    the next second is that second's.
    """
    whole = np.floor(t)
    secs = whole + (np.rint((t - whole) * 1e6) >= 1e6)
    return np.datetime_as_string(secs.astype("datetime64[s]"), unit="s").tolist()


def _combos(codes: np.ndarray) -> tuple[list[tuple[int, ...]], np.ndarray]:
    """The distinct rows of a small non-negative integer matrix, and which one each row is.

    Each row is folded into one integer first: numpy's ``unique`` over rows
    sorts them as records, about fifty times slower than over integers.
    """
    n, k = codes.shape
    base = int(codes.max(initial=0)) + 1
    if k == 0 or base ** k >= 2**63:  # too many columns to fold into an int64: rows as records
        combos, which = np.unique(codes, axis=0, return_inverse=True)
        return [tuple(c) for c in combos.tolist()], which.ravel()
    folded = codes.astype(np.int64) @ (base ** np.arange(k, dtype=np.int64))
    _, first, which = np.unique(folded, return_index=True, return_inverse=True)
    return [tuple(c) for c in codes[first].tolist()], which.ravel()


def _flags(statuses: list[tuple[str, np.ndarray]], words: dict[int, str], n: int) -> tuple[list[str], np.ndarray]:
    """Each sample's measured statuses other than ok, ``name:status`` joined by spaces ("" for none),
    as the distinct texts in the page and which one each sample has.

    Built once per distinct combination of statuses in the page (a handful:
    a status lasts), not once per sample.
    """
    if not statuses:
        return [""], np.zeros(n, dtype=np.int64)
    combos, which = _combos(np.stack([st for _, st in statuses], axis=1))
    return [" ".join(f"{name}:{words.get(c, c)}" for (name, _), c in zip(statuses, combo) if c) for combo in combos], which


def _rows(times: list[str], values: np.ndarray, kinds: str, flags: tuple[list[str], np.ndarray]) -> str:
    """The rows of a page as CSV text: the time, a field per column of ``values``, the flags.

    ``kinds`` has a letter per column of ``values``: ``r`` Python's shortest repr
    (it reads back to the same float64), ``g`` 6 significant digits, ``f`` 3
    decimals; NaN is an empty field. Formatting is one ``%`` of the page, in C
    (per-value Python formatting took most of the export's time): each distinct
    pattern of empty fields in the page gets its row format (a handful: a
    pyrometer below its range, progress every 10 s), the time and the flags go
    into the format as text, and the values are the arguments.
    """
    spec = {"r": "%r", "g": "%.6g", "f": "%.3f"}
    empty = np.isnan(values)
    patterns, which = _combos(empty.view(np.int8))
    middle = np.array(["," + ",".join("" if e else spec[kind] for e, kind in zip(pattern, kinds)) + ","
                       for pattern in patterns], dtype=object)
    texts, flag_of = flags
    # "%" in a flag (a channel's name) must not be read as a conversion
    ends = np.array([t.replace("%", "%%") + "\r\n" for t in texts], dtype=object)
    pieces = np.empty((len(times), 3), dtype=object)
    pieces[:, 0] = [f"{t}Z" for t in times]
    pieces[:, 1] = middle[which]
    pieces[:, 2] = ends[flag_of]
    return "".join(pieces.ravel().tolist()) % tuple(values[~empty].tolist())


class _Sink(Protocol):
    def write(self, text: str, /) -> int: ...


class _Layout:
    """What every page needs to know of the log: its channels, the firing's start, how each column is written."""

    def __init__(self, reader: LogReader) -> None:
        from firewatch.store.layout import STEP_KIND
        from firewatch.transport.records import Status

        self.channels = [(int(r[0]), str(r[1]), str(r[2])) for r in reader.query("SELECT id, name, unit FROM channel ORDER BY id")]
        measured, other = reader._channels()
        self.measured = set(measured)
        self.start: float | None = reader.firing().get("started_t")
        self.words = {int(s): Status(s).name.lower() for s in Status}
        self.progress = [name for _, name, _ in self.channels if name not in measured and other[name][1] == STEP_KIND]
        self.kinds = "f" + "".join("r" if name in measured else "g" for _, name, _ in self.channels)
        """How each value column is written (:func:`_rows`): the elapsed time, then every channel."""


def _page(reader: LogReader, deriver: Deriver, layout: _Layout, a: int, b: int) -> tuple[str, int]:
    """Samples ``a`` to ``b`` as CSV rows, and how many."""
    block = reader.block(a, b)
    n = block.ids.size
    if not n:
        return "", 0
    derived = deriver.derive(a, b, block)
    start = layout.start
    values = np.empty((n, len(layout.channels) + 1))
    values[:, 0] = np.nan if start is None else block.t - start
    bad: list[tuple[str, np.ndarray]] = []
    placed: dict[str, np.ndarray] = {}
    if layout.progress:
        step_ids, _, steps = reader.steps(a, b, layout.progress)
        at = np.searchsorted(block.ids, step_ids)
        for name, v in steps.items():
            col = np.full(n, np.nan)
            col[at] = v
            placed[name] = col
    for j, (_, name, _) in enumerate(layout.channels, start=1):
        if name in layout.measured:
            has = block.has[name]
            values[:, j] = np.where(has, block.values[name], np.nan)
            bad.append((name, np.where(has, block.status[name], 0)))
        elif name in placed:
            values[:, j] = placed[name]
        else:
            got_v = derived.values.get(name)
            values[:, j] = got_v if got_v is not None and got_v.size == n else np.nan
    return _rows(_times(block.t), values, layout.kinds, _flags(bad, layout.words, n)), n


_worker: tuple[LogReader, _Layout] | None = None
"""A worker process's own reader (SQLite connections are not shared across a fork) and the layout."""


def _worker_start(path: str, layout: _Layout) -> None:
    from firewatch.store.reader import LogReader

    global _worker
    _worker = (LogReader(path), layout)


def _worker_pages(a: int, b: int) -> tuple[bytes, int]:
    assert _worker is not None
    text, rows = _task(*_worker, a, b)
    return text.encode("utf-8"), rows  # bytes cross the pipe as they are; a str would be encoded twice over


def _task(reader: LogReader, layout: _Layout, a: int, b: int) -> tuple[str, int]:
    """Samples ``a`` to ``b`` (at most :data:`TASK`), a page at a time, as CSV rows, and how many."""
    from firewatch.store.derive import Deriver

    # a deriver of its own per task (its rates from the window before it), in a worker or not:
    # the text does not depend on how many workers there were or how the tasks fell to them
    deriver = Deriver(reader)
    texts, rows = [], 0
    for x in range(a, b + 1, PAGE):
        text, n = _page(reader, deriver, layout, x, min(x + PAGE - 1, b))
        texts.append(text)
        rows += n
    return "".join(texts), rows


def export_csv(reader: LogReader, out: _Sink, workers: int | None = None) -> int:
    """Write the CSV; return the number of rows.

    Streams :data:`PAGE` samples at a time: the measured readings are read once
    a page, the derived channels recomputed from them (:class:`~firewatch.store.derive.Deriver`
    carries the rate history from page to page within a task of :data:`TASK` samples), and the
    page is formatted in one go. A log of more than :data:`TASK` samples is shared out to ``workers`` processes
    (by default one per core, at most :data:`WORKERS`), :data:`TASK` samples at a time
    and at most two tasks ahead per worker; the rows are written in order as they come back.
    """
    layout = _Layout(reader)
    header = ["time_utc", "elapsed_s"] + [f"{name} [{unit}]" for _, name, unit in layout.channels] + ["flags"]
    span = reader.sample_span()
    lo, hi = span if span is not None else (1, 0)
    workers = min(WORKERS, os.cpu_count() or 1) if workers is None else workers
    tasks = deque((a, min(a + TASK - 1, hi)) for a in range(lo, hi + 1, TASK))
    # forked workers only from a process with one thread: a child forked while another thread holds a lock (a
    # logging handler's, an interpreter's) waits on it for ever; the command line has one thread, a test runner may not
    if workers < 2 or len(tasks) < 2 or "fork" not in multiprocessing.get_all_start_methods() or threading.active_count() > 1:
        csv.writer(out).writerow(header)
        rows = 0
        for a, b in tasks:
            text, n = _task(reader, layout, a, b)
            out.write(text)
            rows += n
        return rows
    # fork: the workers start at once with what is imported, and the band tables built here (each worker would
    # build its own otherwise); the log's path is that of the file actually read
    from firewatch.store.derive import Deriver

    Deriver(reader).prepare()
    with multiprocessing.get_context("fork").Pool(workers, _worker_start, (str(reader.readings_path()), layout)) as pool:
        pending: deque[AsyncResult[tuple[bytes, int]]] = deque()
        while tasks and len(pending) < 2 * workers:
            pending.append(pool.apply_async(_worker_pages, tasks.popleft()))
        csv.writer(out).writerow(header)
        rows = 0
        while tasks or pending:
            while tasks and len(pending) < 2 * workers:  # bounded: at most this many tasks' text held at once
                pending.append(pool.apply_async(_worker_pages, tasks.popleft()))
            data, n = pending.popleft().get()
            if isinstance(out, Output):
                out.write_bytes(data)
            else:
                out.write(data.decode("utf-8"))
            rows += n
    return rows


class Output:
    """The output file in UTF-8, created at the first write: a log refused by its integrity check leaves none."""

    def __init__(self, path: str) -> None:
        self.path = path
        self._file: BinaryIO | None = None

    def write_bytes(self, data: bytes) -> int:
        if self._file is None:
            self._file = open(self.path, "wb")
        return self._file.write(data)

    def write(self, text: str) -> int:
        return self.write_bytes(text.encode("utf-8"))

    def close(self) -> None:
        if self._file is not None:
            self._file.close()
