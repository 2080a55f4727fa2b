"""Child processes that end with the process that started them (``firewatch demo``'s simulator and recorder).

Two mechanisms, because one is not everywhere:

* On Linux the kernel signals the child when its parent ends, however it ends, SIGKILL
  included: ``prctl(PR_SET_PDEATHSIG, sig)`` (prctl(2)). The standard library has no binding
  for it, hence the few lines of ctypes.
* Everywhere a daemon thread polls ``os.getppid()``: an orphan is re-parented (to init or a
  subreaper), so its parent id changes.

The child is told its parent's id on its command line, because the parent may already have
ended by the time the child asks who its parent is.
"""

from __future__ import annotations

import ctypes
import os
import signal
import sys
import threading
from collections.abc import Callable

__all__ = ["set_parent_death_signal", "stop_with_parent", "POLL_S"]

PR_SET_PDEATHSIG = 1
"""prctl(2) option number, from <linux/prctl.h>."""
POLL_S = 0.5
"""How often the polling thread looks for its parent, seconds."""


def set_parent_death_signal(sig: int) -> bool:
    """Have the kernel send ``sig`` to this process when its parent ends; False where that cannot be set."""
    if not sys.platform.startswith("linux"):
        return False
    try:
        libc = ctypes.CDLL(None, use_errno=True)
        return int(libc.prctl(PR_SET_PDEATHSIG, int(sig), 0, 0, 0)) == 0
    except (OSError, AttributeError):
        return False


def stop_with_parent(parent_pid: int, on_gone: Callable[[], None], sig: int | None = signal.SIGTERM,
                     poll_s: float = POLL_S) -> threading.Thread:
    """Call ``on_gone`` once when the process ``parent_pid`` (this process's parent) has ended.

    ``sig`` is what the kernel sends on Linux (None: poll only); the caller must have a handler for
    it, or accept its default action. ``on_gone`` runs at once when the parent has already gone,
    else from a daemon thread that polls every ``poll_s`` seconds (the only mechanism off Linux).
    """
    if sig is not None:
        set_parent_death_signal(sig)
    done = threading.Event()

    def gone() -> None:
        if not done.is_set():
            done.set()
            on_gone()

    def watch() -> None:
        while not done.wait(poll_s):
            if os.getppid() != parent_pid:
                gone()

    if os.getppid() != parent_pid:  # it ended before the signal was asked for
        gone()
    thread = threading.Thread(target=watch, name="parent-watch", daemon=True)
    thread.start()
    return thread
