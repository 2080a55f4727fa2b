"""``firewatch probe``: read Modbus registers and show them raw and decoded, for commissioning.

It only reads (function 3 or 4) and has no option that writes: nothing it
does can change a device's settings.
"""

from __future__ import annotations

import argparse
import sys
import time

from firewatch.commands import _args
from firewatch.commands._args import UsageError

__all__ = ["add_parser", "run", "render"]

_TYPES = ("int16", "uint16", "int32", "uint32", "float32")


def _int_in(lo: int, hi: int):
    def parse(text: str) -> int:
        try:
            value = int(text, 0)
        except ValueError:
            raise argparse.ArgumentTypeError(f"expected a whole number, got {text!r}") from None
        if not lo <= value <= hi:
            raise argparse.ArgumentTypeError(f"must be {lo} to {hi}, got {value}")
        return value

    return parse


def add_parser(sub: argparse._SubParsersAction) -> None:
    p = sub.add_parser(
        "probe",
        help="read Modbus registers and show them raw and decoded (commissioning; never writes)",
        description="Read COUNT registers from a Modbus device over TCP (HOST:PORT) or RTU (a serial device) and print one "
        "line per register: its 0-based address, the number a manual would print (30001/40001 style), the raw value in "
        "decimal and hex, and the value decoded as --type. Reads only; it never writes to a device. Exit 0 when read, 1 when "
        "the device did not answer properly, 2 for a bad command line.",
    )
    p.add_argument("--port", required=True, metavar="HOST:PORT|DEVICE", help="Modbus TCP address, or a serial device for RTU")
    p.add_argument("--protocol", choices=("tcp", "rtu"), help="default: tcp for HOST:PORT, rtu otherwise")
    p.add_argument("--unit", type=_int_in(0, 255), default=1, help="the device's Modbus address (default 1)")
    p.add_argument("--table", choices=("input", "holding"), default="input", help="input registers (function 4, default) or holding registers (function 3)")
    p.add_argument("--register", type=_int_in(0, 65535), default=0, help="first register, 0-based (default 0; a manual's 30001 or 40001 is 0)")
    p.add_argument("--count", type=_int_in(1, 125), default=8, help="registers to read, 1 to 125 (default 8)")
    p.add_argument("--type", choices=_TYPES, default="int16", help="decode as (default int16)")
    p.add_argument("--word-order", choices=("big", "little"), default="big", help="32-bit types: big = high word first (default), little = low word first")
    p.add_argument("--watch", nargs="?", type=_args.positive, const=1.0, metavar="SECONDS", help="read again every SECONDS (default 1) until Ctrl-C")
    p.add_argument("--timeout", type=_args.positive, default=0.5, metavar="SECONDS", help="wait for an answer (default 0.5)")
    p.add_argument("--retries", type=_int_in(0, 10), default=2, help="tries after the first (default 2)")
    p.add_argument("--baudrate", type=_int_in(1, 10_000_000), default=9600, help="RTU: default 9600")
    p.add_argument("--parity", choices=("N", "E", "O"), default="N", help="RTU: default N")
    p.add_argument("--bytesize", type=_int_in(7, 8), default=8, help="RTU: default 8")
    p.add_argument("--stopbits", type=_int_in(1, 2), default=1, help="RTU: default 1")


def _manual_number(table: str, address: int) -> str:
    """The number a manual would print: 30001-style for input registers, 40001-style for holding registers."""
    first = "3" if table == "input" else "4"
    return f"{first}{address + 1:04d}" if address < 9999 else f"{first}{address + 1:05d}"


def render(words: tuple[int, ...], start: int, table: str, type: str, word_order: str) -> list[str]:
    """The table of registers: one line per register, the decoded value on each value's first register.

    Examples
    --------
    >>> for line in render((6, 19544), 0, "input", "int32", "big"):
    ...     print(line)
    register  manual     raw     hex  int32
           0   30001       6  0x0006  412760
           1   30002   19544  0x4C58
    """
    from firewatch.transport.modbus import TYPES, decode

    width = TYPES[type][1]
    lines = [f"{'register':>8}  {'manual':>6}  {'raw':>6}  {'hex':>6}  {type}"]
    for i, word in enumerate(words):
        decoded = ""
        if i % width == 0 and i + width <= len(words):
            value = decode(words[i : i + width], type, word_order)
            decoded = f"{value:.7g}" if type == "float32" else str(value)
        lines.append(f"{start + i:>8}  {_manual_number(table, start + i):>6}  {word:>6}  0x{word:04X}  {decoded}".rstrip())
    return lines


def run(args: argparse.Namespace) -> int:
    from firewatch.transport.modbus import TYPES, Request
    from firewatch.transport.modbus_poll import LinkLost, LinkSettings, ModbusLink, describe_failure, parse_host_port

    width = TYPES[args.type][1]
    if args.count % width:
        raise UsageError(f"--count: {args.type} takes {width} registers a value, so count them in pairs (got {args.count})")
    if args.register + args.count > 65536:
        raise UsageError(f"--count: registers {args.register}-{args.register + args.count - 1} run past the last one, 65535")
    protocol = args.protocol
    if protocol is None:
        try:
            parse_host_port(args.port)
            protocol = "tcp" if not args.port.startswith("/") else "rtu"
        except ValueError:
            protocol = "rtu"
    if protocol == "tcp":
        try:
            parse_host_port(args.port)
        except ValueError as exc:
            raise UsageError(f"--port: {exc}") from None
    elif not 1 <= args.unit <= 247:
        raise UsageError(f"--unit: a serial line's devices are 1 to 247, got {args.unit}")
    try:
        import pymodbus  # noqa: F401 (availability check: imported only to see that the extra is installed)
    except ImportError:
        raise UsageError("--port: probing needs pymodbus: pip install 'firewatch-kiln[modbus]'") from None
    link = ModbusLink(LinkSettings(protocol, args.port, args.baudrate, args.bytesize, args.parity, args.stopbits, args.timeout, args.retries))
    request = Request(args.unit, args.table, args.register, args.count)
    function = 4 if args.table == "input" else 3
    order = "" if width == 1 else (", high word first" if args.word_order == "big" else ", low word first")
    print(f"unit {args.unit}, {args.table} registers (function {function}) {request.start}-{request.start + request.count - 1} "
          f"as {args.type}{order}, over {protocol.upper()} {args.port}", flush=True)
    status = 0
    try:
        while True:
            try:
                result = link.read(request)
                if result.words is None:
                    print(f"{request.label}: {describe_failure(result.failure or 'bad', link.settings)}", file=sys.stderr, flush=True)
                    status = 1
                else:
                    if args.watch:
                        print(time.strftime("%Y-%m-%d %H:%M:%S"), flush=True)
                    print("\n".join(render(result.words, request.start, args.table, args.type, args.word_order)), flush=True)
                    status = 0
            except LinkLost as exc:
                print(f"{args.port}: {exc}", file=sys.stderr, flush=True)
                status = 1
            if not args.watch:
                return status
            time.sleep(args.watch)
    except KeyboardInterrupt:
        return status
    finally:
        link.close()
