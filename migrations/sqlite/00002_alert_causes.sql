-- Alerts name their cause: its onset in data time, the columns involved,
-- the drivers of a VIF and the window judged; the rule "broken" joins the
-- rules. SQLite cannot change a CHECK in place: the table is rebuilt, and
-- the outbox (whose rows the rebuild would cascade away) is kept aside.

-- +goose Up
CREATE TEMP TABLE plumb_outbox_keep AS SELECT * FROM plumb_outbox;

CREATE TABLE plumb_alerts_new (
    id             TEXT    PRIMARY KEY,
    watch          TEXT    NOT NULL,
    segment        TEXT    NOT NULL DEFAULT '',
    rule           TEXT    NOT NULL CHECK (rule IN ('level', 'trend', 'exact', 'constant', 'jump', 'blind', 'broken')),
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
    notify_state   TEXT    NOT NULL CHECK (notify_state IN ('pending', 'sent', 'suppressed')),
    onset          INTEGER,
    columns        TEXT    NOT NULL DEFAULT '[]',
    drivers        TEXT,
    data_window    TEXT
) STRICT;
INSERT INTO plumb_alerts_new (id, watch, segment, rule, subject, severity, as_of, opened_at, updated_as_of,
    updated_at, resolved_as_of, resolved_at, message, detail, notify_state, onset)
SELECT id, watch, segment, rule, subject, severity, as_of, opened_at, updated_as_of,
    updated_at, resolved_as_of, resolved_at, message, detail, notify_state, as_of
FROM plumb_alerts;
DROP TABLE plumb_alerts;
ALTER TABLE plumb_alerts_new RENAME TO plumb_alerts;
CREATE INDEX plumb_alerts_watch ON plumb_alerts (watch, resolved_at);
CREATE INDEX plumb_alerts_as_of ON plumb_alerts (as_of);

DELETE FROM plumb_outbox;
INSERT INTO plumb_outbox SELECT * FROM plumb_outbox_keep;
DROP TABLE plumb_outbox_keep;

-- +goose Down
CREATE TEMP TABLE plumb_outbox_keep AS SELECT * FROM plumb_outbox;
CREATE TABLE plumb_alerts_old (
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
INSERT INTO plumb_alerts_old SELECT id, watch, segment, rule, subject, severity, as_of, opened_at, updated_as_of,
    updated_at, resolved_as_of, resolved_at, message, detail, notify_state FROM plumb_alerts WHERE rule <> 'broken';
DROP TABLE plumb_alerts;
ALTER TABLE plumb_alerts_old RENAME TO plumb_alerts;
CREATE INDEX plumb_alerts_watch ON plumb_alerts (watch, resolved_at);
CREATE INDEX plumb_alerts_as_of ON plumb_alerts (as_of);
DELETE FROM plumb_outbox;
INSERT INTO plumb_outbox SELECT * FROM plumb_outbox_keep WHERE alert_id IN (SELECT id FROM plumb_alerts);
DROP TABLE plumb_outbox_keep;
