"""The plant overview's model: every kiln on a broker, from their retained state and alarm messages.

No textual here: :class:`PlantState` subscribes (paho-mqtt, its own network
thread), keeps each kiln's latest state with the wall-clock time it came,
and sends plant actions (acknowledge) to a kiln's ``action`` topic; the
kiln's recorder applies them only if its site profile enables it.
"""

from __future__ import annotations

import json
import os
import threading
import time
from dataclasses import dataclass, field
from typing import Any

from firewatch.services.mqtt import BrokerURL, start_client, topic

__all__ = ["KilnView", "PlantState"]


@dataclass
class KilnView:
    kiln: str
    state: dict[str, Any] = field(default_factory=dict)
    received: float = 0.0
    alarms_seen: int = 0

    @property
    def alarms(self) -> list[dict[str, Any]]:
        return list(self.state.get("alarms", []))

    @property
    def unacknowledged(self) -> list[dict[str, Any]]:
        return [a for a in self.alarms if a["state"] in ("active-unacknowledged", "returned-unacknowledged", "latched")]


class PlantState:
    """Kilns by id, kept current from the broker."""

    def __init__(self, url: BrokerURL, source: str = "plant overview", clock=time.time) -> None:
        self.url = url
        self.source = source
        self.clock = clock
        self.kilns: dict[str, KilnView] = {}
        self._lock = threading.Lock()
        self.connected = threading.Event()
        # a plant viewer has no site profile: its user and CA come from the environment
        self.client = start_client(
            url, username=os.environ.get("FIREWATCH_MQTT_USERNAME", ""), ca_file=os.environ.get("FIREWATCH_MQTT_CA", ""),
            on_connect=self._on_connect, on_disconnect=lambda *a: self.connected.clear(), on_message=self._on_message,
        )

    def _on_connect(self, client, userdata, flags, reason_code, properties) -> None:
        if reason_code.is_failure:
            return
        self.connected.set()
        client.subscribe([(f"{self.url.prefix}/+/state", 1), (f"{self.url.prefix}/+/alarm", 1)])

    def _on_message(self, client, userdata, msg) -> None:
        parts = msg.topic.split("/")
        if len(parts) < 3:
            return
        kiln, leaf = parts[-2], parts[-1]
        try:
            body = json.loads(msg.payload)
        except (ValueError, UnicodeDecodeError):
            return
        with self._lock:
            view = self.kilns.setdefault(kiln, KilnView(kiln))
            if leaf == "state" and isinstance(body, dict):
                view.state = body
                view.received = self.clock()
            elif leaf == "alarm":
                view.alarms_seen += 1

    def snapshot(self) -> list[KilnView]:
        """The kilns, most urgent first (unacknowledged alarms, then any alarm, then by name)."""
        with self._lock:
            views = [KilnView(k.kiln, dict(k.state), k.received, k.alarms_seen) for k in self.kilns.values()]
        return sorted(views, key=lambda v: (not v.unacknowledged, not v.alarms, v.kiln))

    def acknowledge(self, kiln: str, alarm_id: int) -> None:
        body = {"action": "acknowledge", "alarm_id": alarm_id, "source": self.source}
        self.client.publish(topic(self.url, kiln, "action"), json.dumps(body), qos=1)

    def acknowledge_all(self) -> int:
        """Acknowledge every unacknowledged alarm of every kiln; returns how many were asked for."""
        n = 0
        for view in self.snapshot():
            for a in view.unacknowledged:
                self.acknowledge(view.kiln, int(a["id"]))
                n += 1
        return n

    def close(self) -> None:
        self.client.loop_stop()
        self.client.disconnect()
