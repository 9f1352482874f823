-- Rows of an import identical to a stored measurement (same characteristic, time, factor levels
-- and value: an export that overlaps the previous one) are counted here and not stored again.
-- `accepted` counts them with the stored rows, so `accepted + rejected = rows_read` still holds;
-- the measurements an import stored are `accepted - duplicates`.
ALTER TABLE imports ADD COLUMN duplicates INTEGER NOT NULL DEFAULT 0;
