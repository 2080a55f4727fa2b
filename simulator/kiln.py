"""Lumped heat balance of an electric kiln and the controller that follows the schedule.

Two heat capacities: the chamber (walls, elements, furniture, and the air
the thermocouples sit in) at T_w and the ware at T_x.

    C_w dT_w/dt = P - L(T_w) - Q(T_w, T_x)
    C_x dT_x/dt = Q(T_w, T_x)

with heater power P limited to P_max, losses
L(T) = k_c (T - T_a) + A_leak sigma (T^4 - T_a^4) (conduction through the
walls, radiation through vents and gaps), and exchange
Q = A_x sigma eps_x (T_w^4 - T_x^4) + h A_x (T_w - T_x). Radiation grows
with T^3, so the ware lags a ramp by much more at 300 degC than at 1200
degC, and losses grow so that the kiln falls behind a fast ramp near its
top temperature, as real kilns do. Integrated with 1 s explicit steps
(every time constant here is above 30 s).

The controller follows the schedule the way careful kiln controllers do:
the set point advances at the segment's rate but never more than
``holdback_c`` ahead of the control thermocouple, a hold starts only when
the kiln reaches the target, and a ``max`` segment runs at full power (or,
cooling, with the power off). Power is feed-forward of the modelled losses
plus proportional action.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from firewatch.physics.constants import SIGMA, ZERO_CELSIUS
from firewatch.settings.schedule import Schedule

__all__ = ["KilnParameters", "KilnModel", "Controller"]


@dataclass(frozen=True)
class KilnParameters:
    """A 0.4 m3 electric front-loader: climbs about 230 degC/h at 300 degC and 90 degC/h at 1220 degC,
    and cools naturally at about 160 degC/h from 1220 degC and 25 degC/h at 300 degC."""

    p_max_w: float = 12_000.0
    c_wall_j_per_k: float = 140_000.0
    c_ware_j_per_k: float = 30_000.0
    k_cond_w_per_k: float = 4.0
    a_leak_m2: float = 0.010
    a_ware_m2: float = 1.5
    eps_exchange: float = 0.7
    h_conv_w_per_m2k: float = 20.0
    ambient_c: float = 22.0


@dataclass
class KilnModel:
    """The kiln's state; :meth:`step` advances it by ``dt`` seconds at heater power ``power_w``."""

    params: KilnParameters = field(default_factory=KilnParameters)
    wall_c: float = 22.0
    ware_c: float = 22.0

    def losses_w(self, t_c: float) -> float:
        p = self.params
        tk, ta = t_c + ZERO_CELSIUS, p.ambient_c + ZERO_CELSIUS
        return p.k_cond_w_per_k * (t_c - p.ambient_c) + p.a_leak_m2 * SIGMA * (tk**4 - ta**4)

    def exchange_w(self) -> float:
        p = self.params
        tw, tx = self.wall_c + ZERO_CELSIUS, self.ware_c + ZERO_CELSIUS
        return p.a_ware_m2 * (SIGMA * p.eps_exchange * (tw**4 - tx**4) + p.h_conv_w_per_m2k * (tw - tx))

    def step(self, power_w: float, dt: float) -> None:
        p = self.params
        q = self.exchange_w()
        self.wall_c += (power_w - self.losses_w(self.wall_c) - q) / p.c_wall_j_per_k * dt
        self.ware_c += q / p.c_ware_j_per_k * dt


@dataclass
class Controller:
    """Follows a schedule on the control thermocouple's reading.

    Attributes
    ----------
    segment : int
        Current segment index; ``len(schedule.segments)`` once finished.
    holding_since : float or None
        Simulated seconds at which the current hold began.
    """

    schedule: Schedule
    kiln: KilnModel
    holdback_c: float = 10.0
    band_c: float = 2.0
    gain_w_per_k: float = 600.0
    segment: int = 0
    setpoint_c: float = math.nan
    holding_since: float | None = None

    @property
    def finished(self) -> bool:
        return self.segment >= len(self.schedule.segments)

    def power(self, measured_c: float, now_s: float, dt: float) -> float:
        """Heater power for the next step, W."""
        p = self.kiln.params
        if math.isnan(self.setpoint_c):
            self.setpoint_c = measured_c
        if self.finished:
            return 0.0
        seg = self.schedule.segments[self.segment]
        heating = seg.rate_c_per_h > 0
        if self.holding_since is None:
            if seg.is_fast:
                self.setpoint_c = seg.target_c
            else:
                step = seg.rate_c_per_h / 3600.0 * dt
                sp = self.setpoint_c + step
                if heating:
                    sp = min(sp, seg.target_c, measured_c + self.holdback_c)
                else:
                    sp = max(sp, seg.target_c, measured_c - self.holdback_c)
                self.setpoint_c = sp
            reached = measured_c >= seg.target_c - self.band_c if heating else measured_c <= seg.target_c + self.band_c
            if reached:
                self.holding_since = now_s
                self.setpoint_c = seg.target_c
        if self.holding_since is not None and now_s - self.holding_since >= seg.hold_s:
            self.segment += 1
            self.holding_since = None
            return self.power(measured_c, now_s, 0.0)
        if seg.is_fast and self.holding_since is None:
            return p.p_max_w if heating else 0.0
        ramp_w = 0.0 if seg.is_fast or self.holding_since is not None else seg.rate_c_per_h / 3600.0 * (p.c_wall_j_per_k + p.c_ware_j_per_k)
        power = self.kiln.losses_w(self.setpoint_c) + ramp_w + self.gain_w_per_k * (self.setpoint_c - measured_c)
        return min(max(power, 0.0), p.p_max_w)
