-- Segment keys (see connectors/segment.go): a segment whose column holds v
-- is stored as '=' || v, the empty string included; NULL, stored before as
-- the text '(null)', becomes '~null'; '' stays the whole table. Rows whose
-- key is part of a primary key move through a temporary table, so that no
-- new key meets an old one while the rows are rewritten. In the buckets of
-- a segmented watch (one that has buckets of other segments) '' held the
-- segment of the empty string; elsewhere it is the whole table. A real
-- value '(null)' cannot be told from NULL in old data and is read as NULL.

-- +goose Up
CREATE TEMP TABLE plumb_rekey AS SELECT * FROM plumb_buckets WHERE segment <> '';
UPDATE plumb_rekey SET segment = CASE WHEN segment = '(null)' THEN '~null' ELSE '=' || segment END;
DELETE FROM plumb_buckets WHERE segment <> '';
INSERT INTO plumb_buckets SELECT * FROM plumb_rekey;
DROP TABLE plumb_rekey;
UPDATE plumb_buckets SET segment = '='
 WHERE segment = '' AND watch IN (SELECT watch FROM plumb_buckets WHERE segment <> '');

CREATE TEMP TABLE plumb_rekey AS SELECT * FROM plumb_points WHERE segment <> '';
UPDATE plumb_rekey SET segment = CASE WHEN segment = '(null)' THEN '~null' ELSE '=' || segment END;
DELETE FROM plumb_points WHERE segment <> '';
INSERT INTO plumb_points SELECT * FROM plumb_rekey;
DROP TABLE plumb_rekey;

CREATE TEMP TABLE plumb_rekey AS SELECT * FROM plumb_point_columns WHERE segment <> '';
UPDATE plumb_rekey SET segment = CASE WHEN segment = '(null)' THEN '~null' ELSE '=' || segment END;
DELETE FROM plumb_point_columns WHERE segment <> '';
INSERT INTO plumb_point_columns SELECT * FROM plumb_rekey;
DROP TABLE plumb_rekey;

CREATE TEMP TABLE plumb_rekey AS SELECT * FROM plumb_watch_state WHERE segment <> '';
UPDATE plumb_rekey SET segment = CASE WHEN segment = '(null)' THEN '~null' ELSE '=' || segment END;
DELETE FROM plumb_watch_state WHERE segment <> '';
INSERT INTO plumb_watch_state SELECT * FROM plumb_rekey;
DROP TABLE plumb_rekey;

UPDATE plumb_alerts SET segment = CASE WHEN segment = '(null)' THEN '~null' ELSE '=' || segment END
 WHERE segment <> '';

-- +goose Down
-- The old keys cannot hold the segment of the empty string: its rows go.
DELETE FROM plumb_buckets WHERE segment = '=';
DELETE FROM plumb_points WHERE segment = '=';
DELETE FROM plumb_point_columns WHERE segment = '=';
DELETE FROM plumb_watch_state WHERE segment = '=';
DELETE FROM plumb_alerts WHERE segment = '=';

CREATE TEMP TABLE plumb_rekey AS SELECT * FROM plumb_buckets WHERE segment <> '';
UPDATE plumb_rekey SET segment = CASE WHEN segment = '~null' THEN '(null)' ELSE substr(segment, 2) END;
DELETE FROM plumb_buckets WHERE segment <> '';
INSERT INTO plumb_buckets SELECT * FROM plumb_rekey;
DROP TABLE plumb_rekey;

CREATE TEMP TABLE plumb_rekey AS SELECT * FROM plumb_points WHERE segment <> '';
UPDATE plumb_rekey SET segment = CASE WHEN segment = '~null' THEN '(null)' ELSE substr(segment, 2) END;
DELETE FROM plumb_points WHERE segment <> '';
INSERT INTO plumb_points SELECT * FROM plumb_rekey;
DROP TABLE plumb_rekey;

CREATE TEMP TABLE plumb_rekey AS SELECT * FROM plumb_point_columns WHERE segment <> '';
UPDATE plumb_rekey SET segment = CASE WHEN segment = '~null' THEN '(null)' ELSE substr(segment, 2) END;
DELETE FROM plumb_point_columns WHERE segment <> '';
INSERT INTO plumb_point_columns SELECT * FROM plumb_rekey;
DROP TABLE plumb_rekey;

CREATE TEMP TABLE plumb_rekey AS SELECT * FROM plumb_watch_state WHERE segment <> '';
UPDATE plumb_rekey SET segment = CASE WHEN segment = '~null' THEN '(null)' ELSE substr(segment, 2) END;
DELETE FROM plumb_watch_state WHERE segment <> '';
INSERT INTO plumb_watch_state SELECT * FROM plumb_rekey;
DROP TABLE plumb_rekey;

UPDATE plumb_alerts SET segment = CASE WHEN segment = '~null' THEN '(null)' ELSE substr(segment, 2) END
 WHERE segment <> '';
