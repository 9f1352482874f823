-- Late and changed data: an import records the time range of the measurements it stored, and a
-- run records the highest import id it could see when it began. A period whose latest complete
-- run began before an import that stored measurements inside it is stale: the scheduler checks
-- it again (a new run version). Imports and runs made before this migration carry NULL / 0 and
-- never make a period stale.
ALTER TABLE imports ADD COLUMN ts_min_ms INTEGER;
ALTER TABLE imports ADD COLUMN ts_max_ms INTEGER;
ALTER TABLE run ADD COLUMN max_import_id INTEGER NOT NULL DEFAULT 0;
