"""The firing's time line under hostile device clocks, and the pipeline under hostile numbers (issue 10).

A line's own time (the device's, or its receipt) places it on the time line. One line out of step
(far ahead, far behind) is kept raw, counted and reported, and the lines after it are kept; a clock
that really jumped (a device reset) starts a new stretch, recorded as a gap.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from firewatch.firing.pipeline import CONFIRM, JUMP_S, Batch, Pipeline
from firewatch.settings.profile import load_site, profiles_dir
from firewatch.settings.schedule import load_schedule
from firewatch.transport.native import NativeParser, crc16
from firewatch.transport.records import VALUE_LIMIT

SITE = load_site()  # the demo site: cj, tc1 (control, type K), tc2 (type S), py1 single-band, py2 ratio
LEAN = load_site("lean.toml", text='[site]\nname = "Bench"\n[[cold_junction]]\nname = "cj"\n'
                 '[[thermocouple]]\nname = "tc1"\ntype = "K"\ncold_junction = "cj"\n')
SCHEDULE = load_schedule(profiles_dir() / "demo-glaze.toml")
PARSER = NativeParser()
T0 = 1_773_464_400.0  # an arbitrary moment, 2026-03-14T05:00:00Z
DAY = 86_400.0


def line(seq: int, device_time: float | str, tc1: str = "4.096mV", py: str = "UNDER") -> bytes:
    """A native line with a good checksum (4.096 mV is type K at 100 degC, NIST Monograph 175)."""
    t = device_time if isinstance(device_time, str) else f"{device_time:.3f}"
    body = f"FW1 {seq} {t} cj=24.00C tc1={tc1} tc2=0.646mV py1={py} py2={py}".encode()
    return body + b" *%04X" % crc16(body)


def run(pipeline: Pipeline, stamps: list[tuple[float, float | str]], batch_size: int = 10_000, final: bool = True) -> list[Batch]:
    """Feed (received, device time) pairs in batches; return every batch the pipeline gave back."""
    items = [PARSER.parse(line(i, d), r) for i, (r, d) in enumerate(stamps)]
    out = [pipeline.process(items[i : i + batch_size]) for i in range(0, len(items), batch_size)]
    if final:
        out.append(pipeline.flush())
    return out


def summary(batches: list[Batch]) -> tuple[np.ndarray, list[int], list[str], list[tuple[float, float, str]]]:
    """Sample times; sequence numbers of the samples; reasons of the lines kept raw only; gaps."""
    times = np.concatenate([b.times for b in batches]) if batches else np.empty(0)
    seqs = [s[4] for b in batches for s in b.samples]
    reasons = [r[3] for b in batches for r in b.raw if not r[2]]
    gaps = [g for b in batches for g in b.gaps]
    return times, seqs, reasons, gaps


def steady(n: int, start: int = 0, speed: float = 1.0) -> list[tuple[float, float]]:
    """1 Hz device time, received every 1/speed s (an accelerated simulator sends faster than its clock)."""
    return [(T0 + (start + i) / speed, T0 + start + i) for i in range(n)]


@pytest.mark.parametrize("offset", [DAY, 3600.0, 30.0, -DAY, -30.0])
def test_one_outlier_line_is_kept_raw_and_the_rest_recorded(offset: float) -> None:
    """Issue 10: one line dated a day ahead made 31,730 of 100,000 later lines "time went backwards"."""
    stamps = steady(200)
    stamps[120] = (stamps[120][0], stamps[120][1] + offset)
    times, seqs, reasons, gaps = summary(run(Pipeline(SITE, SCHEDULE, "device"), stamps))
    assert seqs == [i for i in range(200) if i != 120]
    assert len(reasons) == 1 and ("ahead" if offset > 0 else "behind") in reasons[0] and "kept raw only" in reasons[0]
    steps = np.diff(times)
    assert steps[119] == 2.0 and np.all(np.delete(steps, 119) == 1.0)  # the device's own 1 Hz clock
    assert gaps == []


def test_an_outlier_at_the_end_of_a_batch_waits_for_the_next_batch() -> None:
    pipeline = Pipeline(SITE, SCHEDULE, "device")
    stamps = steady(20)
    stamps[9] = (stamps[9][0], stamps[9][1] + DAY)
    batches = run(pipeline, stamps, batch_size=10, final=False)
    assert [s[4] for s in batches[0].samples] == list(range(9))  # the outlier is held, not yet written
    assert [r[3] for r in batches[0].raw if not r[2]] == []
    _, seqs, reasons, _ = summary(batches)
    assert seqs == [i for i in range(20) if i != 9] and len(reasons) == 1
    # every line comes out once: raw lines in arrival order
    assert [int(r[1].split(b" ")[1]) for b in batches for r in b.raw] == list(range(20))


def test_a_device_reset_starts_a_new_stretch_recorded_as_a_gap() -> None:
    stamps = steady(50) + [(T0 + 50 + 20 + i, 7.0 + i) for i in range(30)]  # 20 s off the line, then the clock restarts at 7 s
    times, seqs, reasons, gaps = summary(run(Pipeline(SITE, SCHEDULE, "device"), stamps))
    assert seqs == list(range(80)) and reasons == []  # nothing lost
    assert np.all(np.diff(times) >= 0)  # the time line runs on
    assert len(gaps) == 1 and "went back" in gaps[0][2]
    # placed after the last line by the time that passed between them on the computer's clock
    assert gaps[0][0] == T0 + 49 and gaps[0][1] == pytest.approx(T0 + 49 + 21)
    assert times[50] == pytest.approx(T0 + 70) and times[-1] == pytest.approx(T0 + 99)


def test_a_clock_jumping_ahead_is_confirmed_and_reported() -> None:
    stamps = steady(30, speed=200.0) + [(T0 + (30 + i) / 200.0, T0 + 3600 + i) for i in range(10)]
    batches = run(Pipeline(SITE, SCHEDULE, "device"), stamps)
    times, seqs, reasons, gaps = summary(batches)
    assert seqs == list(range(40)) and reasons == [] and gaps == []  # the time line shows the gap itself
    assert times[30] - times[29] == 3600 - 29
    assert any(e[1] == "clock" and "jumped" in e[3] for b in batches for e in b.events)


def test_lines_in_steps_up_to_jump_s_are_in_step() -> None:
    stamps = [(T0 + i * 0.01, T0 + i * JUMP_S) for i in range(10)]  # a slow device read in a burst
    assert summary(run(Pipeline(SITE, SCHEDULE, "device"), stamps))[1] == list(range(10))


def test_the_first_lines_wait_for_confirmation_and_an_early_outlier_is_dropped() -> None:
    stamps = [(T0, T0 + DAY)] + steady(10, start=1)
    pipeline = Pipeline(SITE, SCHEDULE, "device")
    times, seqs, reasons, _ = summary(run(pipeline, stamps))
    assert seqs == list(range(1, 11)) and len(reasons) == 1 and "out of step with the lines after it" in reasons[0]
    assert times[0] == T0 + 1  # the time line did not start a day ahead
    # lines held at the very start with nothing to contradict them begin the time line at the end
    few = Pipeline(SITE, SCHEDULE, "device")
    assert summary(run(few, steady(CONFIRM)))[1] == list(range(CONFIRM))


def test_an_unconfirmed_jump_at_the_end_is_kept_raw() -> None:
    stamps = steady(20) + [(T0 + 20, T0 + DAY)]
    _, seqs, reasons, _ = summary(run(Pipeline(SITE, SCHEDULE, "device"), stamps))
    assert seqs == list(range(20)) and len(reasons) == 1 and "not confirmed" in reasons[0]


def test_a_wall_clock_stepped_back_is_a_new_stretch() -> None:
    stamps = [(T0 + i, "-") for i in range(20)] + [(T0 - 3600 + i, "-") for i in range(20)]
    times, seqs, reasons, gaps = summary(run(Pipeline(SITE, SCHEDULE, "wall"), stamps))
    assert seqs == list(range(40)) and reasons == [] and np.all(np.diff(times) >= 0)
    assert len(gaps) == 1 and "time of receipt went back 3619.000 s" in gaps[0][2]


def test_warm_start_continues_the_stretch_of_the_log() -> None:
    """A restarted recorder carries on from the log's last sample: its shifted stretch included."""
    pipeline = Pipeline(SITE, SCHEDULE, "device")
    pipeline.warm_start(np.array([T0 + 100.0]), {}, last=(T0 + 100.0, T0 + 40.0, 60.0))  # device clock 60 s, shifted
    times, seqs, reasons, _ = summary(run(pipeline, [(T0 + 41 + i, 61.0 + i) for i in range(5)]))
    assert seqs == list(range(5)) and reasons == []
    assert times[0] == T0 + 101


@settings(max_examples=200, deadline=None)
@given(st.lists(st.tuples(st.floats(0, 5), st.one_of(st.floats(-5, 30), st.floats(-1e10, 1e10), st.just(math.nan))), min_size=1, max_size=60),
       st.integers(1, 25), st.sampled_from(["device", "wall"]))
def test_any_clock_keeps_every_line_and_a_forward_time_line(steps, batch_size: int, clock: str) -> None:
    received, device = T0, T0
    stamps: list[tuple[float, float | str]] = []
    for dr, dd in steps:
        received += dr
        device = device + dd if math.isfinite(dd) else device
        stamps.append((received, "nan" if not math.isfinite(dd) else device))
    batches = run(Pipeline(LEAN, None, clock), stamps, batch_size=batch_size)  # the time line needs no physics
    times, seqs, reasons, _ = summary(batches)
    assert len(seqs) + len(reasons) == len(stamps)  # every line is a sample or kept raw with a reason
    assert np.all(np.diff(times) >= 0)
    assert sorted(int(r[1].split(b" ")[1]) for b in batches for r in b.raw) == list(range(len(stamps)))


# -- hostile numbers ----------------------------------------------------------------------------------


def test_open_control_thermocouple_then_values_in_one_batch() -> None:
    """Issue 10: OPEN in a fresh recorder's first lines and then a value in the same batch raised in progress tracking."""
    items = [PARSER.parse(line(i, T0 + i, "OPEN" if i < 3 else "4.096mV"), T0 + i) for i in range(40)]
    batch = Pipeline(SITE, SCHEDULE, "device").process(items)
    assert len(batch.samples) == 40
    assert np.isnan(batch.values["plan.segment"][:3]).all()
    assert np.nanmax(batch.values["plan.segment"]) == 0.0


SHARED = Pipeline(SITE, SCHEDULE, "device")  # one pipeline for every example: its first batch builds the band tables
CLOCK = iter(range(0, 10**9, 10))


@settings(max_examples=150, deadline=None)
@given(st.sampled_from(["cj", "tc1", "tc2", "py1", "py2"]), st.floats(-VALUE_LIMIT, VALUE_LIMIT), st.sampled_from(["C", "mV"]))
def test_any_value_the_parser_passes_computes_without_warnings(channel: str, value: float, unit: str) -> None:
    """Issue 10: extreme values gave numpy warnings in the log; now they are out of range, quietly."""
    items = []
    start = next(CLOCK)
    for i in range(start, start + 8):
        fields = {"cj": "24.00C", "tc1": "4.096mV", "tc2": "0.646mV", "py1": "900.00C", "py2": "900.00C"}
        fields[channel] = f"{value!r}{unit}"
        body = f"FW1 {i} {T0 + i:.3f} " + " ".join(f"{k}={v}" for k, v in fields.items())
        items.append(PARSER.parse(body.encode() + b" *%04X" % crc16(body.encode()), T0 + i))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        batch = SHARED.process(items)
    assert not [r for r in batch.raw if not r[2]]  # within the bound, nothing is malformed
