-- Sampling structure: the subgroup a measurement was taken in (a shot, a sample, a batch), and
-- the design each test used.
--
-- `measurements.subgroup` is the layout's subgroup id as text (one column, several columns
-- joined with "/", or a clock window derived at import: see `subgroup` in docs/configuration
-- of the README). NULL where the layout names none. Parts of one subgroup share its deviation,
-- so a test of a factor that is constant within subgroups uses the subgroup as its unit.
ALTER TABLE measurements ADD COLUMN subgroup TEXT;

-- Per test: the design used ("independent", "nested", "blocked" or "cell_means"), how many
-- subgroups the values came in, the three-level variance components' middle term (between
-- subgroups within a level) and its share, and the check of serial dependence in time order
-- (one-sided z of the lag-1 serial correlation of the residuals within groups, and its p).
ALTER TABLE run_result ADD COLUMN design TEXT;
ALTER TABLE run_result ADD COLUMN n_subgroups INTEGER;
ALTER TABLE run_result ADD COLUMN var_subgroups REAL;
ALTER TABLE run_result ADD COLUMN share_subgroups REAL;
ALTER TABLE run_result ADD COLUMN serial_r1 REAL;
ALTER TABLE run_result ADD COLUMN serial_z REAL;
ALTER TABLE run_result ADD COLUMN serial_p REAL;
