-- 0011_flag_as_integer: nothing changes in an SQLite database. PostgreSQL's migration of the same
-- number makes `latest_results.is_flagged` an integer 0/1, as SQLite's comparison already gives
-- it; the number keeps both backends at one schema version (later migrations share numbers).
SELECT 1;
