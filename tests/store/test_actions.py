"""Operator actions: one path and one set of messages (issue 11 item 2); a side file that cannot be turned against
the user, sources that are not self-declared (issue 10 item 4)."""

from __future__ import annotations

import os
import pwd
import socket
from pathlib import Path

import pytest

from firewatch.store.actions import (
    Action,
    ActionFileError,
    ActionQueue,
    actions_path,
    apply_action,
    default_source,
    mqtt_action,
)
from firewatch.store.reader import LogReader
from tests.store.conftest import T0, Bench, Clock


def _alarmed(tmp_path: Path) -> Bench:
    """A log with one open alarm: the line fell silent past no_data_s (alarm 1, no-data)."""
    clock = Clock()
    bench = Bench(tmp_path / "alarmed.db", clock, no_data_s=10.0)
    bench.lines([T0 + i for i in range(5)])
    clock.t = T0 + 20
    bench.cycle()
    assert [a.kind for a in bench.engine.alarms.values()] == ["no-data"]
    return bench


def _events(bench: Bench, kind: str) -> list[dict]:
    bench.writer.commit()
    with LogReader(bench.path) as r:
        return r.events([kind])


# -- the side file ---------------------------------------------------------------------------------
def test_a_symlinked_action_file_is_refused_and_its_target_untouched(tmp_path: Path) -> None:
    """Issue 10: a symlinked action file let anyone who can write its target inject acknowledgements."""
    log = tmp_path / "k.db"
    victim = tmp_path / "someone-elses-file"
    victim.write_bytes(b"precious\n")
    actions_path(log).symlink_to(victim)
    with pytest.raises(ActionFileError, match="symbolic link"):
        ActionQueue(log)
    assert victim.read_bytes() == b"precious\n"
    # a dangling link (the target does not exist yet) is refused too, and nothing is created through it
    actions_path(log).unlink()
    actions_path(log).symlink_to(tmp_path / "not-yet")
    with pytest.raises(ActionFileError, match="symbolic link"):
        ActionQueue(log)
    assert not (tmp_path / "not-yet").exists()


def test_an_action_file_that_is_not_a_regular_file_is_refused(tmp_path: Path) -> None:
    log = tmp_path / "k.db"
    os.mkfifo(actions_path(log))
    with pytest.raises(ActionFileError, match="not a regular file"):
        ActionQueue(log)


def test_the_source_is_the_account_of_the_uid_not_the_environment(monkeypatch: pytest.MonkeyPatch) -> None:
    """Issue 10: the source came from ``USER``, so anyone could be anyone."""
    monkeypatch.setenv("USER", "mallory")
    monkeypatch.setenv("LOGNAME", "mallory")
    account = pwd.getpwuid(os.getuid()).pw_name
    assert default_source() == f"{account}@{socket.gethostname()} (viewer pid {os.getpid()})"


def test_queued_actions_keep_their_source_and_moment(tmp_path: Path) -> None:
    queue = ActionQueue(tmp_path / "k.db")
    aid = queue.submit("note", text="glaze bubbling", about_t=T0 + 5, clock=lambda: T0 + 100)
    (pending,) = queue.pending()
    assert (pending.id, pending.kind, pending.text, pending.about_t, pending.submitted_utc) == (aid, "note", "glaze bubbling", T0 + 5, T0 + 100)
    assert pending.source == default_source()
    assert queue.result(aid) is None
    assert queue.mark_applied(aid, "note logged") and not queue.mark_applied(aid, "again")  # applied once only
    assert queue.result(aid) == "note logged" and queue.pending() == []
    with pytest.raises(ValueError, match="reason and a duration"):
        queue.submit("shelve", alarm_id=1, reason="", duration_s=600)


# -- MQTT sources ----------------------------------------------------------------------------------
def test_mqtt_actions_are_known_by_their_topic_and_a_name_is_only_claimed() -> None:
    """Issue 10 item 4: ``mqtt kilns/k1/action (claimed: ann)``."""
    action, refused = mqtt_action("kilns/k1/action", {"action": "acknowledge", "alarm_id": 3, "source": "ann"})
    assert refused is None and action.source == "mqtt kilns/k1/action (claimed: ann)" and action.alarm_id == 3
    action, _ = mqtt_action("kilns/k1/action", {"action": "acknowledge", "alarm_id": 3})
    assert action.source == "mqtt kilns/k1/action"
    # a name cannot forge a second line in the log
    action, _ = mqtt_action("kilns/k1/action", {"action": "note", "text": "x", "source": "ann\nacknowledge from boss"})
    assert "\n" not in action.source and action.source.endswith("(claimed: ann acknowledge from boss)")
    action, _ = mqtt_action("kilns/k1/action", {"action": "shelve", "alarm_id": "7", "reason": "tc swap", "minutes": 30})
    assert (action.alarm_id, action.duration_s, action.reason) == (7, 1800.0, "tc swap")


@pytest.mark.parametrize("body, why", [
    ({"invalid": "not json"}, "not a JSON object"),
    ({"action": "acknowledge", "alarm_id": "seven"}, "bad alarm_id"),
    ({"action": "acknowledge"}, "acknowledge needs an alarm"),
    ({"action": "shelve", "alarm_id": 1, "minutes": 5}, "shelving needs a reason"),
    ({"action": "reboot"}, "unknown action 'reboot'"),
])
def test_mqtt_payloads_that_do_not_make_an_action_are_refused_with_the_reason(body: dict, why: str) -> None:
    _, refused = mqtt_action("kilns/k1/action", body)
    assert refused is not None and why in refused


# -- one path, one set of messages -----------------------------------------------------------------
def test_one_set_of_messages_whoever_applies_and_wherever_it_came_from(tmp_path: Path) -> None:
    """Issue 11 item 2: local and MQTT actions go through one function with one set of messages."""
    bench = _alarmed(tmp_path)
    now = T0 + 21
    local = "ann@kilnroom (viewer pid 1)"

    def both(kind: str, **kw) -> tuple[str, str]:
        a = apply_action(Action(kind, local, **kw), bench.engine, bench.writer.event, now)
        body = {"action": kind, **{k: v for k, v in kw.items() if k != "duration_s"}}
        if "duration_s" in kw:
            body["minutes"] = kw["duration_s"] / 60.0
        mqtt, refused = mqtt_action("kilns/k1/action", body)
        b = apply_action(mqtt, bench.engine, bench.writer.event, now, refused=refused)
        return a, b

    assert both("acknowledge", alarm_id=1) == ("alarm 1 acknowledged", "alarm 1 is active-acknowledged: nothing to acknowledge")
    shelved = "alarm 1 shelved until 2027-01-15 08:10:21Z: swapping tc1"  # T0 + 21 s + 10 min in UTC (Python's datetime)
    assert both("shelve", alarm_id=1, reason="swapping tc1", duration_s=600.0)[0] == shelved
    assert both("unshelve", alarm_id=1)[0] == "alarm 1 unshelved"
    assert both("note", text="cones down") == ("note logged", "note logged")
    assert both("acknowledge", alarm_id=99) == ("refused: alarm 99 is not open",) * 2
    assert both("shelve", alarm_id=1, reason=" ", duration_s=600.0) == ("refused: shelving needs a reason and a duration",) * 2
    details = [e["detail"] for e in _events(bench, "action")]
    assert details[0] == f"acknowledge from {local}: alarm 1 acknowledged"
    assert details[1] == "acknowledge from mqtt kilns/k1/action: alarm 1 is active-acknowledged: nothing to acknowledge"
    assert all(" from " in d and ": " in d for d in details) and len(details) == 12
    notes = _events(bench, "note")
    assert [n["detail"] for n in notes] == [f"cones down ({local})", "cones down (mqtt kilns/k1/action)"]


def test_refusals_decided_before_are_logged_with_their_reason(tmp_path: Path) -> None:
    bench = _alarmed(tmp_path)
    action, _ = mqtt_action("kilns/k1/action", {"action": "acknowledge", "alarm_id": 1, "source": "ann"})
    result = apply_action(action, bench.engine, bench.writer.event, T0 + 21,
                          refused="actions over MQTT are not enabled in the site profile")
    assert result == "refused: actions over MQTT are not enabled in the site profile"
    assert bench.engine.alarms[1].state == "active-unacknowledged"
    assert _events(bench, "action")[-1]["detail"] == (
        "acknowledge from mqtt kilns/k1/action (claimed: ann): refused: actions over MQTT are not enabled in the site profile")
    # without the log's alarms (its profile does not load) alarm actions are refused; notes still go in
    assert apply_action(Action("acknowledge", "x", alarm_id=1), None, bench.writer.event, T0 + 22).startswith("refused: the alarms")
    assert apply_action(Action("note", "x", text="still here"), None, bench.writer.event, T0 + 22) == "note logged"


def test_a_late_action_says_when_it_was_submitted_and_a_replay_note_its_moment(tmp_path: Path) -> None:
    bench = _alarmed(tmp_path)
    late = Action("acknowledge", "ann", alarm_id=1, submitted_utc=T0 + 21, id=4)
    apply_action(late, bench.engine, bench.writer.event, T0 + 81, now_utc=T0 + 81)
    assert _events(bench, "action")[-1]["detail"].endswith("(submitted 2027-01-15 08:00:21Z, applied 60 s later)")
    # a queued note applied late is dated when it was typed, on the firing's time line (here 100 s ahead of UTC)
    typed = Action("note", "ann", text="door ajar", submitted_utc=T0 + 30, id=5)
    apply_action(typed, bench.engine, bench.writer.event, T0 + 190, now_utc=T0 + 90)
    assert [e["t"] for e in _events(bench, "note")] == [T0 + 130]
    assert _events(bench, "action")[-1]["detail"].endswith("applied 60 s later)")
    note = Action("note", "ann", text="glaze crawling here", about_t=T0 + 3)
    apply_action(note, bench.engine, bench.writer.event, T0 + 90, now_utc=T0 + 90)
    logged = _events(bench, "note")[0]
    assert logged["t"] == T0 + 3  # about the moment shown in replay
    assert logged["detail"] == "glaze crawling here (ann; written 2027-01-15 08:01:30Z)"
