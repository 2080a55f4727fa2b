"""A simulated kiln with virtual instruments and scriptable faults, speaking firewatch's native line format.

Deterministic for a seed; runs on simulated time at any speed. Its physics
(band radiance, windows, thermocouple EMF) comes from :mod:`firewatch.physics`.
"""

from __future__ import annotations

from firewatch.simulator.kiln import Controller, KilnModel, KilnParameters
from firewatch.simulator.scenario import Fault, Scenario, load_scenario

__all__ = ["Controller", "Fault", "KilnModel", "KilnParameters", "Scenario", "load_scenario"]
