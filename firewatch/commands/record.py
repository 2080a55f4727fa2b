"""``firewatch record``: the recorder, headless, the firing log's only writer."""

from __future__ import annotations

import argparse
from typing import TYPE_CHECKING

from firewatch.commands import _args
from firewatch.commands._args import UsageError
from firewatch.commands._common import refuse_damaged

__all__ = ["add_parser", "run", "load_profiles", "input_port"]

if TYPE_CHECKING:
    from firewatch.services.recorder import Recorder
    from firewatch.settings._tomlcheck import ProfileError
    from firewatch.settings.profile import SiteProfile
    from firewatch.settings.schedule import Schedule


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "record",
        help="record a firing from a serial line into a firing log",
        description="Read the line, convert and reconcile, and write every reading to the firing log. "
        "Leave it running under systemd, tmux or nohup; viewers come and go.",
    )
    p.add_argument("--port", metavar="URL", help="device path, socket://HOST:PORT, rfc2217://HOST:PORT or loop://; "
                   "for Modbus input a serial device (RTU) or HOST:PORT (TCP), default the site profile's [input] port")
    p.add_argument("--site", help="site profile TOML (default: the demo site)")
    p.add_argument("--schedule", help="schedule TOML (default: the demo glaze schedule)")
    p.add_argument("--log", required=True, metavar="FILE.db", help="the firing log (continued if it exists)")
    p.add_argument("--for", dest="seconds", type=_args.positive, metavar="SECONDS", help="stop after this long")
    p.add_argument("--clock", choices=("wall", "device"), help="time readings on receipt or by the line's own time (default: the site profile's)")
    p.add_argument("--mqtt", metavar="URL", help="also publish to mqtt://HOST:PORT/PREFIX (or mqtts://); credentials from the site profile and the environment")
    # for firewatch demo: stop, closing the session, when the process that started this one ends
    p.add_argument("--parent-pid", type=int, help=argparse.SUPPRESS)


def load_profiles(site_path: str | None, schedule_path: str | None) -> tuple[SiteProfile, Schedule]:
    """The site and schedule, defaulting to the demo ones; UsageError names the bad option."""
    from firewatch.settings._tomlcheck import ProfileError
    from firewatch.settings.profile import load_site, profiles_dir
    from firewatch.settings.schedule import load_schedule

    try:
        site = load_site(site_path)
    except ProfileError as exc:
        raise UsageError(f"--site: {_first_problem(exc)}") from None
    try:
        schedule = load_schedule(schedule_path or profiles_dir() / "demo-glaze.toml")
    except ProfileError as exc:
        raise UsageError(f"--schedule: {_first_problem(exc)}") from None
    return site, schedule


def _first_problem(exc: ProfileError) -> str:
    """The first problem of a profile, with how many more there are (``firewatch check`` lists them all)."""
    more = len(exc.problems) - 1
    return exc.problems[0] + (f" (and {more} more; see firewatch check)" if more else "")


def input_port(site: SiteProfile, port: str | None, clock: str | None) -> str:
    """The port to record from, checked against the site's input; UsageError names the problem."""
    mb = site.input.modbus
    if mb is None:
        if not port:
            raise UsageError("--port: give the serial URL to record from (a device path or socket://HOST:PORT)")
        return port
    try:
        import pymodbus  # noqa: F401 (availability check: imported only to see that the extra is installed)
    except ImportError:
        raise UsageError(f"--site: format {site.input.format!r} needs pymodbus: pip install 'firewatch-kiln[modbus]'") from None
    port = port or mb.port
    if not port:
        where = "HOST:PORT" if mb.protocol == "tcp" else "serial device"
        raise UsageError(f"--port: give the {where} of the Modbus devices (or [input] port in the site profile)")
    if mb.protocol == "tcp":
        from firewatch.transport.modbus_poll import parse_host_port

        try:
            parse_host_port(port)
        except ValueError as exc:
            raise UsageError(f"--port: {exc} for format 'modbus-tcp'") from None
    if (clock or site.input.clock) == "device" and mb.device_time is None:
        raise UsageError("--clock device: the site profile maps no [input.device_time] register, and a poll carries no time of its own")
    return port


def run(args: argparse.Namespace) -> int:
    from pathlib import Path

    from firewatch.services.recorder import Recorder
    from firewatch.store._common import LogError

    site, schedule = load_profiles(args.site, args.schedule)
    port = input_port(site, args.port, args.clock)
    log = Path(args.log)
    if not log.parent.exists():
        raise UsageError(f"--log: directory {log.parent} does not exist")
    refuse_damaged(log)
    if args.mqtt:
        from firewatch.services.mqtt import parse_mqtt_url

        try:
            parse_mqtt_url(args.mqtt)
            import paho.mqtt.client  # noqa: F401 (availability check: imported only to see that the extra is installed)
        except ValueError as exc:
            raise UsageError(f"--mqtt: {exc}") from None
        except ImportError:
            raise UsageError("--mqtt: publishing needs paho-mqtt: pip install 'firewatch-kiln[mqtt]'") from None
    recorder = Recorder(port, site, schedule, log, clock=args.clock, duration_s=args.seconds, mqtt_url=args.mqtt)
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
