"""Sight-window transmission: dispersion, Fresnel losses, cut-off, fouling.

Model of a clean window
-----------------------
The refractive index n(lambda) comes from each material's published
dispersion equation, the Sellmeier form

    n^2 - 1 = sum_i B_i lambda^2 / (lambda^2 - C_i^2),  lambda in um.

A non-absorbing slab with incoherent multiple reflections between its two
surfaces, each of normal-incidence reflectance R = ((n-1)/(n+1))^2,
transmits (1-R)/(1+R) = 2n/(n^2+1) [BornWolf1999]_. Absorption beyond the
long-wavelength cut-off is modelled as a logistic edge,
1/(1 + exp((lambda - lambda_cut)/w)), a deliberate simplification that
gives the right band-effective value for instruments well inside or well
outside the pass band; a measured curve should replace the model for a band
on the edge (:class:`Window` ``measured=``). Fouling multiplies the whole by a
gray factor.

Materials and sources
---------------------
=================== ======================= ============ =======================
name                dispersion              valid, um    cut-off (edge width)
=================== ======================= ============ =======================
fused-silica        [Malitson1965]_         0.21-3.71    4.2 um (0.15), from memory
sapphire            [MalitsonDodge1972]_ o  0.2-5.5      5.3 um (0.15), from memory
calcium-fluoride    [Malitson1963]_         0.23-9.7     9.5 um (0.3), from memory
borosilicate        [SchottNBK7]_, from     0.3-2.5      2.7 um (0.1), from memory
                    memory; a borosilicate
                    crown standing in for
                    sight-glass grades
=================== ======================= ============ =======================

Beyond a dispersion equation's valid range the slab factor is held at its
value at the range's end (part of the model: there the cut-off edge has
already taken the transmission to near zero).

References
----------
See the keys above and ``BornWolf1999`` in docs/references.md.
"""

from __future__ import annotations

import weakref
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike, NDArray

from firewatch.physics.bands import Band
from firewatch.physics.planck import check_temperature, check_wavelength

__all__ = [
    "WindowMaterial",
    "MATERIALS",
    "material",
    "refractive_index",
    "slab_transmission",
    "spectral_transmission",
    "Window",
    "band_effective_transmission",
]


@dataclass(frozen=True)
class WindowMaterial:
    """A window material: Sellmeier coefficients, valid range and cut-off."""

    name: str
    b: tuple[float, float, float]
    c_um: tuple[float, float, float]
    valid_um: tuple[float, float]
    cutoff_um: float
    edge_um: float
    reference: str


MATERIALS: dict[str, WindowMaterial] = {
    m.name: m
    for m in (
        WindowMaterial(
            "fused-silica",
            (0.6961663, 0.4079426, 0.8974794),
            (0.0684043, 0.1162414, 9.896161),
            (0.21, 3.71),
            4.2,
            0.15,
            "Malitson1965",
        ),
        WindowMaterial(
            "sapphire",
            (1.4313493, 0.65054713, 5.3414021),
            (0.0726631, 0.1193242, 18.028251),
            (0.2, 5.5),
            5.3,
            0.15,
            "MalitsonDodge1972",
        ),
        WindowMaterial(
            "calcium-fluoride",
            (0.5675888, 0.4710914, 3.8484723),
            (0.050263605, 0.1003909, 34.649040),
            (0.23, 9.7),
            9.5,
            0.3,
            "Malitson1963",
        ),
        WindowMaterial(
            "borosilicate",
            (1.03961212, 0.231792344, 1.01046945),
            (0.00600069867**0.5, 0.0200179144**0.5, 103.560653**0.5),
            (0.3, 2.5),
            2.7,
            0.1,
            "SchottNBK7",
        ),
    )
}
"""The window materials by name."""


def material(name: str) -> WindowMaterial:
    """Look a material up by name; ``ValueError`` lists the known names."""
    try:
        return MATERIALS[name]
    except KeyError:
        raise ValueError(
            f"unknown window material {name!r}; expected one of {', '.join(sorted(MATERIALS))}"
        ) from None


def refractive_index(mat: WindowMaterial | str, wavelength_m: ArrayLike) -> NDArray[np.float64]:
    """Refractive index from the material's Sellmeier equation.

    Wavelengths outside the equation's valid range are evaluated at the
    nearer end of the range (see the module notes).

    References
    ----------
    [Malitson1965]_, [MalitsonDodge1972]_, [Malitson1963]_, [SchottNBK7]_.

    Examples
    --------
    >>> round(float(refractive_index("fused-silica", 0.9e-6)), 5)
    1.45175
    """
    m = material(mat) if isinstance(mat, str) else mat
    lam = check_wavelength(wavelength_m) * 1e6
    lam2 = np.clip(lam, *m.valid_um) ** 2
    n2 = 1.0 + sum(b * lam2 / (lam2 - c**2) for b, c in zip(m.b, m.c_um))
    return np.sqrt(n2)


def slab_transmission(n: ArrayLike) -> NDArray[np.float64]:
    """Transmission 2n/(n^2+1) of a non-absorbing slab, both surfaces, incoherent multiple reflections.

    References
    ----------
    [BornWolf1999]_ Fresnel reflectance at normal incidence, summed over
    multiple reflections.
    """
    n = np.asarray(n, dtype=float)
    if np.any(n < 1):
        raise ValueError(f"refractive index must be >= 1, got {float(n[n < 1].ravel()[0])!r}")
    return 2.0 * n / (n**2 + 1.0)


def spectral_transmission(mat: WindowMaterial | str, wavelength_m: ArrayLike) -> NDArray[np.float64]:
    """Clean-window spectral transmission: slab Fresnel loss times the cut-off edge."""
    m = material(mat) if isinstance(mat, str) else mat
    lam = check_wavelength(wavelength_m)
    edge = 1.0 / (1.0 + np.exp(np.clip((lam * 1e6 - m.cutoff_um) / m.edge_um, -700, 700)))
    return slab_transmission(refractive_index(m, lam)) * edge


_WindowKey = tuple[str | None, tuple[tuple[float, ...], tuple[float, ...]] | None]
"""What identifies a clean window: its material's name, or its measured curve."""


@dataclass(frozen=True, eq=False)
class Window:
    """A sight window: a material or a measured curve, times a gray fouling factor.

    Parameters
    ----------
    material : str or WindowMaterial, optional
        The material model.
    fouling : float or array_like
        Gray factor for deposits, in (0, 1]; 1 for a clean window. An array
        (one factor per reading, as fouling grows through a firing)
        broadcasts against the readings in the corrections, and against
        the wavelengths in :meth:`transmission`. It is kept as a read-only
        copy, so a window compares and hashes by value.
    measured : tuple of arrays, optional
        ``(wavelength_um, transmission)`` measured on the window itself,
        which replaces the material model.

    Raises
    ------
    ValueError
        For an unknown material, a fouling factor outside (0, 1], a
        transmission outside [0, 1], or neither material nor measurement.
    """

    material: WindowMaterial | str | None = None
    fouling: float | np.ndarray = 1.0
    measured: tuple[tuple[float, ...], tuple[float, ...]] | None = None
    _mat: WindowMaterial | None = field(init=False, repr=False, compare=False, default=None)

    def __post_init__(self) -> None:
        fouling = np.array(self.fouling, dtype=float)
        bad = ~((fouling > 0.0) & (fouling <= 1.0))
        if np.any(bad):
            raise ValueError(f"window fouling factor must be in (0, 1], got {float(fouling[bad].ravel()[0])!r}")
        if fouling.ndim == 0:
            object.__setattr__(self, "fouling", float(fouling))
        else:
            fouling.setflags(write=False)  # the window is frozen: so is its fouling
            object.__setattr__(self, "fouling", fouling)
        if self.measured is not None:
            lam, tau = (tuple(float(v) for v in a) for a in self.measured)
            if len(lam) < 2 or len(lam) != len(tau) or any(b <= a for a, b in zip(lam, lam[1:])):
                raise ValueError("a measured window curve needs two or more points in increasing wavelength")
            if any(not 0.0 <= t <= 1.0 for t in tau):
                raise ValueError("measured window transmission must lie in [0, 1]")
            object.__setattr__(self, "measured", (lam, tau))
        elif self.material is None:
            raise ValueError("a window needs a material or a measured curve")
        if self.material is not None:
            mat = material(self.material) if isinstance(self.material, str) else self.material
            object.__setattr__(self, "_mat", mat)

    def __eq__(self, other: object) -> bool:
        if not isinstance(other, Window):
            return NotImplemented
        return (self._key == other._key and np.shape(self.fouling) == np.shape(other.fouling)
                and bool(np.all(np.asarray(self.fouling) == np.asarray(other.fouling))))

    def __hash__(self) -> int:
        return hash((self._key, np.asarray(self.fouling).tobytes()))

    @property
    def _key(self) -> _WindowKey:
        """What identifies the clean window: its material's name, or its measured curve."""
        return (self._mat.name if self._mat is not None else None, self.measured)

    @property
    def name(self) -> str:
        base = "measured" if self.measured is not None else self._mat.name  # type: ignore[union-attr]
        fouling = np.asarray(self.fouling)
        if fouling.ndim or float(fouling) != 1.0:
            return f"{base} x{float(fouling.mean()):g}" if fouling.ndim == 0 else f"{base}, fouled"
        return base

    def clean_transmission(self, wavelength_m: ArrayLike) -> NDArray[np.float64]:
        """Spectral transmission of the clean window (no fouling)."""
        lam = check_wavelength(wavelength_m)
        if self.measured is not None:
            wl, tau = self.measured
            tau_lam: NDArray[np.float64] = np.interp(lam * 1e6, wl, tau)  # numpy's stubs type float ufunc results as Any
            return tau_lam
        return spectral_transmission(self._mat, lam)  # type: ignore[arg-type]

    def transmission(self, wavelength_m: ArrayLike) -> NDArray[np.float64]:
        """Spectral transmission including the fouling factor (an array of factors broadcasts against the wavelengths)."""
        tau: NDArray[np.float64] = self.clean_transmission(wavelength_m) * np.asarray(self.fouling)  # numpy's stubs type this as Any
        return tau

    def through(self, band: Band) -> Band:
        """The band as seen through the clean window (fouling stays a separate gray factor).

        Cached per band and clean window, so that the windowed band's
        inversion table is built once however many ``Window`` objects
        (one per fouling state) are made.
        """
        key = self._key
        per_band = _THROUGH.setdefault(band, {})
        if key not in per_band:
            per_band[key] = band.weighted(self.clean_transmission, name=f"{band.name} through {key[0] or 'measured window'}")
        return per_band[key]


_THROUGH: weakref.WeakKeyDictionary[Band, dict[_WindowKey, Band]] = weakref.WeakKeyDictionary()


def band_effective_transmission(band: Band, window: Window, temperature_k: ArrayLike) -> NDArray[np.float64]:
    """Band-effective transmission weighted by Planck radiance at the target temperature.

    tau_eff(T) = integral R tau L(T) d lambda / integral R L(T) d lambda,
    times the fouling factor.

    Examples
    --------
    >>> round(float(band_effective_transmission(Band(0.89, 0.91), Window("fused-silica"), 1273.15)), 4)
    0.9343
    """
    t = check_temperature(temperature_k)
    # numpy's stubs type float ufunc results as Any
    tau_eff: NDArray[np.float64] = window.through(band).signal(t) / band.signal(t) * np.asarray(window.fouling, dtype=float)
    return tau_eff
