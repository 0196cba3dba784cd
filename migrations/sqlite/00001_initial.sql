-- plumb state store, SQLite variant. Times are unix microseconds (UTC).

-- +goose Up
CREATE TABLE plumb_runs (
    id              INTEGER PRIMARY KEY AUTOINCREMENT,
    watch           TEXT    NOT NULL,
    kind            TEXT    NOT NULL CHECK (kind IN ('live', 'check', 'backfill')),
    status          TEXT    NOT NULL CHECK (status IN ('ok', 'failed')),
    started_at      INTEGER NOT NULL,
    finished_at     INTEGER NOT NULL,
    duration_ms     INTEGER NOT NULL,
    rows_read       INTEGER NOT NULL DEFAULT 0,
    rows_dropped    INTEGER NOT NULL DEFAULT 0,
    buckets_scanned INTEGER NOT NULL DEFAULT 0,
    points          INTEGER NOT NULL DEFAULT 0,
    as_of           INTEGER,
    error           TEXT
) STRICT;
CREATE INDEX plumb_runs_watch ON plumb_runs (watch, id);

-- One point of a watch's history: the diagnostics of the window ending at
-- "at" (or of the whole table at run time, without buckets), overall
-- (segment '') or for one segment. Later runs revise a point in place.
CREATE TABLE plumb_points (
    watch              TEXT    NOT NULL,
    segment            TEXT    NOT NULL DEFAULT '',
    at                 INTEGER NOT NULL,
    run_id             INTEGER NOT NULL REFERENCES plumb_runs (id),
    rows_used          INTEGER NOT NULL,
    rows_dropped       INTEGER NOT NULL,
    condition_number   REAL,
    centered_condition REAL,
    max_vif            REAL,
    max_vif_column     TEXT,
    rank               INTEGER NOT NULL,
    columns            INTEGER NOT NULL,
    report             TEXT,
    PRIMARY KEY (watch, segment, at)
) STRICT;

CREATE TABLE plumb_point_columns (
    watch        TEXT    NOT NULL,
    segment      TEXT    NOT NULL DEFAULT '',
    at           INTEGER NOT NULL,
    name         TEXT    NOT NULL,
    vif          REAL,
    tolerance    REAL,
    r2           REAL,
    se_inflation REAL,
    constant     INTEGER NOT NULL DEFAULT 0,
    mean         REAL,
    sd           REAL,
    PRIMARY KEY (watch, segment, at, name)
) STRICT;

-- One accumulator per watch, segment and time bucket (stream encoding).
CREATE TABLE plumb_buckets (
    watch        TEXT    NOT NULL,
    segment      TEXT    NOT NULL DEFAULT '',
    bucket_start INTEGER NOT NULL,
    columns      TEXT    NOT NULL,
    rows         INTEGER NOT NULL,
    moments      BLOB    NOT NULL,
    qr           BLOB,
    run_id       INTEGER NOT NULL REFERENCES plumb_runs (id),
    PRIMARY KEY (watch, segment, bucket_start)
) STRICT;

-- Alerts: opened once, updated in place, resolved. notify_state says
-- whether the opening still has to be delivered.
CREATE TABLE plumb_alerts (
    id             TEXT    PRIMARY KEY,
    watch          TEXT    NOT NULL,
    segment        TEXT    NOT NULL DEFAULT '',
    rule           TEXT    NOT NULL CHECK (rule IN ('level', 'trend', 'exact', 'constant', 'jump', 'blind')),
    subject        TEXT    NOT NULL,
    severity       TEXT    NOT NULL CHECK (severity IN ('warning', 'critical')),
    as_of          INTEGER NOT NULL,
    opened_at      INTEGER NOT NULL,
    updated_as_of  INTEGER NOT NULL,
    updated_at     INTEGER NOT NULL,
    resolved_as_of INTEGER,
    resolved_at    INTEGER,
    message        TEXT    NOT NULL,
    detail         TEXT    NOT NULL,
    notify_state   TEXT    NOT NULL CHECK (notify_state IN ('pending', 'sent', 'suppressed'))
) STRICT;
CREATE INDEX plumb_alerts_watch ON plumb_alerts (watch, resolved_at);
CREATE INDEX plumb_alerts_as_of ON plumb_alerts (as_of);

-- Deliveries waiting for, or done by, a notifier.
CREATE TABLE plumb_outbox (
    id              INTEGER PRIMARY KEY AUTOINCREMENT,
    event_id        TEXT    NOT NULL UNIQUE,
    alert_id        TEXT    NOT NULL REFERENCES plumb_alerts (id) ON DELETE CASCADE,
    notifier        TEXT    NOT NULL,
    event           TEXT    NOT NULL CHECK (event IN ('opened', 'escalated', 'resolved')),
    body            TEXT    NOT NULL,
    created_at      INTEGER NOT NULL,
    attempts        INTEGER NOT NULL DEFAULT 0,
    next_attempt_at INTEGER NOT NULL,
    last_error      TEXT,
    delivered_at    INTEGER,
    given_up_at     INTEGER
) STRICT;
CREATE INDEX plumb_outbox_due ON plumb_outbox (next_attempt_at) WHERE delivered_at IS NULL AND given_up_at IS NULL;

-- Rule state per watch and segment: how far alerts have been evaluated,
-- hysteresis counters, consecutive failures.
CREATE TABLE plumb_watch_state (
    watch             TEXT    NOT NULL,
    segment           TEXT    NOT NULL DEFAULT '',
    evaluated_through INTEGER,
    state             TEXT    NOT NULL,
    failures          INTEGER NOT NULL DEFAULT 0,
    last_run_at       INTEGER,
    PRIMARY KEY (watch, segment)
) STRICT;

-- Who holds the store (the lock itself is a file lock beside the store).
CREATE TABLE plumb_lock (
    id           INTEGER PRIMARY KEY CHECK (id = 1),
    holder       TEXT    NOT NULL,
    pid          INTEGER NOT NULL,
    host         TEXT    NOT NULL,
    acquired_at  INTEGER NOT NULL,
    heartbeat_at INTEGER NOT NULL
) STRICT;

-- +goose Down
DROP TABLE plumb_lock;
DROP TABLE plumb_watch_state;
DROP TABLE plumb_outbox;
DROP TABLE plumb_alerts;
DROP TABLE plumb_buckets;
DROP TABLE plumb_point_columns;
DROP TABLE plumb_points;
DROP TABLE plumb_runs;
