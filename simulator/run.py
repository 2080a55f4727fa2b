"""The simulation loop: kiln, controller and instruments stepping through a scenario, emitting native lines."""

from __future__ import annotations

import math
from collections import deque
from collections.abc import Iterator
from dataclasses import dataclass
from typing import Any

import numpy as np

from firewatch.physics.bands import Band
from firewatch.physics.thermocouples import seebeck
from firewatch.simulator.instruments import band_of, pyrometer_shown, pyrometer_status, thermocouple_clean_emf
from firewatch.simulator.kiln import Controller, KilnModel
from firewatch.simulator.scenario import Fault, Scenario
from firewatch.transport.native import crc16
from firewatch.transport.records import Status

__all__ = ["Line", "Simulation"]

CHUNK = 60
"""Steps simulated before the instruments' noise is drawn (fixed, so a seed gives the same run in every mode)."""
AHEAD = 10
"""Chunks the kiln is stepped ahead so that the instruments' physics runs over them at once (its per-call
cost, not its per-reading cost, dominated at 60 readings); noise is still drawn chunk by chunk in the
same order, and :attr:`Simulation.t`, ``done`` and ``state`` answer for the last chunk handed out."""


@dataclass(frozen=True, slots=True)
class Line:
    """One emitted line: simulated seconds since the start, the bytes, and what the link does with it."""

    sim_s: float
    data: bytes
    dropped: bool = False
    """Lost to a dropout: never sent."""
    disconnect: bool = False
    """A dropout that also drops the client (TCP) starts here."""


class Simulation:
    """Step a scenario; :meth:`chunks` yields lists of :class:`Line`.

    Parameters
    ----------
    scenario : Scenario
    endless : bool
        Keep going after the scenario's duration (the kiln idles, cold).
    """

    def __init__(self, scenario: Scenario, endless: bool = False) -> None:
        self.scenario = scenario
        self.endless = endless
        self.site = scenario.site
        self.rng = np.random.default_rng(scenario.seed)
        params = scenario.kiln
        self.kiln = KilnModel(params, wall_c=params.ambient_c, ware_c=params.ambient_c)
        self.controller = Controller(scenario.schedule, self.kiln)
        self.t = 0.0
        self.seq = 0
        self.dt = scenario.interval_s
        self.tcs = list(self.site.thermocouples)
        self.control = self.site.control
        self._lag = {tc.name: params.ambient_c for tc in self.tcs}
        self._tau = {
            tc.name: scenario.instruments.get(tc.name, {}).get("time_constant_s", tc.time_constant_s) for tc in self.tcs
        }
        # a calibration error within a fraction of the tolerance class, fixed per thermocouple
        self._offset = {
            tc.name: scenario.instruments.get(tc.name, {}).get("offset_c", float(self.rng.normal(0.0, 0.4)))
            for tc in self.tcs
        }
        base = self.site.path.parent if self.site.path else None
        self.bands: dict[str, tuple[Band, Band | None]] = {
            py.name: (band_of(py, base), Band(*py.band2_um) if py.kind == "ratio" and py.band2_um else None)
            for py in self.site.pyrometers
        }
        reference = self.site.reference
        self._default_tc = reference.name if reference else (self.tcs[0].name if self.tcs else "")
        self.faults = list(scenario.faults)
        for fault in self.faults:
            channel = fault.param("channel")
            if fault.kind in ("tc-drift", "tc-open") and channel is not None and channel not in self._lag:
                raise ValueError(f"fault {fault.kind}: no thermocouple channel {channel!r} in the site profile")
            if fault.kind == "loop-break" and channel is not None and self.site.pyrometer(channel) is None:
                raise ValueError(f"fault {fault.kind}: no pyrometer channel {channel!r} in the site profile")
        self.duration_s = scenario.duration_s
        self._step_t = 0.0
        """Simulated seconds the kiln has been stepped to (ahead of :attr:`t` by the chunks not yet handed out)."""
        self._ahead: deque[tuple[dict[str, Any], int, int, bool, dict[str, float]]] = deque()
        """Chunks stepped ahead, not yet handed out: truth, its slice, and done and state after the chunk."""
        self._after: tuple[bool, dict[str, float]] | None = None
        """Done and state after the last chunk handed out (None before the first)."""
        self._templates: dict[tuple[int, ...], str] = {}
        """Line templates by the pattern of statuses in a line (see :func:`_template`)."""

    # -- truth as functions of time -------------------------------------------------
    def _faults(self, kind: str) -> list[Fault]:
        return [f for f in self.faults if f.kind == kind]

    def _drift_c(self, name: str, t: np.ndarray) -> np.ndarray:
        out = np.zeros_like(t)
        for f in self._faults("tc-drift"):
            if (f.param("channel") or self._default_tc) == name:
                out += np.clip(t - f.at_s, 0.0, None) / 3600.0 * float(f.param("rate"))
        return out

    def _open(self, name: str, t: np.ndarray) -> np.ndarray:
        out = np.zeros(t.shape, dtype=bool)
        for f in self._faults("tc-open"):
            if (f.param("channel") or self._default_tc) == name:
                out |= t >= f.at_s
        return out

    def _loop_broken(self, name: str, t: np.ndarray) -> np.ndarray:
        out = np.zeros(t.shape, dtype=bool)
        first = self.site.pyrometers[0].name if self.site.pyrometers else ""
        for f in self._faults("loop-break"):
            if (f.param("channel") or first) == name:
                out |= t >= f.at_s
        return out

    def _fouling(self, t: np.ndarray) -> np.ndarray:
        out = np.full(t.shape, float(self.scenario.fouling))
        for f in self._faults("window-fouling"):
            out *= np.exp(-np.clip(t - f.at_s, 0.0, None) / 3600.0 * float(f.param("rate")))
        return np.clip(out, 1e-3, 1.0)

    def _emissivity(self, t: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        eps = np.full(t.shape, self.scenario.emissivity)
        slope = np.full(t.shape, self.scenario.slope)
        for f in self._faults("emissivity-step"):
            after = t >= f.at_s
            to, non_gray = f.param("to"), f.param("slope") is not None
            if to is not None or not non_gray:  # slope alone: a non-gray step that leaves the single band's emissivity
                eps = np.where(after, min(1.0, self.scenario.emissivity + 0.07) if to is None else float(to), eps)
            if non_gray:
                slope = np.where(after, float(f.param("slope")), slope)
        return np.clip(eps, 1e-3, 1.0), slope

    def _window(self, kind: str, t: float) -> Fault | None:
        for f in self._faults(kind):
            if f.at_s <= t < f.at_s + float(f.param("seconds")):
                return f
        return None

    def _windows(self, kind: str, t: np.ndarray) -> list[Fault | None]:
        """:meth:`_window` for each of the times ``t``: the first fault of ``kind`` open at each."""
        faults = self._faults(kind)
        if not faults:
            return [None] * t.size
        first = np.full(t.size, -1)
        for j in range(len(faults) - 1, -1, -1):  # the earliest in the list wins, as in _window
            f = faults[j]
            first[(f.at_s <= t) & (t < f.at_s + float(f.param("seconds")))] = j
        return [None if j < 0 else faults[j] for j in first.tolist()]

    # -- stepping -------------------------------------------------------------------
    @property
    def done(self) -> bool:
        """Whether the run is over, as of the last chunk handed out (the kiln itself may be stepped ahead)."""
        if self.endless:
            return False
        if self._after is not None:
            return self._after[0]
        return self._done_now()

    def _done_now(self) -> bool:
        """Whether the run is over at the stepping clock (see :data:`AHEAD`)."""
        if self.endless:
            return False
        if self.duration_s is not None:
            return self._step_t >= self.duration_s
        cap = 3.0 * self.scenario.schedule.planned_duration_s + 4 * 3600.0
        return (self.controller.finished and self.kiln.wall_c < self.scenario.cool_end_c) or self._step_t >= cap

    def chunks(self) -> Iterator[list[Line]]:
        while not self.done:
            if not self._ahead:
                self._step_ahead()
            yield self._emit(self._ahead.popleft())

    def _step_ahead(self) -> None:
        """Step the kiln up to :data:`AHEAD` chunks, and evaluate their instruments' noise-free truth at once."""
        sizes: list[tuple[int, bool, dict[str, float]]] = []
        parts: list[tuple[np.ndarray, np.ndarray, np.ndarray, dict[str, np.ndarray]]] = []
        for _ in range(AHEAD):
            parts.append(self._step_chunk())
            done = self._done_now()
            sizes.append((parts[-1][0].size, done, self._state_now()))
            if done:
                break
        times = np.concatenate([q[0] for q in parts])
        wall = np.concatenate([q[1] for q in parts])
        ware = np.concatenate([q[2] for q in parts])
        lags = {tc.name: np.concatenate([q[3][tc.name] for q in parts]) for tc in self.tcs}
        truth = self._truth(times, wall, lags, ware)
        lo = 0
        for n, done, state in sizes:
            self._ahead.append((truth, lo, lo + n, done, state))
            lo += n

    def _step_chunk(self) -> tuple[np.ndarray, np.ndarray, np.ndarray, dict[str, np.ndarray]]:
        """Step the kiln and controller through one chunk: times, wall, ware and each thermocouple's lagged junction."""
        n = CHUNK
        if self.duration_s is not None and not self.endless:
            n = max(1, min(n, int(math.ceil((self.duration_s - self._step_t) / self.dt))))
        times = np.empty(n)
        wall = np.empty(n)
        ware = np.empty(n)
        lags = {tc.name: np.empty(n) for tc in self.tcs}
        control = self.control.name if self.control else None
        # the step is sequential (the controller answers the kiln), so it stays a loop; what does
        # not change within a chunk is computed once
        smoothing = [(tc.name, 1.0 - math.exp(-self.dt / self._tau[tc.name]) if self._tau[tc.name] > 0 else 1.0) for tc in self.tcs]
        drifts = [(f.at_s, float(f.param("rate"))) for f in self._faults("tc-drift") if (f.param("channel") or self._default_tc) == control]
        lag, kiln = self._lag, self.kiln
        for i in range(n):
            if control is not None:
                drift = 0.0
                for at_s, rate in drifts:  # as _drift_c, for one time
                    drift += max(self._step_t - at_s, 0.0) / 3600.0 * rate
                measured = lag[control] + self._offset[control] + drift
            else:
                measured = kiln.wall_c
            power = self.controller.power(measured, self._step_t, self.dt)
            kiln.step(power, self.dt)
            self._step_t += self.dt
            wall_c = kiln.wall_c
            for name, a in smoothing:
                lag[name] += a * (wall_c - lag[name])
                lags[name][i] = lag[name]
            times[i] = self._step_t
            wall[i] = wall_c
            ware[i] = kiln.ware_c
        return times, wall, ware, lags

    def _truth(self, times: np.ndarray, wall: np.ndarray, lags: dict[str, np.ndarray], ware: np.ndarray) -> dict[str, Any]:
        """What each instrument would read without noise, and its status, over several chunks at once
        (element by element, so the same as chunk by chunk)."""
        n = times.size
        ambient = self.scenario.kiln.ambient_c
        cold_true = ambient + 6.0 * np.clip((wall - ambient) / 1250.0, 0.0, 1.0)
        truth: dict[str, Any] = {"times": times, "wall": wall, "cold": cold_true}
        for tc in self.tcs:
            junction = lags[tc.name] + self._offset[tc.name] + self._drift_c(tc.name, times)
            cold = cold_true if isinstance(tc.cold_junction, str) else np.full(n, float(tc.cold_junction))
            if tc.unit == "mV":
                emf, status = thermocouple_clean_emf(tc, junction, cold)
                truth[tc.name] = (emf, status)
            else:
                truth[tc.name] = (junction, np.full(n, Status.OK))
            truth["open " + tc.name] = self._open(tc.name, times)
        eps, slope = self._emissivity(times)
        fouling = self._fouling(times)
        for py in self.site.pyrometers:
            band, band2 = self.bands[py.name]
            # what the ware reflects: the walls, a fixed cold surround (a sight tube, an open door), or nothing
            if isinstance(py.background, float):
                surround = np.full(n, py.background)
            elif py.background is None:
                surround = None
            else:
                surround = wall
            truth[py.name] = pyrometer_shown(py, band, band2, ware, surround, eps, slope, fouling)
            truth["broken " + py.name] = self._loop_broken(py.name, times)
        return truth

    def _emit(self, ahead: tuple[dict[str, Any], int, int, bool, dict[str, float]]) -> list[Line]:
        """The lines of one chunk stepped ahead: its noise drawn (in the same order as ever), its lines made."""
        truth, lo, hi, done, state = ahead
        times = truth["times"][lo:hi]
        self.t = float(times[-1])
        self._after = (done, state)
        n = times.size
        rng = self.rng
        columns: list[tuple[str, np.ndarray, str, np.ndarray]] = []
        for cj in self.site.cold_junctions:
            columns.append((cj, truth["cold"][lo:hi] + rng.normal(0.0, 0.05, n), "C", np.full(n, Status.OK)))
        for tc in self.tcs:
            clean, status = truth[tc.name]
            clean, status = clean[lo:hi], status[lo:hi]
            noise_uv = self.scenario.instruments.get(tc.name, {}).get("noise_uv", 2.0)
            if tc.unit == "mV":
                value = clean + rng.normal(0.0, noise_uv * 1e-3, n)
            else:  # a bridge that converts: degC with noise of the same size (clean is the junction)
                sens = float(seebeck(np.clip(np.median(clean), 0, 1000), tc.type))
                value = clean + rng.normal(0.0, noise_uv * 1e-3 / max(sens, 1e-3), n)
            status = np.where(truth["open " + tc.name][lo:hi], Status.OPEN, status)
            columns.append((tc.name, value, tc.unit, status))
        for py in self.site.pyrometers:
            noise = self.scenario.instruments.get(py.name, {}).get("noise_c", 1.0 if py.kind == "ratio" else 0.3)
            value = truth[py.name][lo:hi] + rng.normal(0.0, noise, n)
            status = pyrometer_status(py, value)
            status = np.where(truth["broken " + py.name][lo:hi], Status.ERROR, status)
            columns.append((py.name, value, "C", status))
        garbage_draw = rng.random(n)
        garbage_kind = rng.integers(0, 3, n)
        garbage_pos = rng.random(n)
        lines: list[Line] = []
        # one %-template per pattern of statuses, filled with a whole row at once: the same bytes as
        # transport.native.encode, without a Value and an f-string per value
        value_rows = np.column_stack([col for _, col, _, _ in columns]).tolist() if columns else [[]] * n
        status_rows = np.column_stack([st for _, _, _, st in columns]).astype(np.int64) if columns else np.zeros((n, 0), dtype=np.int64)
        abnormal = (status_rows != int(Status.OK)).any(axis=1).tolist()
        forms = [(name.replace("%", "%%"), unit) for name, _, unit, _ in columns]
        templates = self._templates
        all_ok = tuple([int(Status.OK)] * len(columns))
        start_utc = self.scenario.start_utc
        dropouts, garbages = self._windows("dropout", times), self._windows("garbage", times)
        for i, t in enumerate(times.tolist()):
            key = tuple(status_rows[i].tolist()) if abnormal[i] else all_ok
            template = templates.get(key)
            if template is None:
                template = templates[key] = _template(forms, key)
            body = (template % (self.seq, start_utc + t, *value_rows[i])).encode("ascii")
            data = body + b" *%04X\r\n" % crc16(body)
            self.seq += 1
            dropout, garbage = dropouts[i], garbages[i]
            if garbage is not None and garbage_draw[i] < float(garbage.param("fraction")):
                data = _spoil(data, int(garbage_kind[i]), float(garbage_pos[i]), rng)
            # a dropout that starts within this reading may also drop the connection
            disconnect = dropout is not None and t - dropout.at_s < self.dt and bool(dropout.param("disconnect"))
            lines.append(Line(t, data, dropped=dropout is not None, disconnect=disconnect))
        return lines

    # -- truth for tests ------------------------------------------------------------
    @property
    def state(self) -> dict[str, float]:
        """The kiln as of the last chunk handed out."""
        return self._after[1] if self._after is not None else self._state_now()

    def _state_now(self) -> dict[str, float]:
        return {"t": self._step_t, "wall_c": self.kiln.wall_c, "ware_c": self.kiln.ware_c, "segment": self.controller.segment}


_WORDS = {int(Status.OPEN): "OPEN", int(Status.UNDER): "UNDER", int(Status.OVER): "OVER"}


def _template(forms: list[tuple[str, str]], statuses: tuple[int, ...]) -> str:
    """A native line's %-template for one pattern of statuses, as :func:`firewatch.transport.native.encode`
    writes it: sequence number, device time, then each value (4 decimals in mV, 2 in degC) or its
    status word; a value under a status word is consumed unshown (``%.0s``)."""
    parts = ["FW1 %d %.3f"]
    for (name, unit), status in zip(forms, statuses):
        if status == int(Status.OK):
            parts.append(f"{name}=%.{4 if unit == 'mV' else 2}f{unit}")
        else:
            parts.append(f"{name}={_WORDS.get(status, 'ERR')}%.0s")
    return " ".join(parts)


def _spoil(data: bytes, kind: int, pos: float, rng: np.random.Generator) -> bytes:
    """Garbage on the line: random bytes, a truncated line, or one flipped byte."""
    body = data.rstrip(b"\r\n")
    if kind == 0:
        return bytes(rng.integers(0, 256, max(1, int(pos * 60))).astype(np.uint8).tobytes()).replace(b"\n", b"?") + b"\r\n"
    if kind == 1:
        return body[: max(1, int(pos * len(body)))] + b"\r\n"
    i = min(len(body) - 1, int(pos * len(body)))
    flipped = bytes([body[i] ^ 0x20]) if body[i] ^ 0x20 not in (10, 13) else b"#"
    return body[:i] + flipped + body[i + 1 :] + b"\r\n"
