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

-- latest_results (0007) gains the design, the subgroup count and the serial-dependence check.
DROP VIEW latest_results;
CREATE VIEW latest_results AS
SELECT l.run_id, l.period_kind, l.period_label, l.period_start_utc, l.period_end_utc,
       l.version, t.characteristic, t.factor, t.state,
       t.state IN ('differs', 'differs_material') AS is_flagged,
       t.n_obs, t.n_groups_used, t.leading_method, t.leading_statistic, t.leading_p, t.q_value,
       t.share_between, t.resid_sd AS within_sd, t.tolerance,
       t.standout_level, t.standout_diff, t.standout_sd_units, t.standout_pct_tolerance,
       c.unit, c.lsl, c.usl, c.target,
       t.design, t.n_subgroups, t.share_subgroups, t.serial_r1, t.serial_p
FROM latest_runs l
JOIN run_result t ON t.run_id = l.run_id
LEFT JOIN characteristics c ON c.name = t.characteristic;
