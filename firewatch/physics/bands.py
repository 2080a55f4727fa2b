"""Instrument bands: spectral response, band radiance and its fast inversion.

An instrument with relative spectral response R(lambda) sees the band
signal

    S(T) = integral R(lambda) L(lambda, T) d lambda,

with L Planck's spectral radiance (:func:`~firewatch.physics.planck.planck_radiance`).
A :class:`Band` stores a quadrature rule for that integral: nodes
lambda_i and weights w_i with the response folded into the weights, so
that S(T) = sum_i w_i L(lambda_i, T). A window's spectral transmission is
folded in the same way (:meth:`Band.weighted`).

Quadrature rule
---------------
Composite Gauss-Legendre, 16 nodes a panel. Panels are sized so that the
exponent c2/(lambda T) changes by at most 2 across a panel at the lowest
table temperature, which makes the rule accurate to about 1e-12 relative
for any smooth response; a tabulated response is linear between its points
and every table point is a panel edge.

Fast inversion
--------------
:meth:`Band.log_signal` and :meth:`Band.temperature_from_log_signal` use a
table of ln S against ln T on 8192 points uniform in ln T from
:data:`TABLE_T_MIN_K` to :data:`TABLE_T_MAX_K`, read by linear
interpolation. Measured against quadrature the largest error is
below 1e-4 K over 300-3300 K for bands from 0.65 to 14 um
(tests/physics/test_bands.py and benchmarks/bench_corrections.py). A table
was chosen over the Sakuma-Hattori equation [Sakuma1982]_ because one
interpolation is cheaper than its exp and log and needs no fit per band.

The interpolation gives :func:`numpy.interp`'s own result, to the bit,
but many arguments out of order are read without its search
(:class:`_Knots`): numpy bisects the knots for every argument, which then
costs several times the arithmetic; buckets narrow enough that no two
knots share one find each interval with one lookup and one comparison.
Few arguments, and arguments in order (readings in time order, where
numpy.interp starts from the previous interval), still go to numpy.interp.

References
----------
See ``Planck1901`` and ``Sakuma1982`` in docs/references.md.
"""

from __future__ import annotations

import csv
import warnings
from collections.abc import Callable
from functools import cached_property
from pathlib import Path

import numpy as np
from numpy.typing import ArrayLike, NDArray

from firewatch.physics._warnings import OutOfRangeWarning, RangeError, exact
from firewatch.physics.constants import C2
from firewatch.physics.planck import check_temperature, planck_radiance

__all__ = ["Band", "TABLE_T_MIN_K", "TABLE_T_MAX_K", "band_radiance"]

TABLE_T_MIN_K: float = 200.0
"""Lowest temperature of the inversion table, K."""
TABLE_T_MAX_K: float = 4000.0
"""Highest temperature of the inversion table, K."""
_TABLE_POINTS = 8192
_GL_NODES = 16
_MAX_EXPONENT_STEP = 2.0
_CHUNK = 1 << 15
_LOG_T = np.linspace(np.log(TABLE_T_MIN_K), np.log(TABLE_T_MAX_K), _TABLE_POINTS)
"""The tables' ln T knots, shared by every band (so one search serves several bands)."""
_SEARCH_BELOW = 512
"""Below this many arguments numpy.interp's own search is the cheaper (measured, benchmarks/bench_corrections.py)."""
_MAX_BUCKETS = 1 << 20
"""At most this many buckets (8 MB of indices) for one table; a table needing more is read by numpy.interp."""
_SLICE = 1 << 15
"""Arguments read at a time: the temporaries of a slice stay in the cache (measured, benchmarks/bench_corrections.py)."""
_SAMPLE_PAIRS = 256
"""Neighbouring pairs of arguments sampled to tell ordered arguments (a firing in time order) from scattered ones."""
_NEAR_KNOTS = 4.0
"""Ordered: most sampled steps are within this many mean knot intervals, where numpy.interp's guess finds the interval."""


class _Knots:
    """Where arguments fall among increasing knots xp: numpy.interp's search, without searching.

    :func:`numpy.interp` bisects ``xp`` for each argument (its guess from the
    previous argument spares that only for ordered input); no numpy function
    finds an interval in constant time, so it is written here. Each argument
    goes to a bucket b(x) = trunc(a x + c), and each knot to the bucket the
    same expression gives it; the buckets are made narrow enough that no two
    knots share one (checked when built). As b is non-decreasing in x even
    as rounded, a knot in a lower bucket lies below x and one in a higher
    bucket above it, so the interval is the last knot of the lower buckets or
    the knot in x's own bucket: one comparison decides, exactly, with no
    rounding margin. Values then follow numpy.interp's own expression.

    Index J = j + 1 is used throughout: J = 0 stands for "below the first
    knot" and J = n + 1 for "above the last", both with NaN values.

    Parameters
    ----------
    xp : numpy.ndarray
        Strictly increasing finite knots, at least two.
    """

    def __init__(self, xp: NDArray[np.float64]) -> None:
        n = xp.size
        self.xp = xp
        self.x_last = float(xp[-1])
        span = float(xp[-1] - xp[0])
        self._near = _NEAR_KNOTS * span / (n - 1)
        m = int(np.ceil(span / float(np.min(np.diff(xp))))) + 1
        while True:  # narrower buckets until no two knots share one (rounding could put two in one)
            if m > _MAX_BUCKETS:  # knots too unevenly spaced for buckets: numpy.interp reads this table always
                self._near = np.inf
                return
            self._a = m / span
            self._c = 1.5 - float(xp[0]) * self._a  # the first knot in bucket 1 (not at an edge); bucket 0 lies below
            bucket = self._bucket(xp)
            if bucket[0] >= 1 and np.all(np.diff(bucket) >= 1):
                break
            m *= 2
        self._top = int(bucket[-1]) + 1  # arguments above the last knot's bucket are clipped to this one
        # last J whose knot is in a lower bucket than k (0: none)
        self._lower = np.searchsorted(bucket, np.arange(self._top + 1), side="left").astype(np.intp)
        self._next = np.concatenate([xp, [np.inf]])  # the knot after J, i.e. xp[J]
        self._knot = np.concatenate([[xp[0]], xp, [xp[-1]]])  # xp[J - 1], finite at the ends

    def _bucket(self, x: NDArray[np.float64]) -> NDArray[np.intp]:
        with np.errstate(invalid="ignore"):  # NaN and inf cast to some integer; the clip and the value keep them NaN
            k = (x * self._a + self._c).astype(np.intp)
        return k

    def searched(self, x: NDArray[np.float64]) -> bool:
        """Whether numpy.interp's own search is the cheaper for 1-d ``x``: few arguments, or ordered ones.

        numpy.interp starts each search at the previous argument's interval, so for
        arguments in order (readings in time order) it hardly searches and beats the
        buckets' passes over the arrays; judged from a sample of neighbouring pairs.
        """
        if x.size < _SEARCH_BELOW or self._near == np.inf:
            return True
        every = max(1, x.size // _SAMPLE_PAIRS)
        with np.errstate(invalid="ignore"):
            step = np.abs(x[1::every] - x[:-1:every])
        return 2 * int(np.count_nonzero(step < self._near)) > step.size  # most steps short (NaN counts as long)

    def slopes(self, fp: NDArray[np.float64]) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        """numpy.interp's slopes of ``fp`` (its expression, so the same doubles) and ``fp``, indexed by J."""
        slope = (fp[1:] - fp[:-1]) / (self.xp[1:] - self.xp[:-1])
        # at the last knot numpy.interp returns fp[-1]: a zero slope there gives it exactly; NaN beyond the ends
        return np.concatenate([[np.nan], slope, [0.0, np.nan]]), np.concatenate([[np.nan], fp, [np.nan]])

    def place(self, x: NDArray[np.float64]) -> tuple[NDArray[np.intp], NDArray[np.float64]]:
        """Interval J (see the class notes) and offset x - xp[J - 1], for 1-d ``x``."""
        j = np.take(self._lower, self._bucket(x), mode="clip")  # NaN, inf and the far outside land in the end buckets
        j += x >= self._next[j]  # the knot in x's own bucket, if any, at or below x
        if np.fmax.reduce(x, initial=-np.inf) > self.x_last:  # rare: above the last knot, which shares its bucket
            j[x > self.x_last] = self.xp.size + 1
        return j, x - self._knot[j]

    def interp(self, x: NDArray[np.float64], *tables: tuple[NDArray[np.float64], NDArray[np.float64]]) -> list[NDArray[np.float64]]:
        """numpy.interp(x, xp, fp, left=nan, right=nan) for each table (:meth:`slopes` of an fp) at the same ``x``.

        Whichever of numpy.interp's search and the buckets is the cheaper
        (:meth:`searched`); the buckets in slices of :data:`_SLICE` arguments, so
        that the temporaries stay in the cache, and one placing for all tables.
        """
        flat = x.ravel()
        if self.searched(flat):
            return [np.asarray(np.interp(x, self.xp, fp[1:-1], left=np.nan, right=np.nan), dtype=float) for _, fp in tables]
        outs = [np.empty_like(flat) for _ in tables]
        for i in range(0, flat.size, _SLICE):
            place = self.place(flat[i : i + _SLICE])
            for out, (slope, fp) in zip(outs, tables):
                out[i : i + _SLICE] = self.value(place, slope, fp)
        return [out.reshape(x.shape) for out in outs]

    def value(self, place: tuple[NDArray[np.intp], NDArray[np.float64]], slope: NDArray[np.float64],
              fp: NDArray[np.float64]) -> NDArray[np.float64]:
        """numpy.interp(x, xp, fp, left=nan, right=nan) from a :meth:`place` of ``x`` and :meth:`slopes` of fp."""
        j, dx = place
        out = slope[j] * dx  # numpy.interp's slope*(x - xp[j]) + fp[j], in its order
        out += fp[j]
        return out


_GRID = _Knots(_LOG_T)


def _gauss_panels(edges_m: NDArray[np.float64]) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """Nodes and weights of composite Gauss-Legendre over consecutive panels."""
    x, w = np.polynomial.legendre.leggauss(_GL_NODES)
    a, b = edges_m[:-1, None], edges_m[1:, None]
    nodes = 0.5 * (b - a) * x + 0.5 * (b + a)
    weights = 0.5 * (b - a) * w
    return nodes.ravel(), weights.ravel()


def _panel_edges(start_m: float, end_m: float) -> NDArray[np.float64]:
    """Panel edges between two wavelengths, uniform in 1/lambda."""
    span = C2 / TABLE_T_MIN_K * (1.0 / start_m - 1.0 / end_m)
    n = max(1, int(np.ceil(span / _MAX_EXPONENT_STEP)))
    inv = np.linspace(1.0 / start_m, 1.0 / end_m, n + 1)
    return 1.0 / inv


class Band:
    """The spectral band of an instrument: a flat band or a tabulated response.

    Parameters
    ----------
    start_um, end_um : float
        Band edges, um (0 < start < end).
    name : str, optional
        A label for messages and tables.

    Raises
    ------
    ValueError
        If the edges are not 0 < start < end.

    Notes
    -----
    Build a tabulated response with :meth:`from_response` or
    :meth:`from_csv`. Bands are immutable; their inversion tables are built
    on first use and cached on the instance.

    Examples
    --------
    >>> band = Band(0.8, 1.1)
    >>> round(float(band.temperature_k(band.signal(1273.15))), 3)
    1273.15
    """

    def __init__(self, start_um: float, end_um: float, name: str | None = None) -> None:
        start, end = float(start_um), float(end_um)
        if not (np.isfinite(start) and np.isfinite(end) and 0 < start < end):
            raise ValueError(
                f"band must satisfy 0 < start < end um, got {start_um!r}:{end_um!r}"
            )
        self.start_um = start
        self.end_um = end
        self.name = name or f"{start:g}-{end:g} um"
        nodes, weights = _gauss_panels(_panel_edges(start * 1e-6, end * 1e-6))
        self._nodes = nodes
        self._weights = weights

    # -- construction -------------------------------------------------------
    @classmethod
    def from_response(
        cls, wavelength_um: ArrayLike, response: ArrayLike, name: str | None = None
    ) -> Band:
        """A band with a tabulated relative response, linear between points.

        Raises
        ------
        ValueError
            If there are fewer than two points, wavelengths are not strictly
            increasing and positive, or a response is negative or all zero.
        """
        lam = np.asarray(wavelength_um, dtype=float)
        r = np.asarray(response, dtype=float)
        if lam.ndim != 1 or lam.shape != r.shape or lam.size < 2:
            raise ValueError("a response table needs two or more (wavelength, response) pairs")
        if not np.all(np.isfinite(lam)) or not np.all(np.isfinite(r)):
            raise ValueError("a response table must hold finite numbers only")
        if lam[0] <= 0 or np.any(np.diff(lam) <= 0):
            raise ValueError("response wavelengths must be positive and strictly increasing")
        if np.any(r < 0) or not np.any(r > 0):
            raise ValueError("responses must be >= 0 and not all zero")
        band = cls.__new__(cls)
        band.start_um, band.end_um = float(lam[0]), float(lam[-1])
        band.name = name or f"tabulated {lam[0]:g}-{lam[-1]:g} um"
        all_nodes, all_weights = [], []
        for lo, hi in zip(lam[:-1], lam[1:]):
            nodes, weights = _gauss_panels(_panel_edges(lo * 1e-6, hi * 1e-6))
            all_nodes.append(nodes)
            all_weights.append(weights * np.interp(nodes * 1e6, lam, r))
        band._nodes = np.concatenate(all_nodes)
        band._weights = np.concatenate(all_weights)
        return band

    @classmethod
    def from_csv(cls, path: str | Path, name: str | None = None) -> Band:
        """Read a relative spectral response from a CSV file.

        The file has two columns, wavelength in um and relative response; a
        first non-comment line that is not numeric is taken as a header. Lines starting
        with ``#`` are comments.

        Raises
        ------
        FileNotFoundError
            If the file is missing.
        ValueError
            Naming the file and line of the first bad row.
        """
        path = Path(path)
        lam: list[float] = []
        resp: list[float] = []
        header_seen = False
        with path.open(newline="", encoding="utf-8") as fh:
            for lineno, row in enumerate(csv.reader(fh), start=1):
                if not row or row[0].lstrip().startswith("#"):
                    continue
                first_data = not lam
                try:
                    values = [float(cell) for cell in row[:2]]
                    if len(values) != 2:
                        raise ValueError
                except ValueError:
                    if first_data and not header_seen:
                        header_seen = True
                        continue  # a header line before the data
                    raise ValueError(
                        f"{path}:{lineno}: expected 'wavelength_um,response', got {','.join(row)!r}"
                    ) from None
                lam.append(values[0])
                resp.append(values[1])
        try:
            return cls.from_response(lam, resp, name=name or path.stem)
        except ValueError as exc:
            raise ValueError(f"{path}: {exc}") from None

    def weighted(self, factor_fn: Callable[[NDArray[np.float64]], ArrayLike], name: str | None = None) -> Band:
        """A new band whose response is multiplied by ``factor_fn(wavelength_m)``.

        Used to fold a window's spectral transmission into the band.
        """
        band = Band.__new__(Band)
        band.start_um, band.end_um = self.start_um, self.end_um
        band.name = name or self.name
        band._nodes = self._nodes
        band._weights = self._weights * np.asarray(factor_fn(self._nodes), dtype=float)
        return band

    # -- quadrature -----------------------------------------------------------
    @property
    def nodes_m(self) -> NDArray[np.float64]:
        """Quadrature nodes, m."""
        return self._nodes

    @property
    def weights(self) -> NDArray[np.float64]:
        """Quadrature weights with the response folded in, m."""
        return self._weights

    @property
    def centre_m(self) -> float:
        """Response-weighted mean wavelength, m (for the Wien checks)."""
        return float(np.sum(self._weights * self._nodes) / np.sum(self._weights))

    def signal(self, temperature_k: ArrayLike) -> NDArray[np.float64]:
        """Band radiance by quadrature, W sr^-1 m^-2 per unit response (accurate, slower).

        References
        ----------
        [Planck1901]_ integrated over the band.
        """
        t = check_temperature(temperature_k)
        flat = t.ravel()
        out = np.empty(flat.shape)
        for i in range(0, flat.size, _CHUNK):
            part = flat[i : i + _CHUNK, None]
            out[i : i + _CHUNK] = planck_radiance(self._nodes, part) @ self._weights
        return out.reshape(t.shape)

    # -- fast path ----------------------------------------------------------
    @cached_property
    def _table(self) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        log_t = _LOG_T
        log_s = np.log(self.signal(np.exp(log_t)))
        if not np.all(np.diff(log_s) > 0):
            raise ValueError(f"band {self.name}: signal is not increasing with temperature")
        return log_t, log_s

    @cached_property
    def _forward(self) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
        """Slopes and values of ln S over the shared ln T knots, for :meth:`_Knots.value`."""
        return _GRID.slopes(self._table[1])

    @cached_property
    def _inverse(self) -> tuple[_Knots, NDArray[np.float64], NDArray[np.float64]]:
        """The ln S knots, and slopes and values of ln T over them."""
        knots = _Knots(self._table[1])
        return (knots, *knots.slopes(self._table[0]))

    def _log_signal_at(self, log_t: NDArray[np.float64]) -> NDArray[np.float64]:
        """ln S at ln T from the table, NaN outside it, without warning: numpy.interp's result to the bit."""
        return _GRID.interp(log_t, self._forward)[0]

    def _log_t_at(self, log_signal: NDArray[np.float64]) -> NDArray[np.float64]:
        """ln T at ln S from the table, NaN outside it: numpy.interp's result to the bit."""
        if log_signal.size < _SEARCH_BELOW:  # numpy.interp's search, without building the buckets
            log_t, log_s = self._table
            return np.asarray(np.interp(log_signal, log_s, log_t, left=np.nan, right=np.nan), dtype=float)
        knots, slope, fp = self._inverse
        return knots.interp(log_signal, (slope, fp))[0]

    def log_signal(self, temperature_k: ArrayLike) -> NDArray[np.float64]:
        """ln S(T) from the table; NaN (with :class:`OutOfRangeWarning`) outside the table."""
        t = np.asarray(temperature_k, dtype=float)
        with np.errstate(divide="ignore", invalid="ignore"):
            lt = np.log(t)
        out = self._log_signal_at(lt)
        _flag_outside(out, t, "temperature (K)", f"{TABLE_T_MIN_K:g}..{TABLE_T_MAX_K:g} K")
        return out

    def temperature_from_log_signal(self, log_signal: ArrayLike) -> NDArray[np.float64]:
        """Invert ln S to T (K) from the table; NaN outside the table's range."""
        t: NDArray[np.float64] = np.exp(self._log_t_at(np.asarray(log_signal, dtype=float)))
        return t

    def temperature_k(self, signal: ArrayLike) -> NDArray[np.float64]:
        """Temperature (K) whose band signal is ``signal``; NaN for signal <= 0 or outside the table."""
        s = np.asarray(signal, dtype=float)
        with np.errstate(divide="ignore", invalid="ignore"):
            return self.temperature_from_log_signal(np.log(np.where(s > 0, s, np.nan)))

    def __repr__(self) -> str:
        return f"Band({self.name!r})"


def _log_signals(bands: tuple[Band, ...], temperature_k: NDArray[np.float64]) -> list[NDArray[np.float64]]:
    """:meth:`Band.log_signal` of several bands at the same temperatures, placed on the shared ln T knots once.

    Warns as the bands' own calls would, one after the other.
    """
    with np.errstate(divide="ignore", invalid="ignore"):
        lt = np.log(temperature_k)
    outs = _GRID.interp(lt, *(band._forward for band in bands))
    for out in outs:
        _flag_outside(out, temperature_k, "temperature (K)", f"{TABLE_T_MIN_K:g}..{TABLE_T_MAX_K:g} K")
    return outs


def band_radiance(band: Band, temperature_k: ArrayLike) -> NDArray[np.float64]:
    """Band radiance S(T) = integral R L d lambda by quadrature; see :meth:`Band.signal`."""
    return band.signal(temperature_k)


def _flag_outside(
    result: NDArray[np.float64], given: NDArray[np.float64], what: str, limits: str, show: ArrayLike | None = None
) -> None:
    """Raise (one value) or warn (arrays) where ``result`` is NaN but ``given`` was not.

    ``show`` is the value quoted in the message, ``given`` by default.
    """
    missing = np.isnan(result)
    if not missing.any():  # the usual case, in one pass
        return
    bad = missing & ~np.isnan(given)
    if not bad.any():
        return
    if given.ndim == 0:
        quoted = float(np.asarray(given if show is None else show))
        raise RangeError(f"{what} {exact(quoted)} is outside {limits}")
    warnings.warn(
        f"{int(bad.sum())} of {bad.size} values of {what} outside {limits} set to NaN",
        OutOfRangeWarning,
        stacklevel=3,
    )
