-- 0011_server_results (PostgreSQL).
--
-- `latest_results.is_flagged` as an integer 0/1, the value SQLite's view gives (a comparison is
-- an integer there), so a query reads the same column the same way on both backends
-- (docs/database.md). A view's column type cannot be changed in place: the view is made again
-- with the same columns in the same order.
--
-- The references of run_result, run_group and run_pair to `run` are no longer enforced: a run's
-- thousands of result rows are written in its own transaction right after its `run` row, and
-- PostgreSQL checked each one with a scan of `run` (a table of a page or two, so the planner
-- scans it), 30 to 230 ms of a daily check that takes 300 ms. samewise never deletes a run, so
-- the cascade they declared never acted. `samewise db check` verifies the three references, as
-- it verifies the undeclared ones of `measurements`.

ALTER TABLE run_result DROP CONSTRAINT run_result_run_id_fkey;
ALTER TABLE run_group DROP CONSTRAINT run_group_run_id_fkey;
ALTER TABLE run_pair DROP CONSTRAINT run_pair_run_id_fkey;

DROP VIEW latest_results;

CREATE VIEW latest_results AS
SELECT l.run_id, l.period_kind, l.period_label, l.period_start_utc, l.period_end_utc,
       l.version, t.characteristic, t.factor, t.state,
       CAST(CASE WHEN t.state IN ('differs', 'differs_material') THEN 1 ELSE 0 END AS BIGINT)
           AS is_flagged,
       t.n_obs, t.n_groups_used, t.leading_method, t.leading_statistic, t.leading_p, t.q_value,
       t.share_between, t.resid_sd AS within_sd, t.tolerance,
       t.standout_level, t.standout_diff, t.standout_sd_units, t.standout_pct_tolerance,
       c.unit, c.lsl, c.usl, c.target,
       t.design, t.n_subgroups, t.share_subgroups, t.serial_r1, t.serial_p
FROM latest_runs l
JOIN run_result t ON t.run_id = l.run_id
LEFT JOIN characteristics c ON c.name = t.characteristic;
