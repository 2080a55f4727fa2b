"""ITS-90 thermocouple reference functions, their inverses and cold-junction compensation.

The reference functions and inverse polynomials are those of NIST Monograph
175 [Burns1993]_ as distributed in NIST SRD 60; the coefficients live in
:mod:`firewatch.physics._its90_data`. All functions take array-likes and
return arrays of the broadcast shape.

Out-of-range input
------------------
A *single* value (a 0-d input) outside a type's range raises
:class:`~firewatch.physics._warnings.RangeError` (a :class:`ValueError`)
naming the type, the value and the range. For *arrays* the out-of-range
elements become NaN and one :class:`OutOfRangeWarning` says how many; the
caller's mask is ``numpy.isnan(result) & ~numpy.isnan(input)``. NaN input
gives NaN output without a warning (a missing reading is not an error).

Inverse precision
-----------------
NIST publishes inverse polynomials with stated error bands (for example
type K, 500 to 1372 degC: -0.05 to +0.06 degC). :func:`emf_to_temperature`
starts from the published polynomial and refines with Newton steps on the
reference function itself, so its result reproduces the reference function
to better than 1e-6 degC; :func:`inverse_polynomial` exposes the bare
published polynomial. The inverse is defined on the published inverse
ranges only, which for type B starts at 250 degC (0.291 mV): below about
42 degC type B's EMF is not single-valued. The range includes a margin of
half a table digit (0.0005 mV) at each end, so that the rounded table
values at the ends invert (to the end temperature).

References
----------
.. [Burns1993] See ``Burns1993`` in docs/references.md.
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike, NDArray

from firewatch.physics._its90_data import FORWARD, INVERSE, ForwardRanges, InverseRanges
from firewatch.physics._warnings import OutOfRangeWarning, RangeError, exact

__all__ = [
    "TYPES",
    "temperature_range",
    "emf_range",
    "inverse_error_band",
    "temperature_to_emf",
    "seebeck",
    "emf_to_temperature",
    "inverse_polynomial",
    "check_type",
]

TYPES: tuple[str, ...] = tuple(sorted(FORWARD))
"""The letter-designated types with ITS-90 reference functions."""

_EDGE_MARGIN_MV = 0.0005
"""Half a table digit: EMFs this far past either end still invert, to the end temperature."""

_NEWTON_STEPS = 4
"""Newton steps after the NIST polynomial; two already reach 1e-9 degC."""


_ForwardPieces = tuple[tuple[float, float, NDArray[np.float64], NDArray[np.float64], "tuple[float, float, float] | None"], ...]
_InversePieces = tuple[tuple[float, float, NDArray[np.float64]], ...]


def _forward_pieces(forward: ForwardRanges) -> _ForwardPieces:
    """Each range's coefficients and their derivative's, as arrays made once (issue 15: ``polyder`` per call
    cost as much as the conversion of a half-second batch)."""
    out = []
    for t0, t1, coeffs, expo in forward:
        c = np.asarray(coeffs, dtype=float)
        out.append((t0, t1, c, np.polynomial.polynomial.polyder(c), expo))
    return tuple(out)


def _inverse_pieces(inverse: InverseRanges) -> _InversePieces:
    return tuple((e0, e1, np.asarray(coeffs, dtype=float)) for e0, e1, _t0, _t1, coeffs, _band in inverse)


@dataclass(frozen=True)
class _TypeInfo:
    forward: ForwardRanges
    inverse: InverseRanges
    t_min: float
    t_max: float
    e_min: float
    e_max: float
    forward_pieces: _ForwardPieces = ()
    inverse_pieces: _InversePieces = ()


def check_type(tc_type: str) -> str:
    """Return the upper-case type letter, or raise ``ValueError`` for an unknown type."""
    letter = str(tc_type).strip().upper()
    if letter not in FORWARD:
        raise ValueError(
            f"unknown thermocouple type {tc_type!r}; expected one of {', '.join(TYPES)}"
        )
    return letter


def _info(tc_type: str) -> _TypeInfo:
    letter = check_type(tc_type)
    try:
        return _INFO[letter]
    except KeyError:
        pass
    fwd = FORWARD[letter]
    inv = INVERSE[letter]
    pieces, inv_pieces = _forward_pieces(fwd), _inverse_pieces(inv)
    info = _TypeInfo(fwd, inv, fwd[0][0], fwd[-1][1], np.nan, np.nan, pieces, inv_pieces)
    # The invertible EMF range is E(t) at the ends of the published inverse
    # ranges, from the reference function itself: the EMF limits printed
    # beside the inverse coefficients are rounded to 0.001 mV.
    ends, _ = _forward(np.array([inv[0][2], inv[-1][3]]), info)
    info = _TypeInfo(fwd, inv, info.t_min, info.t_max, float(ends[0]), float(ends[1]), pieces, inv_pieces)
    _INFO[letter] = info
    return info


_INFO: dict[str, _TypeInfo] = {}


def temperature_range(tc_type: str) -> tuple[float, float]:
    """Range of the reference function in degC, ``(low, high)``."""
    info = _info(tc_type)
    return info.t_min, info.t_max


def emf_range(tc_type: str) -> tuple[float, float]:
    """EMF range in mV on which :func:`emf_to_temperature` is defined (reference junction 0 degC)."""
    info = _info(tc_type)
    return info.e_min, info.e_max


def inverse_error_band(tc_type: str) -> list[dict[str, float]]:
    """The published inverse polynomials' ranges and error bands.

    Returns
    -------
    list of dict
        One entry per NIST inverse range with keys ``t_min_c``, ``t_max_c``,
        ``emf_min_mv``, ``emf_max_mv``, ``error_low_c``, ``error_high_c``.
    """
    return [
        {
            "emf_min_mv": e0,
            "emf_max_mv": e1,
            "t_min_c": t0,
            "t_max_c": t1,
            "error_low_c": band[0],
            "error_high_c": band[1],
        }
        for e0, e1, t0, t1, _, band in _info(tc_type).inverse
    ]


def _report_out_of_range(
    bad: NDArray[np.bool_], scalar: bool, what: str, value: NDArray[np.float64], limits: str
) -> None:
    if not bad.any():
        return
    if scalar:
        raise RangeError(f"{what} {exact(float(value))} is outside {limits}")
    warnings.warn(
        f"{int(bad.sum())} of {bad.size} values of {what} outside {limits} set to NaN",
        OutOfRangeWarning,
        stacklevel=3,
    )


def _forward(t: NDArray[np.float64], info: _TypeInfo) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """EMF and its derivative dE/dt, NaN outside the type's range."""
    emf = np.full(t.shape, np.nan)
    slope = np.full(t.shape, np.nan)
    for t0, t1, c, dc, expo in info.forward_pieces:
        mask = (t >= t0) & (t <= t1) & np.isnan(emf)
        if not mask.any():
            continue
        tm = t[mask]
        e = np.polynomial.polynomial.polyval(tm, c)
        d = np.polynomial.polynomial.polyval(tm, dc)
        if expo is not None:
            a0, a1, a2 = expo
            g = a0 * np.exp(a1 * (tm - a2) ** 2)
            e = e + g
            d = d + g * 2.0 * a1 * (tm - a2)
        emf[mask] = e
        slope[mask] = d
    return emf, slope


def temperature_to_emf(temperature_c: ArrayLike, tc_type: str) -> NDArray[np.float64]:
    """EMF of a thermocouple against a 0 degC reference junction.

    Parameters
    ----------
    temperature_c : array_like
        Hot-junction temperature, degC (ITS-90).
    tc_type : str
        Letter designation: B, E, J, K, N, R, S or T.

    Returns
    -------
    numpy.ndarray
        EMF in mV, the broadcast shape of ``temperature_c``.

    Raises
    ------
    ValueError
        For an unknown type; :class:`RangeError` for a single value outside
        the type's range.

    Warns
    -----
    OutOfRangeWarning
        For array elements outside the range (returned as NaN).

    Notes
    -----
    ============== ====== =====================================
    quantity       unit   range
    ============== ====== =====================================
    temperature_c  degC   the type's range, e.g. K -270..1372
    result         mV     about -10..77
    ============== ====== =====================================

    References
    ----------
    [Burns1993]_ reference functions, NIST Monograph 175 section 4.

    Examples
    --------
    >>> round(float(temperature_to_emf(1000.0, "K")), 3)
    41.276
    """
    return _forward_checked(temperature_c, tc_type)[0]


def _forward_checked(temperature_c: ArrayLike, tc_type: str) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """EMF and Seebeck coefficient, with the module's out-of-range rules applied."""
    info = _info(tc_type)
    t = np.asarray(temperature_c, dtype=float)
    emf, slope = _forward(t, info)
    bad = np.isnan(emf) & ~np.isnan(t)
    _report_out_of_range(
        bad, t.ndim == 0, f"type {check_type(tc_type)} temperature (degC)", t,
        f"{info.t_min:g}..{info.t_max:g} degC",
    )
    return emf, slope


def seebeck(temperature_c: ArrayLike, tc_type: str) -> NDArray[np.float64]:
    """Seebeck coefficient dE/dt in mV/degC, the derivative of the reference function.

    References
    ----------
    [Burns1993]_ reference functions, differentiated.
    """
    return _forward_checked(temperature_c, tc_type)[1]


def inverse_polynomial(emf_mv: ArrayLike, tc_type: str) -> NDArray[np.float64]:
    """The bare NIST inverse polynomial t(E), NaN outside its ranges.

    Its accuracy is the published error band, see :func:`inverse_error_band`.

    References
    ----------
    [Burns1993]_ inverse functions, NIST Monograph 175 section 5.
    """
    return _inverse_polynomial(np.asarray(emf_mv, dtype=float), _info(tc_type), clip=False)


def _inverse_polynomial(e: NDArray[np.float64], info: _TypeInfo, clip: bool) -> NDArray[np.float64]:
    """Published polynomial; with ``clip``, values just past a printed limit use the nearest range."""
    t = np.full(e.shape, np.nan)
    ranges = info.inverse
    if clip:
        e = np.clip(e, ranges[0][0], ranges[-1][1])
    for e0, e1, c in info.inverse_pieces:
        mask = (e >= e0) & (e <= e1) & np.isnan(t)
        if mask.any():
            t[mask] = np.polynomial.polynomial.polyval(e[mask], c)
    return t


def emf_to_temperature(
    emf_mv: ArrayLike, tc_type: str, cold_junction_c: ArrayLike = 0.0
) -> NDArray[np.float64]:
    """Hot-junction temperature from a measured EMF, with cold-junction compensation.

    Parameters
    ----------
    emf_mv : array_like
        Measured EMF, mV, between the hot junction and a cold junction at
        ``cold_junction_c``.
    tc_type : str
        Letter designation: B, E, J, K, N, R, S or T.
    cold_junction_c : array_like, optional
        Cold-junction temperature, degC, converted through the same type's
        reference function. Default 0 degC (an ice point).

    Returns
    -------
    numpy.ndarray
        Temperature in degC, broadcast shape of the inputs.

    Raises
    ------
    ValueError
        For an unknown type; :class:`RangeError` for a single value outside
        the invertible range.

    Warns
    -----
    OutOfRangeWarning
        For array elements outside the range (returned as NaN).

    Notes
    -----
    Compensation: E_total = E_measured + E(t_cj), then t = E^-1(E_total).
    The inverse starts from the NIST polynomial and takes Newton steps on the
    reference function, reproducing it to better than 1e-6 degC.

    ================ ====== ======================================
    quantity         unit   range
    ================ ====== ======================================
    emf_mv           mV     the type's inverse range less E(t_cj)
    cold_junction_c  degC   the type's range
    result           degC   the published inverse range
    ================ ====== ======================================

    References
    ----------
    [Burns1993]_ inverse functions, NIST Monograph 175 section 5.

    Examples
    --------
    >>> round(float(emf_to_temperature(41.276, "K")), 1)
    1000.0
    """
    info = _info(tc_type)
    letter = check_type(tc_type)
    e_meas = np.asarray(emf_mv, dtype=float)
    t_cj = np.asarray(cold_junction_c, dtype=float)
    e_cj, _ = _forward(t_cj, info)
    bad_cj = np.isnan(e_cj) & ~np.isnan(t_cj)
    _report_out_of_range(
        bad_cj, t_cj.ndim == 0, f"type {letter} cold-junction temperature (degC)", t_cj,
        f"{info.t_min:g}..{info.t_max:g} degC",
    )
    e = e_meas + e_cj
    scalar = e.ndim == 0
    inside = (e >= info.e_min - _EDGE_MARGIN_MV) & (e <= info.e_max + _EDGE_MARGIN_MV)
    bad = ~inside & ~np.isnan(e)
    _report_out_of_range(
        bad, scalar, f"type {letter} EMF (mV, 0 degC reference)", e,
        f"{info.e_min:.3f}..{info.e_max:.3f} mV ({info.inverse[0][2]:g}..{info.inverse[-1][3]:g} degC)",
    )
    e = np.where(inside, np.clip(e, info.e_min, info.e_max), np.nan)
    t = _inverse_polynomial(e, info, clip=True)
    t = np.where(inside, t, np.nan)
    lo, hi = info.inverse[0][2], info.inverse[-1][3]
    for _ in range(_NEWTON_STEPS):
        f, d = _forward(np.clip(t, lo, hi), info)
        t = np.clip(t - (f - e) / d, lo, hi)
    return t
