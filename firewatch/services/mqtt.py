"""Plant-scale publishing over MQTT (ISO/IEC 20922) with a store-and-forward outbox in the firing log.

Topic layout, version 1 (docs/mqtt.md), under ``PREFIX/KILN``:

=============== ===== ======= ==================================================
topic           QoS   retain  payload (JSON)
=============== ===== ======= ==================================================
``state``       1     yes     latest values, progress and open alarms
``readings``    1     no      one batch: sample ids, times, values per channel
``alarm``       1     no      one alarm transition
``action``      (in)          acknowledge / shelve requests from the plant
=============== ===== ======= ==================================================

Recording never waits on the broker: the recorder adds each message to the
``mqtt_outbox`` table inside the same transaction as the readings, so a
message is as durable as the data; a publisher thread sends them in order,
one in flight at a time, and reports back what the broker acknowledged,
which the recorder (the log's only writer) marks as sent. A broker that
goes away and returns gets the backlog, in order, and nothing is lost.
"""

from __future__ import annotations

import json
import math
import os
import queue
import re
import ssl
import threading
import time
from collections import deque
from dataclasses import dataclass
from urllib.parse import urlparse

__all__ = ["BrokerURL", "parse_mqtt_url", "TOPIC_VERSION", "Publisher", "kiln_id_for", "topic", "start_client"]

TOPIC_VERSION = 1


@dataclass(frozen=True)
class BrokerURL:
    host: str
    port: int
    prefix: str
    tls: bool


def parse_mqtt_url(text: str) -> BrokerURL:
    """``mqtt://HOST[:PORT]/PREFIX`` or ``mqtts://...``; ``ValueError`` names the accepted form.

    Credentials never come from the command line: a URL with a user or a
    password is refused (use the site profile's ``[mqtt]`` and an environment variable).
    """
    u = urlparse(text)
    if u.scheme not in ("mqtt", "mqtts") or not u.hostname:
        raise ValueError(f"expected mqtt://HOST:PORT/PREFIX or mqtts://HOST:PORT/PREFIX, got {text!r}")
    if u.username or u.password:
        raise ValueError("credentials do not belong on the command line: set [mqtt] username and password_env in the site profile")
    prefix = u.path.strip("/") or "firewatch"
    if "+" in prefix or "#" in prefix:
        raise ValueError(f"the topic prefix may not hold MQTT wildcards, got {prefix!r}")
    try:
        port = u.port or (8883 if u.scheme == "mqtts" else 1883)
    except ValueError:
        raise ValueError(f"bad port in {text!r}") from None
    return BrokerURL(u.hostname, port, prefix, u.scheme == "mqtts")


def kiln_id_for(site) -> str:
    """The kiln's topic level: the profile's ``[mqtt] kiln_id``, else a slug of the works and kiln."""
    if site.mqtt.kiln_id:
        return site.mqtt.kiln_id
    slug = re.sub(r"[^a-z0-9]+", "-", f"{site.name} {site.kiln}".lower()).strip("-")
    return slug[:60] or "kiln"


def topic(url: BrokerURL, kiln: str, leaf: str) -> str:
    return f"{url.prefix}/{kiln}/{leaf}"


def _clean(value: float) -> float | None:
    return None if value is None or not math.isfinite(value) else round(float(value), 4)


def summary(site, latest: dict[str, float | None]) -> dict[str, object]:
    """What the plant overview shows of a kiln: its reference temperature, segment, divergence, end."""
    ref = site.reference.name if site.reference else None
    divs = [abs(v) for k, v in latest.items() if k.endswith(".divergence") and v is not None]
    seg = latest.get("plan.segment")
    return {
        "site": site.name,
        "kiln_name": site.kiln,
        "reference": ref,
        "temperature_c": latest.get(ref) if ref else None,
        "segment": None if seg is None else int(seg),
        "divergence_k": max(divs) if divs else None,
        "remaining_s": latest.get("plan.remaining"),
    }


def batch_messages(url: BrokerURL, kiln: str, batch, engine, first_sample_id: int, site=None) -> list[tuple[str, bytes, int, bool]]:
    """The readings and state messages for one batch (alarm transitions are sent as they happen)."""
    if not batch.samples:
        return []
    times = batch.times
    values = {name: [_clean(v) for v in arr.tolist()] for name, arr in batch.values.items()}
    readings = {
        "v": TOPIC_VERSION,
        "kiln": kiln,
        "samples": [first_sample_id, first_sample_id + len(times) - 1],
        "t": [round(float(t), 3) for t in times],
        "values": values,
    }
    latest = {name: arr[-1] for name, arr in values.items()}
    state = {
        "v": TOPIC_VERSION,
        "kiln": kiln,
        "t": round(float(times[-1]), 3),
        "values": latest,
        "summary": summary(site, latest) if site is not None else {},
        "alarms": [
            {"id": a.id, "kind": a.kind, "channel": a.channel_name, "cause": a.cause, "priority": a.priority, "state": a.state}
            for a in (engine.active if engine is not None else [])
        ],
    }
    return [
        (topic(url, kiln, "readings"), json.dumps(readings, separators=(",", ":")).encode(), 1, False),
        (topic(url, kiln, "state"), json.dumps(state, separators=(",", ":")).encode(), 1, True),
    ]


def alarm_message(url: BrokerURL, kiln: str, tr) -> tuple[str, bytes, int, bool]:
    a = tr.alarm
    body = {"v": TOPIC_VERSION, "kiln": kiln, "id": a.id, "kind": a.kind, "channel": a.channel_name, "cause": a.cause,
            "priority": a.priority, "t": round(tr.t, 3), "state": tr.state, "detail": tr.detail, "message": a.message}
    return topic(url, kiln, "alarm"), json.dumps(body, separators=(",", ":")).encode(), 1, False


def start_client(url: BrokerURL, *, client_id: str = "", username: str = "", password_env: str = "FIREWATCH_MQTT_PASSWORD",
                 ca_file: str = "", on_connect=None, on_disconnect=None, on_message=None, on_publish=None):
    """A paho-mqtt client (VERSION2 callbacks) connecting in its own network thread, reconnecting by itself.

    The password is read from the environment variable ``password_env``; TLS for ``mqtts://``
    verifies the broker against ``ca_file`` (or the system's certificates).
    """
    try:
        import paho.mqtt.client as mqtt
    except ImportError:
        raise RuntimeError("MQTT needs paho-mqtt: pip install 'firewatch-kiln[mqtt]'") from None
    client = mqtt.Client(mqtt.CallbackAPIVersion.VERSION2, client_id=client_id)
    if username:
        client.username_pw_set(username, os.environ.get(password_env) or None)
    if url.tls:
        client.tls_set(ca_certs=ca_file or None, cert_reqs=ssl.CERT_REQUIRED)
    client.reconnect_delay_set(min_delay=1, max_delay=10)
    for name, fn in (("on_connect", on_connect), ("on_disconnect", on_disconnect), ("on_message", on_message), ("on_publish", on_publish)):
        if fn is not None:
            setattr(client, name, fn)
    client.connect_async(url.host, url.port, keepalive=30)
    client.loop_start()
    return client


def _drain(q: queue.Queue) -> list:
    """Everything queued so far, without waiting."""
    out = []
    while True:
        try:
            out.append(q.get_nowait())
        except queue.Empty:
            return out


class Publisher:
    """A paho-mqtt client in its own thread: sends what it is handed, in order, one in flight at a time.

    ``hand(rows)`` gives it outbox rows ``(id, topic, payload, qos, retain)``;
    ``acked()`` returns the ids the broker has acknowledged since the last call;
    ``actions()`` the action requests that arrived on ``PREFIX/KILN/action``.
    paho reconnects by itself; whatever was not acknowledged is sent again.
    """

    def __init__(self, url: BrokerURL, kiln: str, site, client_id: str | None = None) -> None:
        self.url = url
        self.kiln = kiln
        self._pending: deque = deque()
        self._inflight: tuple[int, int] | None = None  # (outbox id, mid)
        self._acked: queue.Queue[int] = queue.Queue()
        self._actions: queue.Queue[tuple[str, dict]] = queue.Queue()
        self._lock = threading.Lock()
        self.connected = threading.Event()
        self.client = start_client(
            url, client_id=client_id or f"firewatch-{kiln}-{os.getpid()}", username=site.mqtt.username,
            password_env=site.mqtt.password_env, ca_file=site.mqtt.ca_file, on_connect=self._on_connect,
            on_disconnect=self._on_disconnect, on_message=self._on_message, on_publish=self._on_publish,
        )

    # -- paho callbacks (its network thread) ------------------------------------------
    def _on_connect(self, client, userdata, flags, reason_code, properties) -> None:
        if reason_code.is_failure:
            return
        self.connected.set()
        client.subscribe(topic(self.url, self.kiln, "action"), qos=1)
        with self._lock:
            self._inflight = None  # whatever was in flight is sent again
        self._pump()

    def _on_disconnect(self, client, userdata, flags, reason_code, properties) -> None:
        self.connected.clear()
        with self._lock:
            self._inflight = None

    def _on_publish(self, client, userdata, mid, reason_code, properties) -> None:
        with self._lock:
            if self._inflight is not None and self._inflight[1] == mid:
                done = self._inflight[0]
                self._inflight = None
                if self._pending and self._pending[0][0] == done:
                    self._pending.popleft()
                self._acked.put(done)
        self._pump()

    def _on_message(self, client, userdata, msg) -> None:
        try:
            body = json.loads(msg.payload)
        except (ValueError, UnicodeDecodeError):
            body = {"invalid": msg.payload[:200].decode(errors="replace")}
        self._actions.put((msg.topic, body if isinstance(body, dict) else {"invalid": str(body)[:200]}))

    def _pump(self) -> None:
        with self._lock:
            if self._inflight is not None or not self._pending or not self.connected.is_set():
                return
            row = self._pending[0]
            info = self.client.publish(row[1], row[2], qos=row[3], retain=bool(row[4]))
            if info.rc == 0:
                self._inflight = (row[0], info.mid)

    # -- the recorder's side -------------------------------------------------------------
    def hand(self, rows: list[tuple]) -> None:
        with self._lock:
            self._pending.extend(rows)
        self._pump()

    @property
    def backlog(self) -> int:
        return len(self._pending)

    def acked(self) -> list[int]:
        return _drain(self._acked)

    def actions(self) -> list[tuple[str, dict]]:
        return _drain(self._actions)

    def close(self, timeout: float = 3.0) -> None:
        deadline = time.monotonic() + timeout
        while self._pending and self.connected.is_set() and time.monotonic() < deadline:
            time.sleep(0.05)
        self.client.loop_stop()
        try:
            self.client.disconnect()
        except Exception:  # already gone; nothing to flush
            pass
