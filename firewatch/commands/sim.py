"""``firewatch sim``: the simulated kiln, on a port or straight into a firing log."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from firewatch.cli import UsageError
from firewatch.commands import _args
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
        description="A simulated kiln with thermocouples, pyrometers and scriptable faults, speaking the native line format.",
    )
    p.add_argument("--scenario", metavar="NAME|FILE",
                   help="a built-in scenario by name (closed-kiln, open-port; see --list-scenarios) or a scenario TOML "
                   "(default: closed-kiln)")
    p.add_argument("--list-scenarios", action="store_true", help="list the built-in scenarios and exit")
    p.add_argument("--speed", type=_args.non_negative, default=1.0, help="simulated seconds per real second (default 1; 0 = as fast as possible)")
    p.add_argument("--seed", type=int, help="random seed (default: the scenario's)")
    p.add_argument("--true-emissivity", type=_args.fraction, help="the ware's true emissivity (default: the scenario's)")
    p.add_argument("--fault", action="append", type=_fault, default=[], metavar="KIND@MINUTES[:K=V,...]",
                   help="inject a fault: tc-drift, tc-open, window-fouling, emissivity-step, dropout, garbage (repeatable)")
    out = p.add_mutually_exclusive_group()  # one is required unless --list-scenarios
    out.add_argument("--tcp", type=_host_port, metavar="HOST:PORT", help="listen like a serial device server (port 0 picks a free one)")
    out.add_argument("--pty", action="store_true", help="serve on a new pseudo-terminal; its path is the first line printed")
    out.add_argument("--stdout", action="store_true", help="write lines to standard output")
    out.add_argument("--to-log", metavar="FILE.db", help="run as fast as possible straight into a firing log")
    p.add_argument("--minutes", type=_args.positive, help="simulated minutes to run (default: the scenario's duration; streams run until stopped)")


def list_scenarios() -> int:
    """Print the built-in scenarios, one a line: the name, what it is, and its file (to copy and change)."""
    from firewatch.settings.profile import profiles_dir
    from firewatch.simulator.scenario import BUILT_IN

    width = max(len(n) for n in BUILT_IN)
    for name, (file, what) in BUILT_IN.items():
        print(f"{name:<{width}}  {what} ({profiles_dir() / file})")
    return 0


def run(args: argparse.Namespace) -> int:
    from firewatch.settings._tomlcheck import ProfileError
    from firewatch.simulator.run import Simulation
    from firewatch.simulator.scenario import load_scenario

    if args.list_scenarios:
        return list_scenarios()
    if not (args.tcp or args.pty or args.stdout or args.to_log):
        raise UsageError("one of --tcp, --pty, --stdout or --to-log is required (or --list-scenarios)")

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
        if args.stdout:
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
