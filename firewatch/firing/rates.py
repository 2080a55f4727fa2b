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
    """

    def __init__(self, window_s: float, min_points: int = 5) -> None:
        self.window_s = float(window_s)
        self.min_points = min_points
        self._t = np.empty(0)
        self._y = np.empty(0)

    def update(self, t: np.ndarray, y: np.ndarray) -> np.ndarray:
        """Slopes at each new reading; ``t`` must not decrease."""
        t = np.asarray(t, dtype=float)
        y = np.asarray(y, dtype=float)
        if t.size == 0:
            return np.empty(0)
        keep = np.isfinite(y) & np.isfinite(t)
        all_t = np.concatenate([self._t, t[keep]])
        all_y = np.concatenate([self._y, y[keep]])
        # history for the next batch: what the window can still reach
        cutoff = t[-1] - self.window_s
        start_keep = np.searchsorted(all_t, cutoff, side="left")
        self._t, self._y = all_t[start_keep:], all_y[start_keep:]
        if all_t.size == 0:
            return np.full(t.shape, np.nan)
        t0 = all_t[0]
        tt = all_t - t0
        c = np.concatenate([[0.0], np.cumsum(np.ones_like(tt))])
        ct = np.concatenate([[0.0], np.cumsum(tt)])
        cy = np.concatenate([[0.0], np.cumsum(all_y - all_y[0])])
        ctt = np.concatenate([[0.0], np.cumsum(tt * tt)])
        cty = np.concatenate([[0.0], np.cumsum(tt * (all_y - all_y[0]))])
        end = np.searchsorted(all_t, t, side="right")
        begin = np.searchsorted(all_t, t - self.window_s, side="right")
        n = c[end] - c[begin]
        st = ct[end] - ct[begin]
        sy = cy[end] - cy[begin]
        stt = ctt[end] - ctt[begin]
        sty = cty[end] - cty[begin]
        denom = n * stt - st * st
        with np.errstate(divide="ignore", invalid="ignore"):
            slope = (n * sty - st * sy) / denom
        span = np.where(end > begin, all_t[np.clip(end - 1, 0, None)] - all_t[np.clip(begin, 0, all_t.size - 1)], 0.0)
        ok = (n >= self.min_points) & (span >= self.window_s / 3.0) & (denom > 0)
        return np.where(ok, slope, np.nan)
