"""A viewer's actions: written at once under the log's lock when no recorder runs, else handed to the recorder and
followed up; never accepted silently and stamped later (issue 10 item 1, issue 14 item 3)."""

from __future__ import annotations

from pathlib import Path

import pytest

from firewatch.services.desk import FOLLOW_UP_S, ActionDesk
from firewatch.services.recorder import Recorder
from firewatch.store._common import LogLocked
from firewatch.store.actions import ActionQueue, actions_path, default_source
from firewatch.store.reader import LogReader
from firewatch.store.view import FiringView
from firewatch.store.writer import BRIEF_HOLDER, release_lock, take_lock
from tests.store.conftest import T0, Bench, Clock


def _alarmed(tmp_path: Path, clock: Clock) -> Bench:
    """A log with one open alarm (no-data, id 1), its recorder's writer still holding the lock."""
    bench = Bench(tmp_path / "k.db", clock, no_data_s=10.0)
    bench.lines([T0 + i for i in range(5)])
    clock.t = T0 + 20
    bench.cycle()
    return bench


def _events(path: Path, kind: str) -> list[dict]:
    with LogReader(path) as r:
        return r.events([kind])


def _recorder_applies(bench: Bench) -> None:
    """One cycle of the real recorder's action handling on the bench's writer."""
    rec = Recorder("loop://", bench.site, None, bench.path, clock_fn=bench.clock)
    rec.engine = bench.engine
    rec.actions = ActionQueue(bench.path)
    rec._apply_actions(bench.writer, bench.clock())
    bench.writer.commit()
    rec.actions.close()


def test_with_no_recorder_a_note_and_an_acknowledgement_are_written_at_once(tmp_path: Path) -> None:
    """Issue 10: a note typed after the recorder stopped was reported as sent and logged only at the restart."""
    clock = Clock()
    bench = _alarmed(tmp_path, clock)
    bench.stop("signal")
    clock.t = T0 + 30
    desk = ActionDesk(bench.path, bench.site, None, clock=clock)
    note = desk.submit("note", text="kiln door cracked open")
    assert note.ok and note.written and note.action_id is None
    assert note.text == "note written to the log (no recorder is running): note logged"
    (logged,) = _events(bench.path, "note")
    assert logged["t"] == pytest.approx(T0 + 30)  # stamped when it was made (wall clock log: the time line is UTC)
    assert logged["detail"] == f"kiln door cracked open ({default_source()})"
    ack = desk.submit("acknowledge", alarm_id=1)
    assert ack.written and ack.text.endswith("alarm 1 acknowledged")
    (alarm,) = FiringView(bench.path).alarms_now()
    assert alarm.state == "active-acknowledged"
    with LogReader(bench.path) as r:
        states = r.alarms()[0]["states"]
    assert states[-1]["detail"] == f"acknowledged by {default_source()}"
    assert not actions_path(bench.path).exists()  # nothing was queued for a recorder to stamp later
    desk.close()


def test_with_a_recorder_holding_the_log_actions_go_to_it_and_its_result_comes_back(tmp_path: Path) -> None:
    clock = Clock()
    bench = _alarmed(tmp_path, clock)  # its writer holds the lock, as a running recorder does
    desk = ActionDesk(bench.path, bench.site, None, clock=clock)
    sent = desk.submit("acknowledge", alarm_id=1)
    assert sent.ok and not sent.written and sent.text == f"acknowledge sent to the recorder (#{sent.action_id})"
    assert desk.follow_up() == [] and desk.waiting == [sent.action_id]
    _recorder_applies(bench)
    (done,) = desk.follow_up()
    assert done.written and done.text == f"acknowledge #{sent.action_id} applied by the recorder: alarm 1 acknowledged"
    assert desk.waiting == []
    desk.close()


def test_a_queued_action_is_written_by_the_viewer_if_the_recorder_stops_first(tmp_path: Path) -> None:
    clock = Clock()
    bench = _alarmed(tmp_path, clock)
    desk = ActionDesk(bench.path, bench.site, None, clock=clock)
    sent = desk.submit("note", text="cones 6 down")
    bench.stop("signal")  # SIGKILL or a crash: the lock is free, the action not applied
    clock.t = T0 + 25
    (done,) = desk.follow_up()
    assert done.written and "applied by this viewer (the recorder stopped before applying it): note logged" in done.text
    assert [e["t"] for e in _events(bench.path, "note")] == [T0 + 20]  # dated when typed, not when applied
    # marked applied before the lock was let go: a recorder starting later does not log it again
    queue = ActionQueue(bench.path)
    assert queue.pending() == [] and queue.result(sent.action_id) == "note logged"
    queue.close()
    desk.close()


def test_an_action_the_recorder_does_not_apply_is_reported_as_waiting(tmp_path: Path) -> None:
    clock = Clock()
    bench = _alarmed(tmp_path, clock)
    desk = ActionDesk(bench.path, bench.site, None, clock=clock)
    sent = desk.submit("note", text="hello")
    clock.t += FOLLOW_UP_S - 1
    assert desk.follow_up() == []
    clock.t += 2
    (waiting,) = desk.follow_up()
    assert not waiting.ok and not waiting.written
    assert waiting.text == f"note #{sent.action_id} is still waiting: not applied in 10 s (the recorder holds the log)"
    assert desk.follow_up() == []  # said once
    desk.close()
    bench.stop()


def test_refusals_are_said_and_incomplete_actions_never_written(tmp_path: Path) -> None:
    clock = Clock()
    bench = _alarmed(tmp_path, clock)
    bench.stop()
    desk = ActionDesk(bench.path, bench.site, None, clock=clock)
    bad = desk.submit("shelve", alarm_id=1, reason="", duration_s=600)
    assert not bad.ok and not bad.written and bad.text == "shelving needs a reason and a duration"
    unknown = desk.submit("acknowledge", alarm_id=42)
    assert not unknown.ok and unknown.written  # logged as refused, with the reason
    assert unknown.text.endswith("refused: alarm 42 is not open")
    assert _events(bench.path, "action")[-1]["detail"].endswith("refused: alarm 42 is not open")
    desk.close()


def test_a_symlinked_action_file_is_refused_when_the_recorder_holds_the_log(tmp_path: Path) -> None:
    clock = Clock()
    bench = _alarmed(tmp_path, clock)
    victim = tmp_path / "victim"
    victim.write_text("mine\n")
    actions_path(bench.path).symlink_to(victim)
    desk = ActionDesk(bench.path, bench.site, None, clock=clock)
    out = desk.submit("note", text="x")
    assert not out.ok and "symbolic link" in out.text and victim.read_text() == "mine\n"
    desk.close()
    bench.stop()


def test_a_writer_waits_for_a_brief_write_but_never_for_a_recorder(tmp_path: Path) -> None:
    """One writer at a time, always: a viewer's brief write holds the lock for milliseconds, and a recorder
    starting meanwhile waits for it instead of exiting; a recorder's lock is refused at once."""
    log = tmp_path / "k.db"
    brief = take_lock(log, f"{BRIEF_HOLDER}, pid 1 on test")
    ticks: list[float] = []

    def clock() -> float:  # the brief write ends while the second writer is waiting
        ticks.append(0.0)
        if len(ticks) == 2:
            release_lock(brief)
        return 0.0

    fd = take_lock(log, "pid 2 on test", clock=clock)
    assert len(ticks) >= 2  # it waited
    with pytest.raises(LogLocked, match="already being recorded by pid 2 on test"):
        take_lock(log, "pid 3 on test", clock=lambda: pytest.fail("a recorder's lock is not waited for"))
    release_lock(fd)
    brief = take_lock(log, f"{BRIEF_HOLDER}, pid 1 on test")
    late = iter([0.0, 1.0, 2.5])  # a brief write that outlasts the wait (2 s) is refused, saying so
    with pytest.raises(LogLocked, match="try again"):
        take_lock(log, "pid 2 on test", clock=lambda: next(late))
    release_lock(brief)


def test_a_note_in_replay_is_about_the_moment_shown(tmp_path: Path) -> None:
    """Issue 14 item 3: ``o`` in replay annotates the firing at the cursor; written now, under the lock."""
    clock = Clock()
    bench = _alarmed(tmp_path, clock)
    bench.stop()
    clock.t = T0 + 3600
    desk = ActionDesk(bench.path, bench.site, None, clock=clock)
    out = desk.submit("note", text="glaze crawling at the top", about_t=T0 + 3)
    assert out.written
    (note,) = _events(bench.path, "note")
    assert note["t"] == T0 + 3 and note["detail"].endswith("; written 2027-01-15 09:00:00Z)")  # T0 + 1 h, UTC
    desk.close()
