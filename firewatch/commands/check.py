"""``firewatch check``: validate a site profile, schedule or scenario."""

from __future__ import annotations

import argparse
import sys

__all__ = ["add_parser", "run", "check_file", "UNUSABLE"]


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "check",
        help="validate a site profile, schedule or simulator scenario",
        description="Exit 0 when every file is valid; status 1 and one line per problem (file:line: key: what is wrong) when a "
        "file is not valid; status 2 when a file cannot be read at all (missing, not a regular file, over 1 MiB).",
    )
    p.add_argument("files", nargs="+", metavar="FILE")


UNUSABLE = "unusable file"
"""The kind :func:`check_file` gives a file it could not read at all (exit status 2)."""


def check_file(path: str) -> tuple[str, list[str]]:
    """The kind of file found and its problems (empty when valid); :data:`UNUSABLE` when it cannot be read."""
    from firewatch.settings._tomlcheck import ProfileError, TomlReader, UnusableFile
    from firewatch.settings.profile import check_site
    from firewatch.settings.schedule import check_schedule

    try:
        reader = TomlReader(path)
    except UnusableFile as exc:
        return UNUSABLE, exc.problems
    except ProfileError as exc:
        return "file", exc.problems
    if "scenario" in reader.data:
        from firewatch.simulator.scenario import load_scenario

        try:
            load_scenario(path)
        except ProfileError as exc:
            return "scenario", exc.problems
        return "scenario", []
    if "schedule" in reader.data or "segment" in reader.data:
        check_schedule(reader)
        return "schedule", reader.problems
    if "site" in reader.data or "thermocouple" in reader.data:
        check_site(reader)
        return "site profile", reader.problems
    return "file", [f"{path}: not a site profile ([site]), schedule ([schedule]) or scenario ([scenario])"]


def run(args: argparse.Namespace) -> int:
    status = 0
    for path in args.files:
        kind, problems = check_file(path)
        if problems:
            status = max(status, 2 if kind == UNUSABLE else 1)
            for line in problems:
                print(line, file=sys.stderr)
        else:
            print(f"{path}: valid {kind}")
    return status
