-- Owners acknowledge and snooze alerts: who, when, until when, why, and
-- at which severity. An acknowledged alert is not notified again until it
-- escalates past that severity or the snooze ends; ack_ended_at records
-- that the end of the snooze was noticed (and notified while still open).
-- Times are unix microseconds (UTC), wall clock.

-- +goose Up
ALTER TABLE plumb_alerts ADD COLUMN ack_by TEXT;
ALTER TABLE plumb_alerts ADD COLUMN ack_at INTEGER;
ALTER TABLE plumb_alerts ADD COLUMN ack_until INTEGER;
ALTER TABLE plumb_alerts ADD COLUMN ack_note TEXT;
ALTER TABLE plumb_alerts ADD COLUMN ack_severity TEXT CHECK (ack_severity IN ('warning', 'critical'));
ALTER TABLE plumb_alerts ADD COLUMN ack_ended_at INTEGER;

-- The outbox learns the event 'snooze_ended'. SQLite cannot change a
-- CHECK in place: the table is rebuilt (nothing refers to it).
CREATE TABLE plumb_outbox_v3 (
    id              INTEGER PRIMARY KEY AUTOINCREMENT,
    event_id        TEXT    NOT NULL UNIQUE,
    alert_id        TEXT    NOT NULL REFERENCES plumb_alerts (id) ON DELETE CASCADE,
    notifier        TEXT    NOT NULL,
    event           TEXT    NOT NULL CHECK (event IN ('opened', 'escalated', 'resolved', 'snooze_ended')),
    body            TEXT    NOT NULL,
    created_at      INTEGER NOT NULL,
    attempts        INTEGER NOT NULL DEFAULT 0,
    next_attempt_at INTEGER NOT NULL,
    last_error      TEXT,
    delivered_at    INTEGER,
    given_up_at     INTEGER
) STRICT;
INSERT INTO plumb_outbox_v3 (id, event_id, alert_id, notifier, event, body, created_at, attempts, next_attempt_at,
    last_error, delivered_at, given_up_at)
SELECT id, event_id, alert_id, notifier, event, body, created_at, attempts, next_attempt_at,
    last_error, delivered_at, given_up_at FROM plumb_outbox;
DROP TABLE plumb_outbox;
ALTER TABLE plumb_outbox_v3 RENAME TO plumb_outbox;
CREATE INDEX plumb_outbox_due ON plumb_outbox (next_attempt_at) WHERE delivered_at IS NULL AND given_up_at IS NULL;

-- +goose Down
DELETE FROM plumb_outbox WHERE event = 'snooze_ended';
CREATE TABLE plumb_outbox_v2 (
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
INSERT INTO plumb_outbox_v2 (id, event_id, alert_id, notifier, event, body, created_at, attempts, next_attempt_at,
    last_error, delivered_at, given_up_at)
SELECT id, event_id, alert_id, notifier, event, body, created_at, attempts, next_attempt_at,
    last_error, delivered_at, given_up_at FROM plumb_outbox;
DROP TABLE plumb_outbox;
ALTER TABLE plumb_outbox_v2 RENAME TO plumb_outbox;
CREATE INDEX plumb_outbox_due ON plumb_outbox (next_attempt_at) WHERE delivered_at IS NULL AND given_up_at IS NULL;
ALTER TABLE plumb_alerts DROP COLUMN ack_ended_at;
ALTER TABLE plumb_alerts DROP COLUMN ack_severity;
ALTER TABLE plumb_alerts DROP COLUMN ack_note;
ALTER TABLE plumb_alerts DROP COLUMN ack_until;
ALTER TABLE plumb_alerts DROP COLUMN ack_at;
ALTER TABLE plumb_alerts DROP COLUMN ack_by;
