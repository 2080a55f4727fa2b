"""The README and .ci/run stay in step (issue 2: CI runs exactly the README's test command)."""

from __future__ import annotations

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def _sh_blocks(text: str) -> list[str]:
    return [b.strip() for b in re.findall(r"```sh\n(.*?)```", text, flags=re.S)]


def test_two_setup_commands_and_ci_runs_the_test_one() -> None:
    readme = (ROOT / "README.md").read_text()
    setup = readme.split("## Set up", 1)[1].split("\n## ", 1)[0]
    blocks = _sh_blocks(setup)
    assert len(blocks) == 2 and all("\n" not in b for b in blocks)
    assert blocks[0].startswith("pip install . && firewatch ")
    assert blocks[1] in (ROOT / ".ci" / "run").read_text().splitlines()


def test_readme_shows_cautions() -> None:
    readme = (ROOT / "README.md").read_text().lower()
    for phrase in ("never a safety device", "over-temperature", "eye protection", "ventilat", "isolated", "local codes"):
        assert phrase in readme
