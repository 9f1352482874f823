-- 0011_flag_as_integer (PostgreSQL): `latest_results.is_flagged` as an integer 0/1, the value
-- SQLite's view gives (a comparison is an integer there), so a query reads the same column the
-- same way on both backends (docs/database.md). A view's column type cannot be changed in
-- place: the view is made again with the same columns in the same order.

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
