"""Line numbers of TOML keys, for messages that name the line.

Neither ``tomllib`` nor ``tomlkit`` reports where a key was written, so this
small scanner walks the text once and maps each key path (array-of-tables
indices included, for example ``("thermocouple", 1, "type")``) to its line.
It understands the subset that profiles use: tables, arrays of tables,
dotted keys, quoted strings and multi-line arrays; for anything stranger it
just reports no line.
"""

from __future__ import annotations

import re

__all__ = ["key_lines", "line_of"]

_HEADER = re.compile(r"^\s*(\[\[?)\s*([^\]]+?)\s*(\]\]?)\s*$")
_KEY = re.compile(r"^\s*([A-Za-z0-9_\-\.\"' ]+?)\s*=")


def _strip_comment(line: str) -> str:
    out, quote = [], ""
    for ch in line:
        if quote:
            if ch == quote:
                quote = ""
        elif ch in "\"'":
            quote = ch
        elif ch == "#":
            break
        out.append(ch)
    return "".join(out)


def _split_key(text: str) -> tuple[str, ...]:
    return tuple(part.strip().strip("\"'") for part in text.split("."))


def key_lines(text: str) -> dict[tuple, int]:
    """Map key paths to 1-based line numbers."""
    lines: dict[tuple, int] = {}
    counters: dict[tuple, int] = {}
    table: tuple = ()
    depth = 0
    for lineno, raw in enumerate(text.splitlines(), start=1):
        line = _strip_comment(raw)
        if depth > 0:  # inside a multi-line array
            depth += line.count("[") - line.count("]")
            continue
        header = _HEADER.match(line)
        if header:
            name = _split_key(header.group(2))
            if header.group(1) == "[[":
                index = counters.get(name, -1) + 1
                counters[name] = index
                table = name + (index,)
            else:
                table = _resolve(name, counters)
            lines.setdefault(table, lineno)
            continue
        key = _KEY.match(line)
        if key:
            path = table + _split_key(key.group(1))
            lines.setdefault(path, lineno)
            rest = line[key.end():]
            depth = max(0, rest.count("[") - rest.count("]"))
    return lines


def _resolve(name: tuple, counters: dict[tuple, int]) -> tuple:
    """``[a.b]`` under an array of tables ``[[a]]`` refers to its latest element."""
    out: tuple = ()
    for part in name:
        out = out + (part,)
        if out in counters:
            out = out + (counters[out],)
    return out


def line_of(lines: dict[tuple, int], path: tuple) -> int | None:
    """The line of ``path`` or of its nearest enclosing table."""
    while path:
        if path in lines:
            return lines[path]
        path = path[:-1]
    return None
