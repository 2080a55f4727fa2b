"""A firing record as a document: header fields, the chart, and tables of text, ready for any layout.

The PDF and HTML layouts draw the same :class:`Document`, so both say the
same thing. Every number comes from the :class:`~firewatch.firing.record.FiringRecord`;
this module only words and formats it (durations with units, clock times
in the chosen zone, temperatures in the chosen unit).
"""

from __future__ import annotations

import datetime as dt
from dataclasses import dataclass, field

from firewatch import __version__
from firewatch.firing.alarms.causes import CauseStep
from firewatch.firing.record import DIGEST_NAME, FiringRecord
from firewatch.settings.timefmt import Clock, duration
from firewatch.settings.units import Units

__all__ = ["CAUTIONS", "STATE_WORDS", "ChartBlock", "Document", "Fields", "Table", "build_document"]

CAUTIONS = (
    ("firewatch is a monitoring aid, never a safety device: the kiln's own controller and an independent "
     "over-temperature cut-out stay in charge, and this record does not replace them."),
    ("Follow the site's safety rules, the kiln maker's instructions and local codes; where the law requires "
     "licensed practice, defer to it."),
)
STATE_WORDS = {
    "active-unacknowledged": "raised, unacknowledged",
    "active-acknowledged": "acknowledged, still active",
    "returned-unacknowledged": "cleared, unacknowledged",
    "latched": "latched",
    "shelved": "shelved",
    "normal": "normal",
}
_END_WORDS = {
    "active-unacknowledged": "still active and never acknowledged when the record ends",
    "active-acknowledged": "still active when the record ends",
    "returned-unacknowledged": "cleared, but never acknowledged",
    "latched": "latched: never acknowledged",
    "shelved": "still shelved when the record ends",
}
PRIORITY_WORDS = {"high": "HIGH", "medium": "MEDIUM", "low": "LOW"}


@dataclass
class Fields:
    """Labelled values, laid out in columns."""

    items: list[tuple[str, str]]
    columns: int = 2


@dataclass
class Table:
    """A titled table; ``marks`` flags rows that need the reader's attention (drawn bold)."""

    title: str
    columns: list[tuple[str, float, str]]
    """(heading, relative width, ``l`` or ``r``)."""
    rows: list[list[str]] = field(default_factory=list)
    marks: list[bool] = field(default_factory=list)
    groups: list[bool] = field(default_factory=list)
    """Rows that start a group (an alarm and its transitions): a rule above them."""
    empty: str = "none"
    note: str = ""

    def add(self, row: list[str], mark: bool = False, group: bool = False) -> None:
        self.rows.append(row)
        self.marks.append(mark)
        self.groups.append(group)


@dataclass
class ChartBlock:
    """The firing chart, drawn from the record's chart data."""

    caption: str


@dataclass
class Document:
    title: str
    subtitle: str
    header: Fields
    blocks: list[Fields | Table | ChartBlock]
    cautions: tuple[str, ...]
    digest_line: str
    produced: str
    record: FiringRecord
    clock: Clock
    units: Units


def _verdict(ok: bool, bad_word: str) -> str:
    return "ok" if ok else bad_word


def build_document(record: FiringRecord, clock: Clock, units: Units, now: float | None = None) -> Document:
    """Word and format ``record`` (times in ``clock``'s zone, temperatures in ``units``)."""
    r, u = record, units
    start = r.start_t

    def at(t: float | None) -> str:
        if t is None:
            return "—"
        since = "" if start is None else f" ({duration(t - start)} in)"
        return f"{clock.stamp(t)}{since}"

    # -- header ---------------------------------------------------------------------------
    planned = f"; planned {duration(r.planned_s)}" if r.planned_s else ""
    schedule = f"{r.schedule_name} ({len(r.schedule.segments)} segments{planned})" if r.schedule is not None else (r.schedule_name or "none recorded")
    ref = r.reference or "—"
    if r.reference_label:
        ref += f" ({r.reference_label})"
    sessions = f"{len(r.sessions)} session{'s' if len(r.sessions) != 1 else ''}"
    clock_word = "the instrument's own clock" if r.clock == "device" else "the recorder's clock"
    header = Fields([
        ("Site", r.site_name or "—"),
        ("Kiln", r.kiln or "—"),
        ("Schedule", schedule),
        ("Reference thermocouple", ref),
        ("Firing start", clock.full(r.start_t) if r.start_t is not None else "no readings"),
        ("Firing end", clock.full(r.end_t) if r.end_t is not None else "no readings"),
        ("Recorded", f"{duration(r.duration_s)}, {sessions}, readings timed by {clock_word}" if r.duration_s is not None else sessions),
        ("Clock times", clock.describe(r.start_t, r.end_t)),
        ("Firing log", f"{r.log_name}: {r.lines:,} lines".replace(",", " ")),
        ("Temperatures", f"{u.symbol}; differences in {u.delta_symbol}"),
    ])

    blocks: list[Fields | Table | ChartBlock] = []
    blocks.append(ChartBlock("Plan: the schedule timed from the firing's start. Numbered marks: alarms, as listed below; "
                             "hatched: gaps in the record; bands: critical ranges."))

    # -- summary --------------------------------------------------------------------------
    summary = Table("Summary", [("", 0.27, "l"), ("recorded", 0.41, "l"), ("against", 0.22, "l"), ("verdict", 0.10, "l")],
                    empty="no readings in this log")
    if r.peak is not None:
        summary.add([f"Peak ({r.peak.channel})", f"{u.temperature(r.peak.value_c)} at {at(r.peak.t)}",
                     f"top target {u.temperature(r.top_target_c, 0)}" if r.top_target_c is not None else "", ""])
    if r.threshold_c is not None:
        summary.add([f"Time above {u.temperature(r.threshold_c, 0)}", duration(r.time_above_s),
                     f"top target − {u.delta(10.0, 0, signed=False)}", ""])
    for h in r.holds:
        if not h.reached:
            summary.add([f"Hold '{h.name}'", "segment not reached", f"planned {duration(h.planned_s)}", "NOT HELD"], mark=True)
            continue
        ok = h.achieved_s >= h.planned_s
        summary.add([
            f"Hold '{h.name}' at {u.temperature(h.target_c, 0)}",
            f"{duration(h.achieved_s)} within ±{u.delta(h.band_k, 0, signed=False)}" + (f", from {clock.stamp(h.start_t)}" if h.start_t else ""),
            f"planned {duration(h.planned_s)}", _verdict(ok, "SHORT"),
        ], mark=not ok)
    for p in r.passages:
        cr = p.range
        note = " (gap inside)" if p.gap else ""
        summary.add([
            f"{cr.name} {u.temperature(cr.low_c, 0).split()[0]}–{u.temperature(cr.high_c, 0)}, {p.direction}",
            f"mean {u.rate(p.mean_rate_c_per_h)}, fastest {u.rate(p.fastest_c_per_h)}; {clock.stamp(p.enter_t, False)}–{clock.stamp(p.leave_t, False)}{note}",
            f"limit {u.rate(cr.max_rate_c_per_h)}", _verdict(p.within, "OVER"),
        ], mark=not p.within)
    for cr in r.ranges_not_passed:
        summary.add([f"{cr.name} {u.temperature(cr.low_c, 0).split()[0]}–{u.temperature(cr.high_c, 0)}",
                     f"not passed ({cr.direction})", f"limit {u.rate(cr.max_rate_c_per_h)}", ""])
    if r.deviation is not None:
        seg = ""
        if r.schedule is not None and r.deviation.segment is not None and r.deviation.segment < len(r.schedule.segments):
            seg = f", in '{r.schedule.segments[r.deviation.segment].name}'"
        limit = r.deviation.alarm_k
        off = limit is not None and abs(r.deviation.value_k) > limit
        summary.add([f"Largest deviation from plan ({r.deviation.channel})", f"{u.delta(r.deviation.value_k)} at {at(r.deviation.t)}{seg}",
                     f"alarm beyond ±{u.delta(limit, 0, signed=False)}" if limit is not None else "", _verdict(not off, "OFF PLAN")], mark=off)
    if r.schedule is not None and r.start_t is not None:
        if r.schedule_done_t is not None:
            took = r.schedule_done_t - r.start_t
            late = took - (r.planned_s or 0.0)
            than = "as planned" if abs(late) < 60.0 else f"{duration(abs(late))} {'later' if late > 0 else 'sooner'} than planned"
            summary.add(["Schedule completed", f"at {clock.stamp(r.schedule_done_t)}, after {duration(took)}: {than}",
                         f"planned {duration(r.planned_s)}", ""])
        else:
            summary.add(["Schedule completed", "not by the end of the record", f"planned {duration(r.planned_s)}", "NOT DONE"], mark=True)
    for d in r.divergence:
        if d.n == 0:
            summary.add([f"Divergence {d.pyrometer} − {d.reference}", "never compared (out of range throughout)", "", ""])
            continue
        ok = d.outside_s == 0
        summary.add([
            f"Divergence {d.pyrometer} − {d.reference}",
            f"mean {u.delta(d.mean_k)}, sd {u.delta(d.sd_k, signed=False)}, largest {u.delta(d.largest_k)} at {clock.stamp(d.largest_t)}; "
            f"outside its allowance {duration(d.outside_s)} of {duration(d.compared_s)}",
            f"allowance ±{u.delta(d.mean_allowed_k, signed=False)} on average", _verdict(ok, "OUTSIDE"),
        ], mark=not ok)
    if r.start_t is not None:
        summary.add(["Gaps in the record", "none" if not r.gaps else f"{len(r.gaps)}, {duration(r.gap_total_s)} in all", "", ""])
        summary.add(["Malformed lines", f"{r.malformed:,} of {r.lines:,}".replace(",", " "), "", ""])
        by: dict[str, int] = {}
        for a in r.alarms:
            by[a.priority] = by.get(a.priority, 0) + 1
        order = ("high", "medium", "low")
        words = ", ".join(f"{n} {p}" for p, n in sorted(by.items(), key=lambda x: order.index(x[0]) if x[0] in order else len(order)))
        open_now = [a for a in r.alarms if a.state != "normal"]
        still = f"; {len(open_now)} not back to normal at the end" if open_now else ""
        summary.add(["Alarms", "none" if not r.alarms else f"{len(r.alarms)} ({words}){still}", "", ""])
        summary.add(["Operator notes", str(len(r.notes)) if r.notes else "none", "", ""])
    blocks.append(summary)

    # -- the schedule as run ---------------------------------------------------------------
    if r.schedule is not None:
        seg_t = Table("Schedule as planned and as fired", [
            ("#", 0.04, "r"), ("segment", 0.20, "l"), ("rate", 0.11, "r"), ("target", 0.10, "r"), ("hold", 0.10, "r"),
            ("planned", 0.12, "r"), ("took", 0.12, "r"), ("ended", 0.21, "l"),
        ], note="Planned: the ramp at its rate (or the schedule's planning rate for 'max') plus the hold. "
                "Took: as the recorded progress went through the segment.")
        for s in r.segments:
            rate = "max" if s.rate_c_per_h in (float("inf"), float("-inf")) else u.rate(s.rate_c_per_h)
            seg_t.add([str(s.index + 1), s.name, rate, u.temperature(s.target_c, 0), duration(s.hold_s) if s.hold_s else "—",
                       duration(s.planned_s), duration(s.actual_s) if s.actual_s is not None else ("not reached" if s.entered_t is None else "—"),
                       clock.stamp(s.left_t) if s.left_t is not None else ("running at the end" if s.entered_t is not None else "—")])
        for cr in r.schedule.critical:
            seg_t.note += (f" Critical range '{cr.name}': {u.temperature(cr.low_c, 0)} to {u.temperature(cr.high_c, 0)}, "
                           f"no faster than {u.rate(cr.max_rate_c_per_h)} ({cr.direction}).")
        blocks.append(seg_t)

    # -- sessions and gaps -------------------------------------------------------------------
    sess = Table("Recorder sessions", [("#", 0.04, "r"), ("started", 0.17, "l"), ("ended", 0.17, "l"), ("how it ended", 0.22, "l"),
                                       ("input", 0.22, "l"), ("host, firewatch", 0.18, "l")], empty="no sessions recorded")
    for session in r.sessions:
        sess.add([str(session.index), clock.stamp(session.started_t), clock.stamp(session.ended_t) if session.ended_t is not None else "—",
                  session.end_reason or "no end recorded (still recording, or stopped without closing)", session.port,
                  f"{session.host}, {session.version}"],
                 mark=session.ended_t is None)
    blocks.append(sess)
    gaps = Table("Gaps in the record", [("from", 0.22, "l"), ("to", 0.22, "l"), ("length", 0.16, "r"), ("reason", 0.40, "l")],
                 empty="none: readings throughout")
    for g in r.gaps:
        gaps.add([clock.stamp(g.start_t), clock.stamp(g.end_t), duration(g.seconds), g.reason])
    blocks.append(gaps)
    if r.malformed_reasons:
        mal = Table("Malformed lines (kept raw in the log)", [("reason", 0.85, "l"), ("lines", 0.15, "r")])
        for reason, n in r.malformed_reasons:
            mal.add([reason, str(n)])
        blocks.append(mal)

    # -- alarms and their lifecycle ------------------------------------------------------------
    alarms = Table("Alarms and what was done about them", [("#", 0.05, "r"), ("time", 0.16, "l"), ("state", 0.26, "l"), ("detail", 0.53, "l")],
                   empty="none raised",
                   note="States follow ISA-18.2. Shelving hides an alarm for a time, with a reason; it returns if its condition still holds.")
    for a in r.alarms:
        cause = "" if not a.cause else (f", likely cause {a.cause}" if a.kind == "divergence" else f" ({a.cause})")
        what = f"{PRIORITY_WORDS.get(a.priority, a.priority)} {a.kind}" + (f" {a.channel}" if a.channel else "") + cause
        alarms.add([f"{a.id}", clock.stamp(a.raised_t), what, a.message], mark=True, group=True)
        for step in a.steps[1:] if a.steps and a.steps[0].state == "active-unacknowledged" else a.steps:
            state, detail = STATE_WORDS.get(step.state, step.state), step.detail or ""
            change = CauseStep.from_detail(step.t, step.detail) if step.state == "cause-changed" else None
            if change is not None:  # a new likely cause: its story in words, not the logged JSON
                state = "likely cause changed"
                detail = f"now {change.cause}, was {change.words(lambda t: clock.stamp(t, False))}: {change.reason}"
            elif step.state == "shelved" and step.by:
                detail = f"by {step.by} until {clock.stamp(step.until_t, False)}; reason: {step.reason or 'none given'}"
            elif step.detail.startswith("acknowledged") and step.by:
                state = "acknowledged" + (", back to normal" if step.state == "normal" else ", still active")
                detail = f"by {step.by}"
            alarms.add(["", clock.stamp(step.t), state, detail])
        if a.state != "normal":
            alarms.add(["", "at the end", STATE_WORDS.get(a.state, a.state), _END_WORDS.get(a.state, "not back to normal")], mark=True)
    blocks.append(alarms)
    notes = Table("Operator notes", [("time", 0.16, "l"), ("note", 0.56, "l"), ("by", 0.28, "l")], empty="none")
    for op_note in r.notes:
        notes.add([clock.stamp(op_note.t), op_note.text, op_note.source])
    blocks.append(notes)

    produced_t = now if now is not None else dt.datetime.now(dt.UTC).timestamp()
    return Document(
        title="Firing record",
        subtitle=" · ".join(x for x in (r.site_name, r.kiln) if x),
        header=header,
        blocks=blocks,
        cautions=CAUTIONS,
        digest_line=f"Readings SHA-256 ({DIGEST_NAME}): {r.digest}",
        produced=f"firewatch {__version__} · {r.log_name} · produced {clock.full(produced_t)}",
        record=record,
        clock=clock,
        units=units,
    )
