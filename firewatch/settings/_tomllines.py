"""Line numbers of TOML keys, and how deep a TOML text nests, for messages that name the line.

Neither ``tomllib`` nor ``tomlkit`` reports where a key was written, so this
scanner walks the text once and maps each key path (array-of-tables indices
included, for example ``("thermocouple", 1, "type")``) to its line. It reads
the TOML 1.0 grammar as far as lines and keys go: table headers and arrays of
tables (``[[a]]``, ``[a.b]`` under the latest ``[[a]]``, ``[[a.b]]``), dotted
and quoted keys, basic and literal strings, multi-line basic and literal
strings (whose lines are text, never keys), arrays over several lines with
comments, and inline tables. It never recurses, so no nesting can exhaust the
stack, and it measures the deepest nesting on the way so that a reader can
refuse a hostile file before ``tomllib`` (which recurses) sees it. On text
that is not TOML it stops quietly: the TOML parser reports the syntax error.
"""

from __future__ import annotations

import bisect
import re
from dataclasses import dataclass, field
from typing import Any

__all__ = ["KeyPath", "Scan", "scan", "key_lines", "line_of"]

KeyPath = tuple[str | int, ...]
"""A key's place: table names, keys and array-of-tables indices, e.g. ``("thermocouple", 1, "type")``."""

_WS = re.compile(r"[ \t]*")
_WS_NL = re.compile(r"(?:[ \t\r\n]|#[^\n]*)*")  # inside arrays: white space, newlines and comments
_BARE = re.compile(r"[A-Za-z0-9_\-]+")
_BASIC_BODY = re.compile(r'[^"\\\n]*')
_ML_BASIC_BODY = re.compile(r'[^"\\]*')
_SCALAR = re.compile(r"[^,\]}\n#]*")  # numbers, booleans, dates (a date may hold one space)


@dataclass
class Scan:
    """What a scan found: each key path's line, and the deepest nesting with its line."""

    lines: dict[KeyPath, int] = field(default_factory=dict)
    depth: int = 0
    """The deepest nesting seen: key parts, array indices and open arrays and inline tables together."""
    deep_line: int | None = None
    """The line where nesting first went past the scan's limit (None: it never did)."""


class _Scanner:
    def __init__(self, text: str, max_depth: int) -> None:
        self.s = text
        self.n = len(text)
        self.i = 0
        self.max_depth = max_depth
        self._newlines = [m.start() for m in re.finditer("\n", text)]
        self.out = Scan()

    # -- positions --------------------------------------------------------------------
    def line(self, i: int | None = None) -> int:
        return bisect.bisect_left(self._newlines, self.i if i is None else i) + 1

    def _deeper(self, depth: int) -> bool:
        """Note a nesting depth; True when it passes the limit (the scan then stops)."""
        self.out.depth = max(self.out.depth, depth)
        if depth > self.max_depth and self.out.deep_line is None:
            self.out.deep_line = self.line()
            return True
        return False

    def _skip(self, pattern: re.Pattern[str]) -> None:
        m = pattern.match(self.s, self.i)
        if m:
            self.i = m.end()

    def _to_next_line(self) -> None:
        j = self.s.find("\n", self.i)
        self.i = self.n if j < 0 else j + 1

    def _record(self, path: KeyPath) -> None:
        self.out.lines.setdefault(path, self.line())

    # -- tokens -----------------------------------------------------------------------
    def _key(self) -> tuple[str, ...] | None:
        """A dotted key at ``i`` (bare, "basic" or 'literal' parts); None if there is none."""
        parts: list[str] = []
        while True:
            self._skip(_WS)
            if self.i >= self.n:
                return None
            c = self.s[self.i]
            if c == '"':
                j = self.i + 1
                out = []
                while j < self.n and self.s[j] not in '"\n':
                    if self.s[j] == "\\" and j + 1 < self.n:
                        out.append(self.s[j + 1])
                        j += 2
                        continue
                    out.append(self.s[j])
                    j += 1
                if j >= self.n or self.s[j] != '"':
                    return None
                parts.append("".join(out))
                self.i = j + 1
            elif c == "'":
                j = self.s.find("'", self.i + 1)
                nl = self.s.find("\n", self.i + 1)
                if j < 0 or (0 <= nl < j):
                    return None
                parts.append(self.s[self.i + 1:j])
                self.i = j + 1
            else:
                m = _BARE.match(self.s, self.i)
                if not m:
                    return None
                parts.append(m.group())
                self.i = m.end()
            self._skip(_WS)
            if self.i < self.n and self.s[self.i] == ".":
                self.i += 1
                continue
            return tuple(parts)

    def _string(self) -> bool:
        """Skip the string at ``i`` (any of the four kinds); False if it never closes."""
        s, i = self.s, self.i
        if s.startswith('"""', i):
            j = i + 3
            while True:
                m = _ML_BASIC_BODY.match(s, j)
                j = m.end() if m else j
                if j >= self.n:
                    return False
                if s[j] == "\\":
                    j += 2
                    continue
                if s.startswith('"""', j):
                    j += 3
                    extra = 0
                    while extra < 2 and j < self.n and s[j] == '"':  # up to two quotes may end the content
                        j += 1
                        extra += 1
                    self.i = j
                    return True
                j += 1
        if s.startswith("'''", i):
            j = s.find("'''", i + 3)
            if j < 0:
                return False
            j += 3
            extra = 0
            while extra < 2 and j < self.n and s[j] == "'":
                j += 1
                extra += 1
            self.i = j
            return True
        if s[i] == '"':
            j = i + 1
            while True:
                m = _BASIC_BODY.match(s, j)
                j = m.end() if m else j
                if j >= self.n or s[j] == "\n":
                    return False
                if s[j] == "\\":
                    j += 2
                    continue
                self.i = j + 1
                return True
        j = s.find("'", i + 1)
        nl = s.find("\n", i + 1)
        if j < 0 or (0 <= nl < j):
            return False
        self.i = j + 1
        return True

    # -- grammar ----------------------------------------------------------------------
    def _value(self, path: KeyPath) -> bool:
        """Skip one value at ``i`` (for ``path``), recording the keys of inline tables; False to stop the scan."""
        # explicit stack instead of recursion: [kind, prefix, element index]
        stack: list[list[Any]] = []
        while self.i < self.n:
            if stack and stack[-1][0] == "[":
                self._skip(_WS_NL)
            else:
                self._skip(_WS)
            if self.i >= self.n:
                return True
            c = self.s[self.i]
            top = stack[-1] if stack else None
            if top is not None and top[0] == "{" and top[3]:  # an inline table wants a key
                if c == "}":
                    self.i += 1
                    stack.pop()
                else:
                    key = self._key()
                    if key is None or self.i >= self.n or self.s[self.i] != "=":
                        return True
                    self.i += 1
                    top[3] = False
                    top[2] = key
                    for k in range(1, len(key) + 1):
                        self._record(top[1] + key[:k])
                    if self._deeper(len(top[1]) + len(key)):
                        return False
                    continue
            elif c in "\"'":
                if not self._string():
                    return True
            elif c == "[":
                self.i += 1
                prefix = self._prefix(stack, path)
                stack.append(["[", prefix, 0, False])
                if self._deeper(len(prefix) + 1):
                    return False
                continue
            elif c == "{":
                self.i += 1
                prefix = self._prefix(stack, path)
                stack.append(["{", prefix, (), True])
                if self._deeper(len(prefix) + 1):
                    return False
                continue
            elif c in "]}":
                if not stack:
                    return True
                self.i += 1
                stack.pop()
            elif c == ",":
                self.i += 1
                if top is None:
                    return True
                if top[0] == "[":
                    top[2] += 1
                else:
                    top[3] = True
                continue
            elif c in "\n#":
                return True
            else:
                m = _SCALAR.match(self.s, self.i)
                if not m or m.end() == self.i:
                    return True
                self.i = m.end()
            if not stack:
                return True
        return True

    @staticmethod
    def _prefix(stack: list[list[Any]], path: KeyPath) -> KeyPath:
        """The key path of a value opening now inside ``stack``."""
        if not stack:
            return path
        top = stack[-1]
        prefix: KeyPath = top[1]
        return prefix + ((top[2],) if top[0] == "[" else tuple(top[2]))

    def run(self) -> Scan:
        table: KeyPath = ()
        counters: dict[KeyPath, int] = {}
        while self.i < self.n:
            self._skip(_WS_NL)
            if self.i >= self.n:
                break
            if self.s[self.i] == "[":
                array = self.s.startswith("[[", self.i)
                self.i += 2 if array else 1
                name = self._key()
                closing = "]]" if array else "]"
                if name is None or not self.s.startswith(closing, self.i):
                    self._to_next_line()
                    continue
                self.i += len(closing)
                if array:
                    parent = _resolve(name[:-1], counters) + name[-1:]
                    index = counters.get(parent, -1) + 1
                    counters[parent] = index
                    table = parent + (index,)
                else:
                    table = _resolve(name, counters)
                self._record(table)
                if self._deeper(len(table)):
                    break
                self._to_next_line()
                continue
            key = self._key()
            if key is None or self.i >= self.n or self.s[self.i] != "=":
                self._to_next_line()
                continue
            self.i += 1
            for k in range(1, len(key) + 1):
                self._record(table + key[:k])
            path = table + key
            if self._deeper(len(path)):
                break
            if not self._value(path):
                break
            self._to_next_line()
        return self.out


def _resolve(name: KeyPath, counters: dict[KeyPath, int]) -> KeyPath:
    """``[a.b]`` under an array of tables ``[[a]]`` refers to its latest element."""
    out: KeyPath = ()
    for part in name:
        out = out + (part,)
        if out in counters:
            out = out + (counters[out],)
    return out


def scan(text: str, max_depth: int = 1 << 30) -> Scan:
    """Scan ``text`` once: key lines and nesting depth, stopping where the nesting passes ``max_depth``."""
    return _Scanner(text, max_depth).run()


def key_lines(text: str) -> dict[KeyPath, int]:
    """Map key paths to 1-based line numbers."""
    return scan(text).lines


def line_of(lines: dict[KeyPath, int], path: KeyPath) -> int | None:
    """The line of ``path`` or of its nearest enclosing table."""
    while path:
        if path in lines:
            return lines[path]
        path = path[:-1]
    return None
