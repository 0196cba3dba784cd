-- plumb state store, PostgreSQL variant. Times are unix microseconds (UTC).

-- +goose Up
CREATE TABLE plumb_runs (
    id              BIGINT GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
    watch           TEXT    NOT NULL,
    kind            TEXT    NOT NULL CHECK (kind IN ('live', 'check', 'backfill')),
    status          TEXT    NOT NULL CHECK (status IN ('ok', 'failed')),
    started_at      BIGINT NOT NULL,
    finished_at     BIGINT NOT NULL,
    duration_ms     BIGINT NOT NULL,
    rows_read       BIGINT NOT NULL DEFAULT 0,
    rows_dropped    BIGINT NOT NULL DEFAULT 0,
    buckets_scanned BIGINT NOT NULL DEFAULT 0,
    points          BIGINT NOT NULL DEFAULT 0,
    as_of           BIGINT,
    error           TEXT
);
CREATE INDEX plumb_runs_watch ON plumb_runs (watch, id);

-- One point of a watch's history: the diagnostics of the window ending at
-- "at" (or of the whole table at run time, without buckets), overall
-- (segment '') or for one segment. Later runs revise a point in place.
CREATE TABLE plumb_points (
    watch              TEXT    NOT NULL,
    segment            TEXT    NOT NULL DEFAULT '',
    at                 BIGINT NOT NULL,
    run_id             BIGINT NOT NULL REFERENCES plumb_runs (id),
    rows_used          BIGINT NOT NULL,
    rows_dropped       BIGINT NOT NULL,
    condition_number   DOUBLE PRECISION,
    centered_condition DOUBLE PRECISION,
    max_vif            DOUBLE PRECISION,
    max_vif_column     TEXT,
    rank               BIGINT NOT NULL,
    columns            BIGINT NOT NULL,
    report             TEXT,
    PRIMARY KEY (watch, segment, at)
);

CREATE TABLE plumb_point_columns (
    watch        TEXT    NOT NULL,
    segment      TEXT    NOT NULL DEFAULT '',
    at           BIGINT NOT NULL,
    name         TEXT    NOT NULL,
    vif          DOUBLE PRECISION,
    tolerance    DOUBLE PRECISION,
    r2           DOUBLE PRECISION,
    se_inflation DOUBLE PRECISION,
    constant     BOOLEAN NOT NULL DEFAULT FALSE,
    mean         DOUBLE PRECISION,
    sd           DOUBLE PRECISION,
    PRIMARY KEY (watch, segment, at, name)
);

-- One accumulator per watch, segment and time bucket (stream encoding).
CREATE TABLE plumb_buckets (
    watch        TEXT    NOT NULL,
    segment      TEXT    NOT NULL DEFAULT '',
    bucket_start BIGINT NOT NULL,
    columns      TEXT    NOT NULL,
    rows         BIGINT NOT NULL,
    moments      BYTEA   NOT NULL,
    qr           BYTEA,
    run_id       BIGINT NOT NULL REFERENCES plumb_runs (id),
    PRIMARY KEY (watch, segment, bucket_start)
);

-- Alerts: opened once, updated in place, resolved. notify_state says
-- whether the opening still has to be delivered.
CREATE TABLE plumb_alerts (
    id             TEXT    PRIMARY KEY,
    watch          TEXT    NOT NULL,
    segment        TEXT    NOT NULL DEFAULT '',
    rule           TEXT    NOT NULL CHECK (rule IN ('level', 'trend', 'exact', 'constant', 'jump', 'blind')),
    subject        TEXT    NOT NULL,
    severity       TEXT    NOT NULL CHECK (severity IN ('warning', 'critical')),
    as_of          BIGINT NOT NULL,
    opened_at      BIGINT NOT NULL,
    updated_as_of  BIGINT NOT NULL,
    updated_at     BIGINT NOT NULL,
    resolved_as_of BIGINT,
    resolved_at    BIGINT,
    message        TEXT    NOT NULL,
    detail         TEXT    NOT NULL,
    notify_state   TEXT    NOT NULL CHECK (notify_state IN ('pending', 'sent', 'suppressed'))
);
CREATE INDEX plumb_alerts_watch ON plumb_alerts (watch, resolved_at);
CREATE INDEX plumb_alerts_as_of ON plumb_alerts (as_of);

-- Deliveries waiting for, or done by, a notifier.
CREATE TABLE plumb_outbox (
    id              BIGINT GENERATED ALWAYS AS IDENTITY PRIMARY KEY,
    event_id        TEXT    NOT NULL UNIQUE,
    alert_id        TEXT    NOT NULL REFERENCES plumb_alerts (id) ON DELETE CASCADE,
    notifier        TEXT    NOT NULL,
    event           TEXT    NOT NULL CHECK (event IN ('opened', 'escalated', 'resolved')),
    body            TEXT    NOT NULL,
    created_at      BIGINT NOT NULL,
    attempts        BIGINT NOT NULL DEFAULT 0,
    next_attempt_at BIGINT NOT NULL,
    last_error      TEXT,
    delivered_at    BIGINT,
    given_up_at     BIGINT
);
CREATE INDEX plumb_outbox_due ON plumb_outbox (next_attempt_at) WHERE delivered_at IS NULL AND given_up_at IS NULL;

-- Rule state per watch and segment: how far alerts have been evaluated,
-- hysteresis counters, consecutive failures.
CREATE TABLE plumb_watch_state (
    watch             TEXT    NOT NULL,
    segment           TEXT    NOT NULL DEFAULT '',
    evaluated_through BIGINT,
    state             TEXT    NOT NULL,
    failures          BIGINT NOT NULL DEFAULT 0,
    last_run_at       BIGINT,
    PRIMARY KEY (watch, segment)
);

-- Who holds the store (the lock itself is a session advisory lock).
CREATE TABLE plumb_lock (
    id           INTEGER PRIMARY KEY CHECK (id = 1),
    holder       TEXT    NOT NULL,
    pid          BIGINT NOT NULL,
    host         TEXT    NOT NULL,
    acquired_at  BIGINT NOT NULL,
    heartbeat_at BIGINT NOT NULL
);

-- +goose Down
DROP TABLE plumb_lock;
DROP TABLE plumb_watch_state;
DROP TABLE plumb_outbox;
DROP TABLE plumb_alerts;
DROP TABLE plumb_buckets;
DROP TABLE plumb_point_columns;
DROP TABLE plumb_points;
DROP TABLE plumb_runs;
