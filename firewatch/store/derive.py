"""Derived channels recomputed on read, from the measured readings and the profile each session ran with.

The compact layout keeps only what was measured per sample; a rate, a
reconciled temperature, its uncertainty, a divergence and its allowance are
recomputed here by the same :meth:`~firewatch.firing.pipeline.Pipeline.derive`
the recorder ran, so a reader sees what the recorder computed (to the last
bits of a float: the trailing rate sums from where its window starts). A
stretch read on its own is read from ``rate_window_s`` before it, so that its
first rates have their whole window; stretches read one after another
(:class:`Deriver`) carry each pipeline's rate state on instead.
"""

from __future__ import annotations

import functools
from typing import TYPE_CHECKING

import numpy as np

from firewatch.firing.pipeline import Pipeline
from firewatch.settings._tomlcheck import ProfileError
from firewatch.settings.profile import SiteProfile, load_site
from firewatch.transport.records import Status

if TYPE_CHECKING:
    from firewatch.store.reader import Block, LogReader, Series

__all__ = ["DerivedBlock", "Deriver", "derived_block", "derived_series"]

CHUNK = 50_000
"""Samples recomputed at a time (bounded memory for a week-long log)."""


class DerivedBlock:
    """Derived channels of samples ``ids``: times, values and statuses by channel name."""

    def __init__(self, ids: np.ndarray, t: np.ndarray) -> None:
        self.ids = ids
        self.t = t
        self.values: dict[str, np.ndarray] = {}
        self.status: dict[str, np.ndarray] = {}

    @classmethod
    def joined(cls, parts: list[DerivedBlock]) -> DerivedBlock:
        """Stretches one after the other, with the channels every one of them has."""
        out = cls(np.concatenate([p.ids for p in parts]), np.concatenate([p.t for p in parts]))
        for name in parts[0].values:
            if all(name in p.values for p in parts):
                out.values[name] = np.concatenate([p.values[name] for p in parts])
                out.status[name] = np.concatenate([p.status[name] for p in parts])
        return out

    def between(self, lo: int, hi: int) -> DerivedBlock:
        """Samples ``lo`` to ``hi`` of this stretch (ids, inclusive)."""
        a, b = (int(i) for i in np.searchsorted(self.ids, [lo, hi + 1]))
        out = DerivedBlock(self.ids[a:b], self.t[a:b])
        out.values = {k: v[a:b] for k, v in self.values.items()}
        out.status = {k: v[a:b] for k, v in self.status.items()}
        return out


@functools.lru_cache(maxsize=8)
def _site(text: str, where: str) -> SiteProfile | None:
    try:
        return load_site(where, text=text)
    except ProfileError:
        return None


@functools.lru_cache(maxsize=8)
def _template(text: str, where: str) -> Pipeline | None:
    """A pipeline for a profile, never fed: its band tables (the costly part, tens of ms) are built once."""
    site = _site(text, where)
    return None if site is None else Pipeline(site)


def _fresh(text: str, where: str) -> Pipeline | None:
    """A pipeline for a profile with empty rate history, sharing the template's bands (``Pipeline.fresh``): the
    band objects, whose tables (and the ratio lookups keyed by them) stay cached, are the template's; the state
    ``derive`` changes (the trailing rates, the fallback notes) is new."""
    template = _template(text, where)
    return None if template is None else template.fresh()


def _profiles(reader: LogReader) -> dict[int, str]:
    """Each session's site profile (the firing's where a session kept none)."""
    fallback = reader.firing().get("site_profile") or ""
    return {int(sid): text or fallback for sid, text in reader.query("SELECT id, site_profile FROM session")}


class Deriver:
    """Recomputes the derived channels (``names``, or all) of a log stretch after stretch.

    Profiles are read and parsed once and each profile's pipeline is kept, so a
    stretch that follows the one before it (the next sample ids) goes on with
    the rate history the pipeline carries, as the recorder's did; any other
    stretch is recomputed from ``rate_window_s`` before it.
    """

    def __init__(self, reader: LogReader, names: list[str] | None = None) -> None:
        self.reader = reader
        self.names = names
        self.profiles = _profiles(reader)
        self.where = f"{reader.path} (site profile in the log)"
        self._pipes: dict[str, Pipeline] = {}
        self._next: int | None = None
        """The sample id after the last stretch: a stretch from there goes on with the pipelines as they are."""

    def prepare(self) -> None:
        """Build each profile's band tables now (tens of ms each), so that the first stretch asked for is as quick as the rest.

        A viewer calls this when it opens a log: a seek then costs its reads alone.
        """
        for text in dict.fromkeys(self.profiles.values()):
            pipe = _fresh(text, self.where)
            if pipe is None:
                continue
            one = {name: np.array([1000.0]) for name in pipe.site.channel_names}  # a temperature inside every band table
            pipe.derive(np.zeros(1), one, {name: np.zeros(1, dtype=np.int64) for name in one})

    def _window(self, sessions: np.ndarray) -> float:
        sites = (_site(self.profiles.get(int(s), ""), self.where) for s in np.unique(sessions))
        return max((site.alarms.rate_window_s for site in sites if site is not None), default=0.0)

    def derive(self, lo: int, hi: int, block: Block | None = None) -> DerivedBlock:
        """The derived channels of samples ``lo`` to ``hi``; ``block`` is their measured readings
        (every channel) when the caller has read them already."""
        reader = self.reader
        if block is None:
            block = reader.block(lo, hi)
        if not block.ids.size:
            return DerivedBlock(np.empty(0, dtype=np.int64), np.empty(0))
        texts = list(dict.fromkeys(self.profiles.get(int(s), "") for s in np.unique(block.session)))
        whole = block
        if self._next != lo:
            # not where the last stretch ended: start afresh from the rate window before
            self._pipes = {}
            start = reader.sample_at(float(block.t[0]) - self._window(block.session), after=True) or lo
            if start < lo:
                before = reader.block(start, lo - 1)
                whole = _joined(before, block)
        else:
            # a profile the last stretch did not run needs the window before it too
            for text in texts:
                if text not in self._pipes:
                    self._pipes = {}
                    self._next = None
                    return self.derive(lo, hi, block)
        self._next = hi + 1
        skip = whole.ids.size - block.ids.size
        out = DerivedBlock(block.ids, block.t)
        n = block.ids.size
        # a pipeline per profile, fed every sample in order (a rate spans sessions); each keeps its own sessions' values
        for text in list(self._pipes):
            if text not in texts:
                del self._pipes[text]
        for text in texts:
            pipe = self._pipes.get(text) or _fresh(text, self.where)
            if pipe is None:
                continue
            self._pipes[text] = pipe
            mine = np.isin(whole.session, [s for s, p in self.profiles.items() if p == text])
            got_v, got_s = pipe.derive(whole.t, dict(whole.values), dict(whole.status))
            sel = mine[skip:]
            every = sel.all()
            into = None if every else np.flatnonzero(sel)
            for name in got_v if self.names is None else [x for x in self.names if x in got_v]:
                v, st = got_v[name][skip:], got_s[name][skip:]
                if every and name not in out.values:
                    out.values[name], out.status[name] = v, st.astype(np.int64, copy=False)
                    continue
                if name not in out.values:
                    out.values[name] = np.full(n, np.nan)
                    out.status[name] = np.full(n, int(Status.MISSING), dtype=np.int64)
                out.values[name][into if into is not None else slice(None)] = v[sel]
                out.status[name][into if into is not None else slice(None)] = st[sel]
        return out


def _joined(a: Block, b: Block) -> Block:
    """Two stretches of the same channels, one after the other."""
    from firewatch.store.reader import Block

    return Block(np.concatenate([a.ids, b.ids]), np.concatenate([a.session, b.session]), np.concatenate([a.t, b.t]),
                 {k: np.concatenate([a.values[k], b.values[k]]) for k in b.values},
                 {k: np.concatenate([a.status[k], b.status[k]]) for k in b.status},
                 {k: np.concatenate([a.has[k], b.has[k]]) for k in b.has})


def derived_block(reader: LogReader, lo: int, hi: int, names: list[str] | None = None) -> DerivedBlock:
    """The derived channels (``names``, or all) of samples ``lo`` to ``hi``, recomputed."""
    deriver = Deriver(reader, names)
    parts = [deriver.derive(a, min(a + CHUNK - 1, hi)) for a in range(lo, hi + 1, CHUNK)]
    if len(parts) == 1:
        return parts[0]
    return DerivedBlock.joined([p for p in parts if p.ids.size] or parts[:1])


def derived_series(reader: LogReader, channel: str, lo: int, hi: int) -> Series:
    """One derived channel of samples ``lo`` to ``hi``, recomputed (no values where no profile could be read)."""
    from firewatch.store.reader import Series

    got = derived_block(reader, lo, hi, [channel])
    if channel not in got.values:
        return Series(got.t, np.full(got.t.size, np.nan), np.full(got.t.size, int(Status.MISSING), dtype=np.int64))
    return Series(got.t, got.values[channel], got.status[channel])
