"""The trailing least-squares slope: running sums against the sums recomputed over the whole window (issue 15)."""

from __future__ import annotations

import numpy as np
import pytest

from firewatch.firing.rates import TrailingSlope, TrailingSlopes


class _WholeWindow:
    """The slope as it was computed before issue 15: every sum recomputed over the kept history at every batch.

    The least-squares slope of y on t, b = (n*Sty - St*Sy) / (n*Stt - St**2), is the textbook normal-equation
    form (common practice, no source)."""

    def __init__(self, window_s: float, min_points: int = 5) -> None:
        self.window_s, self.min_points = window_s, min_points
        self._t, self._y = np.empty(0), np.empty(0)

    def update(self, t: np.ndarray, y: np.ndarray) -> np.ndarray:
        keep = np.isfinite(y) & np.isfinite(t)
        all_t = np.concatenate([self._t, t[keep]])
        all_y = np.concatenate([self._y, y[keep]])
        start = np.searchsorted(all_t, t[-1] - self.window_s, side="left")
        self._t, self._y = all_t[start:], all_y[start:]
        if all_t.size == 0:
            return np.full(t.shape, np.nan)
        tt, dy = all_t - all_t[0], all_y - all_y[0]
        sums = [np.concatenate([[0.0], np.cumsum(x)]) for x in (np.ones_like(tt), tt, dy, tt * tt, tt * dy)]
        end = np.searchsorted(all_t, t, side="right")
        begin = np.searchsorted(all_t, t - self.window_s, side="right")
        n, st, sy, stt, sty = (s[end] - s[begin] for s in sums)
        denom = n * stt - st * st
        with np.errstate(divide="ignore", invalid="ignore"):
            slope = (n * sty - st * sy) / denom
        span = np.where(end > begin, all_t[np.clip(end - 1, 0, None)] - all_t[np.clip(begin, 0, all_t.size - 1)], 0.0)
        return np.where((n >= self.min_points) & (span >= self.window_s / 3.0) & (denom > 0), slope, np.nan)


def _stream(seed: int, size: int) -> tuple[np.ndarray, np.ndarray]:
    """100 Hz-ish readings of a ramp with noise, missing readings, a long dropout and a jump of the clock."""
    rng = np.random.default_rng(seed)
    t = 1_770_000_000.0 + np.cumsum(rng.uniform(0.005, 0.02, size))
    t[size // 4 :] += 200.0  # a stretch with nothing for 200 s
    y = 20.0 + 0.15 * (t - t[0]) + rng.normal(0.0, 0.1, size)
    y[rng.uniform(size=size) < 0.05] = np.nan
    y[size // 2 : size // 2 + size // 20] = np.nan  # a dropout of the channel alone
    return t, y


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_running_sums_give_the_whole_window_slopes(seed: int) -> None:
    # issue 15: the sums are kept running instead of recomputed over the window at every batch; the slopes
    # must be the same to rounding (the origin moves differently) and NaN exactly where they were
    t, y = _stream(seed, 120_000)  # about 20 windows of 300 s: the origin moves many times
    rng = np.random.default_rng(seed + 100)
    fast, whole = TrailingSlope(300.0), _WholeWindow(300.0)
    i = finite = 0
    while i < t.size:
        m = int(rng.integers(1, 400))
        a, b = fast.update(t[i : i + m], y[i : i + m]), whole.update(t[i : i + m], y[i : i + m])
        assert np.array_equal(np.isnan(a), np.isnan(b)), i
        np.testing.assert_allclose(a, b, rtol=1e-9, atol=1e-12)
        finite += int(np.isfinite(a).sum())
        i += m
    # the slopes were there most of the time, and gone after the gap and the dropout (the window needs refilling)
    assert t.size // 2 < finite < t.size


def test_slope_of_a_known_ramp() -> None:
    # an exact straight line 0.25 units/s read at 1 Hz: the least-squares slope is the line's (common practice, no source)
    t = np.arange(0.0, 2000.0)
    y = 3.0 + 0.25 * t
    s = TrailingSlope(300.0)
    out = np.concatenate([s.update(t[i : i + 7], y[i : i + 7]) for i in range(0, t.size, 7)])
    assert np.isnan(out[:99]).all()  # under a third of the window
    np.testing.assert_allclose(out[100:], 0.25, rtol=1e-12)


def test_one_batch_and_many_batches_agree() -> None:
    # a report takes the slope over a whole stretch at once; the recorder batch by batch
    t, y = _stream(7, 40_000)
    one = TrailingSlope(300.0).update(t, y)
    s = TrailingSlope(300.0)
    many = np.concatenate([s.update(t[i : i + 50], y[i : i + 50]) for i in range(0, t.size, 50)])
    assert np.array_equal(np.isnan(one), np.isnan(many))
    np.testing.assert_allclose(one, many, rtol=1e-9, atol=1e-12)


def test_empty_and_all_missing_batches() -> None:
    s = TrailingSlope(10.0)
    assert s.update(np.empty(0), np.empty(0)).size == 0
    assert np.isnan(s.update(np.arange(5.0), np.full(5, np.nan))).all()
    out = s.update(np.arange(5.0, 20.0), np.arange(5.0, 20.0) * 2.0)
    assert np.isnan(out[:3]).all()  # 5..7 s: under a third of the window since the first reading at 5 s
    np.testing.assert_allclose(out[4:], 2.0, rtol=1e-12)


def test_channels_together_as_each_alone() -> None:
    # issue 15: the pipeline takes every thermocouple's rate in one call; each channel's slopes must be those
    # of the channel alone: one with readings missing here and there and a dropout, one that never reads,
    # one that stops reading, one missing every third reading
    t, y0 = _stream(11, 60_000)
    rng = np.random.default_rng(11)
    ys = np.stack([y0, np.full(t.size, np.nan), np.where(np.arange(t.size) < t.size // 3, y0 + 5.0, np.nan),
                   np.where(np.arange(t.size) % 3 == 0, np.nan, 2.0 * y0)])
    together = TrailingSlopes(300.0, ys.shape[0])
    alone = [_WholeWindow(300.0) for _ in ys]
    i = 0
    while i < t.size:
        m = int(rng.integers(1, 300))
        got = together.update(t[i : i + m], ys[:, i : i + m])
        for r, (row, ref) in enumerate(zip(got, alone)):
            want = ref.update(t[i : i + m], ys[r, i : i + m])
            assert np.array_equal(np.isnan(row), np.isnan(want)), i
            np.testing.assert_allclose(row, want, rtol=1e-9, atol=1e-12)
        i += m
    assert np.isnan(got[1]).all() and np.isnan(got[2]).all() and np.isfinite(got[0]).any() and np.isfinite(got[3]).any()


def test_readings_without_a_time_are_skipped() -> None:
    # a reading whose time is NaN has no place in any window: NaN itself, and the others as without it
    t = np.arange(0.0, 200.0)
    y = 0.5 * t
    t_bad = t.copy()
    t_bad[150] = np.nan
    a = TrailingSlope(60.0).update(t, np.where(np.arange(t.size) == 150, np.nan, y))
    b = TrailingSlope(60.0).update(t_bad, y)
    assert np.isnan(b[150])
    keep = np.arange(t.size) != 150
    np.testing.assert_allclose(b[keep], a[keep], rtol=1e-12)
