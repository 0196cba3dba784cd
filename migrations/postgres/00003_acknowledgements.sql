-- Owners acknowledge and snooze alerts: who, when, until when, why, and
-- at which severity. An acknowledged alert is not notified again until it
-- escalates past that severity or the snooze ends; ack_ended_at records
-- that the end of the snooze was noticed (and notified while still open).
-- Times are unix microseconds (UTC), wall clock.

-- +goose Up
ALTER TABLE plumb_alerts
    ADD COLUMN ack_by       TEXT,
    ADD COLUMN ack_at       BIGINT,
    ADD COLUMN ack_until    BIGINT,
    ADD COLUMN ack_note     TEXT,
    ADD COLUMN ack_severity TEXT CHECK (ack_severity IN ('warning', 'critical')),
    ADD COLUMN ack_ended_at BIGINT;

-- The outbox learns the event 'snooze_ended'.
ALTER TABLE plumb_outbox DROP CONSTRAINT plumb_outbox_event_check;
ALTER TABLE plumb_outbox ADD CONSTRAINT plumb_outbox_event_check
    CHECK (event IN ('opened', 'escalated', 'resolved', 'snooze_ended'));

-- +goose Down
DELETE FROM plumb_outbox WHERE event = 'snooze_ended';
ALTER TABLE plumb_outbox DROP CONSTRAINT plumb_outbox_event_check;
ALTER TABLE plumb_outbox ADD CONSTRAINT plumb_outbox_event_check
    CHECK (event IN ('opened', 'escalated', 'resolved'));
ALTER TABLE plumb_alerts
    DROP COLUMN ack_ended_at,
    DROP COLUMN ack_severity,
    DROP COLUMN ack_note,
    DROP COLUMN ack_until,
    DROP COLUMN ack_at,
    DROP COLUMN ack_by;
