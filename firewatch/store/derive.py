"""Derived channels recomputed on read, from the measured readings and the profile each session ran with.

The compact layout keeps only what was measured per sample; a rate, a
reconciled temperature, its uncertainty, a divergence and its allowance are
recomputed here by the same :meth:`~firewatch.firing.pipeline.Pipeline.derive`
the recorder ran, so a reader sees what the recorder computed (to the last
bits of a float: the trailing rate sums from where its window starts). Each
stretch is read from ``rate_window_s`` before it, so that its first rates
have their whole window.
"""

from __future__ import annotations

import functools
from typing import TYPE_CHECKING

import numpy as np

from firewatch.firing.pipeline import Pipeline
from firewatch.settings._tomlcheck import ProfileError
from firewatch.settings.profile import SiteProfile, load_site

if TYPE_CHECKING:
    from firewatch.store.reader import LogReader, Series

__all__ = ["DerivedBlock", "derived_block", "derived_series"]

CHUNK = 50_000
"""Samples recomputed at a time (bounded memory for a week-long log)."""


class DerivedBlock:
    """Derived channels of samples ``ids``: times, values and statuses by channel name."""

    def __init__(self, ids: np.ndarray, t: np.ndarray) -> None:
        self.ids = ids
        self.t = t
        self.values: dict[str, np.ndarray] = {}
        self.status: dict[str, np.ndarray] = {}


@functools.lru_cache(maxsize=8)
def _site(text: str, where: str) -> SiteProfile | None:
    try:
        return load_site(where, text=text)
    except ProfileError:
        return None


def _profiles(reader: LogReader) -> dict[int, str]:
    """Each session's site profile (the firing's where a session kept none)."""
    fallback = reader.firing().get("site_profile") or ""
    return {int(sid): text or fallback for sid, text in reader.query("SELECT id, site_profile FROM session")}


def derived_block(reader: LogReader, lo: int, hi: int, names: list[str] | None = None) -> DerivedBlock:
    """The derived channels (``names``, or all) of samples ``lo`` to ``hi``, recomputed."""
    profiles = _profiles(reader)
    parts: list[DerivedBlock] = []
    for a in range(lo, hi + 1, CHUNK):
        parts.append(_chunk(reader, a, min(a + CHUNK - 1, hi), profiles, names))
    if len(parts) == 1:
        return parts[0]
    out = DerivedBlock(np.concatenate([p.ids for p in parts]), np.concatenate([p.t for p in parts]))
    for name in parts[0].values:
        out.values[name] = np.concatenate([p.values[name] for p in parts])
        out.status[name] = np.concatenate([p.status[name] for p in parts])
    return out


def _chunk(reader: LogReader, lo: int, hi: int, profiles: dict[int, str], names: list[str] | None) -> DerivedBlock:
    first_t = reader.query("SELECT t FROM sample WHERE id >= ? ORDER BY id LIMIT 1", (lo,))
    if not first_t:
        return DerivedBlock(np.empty(0, dtype=np.int64), np.empty(0))
    sessions = sorted({int(s) for (s,) in reader.query("SELECT DISTINCT session_id FROM sample WHERE id BETWEEN ? AND ?", (lo, hi))})
    window = max((site.alarms.rate_window_s for s in sessions if (site := _site(profiles.get(s, ""), str(reader.path))) is not None), default=0.0)
    start = reader.sample_at(float(first_t[0][0]) - window, after=True) or lo
    block = reader.block(min(start, lo), hi)
    keep = block.ids >= lo
    out = DerivedBlock(block.ids[keep], block.t[keep])
    n = int(keep.sum())
    # the sessions in this stretch, in runs of one profile: each run recomputed with its own, from the window before it
    for text in dict.fromkeys(profiles.get(int(s), "") for s in np.unique(block.session[keep])):
        site = _site(text, f"{reader.path} (site profile in the log)")
        mine = np.isin(block.session, [s for s, p in profiles.items() if p == text])
        if site is None or not mine[keep].any():
            continue
        upto = int(np.flatnonzero(mine)[-1]) + 1
        values = {k: v[:upto] for k, v in block.values.items()}
        status = {k: v[:upto] for k, v in block.status.items()}
        got_v, got_s = Pipeline(site).derive(block.t[:upto], values, status)
        sel = (mine & keep)[:upto]
        into = np.flatnonzero(mine[keep])
        for name in got_v if names is None else [x for x in names if x in got_v]:
            if name not in out.values:
                out.values[name] = np.full(n, np.nan)
                out.status[name] = np.full(n, 6, dtype=np.int64)  # missing
            out.values[name][into] = got_v[name][sel]
            out.status[name][into] = got_s[name][sel]
    return out


def derived_series(reader: LogReader, channel: str, lo: int, hi: int) -> Series:
    """One derived channel of samples ``lo`` to ``hi``, recomputed (no values where no profile could be read)."""
    from firewatch.store.reader import Series

    got = derived_block(reader, lo, hi, [channel])
    if channel not in got.values:
        return Series(got.t, np.full(got.t.size, np.nan), np.full(got.t.size, 6, dtype=np.int64))
    return Series(got.t, got.values[channel], got.status[channel])
