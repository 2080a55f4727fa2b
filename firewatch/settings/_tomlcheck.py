"""Reading a TOML file with every problem collected, each naming file, line and key.

``firewatch check`` prints the collected problems one per line; loaders
raise :class:`ProfileError` carrying them.

A table is described once, as a list of :class:`Field` (key, type, default,
check, help), and :meth:`TomlReader.read` walks the list: it refuses unknown
keys, checks each value and collects every problem with its line. The same
list writes the key tables in docs/site-profile.md and docs/schedules.md
(:mod:`firewatch.settings.keydocs`), so a key added in one line brings its
message and its documentation with it.

Files are read defensively (:func:`read_text_file`): regular files only, at
most :data:`MAX_BYTES`, UTF-8, nested at most :data:`MAX_DEPTH` deep; any
other file is refused with one line naming it, never a hang or a traceback.
"""

from __future__ import annotations

import errno
import math
import os
import stat
import tomllib
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from firewatch.settings import units as _units
from firewatch.settings._tomllines import KeyPath, line_of, scan

__all__ = [
    "ProfileError",
    "UnusableFile",
    "TomlReader",
    "Field",
    "MISSING",
    "MAX_BYTES",
    "MAX_DEPTH",
    "read_text_file",
    "in_range",
    "one_of",
    "strings",
    "temperature_range",
]

MAX_BYTES = 1 << 20
"""The largest profile, schedule or scenario read: 1 MiB (the shipped ones are a few KiB)."""
MAX_DEPTH = 32
"""The deepest nesting of tables, arrays and inline tables accepted (a site profile needs five)."""


class ProfileError(Exception):
    """A profile, schedule or scenario with problems; ``problems`` holds one line each."""

    def __init__(self, problems: list[str]) -> None:
        super().__init__(problems[0] if len(problems) == 1 else f"{problems[0]} (and {len(problems) - 1} more)")
        self.problems = problems


class UnusableFile(ProfileError):
    """The file could not be read as a text file at all: missing, not a regular file, too large, unreadable."""


class _Missing:
    def __repr__(self) -> str:
        return "MISSING"


MISSING: Any = _Missing()

Check = Callable[[Any], "str | None"]
"""A check returns a message for a bad value, None for a good one."""


def _display(path: KeyPath) -> str:
    out = ""
    for part in path:
        if isinstance(part, int):
            out += f"[{part + 1}]"
        else:
            out += ("." if out else "") + str(part)
    return out or "(top level)"


_KINDS = {
    stat.S_IFDIR: "a directory",
    stat.S_IFCHR: "a character device",
    stat.S_IFBLK: "a block device",
    stat.S_IFIFO: "a named pipe (FIFO)",
    stat.S_IFSOCK: "a socket",
}


def read_text_file(path: str | Path, limit: int = MAX_BYTES) -> str:
    """The text of a regular file of at most ``limit`` bytes, or :class:`UnusableFile` / :class:`ProfileError` in one line.

    The file is opened without blocking (a FIFO would wait for a writer) and
    checked with ``fstat`` before a byte is read, so a device, a pipe or a
    directory is refused at once; at most ``limit + 1`` bytes are ever read.
    """
    p = Path(path)
    try:
        fd = os.open(p, os.O_RDONLY | os.O_NONBLOCK | getattr(os, "O_CLOEXEC", 0))
    except FileNotFoundError:
        raise UnusableFile([f"{p}: no such file"]) from None
    except IsADirectoryError:
        raise UnusableFile([f"{p}: is a directory, not a file"]) from None
    except OSError as exc:
        try:  # a socket cannot be opened at all: say what it is
            kind = _KINDS.get(stat.S_IFMT(os.stat(p).st_mode))
        except OSError:
            kind = None
        if kind is not None:
            raise UnusableFile([f"{p}: is {kind}, not a regular file"]) from None
        raise UnusableFile([f"{p}: cannot open: {exc.strerror or exc}"]) from None
    try:
        st = os.fstat(fd)
        if not stat.S_ISREG(st.st_mode):
            kind = _KINDS.get(stat.S_IFMT(st.st_mode), "not a regular file")
            raise UnusableFile([f"{p}: is {kind}, not a regular file"])
        if st.st_size > limit:
            raise UnusableFile([f"{p}: {_size(st.st_size)}, larger than the {_size(limit)} a profile may be"])
        chunks: list[bytes] = []
        got = 0
        while got <= limit:
            chunk = os.read(fd, min(65536, limit + 1 - got))
            if not chunk:
                break
            chunks.append(chunk)
            got += len(chunk)
        if got > limit:
            raise UnusableFile([f"{p}: larger than the {_size(limit)} a profile may be"])
    except OSError as exc:
        if exc.errno == errno.EISDIR:
            raise UnusableFile([f"{p}: is a directory, not a file"]) from None
        raise UnusableFile([f"{p}: cannot read: {exc.strerror or exc}"]) from None
    finally:
        os.close(fd)
    data = b"".join(chunks)
    try:
        return data.decode("utf-8")
    except UnicodeDecodeError as exc:
        line = data[: exc.start].count(b"\n") + 1
        raise ProfileError([f"{p}:{line}: not UTF-8 text (byte 0x{data[exc.start]:02x}); save the file as UTF-8"]) from None


def _size(n: int) -> str:
    if n >= 1 << 20:
        return f"{n / (1 << 20):.3g} MiB"
    if n >= 1 << 10:
        return f"{n / (1 << 10):.3g} KiB"
    return f"{n} bytes"


@dataclass(frozen=True)
class Field:
    """One key of a TOML table: how it is read, checked, converted and documented.

    Parameters
    ----------
    key : str
        The key as written in the file.
    kind : type, tuple of types, or None
        The TOML types accepted (an int is accepted where a float is); None
        accepts any value and leaves every judgement to ``check``.
    default : any
        The value when the key is absent; :data:`MISSING` makes it required.
    check : callable(value) -> str or None
        A message for a bad value.
    help : str
        One line for the docs.
    missing : str
        Added to the ``missing`` message of a required key (what to write).
    convert : callable(value) -> value
        Applied to a good value that was given (never to the default).
    quantity : {"temperature", "rate"}, optional
        A temperature or a rate in the file's units, converted to degC
        (through :mod:`firewatch.settings.units`) when given.
    shown_default : str, optional
        The default as the docs show it (else taken from ``default``).
    attr : str, optional
        The attribute the value lands in (else ``key``).
    """

    key: str
    kind: type | tuple[type, ...] | None
    default: Any = MISSING
    check: Check | None = None
    help: str = ""
    missing: str = ""
    convert: Callable[[Any], Any] | None = None
    quantity: str | None = None
    shown_default: str | None = None
    attr: str | None = None

    @property
    def name(self) -> str:
        return self.attr or self.key

    @property
    def required(self) -> bool:
        return self.default is MISSING

    def doc_default(self) -> str:
        """The default as one table cell of the docs."""
        if self.shown_default is not None:
            return self.shown_default
        if self.required or self.default is None:
            return ""
        value = self.default
        if isinstance(value, bool):
            return "`true`" if value else "`false`"
        if isinstance(value, str):
            return f'`"{value}"`'
        if isinstance(value, (tuple, list)):
            return "`[" + ", ".join(f'"{v}"' if isinstance(v, str) else f"{v:g}" for v in value) + "]`"
        if isinstance(value, float):
            return f"{value:g}"
        return str(value)


class TomlReader:
    """Parse a TOML file and hand out checked values, collecting problems.

    Raises
    ------
    ProfileError
        At construction, for a missing or unusable file, text that is not
        UTF-8, nesting deeper than :data:`MAX_DEPTH` or a TOML syntax error
        (those stop everything else).
    """

    def __init__(self, path: str | Path, text: str | None = None) -> None:
        self.path = Path(path)
        self.problems: list[str] = []
        if text is None:
            text = read_text_file(self.path)
        self.text = text
        found = scan(text, MAX_DEPTH)
        if found.deep_line is not None:
            raise ProfileError([f"{self.path}:{found.deep_line}: nested deeper than {MAX_DEPTH} levels of tables and arrays; a profile needs only a few"])
        try:
            self.data: dict[str, Any] = tomllib.loads(text)
        except tomllib.TOMLDecodeError as exc:
            message = str(exc)
            line = ""
            if "(at line " in message:
                line = message.rsplit("(at line ", 1)[1].split(",", 1)[0]
                message = message.rsplit(" (at line ", 1)[0]
            raise ProfileError([f"{self.path}:{line or '?'}: TOML syntax error: {message}"]) from None
        except RecursionError:  # the scan bounds the nesting; this is the backstop should the two ever disagree
            raise ProfileError([f"{self.path}: nested too deeply for the TOML parser; a profile needs only a few levels"]) from None
        self._lines = found.lines

    # -- problems -------------------------------------------------------------
    def problem(self, path: KeyPath, message: str) -> None:
        line = line_of(self._lines, path)
        where = f"{self.path}:{line}" if line else str(self.path)
        text = f"{where}: {_display(path)}: {message}"
        if text not in self.problems:  # a key read twice (units first, then with its table) is reported once
            self.problems.append(text)

    def raise_if_problems(self) -> None:
        if self.problems:
            raise ProfileError(self.problems)

    # -- access ---------------------------------------------------------------
    def table(self, path: KeyPath, required: bool = False) -> dict[str, Any]:
        node: Any = self.data
        for part in path:
            try:
                node = node[part]
            except (KeyError, IndexError, TypeError):
                if required:
                    self.problem(path, "missing table")
                return {}
        if not isinstance(node, dict):
            self.problem(path, "expected a table")
            return {}
        return node

    def tables(self, name: str, required: bool = False) -> list[dict[str, Any]]:
        node = self.data.get(name)
        if node is None:
            if required:
                self.problem((name,), f"missing: add at least one [[{name}]]")
            return []
        if not isinstance(node, list) or not all(isinstance(x, dict) for x in node):
            self.problem((name,), f"expected [[{name}]] tables")
            return []
        return node

    def unknown_keys(self, path: KeyPath, table: dict[str, Any], known: Iterable[str]) -> None:
        known = set(known)
        for key in table:
            if key not in known:
                self.problem(path + (key,), f"unknown key; expected one of {', '.join(sorted(known))}")

    def get(
        self,
        table: dict[str, Any],
        path: KeyPath,
        key: str,
        kind: type | tuple[type, ...] | None,
        default: Any = MISSING,
        check: Check | None = None,
        missing: str = "",
    ) -> Any:
        """The value of ``key``, type-checked and checked by ``check`` (which returns a message or None)."""
        return self._checked(table, path, key, kind, default, check, missing)[0]

    def _checked(self, table: dict[str, Any], path: KeyPath, key: str, kind: type | tuple[type, ...] | None,
                 default: Any, check: Check | None, missing: str) -> tuple[Any, bool]:
        """``(value, given_and_good)``: the default (None when required) unless the key is given and passes."""
        where = path + (key,)
        fallback = None if default is MISSING else default
        if key not in table:
            if default is MISSING:
                self.problem(where, f"missing: {missing}" if missing else "missing")
            return fallback, False
        value = table[key]
        if kind is not None:
            kinds = kind if isinstance(kind, tuple) else (kind,)
            if float in kinds and isinstance(value, int) and not isinstance(value, bool):
                value = float(value)
            if not isinstance(value, kinds) or (isinstance(value, bool) and bool not in kinds):
                names = " or ".join(_kind_name(k) for k in kinds)
                self.problem(where, f"expected {names}, got {value!r}")
                return fallback, False
            if isinstance(value, float) and not math.isfinite(value):
                self.problem(where, f"expected a finite number, got {value!r}")
                return fallback, False
        if check is not None:
            message = check(value)
            if message:
                self.problem(where, message)
                return fallback, False
        return value, True

    def value(self, table: dict[str, Any], path: KeyPath, f: Field, units: str = "C") -> Any:
        """One field's checked value, converted (and in degC for a temperature or rate given in ``units``)."""
        value, good = self._checked(table, path, f.key, f.kind, f.default, f.check, f.missing)
        if not good:
            return value
        if f.convert is not None:
            value = f.convert(value)
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            return value  # a word such as rate = "max" stays as it is
        if f.quantity == "temperature":
            value = float(_units.to_celsius(value, units))
        elif f.quantity == "rate":
            value = float(_units.delta_to_celsius(value, units))
        return value

    def read(self, table: dict[str, Any], path: KeyPath, fields: Iterable[Field], units: str = "C") -> dict[str, Any]:
        """Walk ``fields`` over ``table``: unknown keys refused, each value checked; ``{attr: value}``."""
        fields = tuple(fields)
        self.unknown_keys(path, table, (f.key for f in fields))
        return {f.name: self.value(table, path, f, units) for f in fields}


def _kind_name(kind: type) -> str:
    return {float: "a number", int: "a whole number", str: "a string", bool: "true or false", list: "an array", dict: "a table"}.get(kind, kind.__name__)


def in_range(lo: float | None = None, hi: float | None = None, lo_open: bool = False) -> Check:
    """A check for numbers in [lo, hi] (or (lo, hi] with ``lo_open``)."""

    def check(value: Any) -> str | None:
        if lo is not None and (value <= lo if lo_open else value < lo):
            return f"must be {'>' if lo_open else '>='} {lo:g}, got {value!r}"
        if hi is not None and value > hi:
            return f"must be <= {hi:g}, got {value!r}"
        return None

    return check


def one_of(*choices: Any) -> Check:
    """A check for one of ``choices``."""

    def check(value: Any) -> str | None:
        if value not in choices:
            return f"must be one of {', '.join(repr(c) for c in choices)}, got {value!r}"
        return None

    return check


def strings(what: str = "strings") -> Check:
    """A check for an array of strings (``what`` names them in the message)."""

    def check(value: Any) -> str | None:
        if not isinstance(value, list) or not all(isinstance(x, str) for x in value):
            return f"expected an array of {what}"
        return None

    return check


def temperature_range(lo_c: float, hi_c: float, units: str) -> Check:
    """A check for a temperature written in ``units`` within [lo_c, hi_c] degC; the message speaks ``units``."""
    lo = float(_units.from_celsius(lo_c, units))
    hi = float(_units.from_celsius(hi_c, units))
    return in_range(lo, hi)
