"""``python -m firewatch``: the same as the ``firewatch`` command."""

from __future__ import annotations

import sys

from firewatch.cli import main

if __name__ == "__main__":
    sys.exit(main())
