-- Views for people who query the database with plain SQL (docs/database.md). Values in
-- measurement units, the latest complete run version of each period picked for you. Times are
-- UTC: `*_utc` as ISO 8601 text, `*_ms` as milliseconds since 1970-01-01.
-- `measurement_values` (one column per configured factor) is rebuilt by samewise whenever the
-- configuration's factors change (src/storage/master.rs), so it is not defined here.

-- The latest complete version of every checked period.
CREATE VIEW latest_runs AS
SELECT r.run_id, r.period_kind, r.period_label,
       strftime('%Y-%m-%dT%H:%M:%fZ', r.period_start_ms / 1000.0, 'unixepoch') AS period_start_utc,
       strftime('%Y-%m-%dT%H:%M:%fZ', r.period_end_ms / 1000.0, 'unixepoch') AS period_end_utc,
       r.period_start_ms, r.period_end_ms, r.schedule, r.version,
       (SELECT COUNT(*) FROM run c WHERE c.period_kind = r.period_kind
            AND c.period_label = r.period_label AND c.status = 'complete') AS complete_versions,
       r.fdr_method, r.fdr_level, r.n_tests, r.n_flagged,
       strftime('%Y-%m-%dT%H:%M:%fZ', r.finished_ms / 1000.0, 'unixepoch') AS finished_utc
FROM run r
WHERE r.status = 'complete'
  AND r.version = (SELECT MAX(v.version) FROM run v WHERE v.period_kind = r.period_kind
                   AND v.period_label = r.period_label AND v.status = 'complete');

-- Every test of the latest complete version of every period: the state, the leading test, its
-- q-value, the between-group share and the standing-out group (its distance from the grand mean
-- is a difference, so it is in units as stored).
CREATE VIEW latest_results AS
SELECT l.run_id, l.period_kind, l.period_label, l.period_start_utc, l.period_end_utc,
       l.version, t.characteristic, t.factor, t.state,
       t.state IN ('differs', 'differs_material') AS is_flagged,
       t.n_obs, t.n_groups_used, t.leading_method, t.leading_statistic, t.leading_p, t.q_value,
       t.share_between, t.resid_sd AS within_sd, t.tolerance,
       t.standout_level, t.standout_diff, t.standout_sd_units, t.standout_pct_tolerance,
       c.unit, c.lsl, c.usl, c.target
FROM latest_runs l
JOIN run_result t ON t.run_id = l.run_id
LEFT JOIN characteristics c ON c.name = t.characteristic;

-- The group summaries of those tests, means and extremes in units (the stored offsets plus the
-- characteristic's exact origin, as a double).
CREATE VIEW latest_groups AS
SELECT l.run_id, l.period_kind, l.period_label, t.characteristic, t.factor,
       g.level, g.n,
       CAST(g.origin AS REAL) + g.mean AS mean,
       g.sd,
       CAST(g.origin AS REAL) + g.min AS min,
       CAST(g.origin AS REAL) + g.max AS max,
       g.diff_from_grand
FROM latest_runs l
JOIN run_result t ON t.run_id = l.run_id
JOIN run_group g ON g.run_id = t.run_id AND g.test_idx = t.test_idx;

-- Findings with readable times.
CREATE VIEW findings_view AS
SELECT finding_id, period_kind, characteristic, factor, level, status, times_reopened,
       first_label, episode_label, last_label, n_flagged, quiet_periods, unit,
       effect_now, effect_now_sd, effect_now_pct, peak_effect, peak_label,
       strftime('%Y-%m-%dT%H:%M:%fZ', onset_ms / 1000.0, 'unixepoch') AS onset_utc,
       event_id, event_note
FROM finding;
