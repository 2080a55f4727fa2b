"""Line framing: a byte stream in, whole lines out, with a bound on line length."""

from __future__ import annotations

__all__ = ["LineFramer", "MAX_LINE"]

MAX_LINE = 4096
"""Longest line kept, bytes; a longer run without a line end is cut and reported."""


class LineFramer:
    """Split a byte stream on LF; keep partial lines across ``feed`` calls.

    ``feed`` returns ``(lines, overlong)``: complete lines (without LF, CR
    kept for the parser to strip) and the number of overlong fragments that
    were dropped because no LF came within :data:`MAX_LINE` bytes. Bytes
    held at a disconnect are returned by :meth:`flush` (a truncated line,
    which the parser reports as malformed).
    """

    def __init__(self, max_line: int = MAX_LINE) -> None:
        self._buf = bytearray()
        self._max = max_line
        self._discarding = False

    def feed(self, data: bytes) -> tuple[list[bytes], list[bytes]]:
        self._buf += data
        lines: list[bytes] = []
        overlong: list[bytes] = []
        while True:
            nl = self._buf.find(b"\n")
            if nl < 0:
                break
            line = bytes(self._buf[:nl])
            del self._buf[: nl + 1]
            if self._discarding:
                self._discarding = False
                continue
            lines.append(line)
        if len(self._buf) > self._max:
            if not self._discarding:
                overlong.append(bytes(self._buf[:80]))
            self._discarding = True
            self._buf.clear()
        return lines, overlong

    def flush(self) -> bytes:
        """Return and clear any partial line held."""
        rest = b"" if self._discarding else bytes(self._buf)
        self._buf.clear()
        self._discarding = False
        return rest
