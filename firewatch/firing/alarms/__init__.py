"""Alarms: conditions, debouncing, the ISA-18.2 lifecycle, and the likely cause of a divergence.

The package has five rooms:

* :mod:`.engine`: :class:`AlarmEngine`, the ISA-18.2 lifecycle (raise,
  clear, acknowledge, shelve, unshelve, restore) and the order in which the
  conditions are evaluated; :class:`Alarm`, :class:`Transition`;
* :mod:`.conditions`: one class per condition, turning a batch's arrays
  into the alarms it raises and clears, timed by :class:`Debounce`;
* :mod:`.causes`: the likely cause of a divergence, one function per cause,
  their thresholds in :class:`CauseThresholds`;
* :mod:`.learning`: the likely cause of an open divergence alarm decided
  again as evidence arrives;
* :mod:`.history`: the 10-second means that the causes look back on.

Kinds
-----
=================== ========================================================== =========
kind                condition                                                  priority
=================== ========================================================== =========
divergence          |reconciled pyrometer - reference thermocouple| above k x  medium
                    the combined standard uncertainty for the debounce time;
                    clears below clear_k x
schedule-deviation  temperature off the segment's plan by more than            low
                    deviation_c, or the rate off plan, for deviation_debounce_s
over-temperature    any temperature above over_temperature_c                   high
rate-limit          faster than a critical range's max_rate inside the range   medium
sensor-fault        thermocouple open; reading out of range; value frozen;     high/med.
                    a device error or failed signal (no answer, a 4-20 mA
                    loop outside NAMUR NE 43's range); pyrometer below range
                    or saturated when the thermocouples say it should read;
                    line noise (many malformed lines)
no-data             no readings from the line, or a channel missing            high/med.
=================== ========================================================== =========

Likely cause of a divergence
----------------------------
Decided at the moment the alarm is raised from the last hour of history
(10 s means), with the evidence kept beside it: ``thermocouple-lag``,
``emissivity-change``, ``thermocouple-drift``, ``window-attenuation``, or
``unknown`` with a sentence naming the evidence that is missing (see
:mod:`.causes`); then decided again once a minute while the alarm's
condition holds, each change logged as a ``cause-changed`` transition (see
:mod:`.learning`).
"""

from __future__ import annotations

from firewatch.firing.alarms.causes import CAUSES, THRESHOLDS, CauseThresholds, Verdict
from firewatch.firing.alarms.conditions import Debounce
from firewatch.firing.alarms.engine import (
    CAUSE_CHANGED,
    KINDS,
    PRIORITY_ORDER,
    STATES,
    Alarm,
    AlarmEngine,
    Transition,
    evidence_json,
)
from firewatch.firing.alarms.history import History

__all__ = [
    "KINDS",
    "CAUSES",
    "CAUSE_CHANGED",
    "STATES",
    "PRIORITY_ORDER",
    "Alarm",
    "Transition",
    "AlarmEngine",
    "Debounce",
    "History",
    "CauseThresholds",
    "THRESHOLDS",
    "Verdict",
    "evidence_json",
]
