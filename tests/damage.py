"""Damaged copies of real firing logs, for the tests that every reader survives them (issue 10, item 5).

Each function copies a sound, checkpointed log (one made by ``firewatch sim --to-log``) and
spoils the copy the way a failing disk or a careless copy would. The page layout is SQLite's
file format (SQLite's documentation, "Database File Format": page size at offset 16 of the
header, b-tree page type in the first byte of each b-tree page); which pages hold which table
comes from SQLite's own ``dbstat`` table.
"""

from __future__ import annotations

import shutil
import sqlite3
from pathlib import Path

__all__ = ["overwrite_middle", "truncate_half", "spoil_table", "not_sqlite"]


def _page_size(path: Path) -> int:
    with open(path, "rb") as f:
        f.seek(16)
        size = int.from_bytes(f.read(2), "big")
    return 65536 if size == 1 else size  # the file format stores 65536 as 1


def overwrite_middle(sound: Path, out: Path, pages: int = 16) -> Path:
    """``pages`` whole pages from the middle of the file overwritten with a fixed byte pattern."""
    shutil.copyfile(sound, out)
    size = out.stat().st_size
    page = _page_size(out)
    start = (size // page // 2) * page
    with open(out, "r+b") as f:
        f.seek(start)
        f.write(bytes([0xA5]) * page * pages)
    return out


def truncate_half(sound: Path, out: Path) -> Path:
    """The first half of the file, as an interrupted copy leaves it."""
    data = sound.read_bytes()
    out.write_bytes(data[: len(data) // 2])
    return out


def not_sqlite(out: Path) -> Path:
    """A file with the log's name that is no database at all."""
    out.write_bytes(b"time,tc1,tc2\n" + b"\x00\xff garbage \x7f" * 400)
    return out


def spoil_table(sound: Path, out: Path, table: str) -> Path:
    """Every leaf page of ``table`` given an invalid b-tree page type; the rest of the file is sound."""
    shutil.copyfile(sound, out)
    con = sqlite3.connect(f"file:{out}?mode=ro", uri=True)
    try:
        leaves = [p for (p,) in con.execute("SELECT pageno FROM dbstat WHERE name = ? AND pagetype = 'leaf'", (table,))]
    finally:
        con.close()
    assert leaves, f"no leaf pages for {table}"
    page = _page_size(out)
    with open(out, "r+b") as f:
        for n in leaves:
            f.seek((n - 1) * page)
            f.write(b"\x00" * 8)  # page type 0 is none of the four b-tree page types
    return out
