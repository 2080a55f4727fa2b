"""Trailing rates of change, robust to noise, vectorised over a batch with history carried between batches."""

from __future__ import annotations

import numpy as np

__all__ = ["TrailingSlope"]


class TrailingSlope:
    """Least-squares slope over a trailing time window, in units per second.

    Noise averages out over the window (a 300 s window of 1 Hz readings
    with 0.1 degC noise gives a slope good to about 0.1 degC/h); readings
    that are NaN are skipped. A slope needs at least ``min_points`` valid
    readings spanning at least a third of the window, else it is NaN.

    Notes
    -----
    The slope is the least-squares one from the window's sums,
    b = (n Sty - St Sy) / (n Stt - St^2) (the normal equations; common
    practice). The sums over the readings kept are carried from batch to
    batch: a batch adds its readings' terms and takes off those of the
    readings that left the window, so that it costs in proportion to its own
    readings rather than to the window (issue 15: recomputing the sums over
    a 300 s window of 100 Hz readings, for each thermocouple in each
    half-second batch, took 15 % of a core at 64 channels). The terms are
    taken from an origin (a time and a value) moved up to the oldest reading
    kept whenever it falls more than a window behind, the sums then
    recomputed, so that neither cancellation nor the carried additions cost
    more than a few last places.
    """

    def __init__(self, window_s: float, min_points: int = 5) -> None:
        self.window_s = float(window_s)
        self.min_points = min_points
        self._t = np.empty(0)
        self._y = np.empty(0)
        self._lo = 0
        self._hi = 0
        """The readings kept (within reach of the window) are ``_t[_lo:_hi]``, ``_y[_lo:_hi]``."""
        self._origin = (0.0, 0.0)
        self._total = np.zeros(4)
        """Sums of t, y, t*t and t*y (from the origin) over the readings kept."""

    def _terms(self, t: np.ndarray, y: np.ndarray) -> np.ndarray:
        """The running sums of the readings' terms, with a leading zero: shape (4, size + 1)."""
        tt, dy = t - self._origin[0], y - self._origin[1]
        out = np.zeros((4, t.size + 1))
        np.cumsum(np.stack([tt, dy, tt * tt, tt * dy]), axis=1, out=out[:, 1:])
        return out

    def _rebase(self, extra: int) -> None:
        """Move the kept readings to the start of buffers with room for ``extra`` more, the origin to the oldest."""
        t, y = self._t[self._lo : self._hi], self._y[self._lo : self._hi]
        size = max((3 * (t.size + extra)) // 2, 1024)
        self._t, self._y = np.empty(size), np.empty(size)
        self._t[: t.size], self._y[: t.size] = t, y
        self._lo, self._hi = 0, t.size
        self._origin = (float(t[0]), float(y[0])) if t.size else (0.0, 0.0)
        self._total = self._terms(t, y)[:, -1]

    def update(self, t: np.ndarray, y: np.ndarray) -> np.ndarray:
        """Slopes at each new reading; ``t`` must not decrease."""
        t = np.asarray(t, dtype=float)
        y = np.asarray(y, dtype=float)
        if t.size == 0:
            return np.empty(0)
        keep = np.isfinite(y) & np.isfinite(t)
        tk, yk = t[keep], y[keep]
        m = tk.size
        if m:
            empty = self._hi == self._lo
            stale = not empty and self._t[self._lo] - self._origin[0] > self.window_s
            if empty or stale or self._hi + m > self._t.size:
                self._rebase(m)
                if empty:
                    self._origin = (float(tk[0]), float(yk[0]))
        lo, held = self._lo, self._hi - self._lo
        self._t[self._hi : self._hi + m], self._y[self._hi : self._hi + m] = tk, yk
        self._hi += m
        all_t = self._t[lo : self._hi]
        if all_t.size == 0:
            return np.full(t.shape, np.nan)
        end = np.searchsorted(all_t, t, side="right")
        begin = np.searchsorted(all_t, t - self.window_s, side="right")
        # history for the next batch: what the window can still reach
        drop = int(np.searchsorted(all_t, t[-1] - self.window_s, side="left"))
        # the running sums at any place p among the kept readings and the new: within the kept ones only
        # as far as a window's start or the cut reaches (the start of the history, a batch's length)
        new = self._terms(tk, yk)
        reach = min(max(int(begin.max()), drop), held)
        head = self._terms(self._t[lo : lo + reach], self._y[lo : lo + reach])

        def at(p: np.ndarray) -> np.ndarray:
            inside = p <= reach
            return np.where(inside, head[:, np.minimum(p, reach)], self._total[:, None] + new[:, np.clip(p - held, 0, m)])

        st, sy, stt, sty = at(end) - at(begin)
        self._total = (at(np.array([held + m])) - at(np.array([drop])))[:, 0]
        self._lo = lo + drop
        n = (end - begin).astype(float)
        denom = n * stt - st * st
        with np.errstate(divide="ignore", invalid="ignore"):
            slope = (n * sty - st * sy) / denom
        span = np.where(end > begin, all_t[np.clip(end - 1, 0, None)] - all_t[np.clip(begin, 0, all_t.size - 1)], 0.0)
        ok = (n >= self.min_points) & (span >= self.window_s / 3.0) & (denom > 0)
        return np.where(ok, slope, np.nan)
