"""Trailing rates of change, robust to noise, vectorised over a batch with history carried between batches."""

from __future__ import annotations

import numpy as np

__all__ = ["TrailingSlope"]

_SUMS = 5
"""The running sums a least-squares slope needs: count, sum t, sum y, sum t*t, sum t*y."""


class TrailingSlope:
    """Least-squares slope over a trailing time window, in units per second.

    Noise averages out over the window (a 300 s window of 1 Hz readings
    with 0.1 degC noise gives a slope good to about 0.1 degC/h); readings
    that are NaN are skipped. A slope needs at least ``min_points`` valid
    readings spanning at least a third of the window, else it is NaN.

    Notes
    -----
    The window's sums are differences of running (prefix) sums kept with the
    history, so a batch costs in proportion to its own readings, not to the
    window (issue 15: recomputing the sums over a 300 s window of 100 Hz
    readings, for every thermocouple and every half-second batch, took 15 %
    of a core at 64 channels). The sums are taken from an origin (a time and
    a value) near the window, moved up to the oldest reading kept whenever it
    falls more than a window behind, so that the differences lose no more
    than a few last places to cancellation.
    """

    def __init__(self, window_s: float, min_points: int = 5) -> None:
        self.window_s = float(window_s)
        self.min_points = min_points
        self._t = np.empty(0)
        self._y = np.empty(0)
        self._sums = np.zeros((_SUMS, 1))
        """Running sums before each kept reading: column i sums readings lo .. i-1 of the buffers."""
        self._lo = 0
        self._hi = 0
        self._origin = (0.0, 0.0)

    def _rebase(self, extra: int) -> None:
        """Move the kept readings to the start of buffers with room for ``extra`` more, the origin to the oldest."""
        t, y = self._t[self._lo : self._hi], self._y[self._lo : self._hi]
        size = max(2 * (t.size + extra), 1024)
        self._t, self._y = np.empty(size), np.empty(size)
        self._t[: t.size], self._y[: t.size] = t, y
        self._sums = np.zeros((_SUMS, size + 1))
        self._lo, self._hi = 0, 0
        self._origin = (float(t[0]), float(y[0])) if t.size else (0.0, 0.0)
        self._append(t, y)

    def _append(self, t: np.ndarray, y: np.ndarray) -> None:
        t0, y0 = self._origin
        tt, dy = t - t0, y - y0
        terms = np.stack([np.ones_like(tt), tt, dy, tt * tt, tt * dy])
        hi, m = self._hi, t.size
        np.cumsum(terms, axis=1, out=self._sums[:, hi + 1 : hi + 1 + m])
        self._sums[:, hi + 1 : hi + 1 + m] += self._sums[:, hi : hi + 1]
        self._t[hi : hi + m], self._y[hi : hi + m] = t, y
        self._hi = hi + m

    def update(self, t: np.ndarray, y: np.ndarray) -> np.ndarray:
        """Slopes at each new reading; ``t`` must not decrease."""
        t = np.asarray(t, dtype=float)
        y = np.asarray(y, dtype=float)
        if t.size == 0:
            return np.empty(0)
        keep = np.isfinite(y) & np.isfinite(t)
        tk, yk = t[keep], y[keep]
        if tk.size:
            empty = self._hi == self._lo
            stale = not empty and self._t[self._lo] - self._origin[0] > self.window_s
            if empty or stale or self._hi + tk.size > self._t.size:
                self._rebase(tk.size)
                if self._hi == self._lo:
                    self._origin = (float(tk[0]), float(yk[0]))
            self._append(tk, yk)
        lo, hi = self._lo, self._hi
        all_t = self._t[lo:hi]
        # history for the next batch: what the window can still reach
        self._lo = lo + int(np.searchsorted(all_t, t[-1] - self.window_s, side="left"))
        if all_t.size == 0:
            return np.full(t.shape, np.nan)
        end = np.searchsorted(all_t, t, side="right")
        begin = np.searchsorted(all_t, t - self.window_s, side="right")
        n, st, sy, stt, sty = self._sums[:, lo + end] - self._sums[:, lo + begin]
        denom = n * stt - st * st
        with np.errstate(divide="ignore", invalid="ignore"):
            slope = (n * sty - st * sy) / denom
        span = np.where(end > begin, all_t[np.clip(end - 1, 0, None)] - all_t[np.clip(begin, 0, all_t.size - 1)], 0.0)
        ok = (n >= self.min_points) & (span >= self.window_s / 3.0) & (denom > 0)
        return np.where(ok, slope, np.nan)
