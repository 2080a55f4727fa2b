"""Trailing rates of change, robust to noise, vectorised over a batch (and over channels) with history carried between batches."""

from __future__ import annotations

import numpy as np

__all__ = ["TrailingSlope", "TrailingSlopes"]


class TrailingSlopes:
    """Least-squares slopes over a trailing time window, in units per second, for several channels read together.

    Noise averages out over the window (a 300 s window of 1 Hz readings
    with 0.1 degC noise gives a slope good to about 0.1 degC/h); readings
    that are NaN are skipped. A slope needs at least ``min_points`` valid
    readings spanning at least a third of the window, else it is NaN.

    Parameters
    ----------
    window_s : float
        The trailing window, s.
    channels : int
        Channels updated together, sharing their readings' times.
    min_points : int
        Valid readings a slope needs in its window.

    Notes
    -----
    The slope is the least-squares one from the window's sums,
    b = (n Sty - St Sy) / (n Stt - St^2) (the normal equations; common
    practice, no source). The sums over the readings kept are carried from
    batch to batch: a batch adds its readings' terms and takes off those of
    the readings that left the window, so that it costs in proportion to its
    own readings rather than to the window, and all channels go through each
    step in one call (issue 15: recomputing the sums over a 300 s window of
    100 Hz readings, for each thermocouple in each half-second batch, took
    15 % of a core at 64 channels). The terms are taken from an origin moved
    up to the oldest reading kept whenever it falls more than a window
    behind, the sums then recomputed, so that neither cancellation nor the
    carried additions cost more than a few last places. The times of each
    channel's valid readings are kept in a row of their own, so that the
    first and last valid reading of a window (its span) are read by their
    count.
    """

    def __init__(self, window_s: float, channels: int, min_points: int = 5) -> None:
        self.window_s = float(window_s)
        self.channels = channels
        self.min_points = min_points
        k = channels
        self._t = np.empty(0)
        self._y = np.empty((k, 0))
        self._lo = 0
        self._hi = 0
        """The readings kept (within reach of the window) are ``_t[_lo:_hi]``, ``_y[:, _lo:_hi]`` (NaN where not valid)."""
        self._t0 = 0.0
        self._y0 = np.full(k, np.nan)
        """The origin of the terms: a time, and a value for each channel (NaN until the channel has one)."""
        self._total = np.zeros((5, k))
        """Count and sums of t, y, t*t, t*y (from the origin) over each channel's valid readings kept."""
        self._gone = np.zeros(k, dtype=np.int64)
        """Valid readings of each channel before the readings kept."""
        self._valid_t = np.empty((k, 0))
        self._valid_base = np.zeros(k, dtype=np.int64)
        """Times of each channel's valid readings, row by row; ``_valid_t[c, 0]`` is the channel's reading number
        ``_valid_base[c]`` (counted from the first)."""
        self._valid_count = np.zeros(k, dtype=np.int64)

    def _terms(self, t: np.ndarray, y: np.ndarray) -> np.ndarray:
        """Running sums of the readings' terms, shape (5, channels, size + 1), from a leading zero."""
        valid = np.isfinite(y)
        v = valid.astype(float)
        ttv = (t - self._t0) * v
        dyv = np.where(valid, y - self._y0[:, None], 0.0)
        out = np.zeros((5, y.shape[0], t.size + 1))
        np.cumsum(np.stack([v, ttv, dyv, ttv * ttv, ttv * dyv]), axis=2, out=out[:, :, 1:])
        return out

    def _set_first_values(self, y: np.ndarray) -> None:
        """Channels without a value at the origin take their first valid one in ``y``."""
        need = np.isnan(self._y0)
        if need.any() and y.shape[1]:
            valid = np.isfinite(y)
            has = valid.any(axis=1) & need
            first = np.argmax(valid, axis=1)
            self._y0 = np.where(has, y[np.arange(y.shape[0]), first], self._y0)

    def _rebase(self, extra: int, t_new: np.ndarray) -> None:
        """Move the kept readings to the start of buffers with room for ``extra`` more, the origin to the oldest."""
        k = self.channels
        t, y = self._t[self._lo : self._hi], self._y[:, self._lo : self._hi]
        size = max((3 * (t.size + extra)) // 2, 1024)
        self._t, self._y = np.empty(size), np.empty((k, size))
        self._t[: t.size], self._y[:, : t.size] = t, y
        self._lo, self._hi = 0, t.size
        self._t0 = float(t[0]) if t.size else float(t_new[0])
        self._y0 = np.full(k, np.nan)
        self._set_first_values(y)
        self._total = self._terms(t, y)[:, :, -1]
        # each channel's valid times, from its first kept valid reading on
        valid = np.isfinite(y)
        rows, cols = np.nonzero(valid)
        rank = np.cumsum(valid, axis=1) - 1
        self._valid_t = np.empty((k, size))
        self._valid_t[rows, rank[rows, cols]] = t[cols]
        self._valid_base = self._gone.copy()

    def update(self, t: np.ndarray, y: np.ndarray) -> np.ndarray:
        """Slopes at each new reading, shape (channels, readings); ``t`` must not decrease.

        Parameters
        ----------
        t : array, shape (n,)
            The readings' times, s.
        y : array, shape (channels, n)
            The channels' readings; NaN where a channel has none.
        """
        t = np.asarray(t, dtype=float)
        y = np.asarray(y, dtype=float).reshape(self.channels, t.size)
        k = self.channels
        if t.size == 0:
            return np.empty((k, 0))
        timed = np.isfinite(t)
        ta, ya = (t, y) if timed.all() else (t[timed], y[:, timed])
        m = ta.size
        if m:
            empty = self._hi == self._lo
            stale = not empty and self._t[self._lo] - self._t0 > self.window_s
            if empty or stale or self._hi + m > self._t.size:
                self._rebase(m, ta)
            self._set_first_values(ya)
        lo, held = self._lo, self._hi - self._lo
        self._t[self._hi : self._hi + m], self._y[:, self._hi : self._hi + m] = ta, ya
        self._hi += m
        # the new valid readings' times, each channel's after its own
        valid_new = np.isfinite(ya)
        rows, cols = np.nonzero(valid_new)
        rank = np.cumsum(valid_new, axis=1) - 1
        self._valid_t[rows, (self._valid_count - self._valid_base)[rows] + rank[rows, cols]] = ta[cols]
        self._valid_count += valid_new.sum(axis=1)
        all_t = self._t[lo : self._hi]
        if all_t.size == 0:
            return np.full((k, t.size), np.nan)
        end = np.searchsorted(all_t, t, side="right")
        begin = np.searchsorted(all_t, t - self.window_s, side="right")
        # history for the next batch: what the window can still reach
        drop = int(np.searchsorted(all_t, t[-1] - self.window_s, side="left"))
        # the running sums at any place p among the kept readings and the new: within the kept ones only as
        # far as a window's start or the cut reaches (the start of the history, about a batch's length)
        new = self._terms(ta, ya)
        reach = min(max(int(begin.max()), drop), held)
        head = self._terms(self._t[lo : lo + reach], self._y[:, lo : lo + reach])
        total = self._total

        def at(p: np.ndarray) -> np.ndarray:
            return np.where(p <= reach, head[:, :, np.minimum(p, reach)], total[:, :, None] + new[:, :, np.clip(p - held, 0, m)])

        s_end, s_begin = at(end), at(begin)
        n, st, sy, stt, sty = s_end - s_begin
        cut = at(np.array([drop]))[:, :, 0]
        self._total = at(np.array([held + m]))[:, :, 0] - cut
        self._lo = lo + drop
        before = self._gone[:, None] - self._valid_base[:, None]
        self._gone = self._gone + np.rint(cut[0]).astype(np.int64)
        denom = n * stt - st * st
        with np.errstate(divide="ignore", invalid="ignore"):
            slope = (n * sty - st * sy) / denom
        # the window's first and last valid readings, by their count
        last_valid = np.maximum(self._valid_count - self._valid_base - 1, 0)[:, None]
        first = np.clip(before + np.rint(s_begin[0]).astype(np.int64), 0, last_valid)
        last = np.clip(before + np.rint(s_end[0]).astype(np.int64) - 1, 0, last_valid)
        ch = np.arange(k)[:, None]
        with np.errstate(invalid="ignore"):  # a channel with no valid reading yet holds NaN times: its span is not used
            span = np.where(n > 0, self._valid_t[ch, last] - self._valid_t[ch, first], 0.0)
        ok = (n >= self.min_points) & (span >= self.window_s / 3.0) & (denom > 0)
        return np.where(ok, slope, np.nan)


class TrailingSlope:
    """Least-squares slope over a trailing time window, in units per second, for one channel.

    See :class:`TrailingSlopes`, which this reads one channel through.
    """

    def __init__(self, window_s: float, min_points: int = 5) -> None:
        self.window_s = float(window_s)
        self.min_points = min_points
        self._slopes = TrailingSlopes(window_s, 1, min_points)

    def update(self, t: np.ndarray, y: np.ndarray) -> np.ndarray:
        """Slopes at each new reading; ``t`` must not decrease."""
        t = np.asarray(t, dtype=float)
        return self._slopes.update(t, np.asarray(y, dtype=float).reshape(1, t.size))[0]
