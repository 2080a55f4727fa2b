"""The alarm list shows a cause that changed as the model words it (issue 12 item 2); the widget only shows it."""

from __future__ import annotations

from textual.app import App, ComposeResult

from firewatch.firing.alarms.causes import CauseStep
from firewatch.settings.timefmt import Clock
from firewatch.store.view import AlarmRow
from firewatch.ui.widgets import AlarmList

T1 = 1_773_488_520.0  # 2026-03-14 11:42:00 UTC (Python's datetime)


class OneList(App):
    def __init__(self) -> None:
        super().__init__()
        self.said: list[str] = []

    def compose(self) -> ComposeResult:
        yield AlarmList()

    def on_alarm_list_highlighted(self, message: AlarmList.Highlighted) -> None:
        self.said.append(message.evidence)


def row(steps: tuple[CauseStep, ...]) -> AlarmRow:
    return AlarmRow(7, "divergence", "py1", "window-attenuation", "medium", "active-unacknowledged", T1 - 3600.0,
                    "py1 -12.8 K from tc2 (allowed ±5.9 K)", {"reason": "py1 reads ever lower (-11.5 K/h) while py2 holds (+0.6 K/h)"},
                    steps)


async def test_the_alarm_list_shows_the_story_of_a_cause() -> None:
    step = CauseStep(T1 + 600.0, "unknown", "window-attenuation", "py2 came into range", T1, "py1 reads ever lower",
                     "the evidence does not decide")
    app = OneList()
    async with app.run_test(size=(160, 24)) as pilot:
        table = app.query_one(AlarmList)
        table.show([row((step,))], ref=T1, clock=Clock.for_site("UTC"))
        await pilot.pause()
        assert [str(c) for c in table.get_row_at(0)][5] == "window-attenuation (was unknown)"
        # the time of day, as the list shows it (UTC here)
        assert app.said[-1] == ("window-attenuation, was unknown until py2 came into range at 11:42 — "
                                "py1 reads ever lower (-11.5 K/h) while py2 holds (+0.6 K/h)")
        # a cause that never changed: its reason alone, as before
        table.show([row(())], ref=T1, clock=Clock.for_site("UTC"))
        await pilot.pause()
        assert [str(c) for c in table.get_row_at(0)][5] == "window-attenuation"
        assert app.said[-1] == "py1 reads ever lower (-11.5 K/h) while py2 holds (+0.6 K/h)"
