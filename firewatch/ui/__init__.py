"""The dashboard (textual): watch a live firing, replay a finished one, and the demo.

Nothing outside this package imports it; it reads the model
(:mod:`firewatch.store.view`) and hands operator actions to
:mod:`firewatch.services.desk`. textual is imported only here, by the commands
that draw.
"""

from __future__ import annotations

__all__ = ["run_app", "run_replay", "run_watch"]


def run_watch(log, show_cautions: bool | None = None, site_path=None, utc: bool = False) -> int:
    """The live dashboard until the operator quits; a log found damaged ends it with :class:`LogDamaged`."""
    from firewatch.ui.app import FirewatchApp

    return run_app(FirewatchApp(log, mode="live", show_cautions=show_cautions, site_path=site_path, utc=utc))


def run_replay(log, site=None, schedule=None, speed: float = 60.0, show_cautions: bool | None = None, site_path=None,
               utc: bool = False) -> int:
    from firewatch.ui.app import FirewatchApp

    return run_app(FirewatchApp(log, mode="replay", site=site, schedule=schedule, speed=speed, show_cautions=show_cautions,
                                site_path=site_path, utc=utc))


def run_app(app) -> int:
    """Run a :class:`~firewatch.ui.app.FirewatchApp`; its exit status, or :class:`LogDamaged` when the log failed it."""
    app.run()
    if app.failure is not None:  # said once the terminal is back, by the command line as one line
        from firewatch.store._common import LogDamaged

        raise LogDamaged(app.failure)
    return int(app.return_code or 0)
