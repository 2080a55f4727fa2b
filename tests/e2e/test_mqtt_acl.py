"""The broker configuration in docs/mqtt.md, run for real (issue 10, item 4).

Mosquitto is started on 127.0.0.1 with the two files exactly as the document shows them (only
the paths, the port and the certificates are this test's), behind TLS with a CA made here by
openssl. Then: anonymous clients and wrong passwords are refused; a real recorder logged in as
``kiln3-recorder`` publishes its kiln's topics, which a viewer reads; an action published by a
user not named for actions never reaches the recorder, while the named user's does.

Non-delivery is shown without waiting on a clock: the broker handles one message at a time, so
once the unnamed user's publish has been acknowledged, anything it was going to deliver is queued
to the recorder ahead of the named user's later action; when that one is in the log, the first
would have been too.
"""

from __future__ import annotations

import os
import pwd
import re
import shutil
import ssl
import subprocess
import sys
import threading
from pathlib import Path

import pytest

from firewatch.settings.profile import profiles_dir
from firewatch.store.reader import LogReader
from tests.e2e.helpers import ROOT, env, free_port, start_sim_tcp, stop, wait_for

MOSQUITTO = shutil.which("mosquitto") or ("/usr/sbin/mosquitto" if Path("/usr/sbin/mosquitto").exists() else None)
PASSWD = shutil.which("mosquitto_passwd")
OPENSSL = shutil.which("openssl")
pytestmark = [
    pytest.mark.skipif(MOSQUITTO is None or PASSWD is None, reason="mosquitto (with mosquitto_passwd) is installed by .ci/run"),
    pytest.mark.skipif(OPENSSL is None, reason="openssl makes the test's certificates"),
]

PASSWORDS = {"kiln3-recorder": "rec-secret-1", "plant-viewer": "view-secret-2", "shift-lead": "lead-secret-3"}


def doc_block(first_line: str) -> str:
    """The fenced block of docs/mqtt.md that starts with ``first_line``."""
    text = (ROOT / "docs" / "mqtt.md").read_text(encoding="utf-8")
    for block in re.findall(r"```[^\n]*\n(.*?)```", text, flags=re.S):
        if block.startswith(first_line + "\n"):
            return block
    raise AssertionError(f"docs/mqtt.md has no block starting {first_line!r}")


def certificates(where: Path) -> None:
    """A CA and a broker certificate for 127.0.0.1 signed by it (openssl req(1), x509(1))."""
    def ossl(*args: str) -> None:
        subprocess.run([OPENSSL, *args], cwd=where, check=True, capture_output=True, timeout=60)

    ossl("req", "-x509", "-newkey", "rsa:2048", "-nodes", "-days", "2", "-subj", "/CN=firewatch test CA",
         "-keyout", "ca.key", "-out", "ca.crt", "-addext", "basicConstraints=critical,CA:TRUE", "-addext", "keyUsage=keyCertSign")
    ossl("req", "-newkey", "rsa:2048", "-nodes", "-subj", "/CN=127.0.0.1", "-keyout", "broker.key", "-out", "broker.csr")
    (where / "san.ext").write_text("subjectAltName=IP:127.0.0.1\n")
    ossl("x509", "-req", "-in", "broker.csr", "-CA", "ca.crt", "-CAkey", "ca.key", "-CAcreateserial", "-days", "2",
         "-extfile", "san.ext", "-out", "broker.crt")


@pytest.fixture
def broker(tmp_path: Path):
    """Mosquitto with the document's configuration; yields (port, CA file)."""
    certificates(tmp_path)
    passwd = tmp_path / "firewatch.passwd"
    for i, (user, password) in enumerate(PASSWORDS.items()):
        subprocess.run([PASSWD, "-b", *(["-c"] if i == 0 else []), str(passwd), user, password], check=True, timeout=30)
    acl = tmp_path / "firewatch.acl"
    acl.write_text(doc_block("# /etc/mosquitto/firewatch.acl"))
    port = free_port()
    conf = doc_block("# /etc/mosquitto/conf.d/firewatch.conf")
    for doc_path, ours in (("/etc/mosquitto/firewatch.passwd", passwd), ("/etc/mosquitto/firewatch.acl", acl),
                           ("/etc/mosquitto/certs/broker.crt", tmp_path / "broker.crt"),
                           ("/etc/mosquitto/certs/broker.key", tmp_path / "broker.key")):
        assert doc_path in conf
        conf = conf.replace(doc_path, str(ours))
    assert "\nlistener 8883\n" in conf
    conf = conf.replace("\nlistener 8883\n", f"\nlistener {port} 127.0.0.1\n")
    # the test's own additions: keep nothing, log where the test reads it, and stay the user running
    # the tests (started as root, Mosquitto would become 'mosquitto', who cannot read this test's files)
    conf += f"persistence false\nlog_dest stderr\nuser {pwd.getpwuid(os.geteuid()).pw_name}\n"
    (tmp_path / "mosquitto.conf").write_text(conf)
    log = open(tmp_path / "mosquitto.log", "w")
    proc = subprocess.Popen([MOSQUITTO, "-c", str(tmp_path / "mosquitto.conf")], stdout=log, stderr=log)
    try:
        wait_for(lambda: "Opening ipv4 listen socket" in (tmp_path / "mosquitto.log").read_text() or proc.poll() is not None, timeout=10)
        assert proc.poll() is None, (tmp_path / "mosquitto.log").read_text()
        yield port, tmp_path / "ca.crt"
    finally:
        proc.terminate()
        proc.wait(10)
        log.close()


class Client:
    """A paho-mqtt client over TLS that records its connection result, acknowledgements and messages."""

    def __init__(self, port: int, ca: Path, user: str | None, password: str | None, subscribe: str | None = None) -> None:
        import paho.mqtt.client as mqtt

        self.connected = threading.Event()
        self.refused: str | None = None
        self.messages: list[tuple[str, bytes]] = []
        self.lock = threading.Lock()
        self.client = mqtt.Client(mqtt.CallbackAPIVersion.VERSION2, protocol=mqtt.MQTTv5)
        if user is not None:
            self.client.username_pw_set(user, password)
        self.client.tls_set(ca_certs=str(ca), cert_reqs=ssl.CERT_REQUIRED)
        self.pubacks: dict[int, object] = {}

        def on_connect(client, userdata, flags, reason_code, properties) -> None:
            if reason_code.is_failure:
                self.refused = str(reason_code)
            elif subscribe:
                client.subscribe(subscribe, qos=1)
            else:
                self.connected.set()

        def on_subscribe(client, userdata, mid, reason_codes, properties) -> None:
            self.connected.set()

        def on_message(client, userdata, msg) -> None:
            with self.lock:
                self.messages.append((msg.topic, bytes(msg.payload)))

        def on_publish(client, userdata, mid, reason_code, properties) -> None:
            self.pubacks[mid] = reason_code

        self.client.on_connect, self.client.on_subscribe = on_connect, on_subscribe
        self.client.on_message, self.client.on_publish = on_message, on_publish
        self.client.connect_async("127.0.0.1", port)
        self.client.loop_start()

    def publish(self, topic: str, payload: str):
        """Publish at QoS 1 and return the broker's acknowledgement's reason code once it came."""
        info = self.client.publish(topic, payload, qos=1)
        wait_for(lambda: info.mid in self.pubacks, timeout=10)
        return self.pubacks[info.mid]

    def close(self) -> None:
        self.client.disconnect()
        self.client.loop_stop()


def test_documented_acl_lets_only_named_clients_act(tmp_path: Path, broker) -> None:
    port, ca = broker
    # no name, or a wrong password: refused at the door
    anonymous = Client(port, ca, None, None)
    intruder = Client(port, ca, "shift-lead", "guess")
    try:
        wait_for(lambda: anonymous.refused and intruder.refused, timeout=10)
        assert "authori" in anonymous.refused.lower() or "bad user name" in anonymous.refused.lower(), anonymous.refused
    finally:
        anonymous.close()
        intruder.close()

    # a real recorder, logged in as the document's kiln3-recorder over TLS
    site = tmp_path / "site.toml"
    site.write_text((profiles_dir() / "demo-site.toml").read_text()
                    + f'\n[mqtt]\nkiln_id = "kiln3"\nusername = "kiln3-recorder"\nca_file = "{ca}"\naccept_actions = false\n')
    sim, sim_port = start_sim_tcp("--speed", "60")
    log = tmp_path / "acl.db"
    rec = subprocess.Popen(
        [sys.executable, "-m", "firewatch", "record", "--port", f"socket://127.0.0.1:{sim_port}", "--log", str(log),
         "--clock", "device", "--site", str(site), "--mqtt", f"mqtts://127.0.0.1:{port}/firewatch"],
        cwd=ROOT, env=env() | {"FIREWATCH_MQTT_PASSWORD": PASSWORDS["kiln3-recorder"]},
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True,
    )
    viewer = Client(port, ca, "plant-viewer", PASSWORDS["plant-viewer"], subscribe="firewatch/+/state")
    lead = Client(port, ca, "shift-lead", PASSWORDS["shift-lead"])
    try:
        # recorders publish their own topics and viewers read them
        wait_for(lambda: viewer.connected.is_set() and any(t == "firewatch/kiln3/state" for t, _ in viewer.messages), timeout=40)

        def action_events() -> list[str]:
            with LogReader(log) as r:
                return [e["detail"] for e in r.events(["action"])]

        wait_for(lambda: log.exists() and lead.connected.is_set(), timeout=10)
        # an action from a user not named for actions: acknowledged as "not authorized" (MQTT 5), delivered to nobody
        refused = viewer.publish("firewatch/kiln3/action", '{"action": "acknowledge", "alarm_id": 1, "source": "viewer-not-named"}')
        assert refused.is_failure and "authori" in str(refused).lower(), str(refused)
        # nor may a recorder forge actions, on its own kiln or another
        recorder_as_client = Client(port, ca, "kiln3-recorder", PASSWORDS["kiln3-recorder"])
        try:
            wait_for(recorder_as_client.connected.is_set, timeout=10)
            forged = recorder_as_client.publish("firewatch/kiln3/action", '{"action": "acknowledge", "alarm_id": 1, "source": "recorder-forged"}')
            assert forged.is_failure, str(forged)
            other = recorder_as_client.publish("firewatch/kiln4/state", '{"v": 1}')
            assert other.is_failure, str(other)
        finally:
            recorder_as_client.close()
        # the named user's action arrives, and is logged by the recorder (refused there: accept_actions is false)
        allowed = lead.publish("firewatch/kiln3/action", '{"action": "acknowledge", "alarm_id": 1, "source": "lead-named"}')
        assert not allowed.is_failure, str(allowed)
        wait_for(lambda: any("lead-named" in d for d in action_events()), timeout=20)
        details = action_events()
        assert not any("viewer-not-named" in d or "recorder-forged" in d for d in details), details
    finally:
        viewer.close()
        lead.close()
        stop(rec)
        stop(sim)
