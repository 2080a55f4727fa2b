"""Reading a TOML file with every problem collected, each naming file, line and key.

``firewatch check`` prints the collected problems one per line; loaders
raise :class:`ProfileError` carrying them.
"""

from __future__ import annotations

import math
import tomllib
from collections.abc import Callable
from pathlib import Path
from typing import Any

from firewatch.settings._tomllines import key_lines, line_of

__all__ = ["ProfileError", "TomlReader", "MISSING"]


class ProfileError(Exception):
    """A profile, schedule or scenario with problems; ``problems`` holds one line each."""

    def __init__(self, problems: list[str]) -> None:
        super().__init__(problems[0] if len(problems) == 1 else f"{problems[0]} (and {len(problems) - 1} more)")
        self.problems = problems


class _Missing:
    def __repr__(self) -> str:
        return "MISSING"


MISSING: Any = _Missing()


def _display(path: tuple) -> str:
    out = ""
    for part in path:
        if isinstance(part, int):
            out += f"[{part + 1}]"
        else:
            out += ("." if out else "") + str(part)
    return out or "(top level)"


class TomlReader:
    """Parse a TOML file and hand out checked values, collecting problems.

    Raises
    ------
    ProfileError
        At construction, for a missing file, unreadable text or a TOML
        syntax error (those stop everything else).
    """

    def __init__(self, path: str | Path, text: str | None = None) -> None:
        self.path = Path(path)
        self.problems: list[str] = []
        if text is None:
            try:
                text = self.path.read_text(encoding="utf-8")
            except FileNotFoundError:
                raise ProfileError([f"{self.path}: no such file"]) from None
            except (OSError, UnicodeDecodeError) as exc:
                raise ProfileError([f"{self.path}: cannot read: {exc}"]) from None
        self.text = text
        try:
            self.data: dict[str, Any] = tomllib.loads(text)
        except tomllib.TOMLDecodeError as exc:
            message = str(exc)
            line = ""
            if "(at line " in message:
                line = message.rsplit("(at line ", 1)[1].split(",", 1)[0]
                message = message.rsplit(" (at line ", 1)[0]
            raise ProfileError([f"{self.path}:{line or '?'}: TOML syntax error: {message}"]) from None
        self._lines = key_lines(text)

    # -- problems -------------------------------------------------------------
    def problem(self, path: tuple, message: str) -> None:
        line = line_of(self._lines, path)
        where = f"{self.path}:{line}" if line else str(self.path)
        self.problems.append(f"{where}: {_display(path)}: {message}")

    def raise_if_problems(self) -> None:
        if self.problems:
            raise ProfileError(self.problems)

    # -- access ---------------------------------------------------------------
    def table(self, path: tuple, required: bool = False) -> dict[str, Any]:
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

    def unknown_keys(self, path: tuple, table: dict[str, Any], known: set[str]) -> None:
        for key in table:
            if key not in known:
                self.problem(path + (key,), f"unknown key; expected one of {', '.join(sorted(known))}")

    def get(
        self,
        table: dict[str, Any],
        path: tuple,
        key: str,
        kind: type | tuple[type, ...],
        default: Any = MISSING,
        check: Callable[[Any], str | None] | None = None,
    ) -> Any:
        """The value of ``key``, type-checked and checked by ``check`` (which returns a message or None)."""
        where = path + (key,)
        if key not in table:
            if default is MISSING:
                self.problem(where, "missing")
            return None if default is MISSING else default
        value = table[key]
        kinds = kind if isinstance(kind, tuple) else (kind,)
        if float in kinds and isinstance(value, int) and not isinstance(value, bool):
            value = float(value)
        if not isinstance(value, kinds) or (isinstance(value, bool) and bool not in kinds):
            names = " or ".join(_kind_name(k) for k in kinds)
            self.problem(where, f"expected {names}, got {value!r}")
            return None if default is MISSING else default
        if isinstance(value, float) and not math.isfinite(value):
            self.problem(where, f"expected a finite number, got {value!r}")
            return None if default is MISSING else default
        if check is not None:
            message = check(value)
            if message:
                self.problem(where, message)
                return None if default is MISSING else default
        return value


def _kind_name(kind: type) -> str:
    return {float: "a number", int: "a whole number", str: "a string", bool: "true or false", list: "an array", dict: "a table"}.get(kind, kind.__name__)


def in_range(lo: float | None = None, hi: float | None = None, lo_open: bool = False) -> Callable[[Any], str | None]:
    """A check for numbers in [lo, hi] (or (lo, hi] with ``lo_open``)."""

    def check(value: Any) -> str | None:
        if lo is not None and (value <= lo if lo_open else value < lo):
            return f"must be {'>' if lo_open else '>='} {lo:g}, got {value!r}"
        if hi is not None and value > hi:
            return f"must be <= {hi:g}, got {value!r}"
        return None

    return check


def one_of(*choices: str) -> Callable[[Any], str | None]:
    def check(value: Any) -> str | None:
        if value not in choices:
            return f"must be one of {', '.join(repr(c) for c in choices)}, got {value!r}"
        return None

    return check
