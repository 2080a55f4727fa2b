"""``firewatch inspect``: what a firing log holds, for people or as JSON."""

from __future__ import annotations

import argparse
import json
import sys
from typing import Any

from firewatch.commands._common import duration_text, iso, open_log

__all__ = ["add_parser", "run", "summary"]


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser("inspect", help="summarise a firing log: times, samples, gaps, alarms",
                       description="The firing's start and end, duration, samples per channel, malformed lines, failed Modbus polls, gaps and alarms.")
    p.add_argument("log", metavar="FILE.db")
    p.add_argument("--json", action="store_true", help="print one JSON object")


def summary(reader) -> dict[str, Any]:
    firing = reader.firing()
    start, end = firing.get("started_t"), firing.get("ended_t")
    samples = {
        name: count
        for name, count in reader.query(
            "SELECT c.name, count(r.sample_id) FROM channel c LEFT JOIN reading r ON r.channel_id = c.id "
            "WHERE c.kind IN ('thermocouple', 'cold_junction', 'pyrometer') GROUP BY c.id ORDER BY c.id"
        )
    }
    malformed = reader.query("SELECT count(*) FROM raw_line WHERE ok = 0")[0][0]
    failed_polls = reader.query("SELECT value FROM meta WHERE key = 'failed_polls'")  # kept by a Modbus recorder
    gaps = [
        {"start": iso(g["start_t"]), "end": iso(g["end_t"]), "seconds": round(g["end_t"] - g["start_t"], 3), "reason": g["reason"]}
        for g in reader.gaps()
    ]
    alarms = []
    for a in reader.alarms():
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
                "states": [
                    {"state": s["state"], "t_s": None if start is None else round(s["t"] - start, 3), "time": iso(s["t"]), "detail": s["detail"]}
                    for s in a["states"]
                ],
            }
        )
    sessions = reader.query("SELECT count(*) FROM session")[0][0]
    return {
        "site": firing.get("site_name"),
        "kiln": firing.get("kiln"),
        "schedule": firing.get("schedule_name"),
        "clock": firing.get("clock"),
        "start": iso(start),
        "end": iso(end),
        "duration_s": None if start is None else round(end - start, 3),
        "sessions": sessions,
        "samples": samples,
        "malformed_lines": malformed,
        "failed_polls": int(failed_polls[0][0]) if failed_polls else 0,
        "gaps": gaps,
        "alarms": alarms,
    }


def run(args: argparse.Namespace) -> int:
    with open_log(args.log) as reader:
        info = summary(reader)
    if args.json:
        json.dump(info, sys.stdout)
        sys.stdout.write("\n")
        return 0
    from rich.console import Console
    from rich.table import Table

    console = Console()
    table = Table(title=f"firing log {args.log}", show_header=False, title_justify="left")
    table.add_column("what")
    table.add_column("value")
    table.add_row("site", f"{info['site']} — {info['kiln']}")
    table.add_row("schedule", info["schedule"] or "none")
    table.add_row("start", info["start"] or "no data")
    table.add_row("end", info["end"] or "no data")
    table.add_row("duration", duration_text(info["duration_s"]) if info["duration_s"] is not None else "-")
    table.add_row("recorder sessions", str(info["sessions"]))
    table.add_row("samples", ", ".join(f"{k} {v}" for k, v in info["samples"].items()))
    table.add_row("malformed lines", str(info["malformed_lines"]))
    if info["failed_polls"]:
        table.add_row("failed Modbus polls", str(info["failed_polls"]))
    table.add_row("gaps", "none" if not info["gaps"] else "\n".join(f"{g['start']} +{g['seconds']:.0f} s ({g['reason']})" for g in info["gaps"]))
    table.add_row(
        "alarms",
        "none" if not info["alarms"] else "\n".join(
            f"{a['priority']} {a['kind']} {a['channel'] or ''} {('cause ' + a['cause']) if a['cause'] else ''} at +{a['raised_s']:.0f} s, {a['state']}"
            for a in info["alarms"]
        ),
    )
    console.print(table)
    return 0
