"""The key tables of docs/site-profile.md and docs/schedules.md, written from the field lists.

Each table in those documents sits between ``<!-- keys NAME -->`` and
``<!-- end keys -->``, where NAME is a key of ``profile.TABLES`` or
``schedule.TABLES``. From a source checkout::

    python -m firewatch.settings.keydocs           # rewrite the tables in place
    python -m firewatch.settings.keydocs --check   # exit 1 when a table is out of date

A test runs the check, so the documentation lists every key the reader accepts.
"""

from __future__ import annotations

import re
import sys
from collections.abc import Mapping, Sequence
from pathlib import Path

from firewatch.settings import profile, schedule
from firewatch.settings._tomlcheck import Field

__all__ = ["DOCS", "markdown", "render", "main"]

DOCS: dict[str, Mapping[str, tuple[Field, ...]]] = {
    "site-profile.md": profile.TABLES,
    "schedules.md": schedule.TABLES,
}
"""Each document under docs/ and the tables it documents."""

_BLOCK = re.compile(r"(<!-- keys (?P<table>\S+) -->\n)(?P<body>.*?)(<!-- end keys -->)", re.DOTALL)


def markdown(fields: Sequence[Field]) -> str:
    """One table, one row per key: key, default (``required`` for a required key), meaning."""
    rows = ["| key | default | meaning |", "|---|---|---|"]
    for f in fields:
        rows.append(f"| `{f.key}` | {'required' if f.required else f.doc_default()} | {f.help} |")
    return "\n".join(rows) + "\n"


def render(text: str, tables: Mapping[str, tuple[Field, ...]]) -> str:
    """``text`` with every marked table rewritten; ``KeyError`` names an unknown or missing table."""
    found: set[str] = set()

    def table(m: re.Match[str]) -> str:
        name = m.group("table")
        if name not in tables:
            raise KeyError(f"no table {name!r}; expected one of {', '.join(tables)}")
        found.add(name)
        return m.group(1) + markdown(tables[name]) + m.group(4)

    out = _BLOCK.sub(table, text)
    missing = set(tables) - found
    if missing:
        raise KeyError(f"no <!-- keys ... --> block for {', '.join(sorted(missing))}")
    return out


def main(argv: Sequence[str] | None = None) -> int:
    argv = list(sys.argv[1:] if argv is None else argv)
    check = "--check" in argv
    docs = Path(__file__).resolve().parents[2] / "docs"
    status = 0
    for name, tables in DOCS.items():
        path = docs / name
        text = path.read_text(encoding="utf-8")
        new = render(text, tables)
        if new == text:
            continue
        if check:
            print(f"{path}: key tables out of date; run python -m firewatch.settings.keydocs", file=sys.stderr)
            status = 1
        else:
            path.write_text(new, encoding="utf-8")
            print(f"{path}: key tables rewritten")
    return status


if __name__ == "__main__":
    raise SystemExit(main())
