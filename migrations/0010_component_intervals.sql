-- Intervals of the variance components of each test, at the check's confidence level: between
-- groups (levels) and within (the one-way model's, or the three-level model's for a nested
-- design), and between subgroups within a level (nested designs). NULL where no interval could
-- be computed (the test's notes say why) and in runs stored before this migration.
ALTER TABLE run_result ADD COLUMN var_between_low REAL;
ALTER TABLE run_result ADD COLUMN var_between_high REAL;
ALTER TABLE run_result ADD COLUMN var_within_low REAL;
ALTER TABLE run_result ADD COLUMN var_within_high REAL;
ALTER TABLE run_result ADD COLUMN var_subgroups_low REAL;
ALTER TABLE run_result ADD COLUMN var_subgroups_high REAL;
