"""``firewatch sim``: the simulated kiln, on a port or straight into a firing log."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from firewatch.commands import _args
from firewatch.commands._args import UsageError
from firewatch.commands._common import refuse_damaged

__all__ = ["add_parser", "run"]


def _host_port(text: str) -> tuple[str, int]:
    host, sep, port = text.rpartition(":")
    if not sep or not port.isdigit() or not 0 <= int(port) <= 65535:
        raise argparse.ArgumentTypeError(f"expected HOST:PORT such as 127.0.0.1:7700, got {text!r}")
    return host or "127.0.0.1", int(port)


def _fault(text: str):
    from firewatch.simulator.scenario import parse_fault

    try:
        return parse_fault(text)
    except ValueError as exc:
        raise argparse.ArgumentTypeError(str(exc).removeprefix("--fault: ")) from None


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "sim",
        help="run the simulated kiln (for trying firewatch without a kiln, and for tests)",
        description="A simulated kiln with thermocouples, pyrometers and scriptable faults, speaking the native line format, "
        "or Modbus as a thermocouple module (unit 1) and a pyrometer (unit 2); docs/modbus.md has the register map.",
    )
    p.add_argument("--scenario", metavar="NAME|FILE",
                   help="a built-in scenario by name (closed-kiln, open-port; see --list-scenarios) or a scenario TOML "
                   "(default: closed-kiln)")
    p.add_argument("--list-scenarios", action="store_true", help="list the built-in scenarios and exit")
    p.add_argument("--speed", type=_args.non_negative, default=1.0, help="simulated seconds per real second (default 1; 0 = as fast as possible)")
    p.add_argument("--seed", type=int, help="random seed (default: the scenario's)")
    p.add_argument("--true-emissivity", type=_args.fraction, help="the ware's true emissivity (default: the scenario's)")
    p.add_argument("--fault", action="append", type=_fault, default=[], metavar="KIND@MINUTES[:K=V,...]",
                   help="inject a fault: tc-drift, tc-open, loop-break, window-fouling, emissivity-step, dropout, garbage (repeatable)")
    out = p.add_mutually_exclusive_group()  # one is required unless --list-scenarios
    out.add_argument("--tcp", type=_host_port, metavar="HOST:PORT", help="listen like a serial device server (port 0 picks a free one)")
    out.add_argument("--pty", action="store_true", help="serve on a new pseudo-terminal; its path is the first line printed")
    out.add_argument("--stdout", action="store_true", help="write lines to standard output")
    out.add_argument("--to-log", metavar="FILE.db", help="run as fast as possible straight into a firing log")
    out.add_argument("--modbus-tcp", type=_host_port, metavar="HOST:PORT",
                     help="serve Modbus TCP (port 0 picks a free one; its address is the first line printed); --speed 0 is lock-step, one reading per poll")
    p.add_argument("--modbus-rtu", action="store_true", help="with --pty: serve Modbus RTU on the pseudo-terminal instead of lines")
    p.add_argument("--minutes", type=_args.positive, help="simulated minutes to run (default: the scenario's duration; streams run until stopped)")
    # for firewatch demo: end when the process that started this one ends
    p.add_argument("--parent-pid", type=int, help=argparse.SUPPRESS)


def list_scenarios() -> int:
    """Print the built-in scenarios, one a line: the name, what it is, and its file (to copy and change)."""
    from firewatch.settings.profile import profiles_dir
    from firewatch.simulator.scenario import BUILT_IN

    width = max(len(n) for n in BUILT_IN)
    for name, (file, what) in BUILT_IN.items():
        print(f"{name:<{width}}  {what} ({profiles_dir() / file})")
    return 0


def run(args: argparse.Namespace) -> int:
    if args.parent_pid:
        import os
        import signal

        from firewatch.commands._lifeline import stop_with_parent

        # the simulator keeps nothing: SIGTERM's default action ends it at once, whatever it waits on
        stop_with_parent(args.parent_pid, lambda: os.kill(os.getpid(), signal.SIGTERM))
    from firewatch.settings._tomlcheck import ProfileError
    from firewatch.simulator.run import Simulation
    from firewatch.simulator.scenario import load_scenario

    if args.list_scenarios:
        return list_scenarios()
    if not (args.tcp or args.pty or args.stdout or args.to_log or args.modbus_tcp is not None):
        raise UsageError("one of --tcp, --pty, --stdout, --to-log or --modbus-tcp is required (or --list-scenarios)")

    try:
        scenario = load_scenario(args.scenario)
    except ProfileError as exc:
        raise UsageError("--scenario: " + exc.problems[0]) from None
    changes = {}
    if args.seed is not None:
        changes["seed"] = args.seed
    if args.true_emissivity is not None:
        changes["emissivity"] = args.true_emissivity
    if args.fault:
        changes["faults"] = scenario.faults + tuple(args.fault)
    if args.minutes is not None:
        changes["duration_s"] = args.minutes * 60.0
    scenario = scenario.with_changes(**changes)
    if args.modbus_rtu and not args.pty:
        raise UsageError("--modbus-rtu: serves on a pseudo-terminal; add --pty")
    modbus = args.modbus_rtu or args.modbus_tcp is not None
    if modbus:
        try:
            import pymodbus  # noqa: F401 (availability check: imported only to see that the extra is installed)
        except ImportError:
            raise UsageError("--modbus-" + ("rtu" if args.modbus_rtu else "tcp") + ": needs pymodbus: pip install 'firewatch-kiln[modbus]'") from None
    streaming = args.to_log is None
    try:
        sim = Simulation(scenario, endless=streaming and args.minutes is None)
    except ValueError as exc:
        raise UsageError(f"--fault: {exc}") from None

    def announce(text: str) -> None:
        print(text, flush=True)

    from firewatch.simulator import serve

    if args.to_log:
        path = Path(args.to_log)
        if not path.parent.exists():
            raise UsageError(f"--to-log: directory {path.parent} does not exist")
        refuse_damaged(path)
        from firewatch.store._common import LogError

        try:
            result = serve.to_log(sim, path)
        except LogError as exc:
            raise UsageError(f"--to-log: {exc}") from None
        print(
            f"firewatch sim: {result['simulated_s'] / 3600:.2f} h simulated into {path}: "
            f"{result['lines']} lines, {result['malformed']} malformed",
            file=sys.stderr,
        )
        return 0
    try:
        if modbus:
            from firewatch.simulator import modbus as modbus_serve

            if args.modbus_rtu:
                modbus_serve.serve_rtu_pty(sim, args.speed, announce)
            else:
                host, port = args.modbus_tcp
                try:
                    modbus_serve.serve_tcp(sim, args.speed, host, port, announce)
                except OSError as exc:
                    raise UsageError(f"--modbus-tcp: cannot listen on {host}:{port}: {exc.strerror or exc}") from None
        elif args.stdout:
            serve.to_stdout(sim, args.speed)
        elif args.pty:
            serve.to_pty(sim, args.speed, announce)
        else:
            host, port = args.tcp
            try:
                serve.to_tcp(sim, args.speed, host, port, announce)
            except OSError as exc:
                raise UsageError(f"--tcp: cannot listen on {host}:{port}: {exc.strerror or exc}") from None
    except KeyboardInterrupt:
        return 0
    return 0
