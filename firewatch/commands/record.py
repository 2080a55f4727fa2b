"""``firewatch record``: the recorder, headless, the firing log's only writer."""

from __future__ import annotations

import argparse
from typing import TYPE_CHECKING

from firewatch.cli import UsageError
from firewatch.commands import _args
from firewatch.commands._common import refuse_damaged

if TYPE_CHECKING:
    from firewatch.services.recorder import Recorder

__all__ = ["add_parser", "run", "load_profiles"]


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "record",
        help="record a firing from a serial line into a firing log",
        description="Read the line, convert and reconcile, and write every reading to the firing log. "
        "Leave it running under systemd, tmux or nohup; viewers come and go.",
    )
    p.add_argument("--port", required=True, metavar="URL", help="device path, socket://HOST:PORT, rfc2217://HOST:PORT or loop://")
    p.add_argument("--site", help="site profile TOML (default: the demo site)")
    p.add_argument("--schedule", help="schedule TOML (default: the demo glaze schedule)")
    p.add_argument("--log", required=True, metavar="FILE.db", help="the firing log (continued if it exists)")
    p.add_argument("--for", dest="seconds", type=_args.positive, metavar="SECONDS", help="stop after this long")
    p.add_argument("--clock", choices=("wall", "device"), help="time readings on receipt or by the line's own time (default: the site profile's)")
    p.add_argument("--mqtt", metavar="URL", help="also publish to mqtt://HOST:PORT/PREFIX (or mqtts://); credentials from the site profile and the environment")
    p.add_argument("-v", "--verbose", action="store_true", help="also say which SQLite the log is written with (always kept in the log; see inspect)")
    # for firewatch demo: stop, closing the session, when the process that started this one ends
    p.add_argument("--parent-pid", type=int, help=argparse.SUPPRESS)


def load_profiles(site_path: str | None, schedule_path: str | None):
    """The site and schedule, defaulting to the demo ones; UsageError names the bad option."""
    from firewatch.settings._tomlcheck import ProfileError
    from firewatch.settings.profile import load_site, profiles_dir
    from firewatch.settings.schedule import load_schedule

    try:
        site = load_site(site_path)
    except ProfileError as exc:
        raise UsageError(f"--site: {exc.problems[0]}" + (f" (and {len(exc.problems) - 1} more; see firewatch check)" if len(exc.problems) > 1 else "")) from None
    try:
        schedule = load_schedule(schedule_path or profiles_dir() / "demo-glaze.toml")
    except ProfileError as exc:
        raise UsageError(f"--schedule: {exc.problems[0]}" + (f" (and {len(exc.problems) - 1} more; see firewatch check)" if len(exc.problems) > 1 else "")) from None
    return site, schedule


def run(args: argparse.Namespace) -> int:
    from pathlib import Path

    from firewatch.store._common import LogError
    from firewatch.services.recorder import Recorder

    site, schedule = load_profiles(args.site, args.schedule)
    log = Path(args.log)
    if not log.parent.exists():
        raise UsageError(f"--log: directory {log.parent} does not exist")
    refuse_damaged(log)
    if args.mqtt:
        from firewatch.services.mqtt import parse_mqtt_url

        try:
            parse_mqtt_url(args.mqtt)
            import paho.mqtt.client  # noqa: F401
        except ValueError as exc:
            raise UsageError(f"--mqtt: {exc}") from None
        except ImportError:
            raise UsageError("--mqtt: publishing needs paho-mqtt: pip install 'firewatch[mqtt]'") from None
    recorder = Recorder(args.port, site, schedule, log, clock=args.clock, duration_s=args.seconds, mqtt_url=args.mqtt,
                        verbose=args.verbose)
    if args.parent_pid:
        _stop_with_parent(recorder, args.parent_pid)
    try:
        recorder.run()
    except LogError as exc:
        raise UsageError(f"--log: {exc}") from None
    return 0


def _stop_with_parent(recorder: Recorder, parent_pid: int) -> None:
    """End the recording, with its reason in the log, when the process that started it ends (demo)."""
    import signal

    from firewatch.commands._lifeline import stop_with_parent

    reason = f"the process that started it (pid {parent_pid}) ended"

    def gone(*_: object) -> None:
        recorder.stop(reason)

    # the kernel's parent-death signal: one of our own, so its handler can give the reason
    signal.signal(signal.SIGUSR2, gone)
    stop_with_parent(parent_pid, gone, sig=signal.SIGUSR2)
