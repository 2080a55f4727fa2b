"""``firewatch inspect``: what a firing log holds, for people or as JSON."""

from __future__ import annotations

import argparse
import json
import sys
from typing import Any

from firewatch.commands._common import iso, open_log

__all__ = ["add_parser", "run", "summary"]


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("inspect", help="summarise a firing log: times, samples, gaps, alarms",
                       description="The firing's start and end, duration, samples per channel, malformed lines, failed Modbus polls, gaps and alarms; "
                       "with --json also the firing report's summary (peak, holds, critical ranges, divergence, readings SHA-256).")
    p.add_argument("log", metavar="FILE.db")
    p.add_argument("--json", action="store_true", help="print one JSON object (times in UTC, ISO 8601)")
    p.add_argument("--utc", action="store_true", help="clock times in UTC instead of the site's time zone ([site] timezone, else this computer's)")


def _record_summary(reader: Any) -> dict[str, Any] | None:
    """The firing report's figures, or None where a damaged part of the log keeps them from being computed."""
    from firewatch.store._common import LogError
    from firewatch.store.record import read_record  # the firing record's numbers, as the report shows them

    try:
        return read_record(reader).summary()
    except LogError:
        return None  # the integrity check names the damage


def summary(reader, record: bool = True) -> dict[str, Any]:
    firing = reader.firing()
    start, end = firing.get("started_t"), firing.get("ended_t")
    samples = {
        name: count
        for name, count in reader.query(
            "SELECT c.name, (SELECT count(*) FROM sample s WHERE s.id >= coalesce(c.first_sample, 1)) FROM channel c "
            "WHERE c.kind IN ('thermocouple', 'cold_junction', 'pyrometer') ORDER BY c.id"
        )
    }
    malformed = reader.raw_counts()[1]
    failed_polls = reader.query("SELECT value FROM meta WHERE key = 'failed_polls'")  # kept by a Modbus recorder
    gaps = [
        {"start": iso(g["start_t"]), "end": iso(g["end_t"]), "seconds": round(g["end_t"] - g["start_t"], 3), "reason": g["reason"]}
        for g in reader.gaps()
    ]
    from firewatch.firing.alarms.causes import cause_steps, earlier_causes

    alarms = []
    for a in reader.alarms():
        earlier = earlier_causes(a["raised_t"], cause_steps(a["states"]), start)
        for c, step in zip(earlier, cause_steps(a["states"])):
            c["until"] = iso(step.t)
        alarms.append(
            {
                "kind": a["kind"],
                "cause": a["cause"],
                "channel": a["channel"],
                "priority": a["priority"],
                "raised_s": None if start is None else round(a["raised_t"] - start, 3),
                "cleared_s": None if a["cleared_t"] is None or start is None else round(a["cleared_t"] - start, 3),
                "state": a["state"],
                "message": a["message"],
                "evidence": a["evidence"],
                "causes": earlier,
                "states": [
                    {"state": s["state"], "t_s": None if start is None else round(s["t"] - start, 3), "time": iso(s["t"]), "detail": s["detail"]}
                    for s in a["states"]
                ],
            }
        )
    sessions = reader.query("SELECT count(*) FROM session")[0][0]
    recorder_sessions = _sessions(reader)
    return {
        "site": firing.get("site_name"),
        "kiln": firing.get("kiln"),
        "schedule": firing.get("schedule_name"),
        "clock": firing.get("clock"),
        "start": iso(start),
        "end": iso(end),
        "duration_s": None if start is None else round(end - start, 3),
        "sessions": sessions,
        "layout": {"schema": int(reader.query("SELECT value FROM meta WHERE key = 'schema_version'")[0][0]),
                   "converted_from_schema": None if reader.upgraded_from is None else int(reader.upgraded_from)},
        "recorder_sessions": recorder_sessions,
        "samples": samples,
        "malformed_lines": malformed,
        "failed_polls": int(failed_polls[0][0]) if failed_polls else 0,
        "gaps": gaps,
        "alarms": alarms,
        "summary": _record_summary(reader) if record else None,
    }


def _sessions(reader) -> list[dict[str, Any]]:
    """Each recorder session with the SQLite it wrote with and what that means (issue 10 item 9: said here, not
    on the operator's terminal at every start)."""
    from firewatch.services.recorder import sqlite_note

    rows = reader.query("SELECT started_utc, ended_utc, end_reason, port, host, pid, firewatch_version, sqlite_version "
                        "FROM session ORDER BY id")
    return [
        {
            "started": iso(r[0]), "ended": iso(r[1]), "end_reason": r[2], "port": r[3], "host": r[4], "pid": r[5],
            "firewatch_version": r[6], "sqlite_version": r[7], "sqlite_note": sqlite_note(r[7] or ""),
        }
        for r in rows
    ]


def _site_zone(reader) -> str:
    """The ``[site] timezone`` of the profile kept in the log ("" when it names none or does not load)."""
    from firewatch.settings._tomlcheck import ProfileError
    from firewatch.settings.profile import load_site
    from firewatch.store._common import LogError

    try:
        return load_site(f"{reader.path} (site profile in the log)", text=reader.firing().get("site_profile") or "").timezone
    except (ProfileError, LogError):
        return ""


def run(args: argparse.Namespace) -> int:
    from firewatch.store._common import LogDamaged, damage_error

    with open_log(args.log, check=False) as reader:
        problems = reader.integrity()
        try:
            info = summary(reader, record=args.json)  # the record's figures are printed with --json only
        except LogDamaged:
            if not problems:
                raise
            info = {}  # what a damaged log could not give; the integrity check says why
        zone = _site_zone(reader)
    info["integrity"] = {"check": "PRAGMA quick_check", "ok": not problems, "problems": problems}
    status = 0
    if problems:
        print(f"firewatch inspect: {damage_error(args.log, problems)}", file=sys.stderr)
        status = 2
    if args.json:
        json.dump(info, sys.stdout)
        sys.stdout.write("\n")
        return status
    from rich.console import Console
    from rich.table import Table

    from firewatch.settings.timefmt import Clock, duration

    clock = Clock.for_site(zone, utc=args.utc)
    console = Console()
    if len(info) == 1:  # only the integrity check could be read
        console.print(f"firing log {args.log}: damaged; SQLite's quick_check found:\n" + "\n".join(problems), markup=False, highlight=False)
        return status

    def at(text: str | None) -> str:
        """An ISO time from the summary, in the site's clock (the zone is named once, in its own row)."""
        return clock.stamp(_utc_seconds(text)) if text else "-"

    start_t, end_t = _utc_seconds(info["start"]), _utc_seconds(info["end"])
    table = Table(title=f"firing log {args.log}", show_header=False, title_justify="left")
    table.add_column("what")
    table.add_column("value")
    table.add_row("site", f"{info['site']} — {info['kiln']}")
    table.add_row("schedule", info["schedule"] or "none")
    table.add_row("clock times", clock.describe(start_t, end_t))
    table.add_row("start", clock.full(start_t) if start_t is not None else "no data")
    table.add_row("end", clock.full(end_t) if end_t is not None else "no data")
    table.add_row("duration", duration(info["duration_s"]) if info["duration_s"] is not None else "-")
    table.add_row("recorder sessions", "\n".join(
        f"{at(x['started'])} to {at(x['ended']) if x['ended'] else 'open (killed, or still recording)'}"
        f"{' (' + x['end_reason'] + ')' if x['end_reason'] else ''}; SQLite {x['sqlite_version']}"
        f"{' (' + x['sqlite_note'] + ')' if x['sqlite_note'] else ''}"
        for x in info["recorder_sessions"]) or "none")
    table.add_row("samples", ", ".join(f"{k} {v}" for k, v in info["samples"].items()))
    layout = info.get("layout") or {}
    if layout.get("converted_from_schema") is not None:
        table.add_row("log layout", f"schema {layout['converted_from_schema']}, read through a converted copy; "
                                    f"`firewatch upgrade-log` writes the compact layout (schema {layout['schema']})")
    table.add_row("malformed lines", str(info["malformed_lines"]))
    if info["failed_polls"]:
        table.add_row("failed Modbus polls", str(info["failed_polls"]))
    table.add_row("gaps", "none" if not info["gaps"] else "\n".join(
        f"{at(g['start'])}, {duration(g['seconds'])} ({g['reason']})" for g in info["gaps"]))
    table.add_row(
        "alarms",
        "none" if not info["alarms"] else "\n".join(
            f"{clock.stamp(start_t + a['raised_s']) if start_t is not None else '-'} {a['priority']} {a['kind']} "
            f"{a['channel'] or ''}{(' (cause ' + a['cause'] + ')') if a['cause'] else ''}, {a['state']}"
            for a in info["alarms"]
        ),
    )
    table.add_row("integrity", "ok (SQLite quick_check)" if not problems else "DAMAGED (SQLite quick_check):\n" + "\n".join(problems))
    console.print(table)
    return status


def _utc_seconds(text: str | None) -> float | None:
    """Seconds since the epoch from the summary's ISO 8601 UTC text."""
    import datetime as dt

    if not text:
        return None
    return dt.datetime.fromisoformat(text).timestamp()  # Python 3.11 reads the Z itself
