-- The firing log's schema (version 3, the compact layout); documented in docs/log-format.md.
CREATE TABLE meta(key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE firing(
    id INTEGER PRIMARY KEY CHECK (id = 1),
    created_utc REAL NOT NULL,
    started_t REAL,
    ended_t REAL,
    site_name TEXT,
    kiln TEXT,
    site_profile TEXT,
    schedule_name TEXT,
    schedule TEXT,
    clock TEXT NOT NULL
);
CREATE TABLE session(
    id INTEGER PRIMARY KEY,
    started_utc REAL NOT NULL,
    ended_utc REAL,
    end_reason TEXT,
    heartbeat_utc REAL,
    port TEXT,
    pid INTEGER,
    host TEXT,
    firewatch_version TEXT,
    sqlite_version TEXT,
    site_profile TEXT,
    schedule TEXT,
    last_received_utc REAL,
    last_device_time REAL
);
CREATE TABLE channel(
    id INTEGER PRIMARY KEY,
    name TEXT NOT NULL UNIQUE,
    kind TEXT NOT NULL,
    unit TEXT NOT NULL,
    source TEXT,
    description TEXT,
    first_sample INTEGER
);
CREATE TABLE raw_line(
    id INTEGER PRIMARY KEY,
    session_id INTEGER NOT NULL,
    received_utc REAL NOT NULL,
    line BLOB NOT NULL,
    ok INTEGER NOT NULL,
    reason TEXT
);
CREATE TABLE raw_block(
    id INTEGER PRIMARY KEY,
    last_id INTEGER NOT NULL,
    session_id INTEGER NOT NULL,
    n INTEGER NOT NULL,
    bad INTEGER NOT NULL,
    received BLOB NOT NULL,
    ok BLOB NOT NULL,
    lengths BLOB NOT NULL,
    size INTEGER NOT NULL,
    lines BLOB NOT NULL,
    reasons TEXT
);
CREATE TABLE sample(
    id INTEGER PRIMARY KEY,
    session_id INTEGER NOT NULL,
    t REAL NOT NULL
);
CREATE TABLE flag(
    channel_id INTEGER NOT NULL,
    first_id INTEGER NOT NULL,
    last_id INTEGER NOT NULL,
    status INTEGER NOT NULL,
    PRIMARY KEY (channel_id, first_id)
) WITHOUT ROWID;
CREATE TABLE step(
    sample_id INTEGER PRIMARY KEY
);
CREATE TABLE latest(
    channel_id INTEGER PRIMARY KEY,
    sample_id INTEGER NOT NULL,
    t REAL NOT NULL,
    value REAL,
    status INTEGER NOT NULL
);
CREATE TABLE event(
    id INTEGER PRIMARY KEY,
    t REAL NOT NULL,
    kind TEXT NOT NULL,
    channel TEXT,
    detail TEXT
);
CREATE INDEX event_t ON event(t);
CREATE TABLE gap(
    id INTEGER PRIMARY KEY,
    start_t REAL NOT NULL,
    end_t REAL NOT NULL,
    reason TEXT NOT NULL
);
CREATE TABLE alarm(
    id INTEGER PRIMARY KEY,
    kind TEXT NOT NULL,
    channel TEXT,
    cause TEXT,
    priority TEXT NOT NULL,
    raised_t REAL NOT NULL,
    cleared_t REAL,
    state TEXT NOT NULL,
    message TEXT,
    evidence TEXT
);
CREATE TABLE alarm_state(
    id INTEGER PRIMARY KEY,
    alarm_id INTEGER NOT NULL,
    t REAL NOT NULL,
    state TEXT NOT NULL,
    detail TEXT
);
CREATE INDEX alarm_state_alarm ON alarm_state(alarm_id);
CREATE TABLE trend_minute(
    minute INTEGER NOT NULL,
    channel_id INTEGER NOT NULL,
    lo REAL NOT NULL,
    hi REAL NOT NULL,
    n INTEGER NOT NULL,
    PRIMARY KEY (minute, channel_id)
) WITHOUT ROWID;
