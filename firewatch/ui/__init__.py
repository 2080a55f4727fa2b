"""The dashboard (textual): watch a live firing, replay a finished one, and the demo.

Nothing outside this package imports it; it reads the model
(:mod:`firewatch.store.view`) and hands operator actions to
:mod:`firewatch.services.desk`. textual is imported only here, by the commands
that draw.
"""

from __future__ import annotations

__all__ = ["run_replay", "run_watch"]


def run_watch(log, show_cautions: bool | None = None, site_path=None, utc: bool = False) -> int:
    from firewatch.ui.app import FirewatchApp

    FirewatchApp(log, mode="live", show_cautions=show_cautions, site_path=site_path, utc=utc).run()
    return 0


def run_replay(log, site=None, schedule=None, speed: float = 60.0, show_cautions: bool | None = None, site_path=None,
               utc: bool = False) -> int:
    from firewatch.ui.app import FirewatchApp

    FirewatchApp(log, mode="replay", site=site, schedule=schedule, speed=speed, show_cautions=show_cautions,
                 site_path=site_path, utc=utc).run()
    return 0
