"""firewatch: kiln and furnace firing monitor reconciling thermocouples and pyrometers.

A monitoring aid, never a safety device: the kiln's own controller and an
independent over-temperature cut-out stay in charge.
"""

from __future__ import annotations

import importlib.abc
import importlib.machinery
import importlib.util
import sys
from pathlib import Path

__version__ = "0.1.0"
__all__ = ["__version__"]


class _SourceTreeSimulator(importlib.abc.MetaPathFinder):
    """Find ``firewatch.simulator`` in a source checkout, where it is the top-level ``simulator/`` folder.

    An installed firewatch carries the simulator as the package ``firewatch.simulator``
    (pyproject.toml maps the folder there, as it maps ``profiles/``). Run from a checkout,
    as the tests do, the same name must find the same folder; setuptools' package-dir
    mapping has no run-time counterpart, hence this small finder. It answers for that one
    name only and loads nothing until the simulator is imported.
    """

    def __init__(self, folder: Path) -> None:
        self.folder = folder

    def find_spec(self, fullname: str, path: object = None, target: object = None) -> importlib.machinery.ModuleSpec | None:
        if fullname != "firewatch.simulator":
            return None
        return importlib.util.spec_from_file_location(
            fullname, self.folder / "__init__.py", submodule_search_locations=[str(self.folder)])


def _install_source_tree_finder() -> None:
    here = Path(__file__).resolve().parent
    folder = here.parent / "simulator"
    if not (here / "simulator").is_dir() and (folder / "__init__.py").is_file():
        # ahead of an editable install's finder, which would answer with the tree it was installed from
        sys.meta_path.insert(0, _SourceTreeSimulator(folder))


_install_source_tree_finder()
