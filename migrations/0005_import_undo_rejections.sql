-- Undoing an import, one rejection record per bad row, and a bound on the rejections kept.
--
-- `samewise import undo N` removes import N's measurements and rejected rows in one transaction
-- and records the undo as an import row of its own: `undoes` names the import it removed, its
-- counts are 0 and its time range is the removed import's, so a checked period it touches is
-- stale (the rule of 0004: a data change with an id above the run's `max_import_id`). The undone
-- import keeps its row (what it once stored) and is no longer a duplicate of a later import of the
-- same content.
ALTER TABLE imports ADD COLUMN undoes INTEGER REFERENCES imports (id);
CREATE UNIQUE INDEX imports_undoes ON imports (undoes) WHERE undoes IS NOT NULL;

-- One record per bad row: a problem with a whole row of a wide file (a bad timestamp, a blank
-- line) is one record standing for every measurement of the row. `measurements` is how many
-- measurements a record stands for (1 for a single cell or a long file's row), so
-- SUM(measurements) of an import's records is its `rejected` count.
ALTER TABLE rejected_rows ADD COLUMN measurements INTEGER NOT NULL DEFAULT 1 CHECK (measurements >= 1);

-- Records kept per import are bounded (the counts stay exact, and `import --rejects FILE` writes
-- every record): the measurements of the records that were not kept.
ALTER TABLE imports ADD COLUMN rejected_not_kept INTEGER NOT NULL DEFAULT 0;

-- Measurement identity: a part (serial) id where the layout names a part column. NULL where it
-- does not. A layout whose identity is the part looks measurements up by it.
ALTER TABLE measurements ADD COLUMN part TEXT;
CREATE INDEX measurements_part ON measurements (characteristic_id, part) WHERE part IS NOT NULL;
