-- Alerts name their cause: its onset in data time, the columns involved,
-- the drivers of a VIF and the window judged; the rule "broken" joins the
-- rules.

-- +goose Up
ALTER TABLE plumb_alerts DROP CONSTRAINT plumb_alerts_rule_check;
ALTER TABLE plumb_alerts ADD CONSTRAINT plumb_alerts_rule_check
    CHECK (rule IN ('level', 'trend', 'exact', 'constant', 'jump', 'blind', 'broken'));
ALTER TABLE plumb_alerts ADD COLUMN onset BIGINT;
ALTER TABLE plumb_alerts ADD COLUMN columns TEXT NOT NULL DEFAULT '[]';
ALTER TABLE plumb_alerts ADD COLUMN drivers TEXT;
ALTER TABLE plumb_alerts ADD COLUMN data_window TEXT;
UPDATE plumb_alerts SET onset = as_of;

-- +goose Down
DELETE FROM plumb_alerts WHERE rule = 'broken';
ALTER TABLE plumb_alerts DROP COLUMN data_window;
ALTER TABLE plumb_alerts DROP COLUMN drivers;
ALTER TABLE plumb_alerts DROP COLUMN columns;
ALTER TABLE plumb_alerts DROP COLUMN onset;
ALTER TABLE plumb_alerts DROP CONSTRAINT plumb_alerts_rule_check;
ALTER TABLE plumb_alerts ADD CONSTRAINT plumb_alerts_rule_check
    CHECK (rule IN ('level', 'trend', 'exact', 'constant', 'jump', 'blind'));
