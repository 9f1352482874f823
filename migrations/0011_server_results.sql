-- 0011_server_results: nothing changes in an SQLite database. PostgreSQL's migration of the same
-- number makes `latest_results.is_flagged` an integer 0/1, as SQLite's comparison already gives
-- it, and stops enforcing the run tables' references to `run` row by row (SQLite's enforcement
-- costs nothing comparable); the number keeps both backends at one schema version (later
-- migrations share numbers).
SELECT 1;
