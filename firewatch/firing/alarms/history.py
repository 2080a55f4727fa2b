"""The recent past that the likely cause looks at: 10-second means of chosen channels."""

from __future__ import annotations

import numpy as np

__all__ = ["History", "BIN_S"]

BIN_S = 10.0
"""Width of one history bin, seconds."""


class History:
    """10-second means of chosen channels over the last two hours (before the latest batch), for the cause of a divergence.

    Parameters
    ----------
    names : list of str
        The channels to keep (readings and derived channels alike).
    """

    BIN_S = BIN_S
    KEEP_S = 7200.0

    def __init__(self, names: list[str]) -> None:
        self.names = names
        self.t = np.empty(0)
        self.v = {n: np.empty(0) for n in names}
        self._bin: float | None = None
        self._open_sum: dict[str, float] = {}
        self._open_count: dict[str, float] = {}

    def add(self, times: np.ndarray, values: dict[str, np.ndarray]) -> None:
        """Add a batch; each completed 10 s bin becomes one mean per channel (vectorised with reduceat)."""
        if times.size == 0:
            return
        bins = np.floor(times / self.BIN_S)
        starts = np.concatenate([[0], np.flatnonzero(np.diff(bins)) + 1])
        bin_ids = bins[starts]
        sums: dict[str, np.ndarray] = {}
        counts: dict[str, np.ndarray] = {}
        for n in self.names:
            col = values.get(n)
            if col is None:
                col = np.full(times.size, np.nan)
            ok = np.isfinite(col)
            sums[n] = np.add.reduceat(np.where(ok, col, 0.0), starts)
            counts[n] = np.add.reduceat(ok.astype(float), starts)
        # merge the bin left open by the previous batch
        if self._bin is not None and bin_ids[0] == self._bin:
            for n in self.names:
                sums[n][0] += self._open_sum[n]
                counts[n][0] += self._open_count[n]
        elif self._bin is not None:
            bin_ids = np.concatenate([[self._bin], bin_ids])
            for n in self.names:
                sums[n] = np.concatenate([[self._open_sum[n]], sums[n]])
                counts[n] = np.concatenate([[self._open_count[n]], counts[n]])
        # the last bin stays open for the next batch
        self._bin = float(bin_ids[-1])
        self._open_sum = {n: float(sums[n][-1]) for n in self.names}
        self._open_count = {n: float(counts[n][-1]) for n in self.names}
        done = bin_ids[:-1]
        if done.size == 0:
            return
        self.t = np.concatenate([self.t, (done + 0.5) * self.BIN_S])
        for n in self.names:
            with np.errstate(invalid="ignore", divide="ignore"):
                mean = sums[n][:-1] / counts[n][:-1]
            self.v[n] = np.concatenate([self.v[n], np.where(counts[n][:-1] > 0, mean, np.nan)])
        # keep two hours before the batch's first reading, so that whatever is judged inside a long batch (replay's
        # thousands of lines) sees the same past as in the recorder's half-second batches
        keep = self.t >= float(times[0]) - self.KEEP_S
        self.t = self.t[keep]
        for n in self.names:
            self.v[n] = self.v[n][keep]

    def window(self, end_t: float, span_s: float) -> tuple[np.ndarray, dict[str, np.ndarray]]:
        """The bin times in ``(end_t - span_s, end_t]`` and each channel's means there."""
        # the bins are in time order (the firing's time line never goes back): two binary searches, and views
        lo = int(np.searchsorted(self.t, end_t - span_s, side="right"))
        hi = int(np.searchsorted(self.t, end_t, side="right"))
        return self.t[lo:hi], {n: self.v[n][lo:hi] for n in self.names}
