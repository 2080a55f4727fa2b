"""The MQTT outbox inside the firing log: messages written with the readings, marked when the broker has them.

Store and forward: the recorder writes each message into ``mqtt_outbox`` inside
the same transaction as the readings it describes, so a message exists exactly
when its data does; a publisher thread sends them in order and the recorder
(the log's only writer) marks what the broker acknowledged. The queries live
here, beside the rest of the log's SQL; the publishing lives in
:mod:`firewatch.services.mqtt`.
"""

from __future__ import annotations

import sqlite3
from collections.abc import Iterable

from firewatch.store.writer import LogWriter

__all__ = ["OUTBOX_SCHEMA", "Outbox"]

OUTBOX_SCHEMA = """
CREATE TABLE IF NOT EXISTS mqtt_outbox(
    id INTEGER PRIMARY KEY,
    topic TEXT NOT NULL,
    payload BLOB NOT NULL,
    qos INTEGER NOT NULL,
    retain INTEGER NOT NULL,
    created_t REAL NOT NULL,
    sent_utc REAL
);
CREATE INDEX IF NOT EXISTS mqtt_outbox_unsent ON mqtt_outbox(sent_utc, id);
"""
"""Created on first use by a recorder that publishes; a log that never published has no outbox."""


class Outbox:
    """The outbox queries, run through the log's one writing connection."""

    def __init__(self, writer: LogWriter) -> None:
        self.writer = writer
        for statement in OUTBOX_SCHEMA.split(";"):
            if statement.strip():
                writer.execute(statement)
        try:
            self._next = int(writer.query("SELECT coalesce(max(id), 0) + 1 FROM mqtt_outbox").fetchone()[0])
        except sqlite3.OperationalError:  # the table is still held in memory: the log could not be written
            self._next = 1

    def enqueue(self, messages: Iterable[tuple[str, bytes, int, bool]], t: float) -> None:
        """Add ``(topic, payload, qos, retain)`` messages inside the open transaction."""
        rows = [(topic, payload, qos, int(retain), t) for topic, payload, qos, retain in messages]
        first, self._next = self._next, self._next + len(rows)
        # numbered here, so that the ids handed to the publisher stay theirs if the log cannot be written for a
        # while; bulk: past the bound on held writes these are dropped with the readings they describe
        self.writer.executemany(
            "INSERT INTO mqtt_outbox(id, topic, payload, qos, retain, created_t) VALUES (?, ?, ?, ?, ?, ?)",
            [(first + i, *row) for i, row in enumerate(rows)],
            bulk=True,
        )

    def mark_sent(self, ids: Iterable[int], stamp: float) -> None:
        self.writer.executemany("UPDATE mqtt_outbox SET sent_utc = ? WHERE id = ?", [(stamp, i) for i in ids])

    def unsent_after(self, last_id: int, limit: int = 20000) -> list[tuple[int, str, bytes, int, int]]:
        """Unsent messages after ``last_id`` in order: ``(id, topic, payload, qos, retain)``."""
        return self.writer.query(
            "SELECT id, topic, payload, qos, retain FROM mqtt_outbox WHERE sent_utc IS NULL AND id > ? ORDER BY id LIMIT ?",
            (last_id, limit),
        ).fetchall()
