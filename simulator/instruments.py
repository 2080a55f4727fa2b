"""Virtual instruments: thermocouples with lag, drift and noise; pyrometers seen through a window.

Signals come from the measurement core (band radiance through the window,
emissivity, reflected wall radiation; ITS-90 EMF), vectorised over a chunk
of simulated readings.
"""

from __future__ import annotations

import math
import warnings
from pathlib import Path

import numpy as np

from firewatch.physics._warnings import OutOfRangeWarning
from firewatch.physics.bands import Band
from firewatch.physics.corrections import indicated_ratio, indicated_single_band
from firewatch.physics.thermocouples import temperature_range, temperature_to_emf
from firewatch.physics.windows import Window
from firewatch.settings.profile import Pyrometer, Thermocouple
from firewatch.transport.records import Status

__all__ = ["thermocouple_emf", "thermocouple_clean_emf", "pyrometer_reading", "pyrometer_shown", "pyrometer_status", "band_of"]


def band_of(py: Pyrometer, base: Path | None = None) -> Band:
    """The band of a pyrometer as the site profile describes it (band 1 for a ratio instrument)."""
    if py.band_file:
        path = Path(py.band_file)
        if not path.is_absolute() and base is not None:
            path = base / path
        return Band.from_csv(path)
    return Band(*py.band_um)


def thermocouple_emf(
    tc: Thermocouple, junction_c: np.ndarray, cold_c: np.ndarray, noise_mv: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """EMF (mV) that the bridge sees, and the status per reading (OVER/UNDER outside the type's range)."""
    emf, status = thermocouple_clean_emf(tc, junction_c, cold_c)
    return emf + noise_mv, status


def thermocouple_clean_emf(tc: Thermocouple, junction_c: np.ndarray, cold_c: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """EMF (mV) before the bridge's noise, and the status per reading (OVER/UNDER outside the type's range)."""
    lo, hi = temperature_range(tc.type)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", OutOfRangeWarning)
        emf = temperature_to_emf(np.clip(junction_c, lo, hi), tc.type) - temperature_to_emf(cold_c, tc.type)
    status = np.where(junction_c > hi, Status.OVER, np.where(junction_c < lo, Status.UNDER, Status.OK))
    return emf, status


def pyrometer_reading(
    py: Pyrometer,
    band: Band,
    band2: Band | None,
    ware_c: np.ndarray,
    wall_c: np.ndarray | None,
    emissivity: np.ndarray,
    slope: np.ndarray,
    fouling: np.ndarray,
    noise_c: np.ndarray,
) -> tuple[np.ndarray, np.ndarray]:
    """What the instrument shows (degC) and its status (UNDER/OVER outside its measuring range)."""
    shown = pyrometer_shown(py, band, band2, ware_c, wall_c, emissivity, slope, fouling) + noise_c
    return shown, pyrometer_status(py, shown)


def pyrometer_shown(
    py: Pyrometer,
    band: Band,
    band2: Band | None,
    ware_c: np.ndarray,
    wall_c: np.ndarray | None,
    emissivity: np.ndarray,
    slope: np.ndarray,
    fouling: np.ndarray,
) -> np.ndarray:
    """What the instrument shows before its noise (degC), reading by reading."""
    if py.window is not None:
        path: float | np.ndarray | Window = Window(py.window, fouling=fouling)
    else:
        path = np.clip(py.transmission * fouling, 1e-6, 1.0)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", OutOfRangeWarning)
        if py.kind == "ratio":
            assert band2 is not None
            return indicated_ratio(
                ware_c, band, band2, slope, py.set_slope, emissivity=emissivity, transmission=path, background_c=wall_c
            )
        return indicated_single_band(
            ware_c, band, emissivity, path, py.set_emissivity, py.set_transmission, background_c=wall_c
        )


def pyrometer_status(py: Pyrometer, shown: np.ndarray) -> np.ndarray:
    """UNDER/OVER where what the instrument shows is outside its measuring range, else OK."""
    lo, hi = py.range_c
    if not math.isfinite(lo):
        lo = -73.0  # the band table's floor
    return np.where(~(shown >= lo), Status.UNDER, np.where(shown > hi, Status.OVER, Status.OK))
