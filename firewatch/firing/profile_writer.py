"""Writing tuned values into a site profile, keeping the file's other content and comments (tomlkit)."""

from __future__ import annotations

from pathlib import Path

import tomlkit

from firewatch.settings._tomlcheck import ProfileError, read_text_file
from firewatch.settings.profile import load_site

__all__ = ["apply_tuning"]


def apply_tuning(site_path: str | Path, channel: str, values: dict[str, float], comment: str) -> str:
    """Set ``values`` on the ``[[pyrometer]]`` named ``channel``, with ``comment`` above the first; return the new text.

    The file is rewritten only if the result still validates.
    """
    path = Path(site_path)
    text = read_text_file(path)  # a regular file of a sane size, or ProfileError: never a device or a pipe
    load_site(path, text=text)  # and a valid profile, nested shallowly enough for tomlkit's parser
    doc = tomlkit.parse(text)
    tables = doc.get("pyrometer")
    if tables is None:
        raise ProfileError([f"{path}: no [[pyrometer]] tables"])
    target = next((t for t in tables if t.get("name") == channel), None)
    if target is None:
        raise ProfileError([f"{path}: no [[pyrometer]] named {channel!r}"])
    first = True
    for key, value in values.items():
        item = tomlkit.item(round(float(value), 4))
        if first:
            item.comment(comment)
            first = False
        target[key] = item
    new = tomlkit.dumps(doc)
    load_site(path, text=new)  # refuse to write a profile that would not load
    path.write_text(new, encoding="utf-8")
    return new
