//! The analysis engine: loads one period's values from `storage`, runs the `stats` core for every
//! characteristic x factor, applies false-discovery control across the run and returns the run.
//! It is the only module that calls both `storage` and `stats`.
//!
//! Start reading at [`check_frame`] (the whole check on one period's columnar values) and
//! [`CheckOptions`].
//!
//! Flag states (our own names), decided per test after the FDR adjustment over the run:
//! - `differs_material` ("differs and material"): `q <= level` and the difference the data
//!   support at the least is at least `material_share` of the reference: the bound nearest zero
//!   of the standing-out group's interval against the other groups
//!   ([`crate::stats::materiality`], Bonferroni over the groups since that group was picked as the
//!   furthest out), against the tolerance width (USL - LSL) or, with a single limit, the
//!   distance from the target (or the test's grand mean) to that limit. The range of the group
//!   means is not used: with many small groups noise alone makes it wide;
//! - `differs`: `q <= level`, and the supported difference is below that share or no limit is
//!   set (then materiality cannot be judged; the notes say so);
//! - `no_evidence`: `q > level`;
//! - `too_few_to_compare`: there are groups to compare, but no available test holds its level on
//!   data of this shape (small groups whose spreads look different, or very unequal group sizes
//!   with fewer than five values in a group; [`crate::stats::oneway::choose_leading`], proven by the
//!   null-rate study in docs/null-rates.md): no p-value, and the reason in the notes;
//! - `too_little_data`: fewer than two groups with at least `max(min_per_group, 2)` values.
//!   Groups below that size are left out of the test (and named in the notes); when fewer than
//!   two remain, the test is kept in the results with this state and *no* p-value.
//!
//! The FDR family is every test of the run that has a p-value (the leading method's p). Tests in
//! `too_little_data` or `too_few_to_compare`, and tests whose leading statistic is unavailable,
//! have no p and are not part of the family: they could never be rejected, and
//! counting them would only dilute `m`. Their state is `too_little_data`, `too_few_to_compare` or
//! `no_evidence` with the reason in the notes. Groups that are each constant (a coarse gauge) are
//! not such a case: the exact permutation test of [`crate::stats::constant_groups`] gives them a
//! p-value.
//!
//! "New" marks a flag that the latest complete run of the previous period of the same kind did
//! not have (when no previous run exists, every flag is new).

pub mod design;
pub mod findings;
pub mod report;
pub mod run;
pub mod sites;

use std::collections::HashSet;
use std::sync::atomic::{AtomicUsize, Ordering};

use crate::config::CharacteristicConfig;
use crate::results::{GroupResult, LeadingTest, PairResult, TestResult, TestState};
use crate::stats::decimal::Decimal;
use crate::stats::describe::Summary;
use crate::stats::fdr::{self, FdrMethod};
use crate::stats::oneway::{self, LeadingMethod, OneWayOptions, Tolerance};
use crate::stats::posthoc::{self, Pair};
use crate::stats::power::sensitivity;
use crate::stats::variance_components::one_way_random;
use crate::stats::Stat;
use crate::stats::{blocked as block_design, nested, serial};
use crate::storage::runs::RunContent;
use design::{DesignKind, NoStructure};

/// One grouping factor of a frame: its name and level names (indexed by `level_idx`).
#[derive(Debug, Clone)]
pub struct FrameFactor {
    /// Factor name.
    pub name: String,
    /// Level names.
    pub levels: Vec<String>,
}

/// One characteristic's values in a period, columnar.
#[derive(Debug, Clone)]
pub struct FrameCharacteristic {
    /// Its configuration (limits, activity).
    pub characteristic: CharacteristicConfig,
    /// Exact origin the values are offsets from.
    pub origin: Decimal,
    /// Offsets from `origin`.
    pub values: Vec<f64>,
    /// `[factor][row]` index into `FrameFactor::levels`.
    pub level_idx: Vec<Vec<u32>>,
    /// `[row]`: the measurement's subgroup (shot, sample, batch), numbered from 0 within the
    /// frame, [`NO_SUBGROUP`] for a measurement without one; empty when no measurement has one.
    pub subgroup: Vec<u32>,
}

/// `FrameCharacteristic::subgroup` of a measurement without a subgroup.
pub const NO_SUBGROUP: u32 = u32::MAX;

/// One period's values, read once (the shape of `storage`'s period frame).
#[derive(Debug, Clone, Default)]
pub struct Frame {
    /// Factors in configuration order.
    pub factors: Vec<FrameFactor>,
    /// Characteristics with their values.
    pub characteristics: Vec<FrameCharacteristic>,
}

/// Settings of one check.
#[derive(Debug, Clone)]
pub struct CheckOptions {
    /// FDR procedure across the run.
    pub fdr_method: FdrMethod,
    /// FDR level q.
    pub fdr_level: f64,
    /// Share of the tolerance the spread of group means must reach to be material (0.10).
    pub material_share: f64,
    /// Smallest group that takes part in a test (at least 2 is always required).
    pub min_per_group: u64,
    /// Significance level of the requirement checks and the sensitivity analysis.
    pub alpha: f64,
    /// Power target of the sensitivity analysis.
    pub power_target: f64,
    /// Confidence level of intervals.
    pub confidence: f64,
    /// Characteristics to check (`None`: all active).
    pub characteristics: Option<Vec<String>>,
    /// Factors to check (`None`: all).
    pub factors: Option<Vec<String>>,
    /// Worker threads (0: as many as the machine has cores).
    pub threads: usize,
}

impl CheckOptions {
    /// Options from the `[check]` settings of a configuration.
    pub fn from_config(config: &crate::config::Config) -> Self {
        let c = &config.check;
        CheckOptions {
            fdr_method: c.fdr_method,
            fdr_level: c.fdr_level,
            material_share: c.material_share,
            min_per_group: c.min_per_group,
            alpha: c.alpha,
            power_target: c.power_target,
            confidence: 0.95,
            characteristics: None,
            factors: None,
            threads: 0,
        }
    }
}

/// q-values for a run: tests with `None` (no p-value) are outside the family and get `None`.
pub fn run_q_values(p: &[Option<f64>], method: FdrMethod) -> crate::Result<Vec<Option<f64>>> {
    let family: Vec<f64> = p.iter().flatten().copied().collect();
    let q = fdr::adjust(&family, method)
        .map_err(|e| crate::Error::Database(format!("false-discovery adjustment: {e}")))?;
    let mut it = q.into_iter();
    Ok(p.iter()
        .map(|x| x.map(|_| it.next().expect("same length")))
        .collect())
}

struct Task<'a> {
    test_idx: usize,
    characteristic: &'a FrameCharacteristic,
    factor_idx: usize,
}

/// One test waiting for a worker: the frame holding its characteristic (shared between the
/// tests of that characteristic) and where it sits in the frame and in the run.
struct Job<F> {
    frame: F,
    test_idx: usize,
    characteristic_idx: usize,
    factor_idx: usize,
}

/// Per-test work before the run-level FDR: everything but q, state, is_new and pairs.
struct Partial {
    row: TestResult,
    summaries: Vec<Summary>,
    levels: Vec<String>,
    leading: Option<LeadingMethod>,
    /// The leading rule declined to judge (too few values per group to compare).
    declined: bool,
    /// What materiality is judged against: the tolerance width, or the distance from the target
    /// (or the grand mean) to a single limit; with its description.
    material_reference: Option<(f64, &'static str)>,
    confidence: f64,
    /// The values were tested as independent, the serial-dependence check failed and the
    /// leading p could be flagged: the design effect of the dependence and the leading p with
    /// its statistic divided by it (`None` when the leading test has no F scale).
    dependence: Option<(f64, Option<f64>)>,
    /// Pairs computed with the test (a blocked design: on the adjusted means), used instead of
    /// the one-way pairs when the test is flagged.
    pairs_ready: Option<Vec<Stat<Pair>>>,
}

/// Worker threads for `options` (0: as many as the machine has cores).
pub(crate) fn worker_count(options: &CheckOptions) -> usize {
    if options.threads == 0 {
        std::thread::available_parallelism().map_or(1, |n| n.get())
    } else {
        options.threads
    }
}

/// Runs the whole check on one period's frame: every selected active characteristic x every
/// selected factor, FDR across the run, states, standing-out groups, pairs of flagged tests and
/// the "new" mark against `previous_flags` (the flagged (characteristic, factor) pairs of the
/// previous period's latest complete run, `None` when there is none).
pub fn check_frame(
    frame: &Frame,
    options: &CheckOptions,
    previous_flags: Option<&HashSet<(String, String)>>,
) -> crate::Result<RunContent> {
    check_frames(std::iter::once(Ok(frame)), options, previous_flags)
}

/// [`check_frame`] over a period that arrives in parts (a few characteristics at a time, as
/// `run::run_check` loads it): the tests of each part go to the worker threads as soon
/// as it arrives, so loading the next part overlaps the statistics of the previous ones, and
/// only the parts still being analysed are held in memory.
///
/// Every part must carry the same factors in the same order (their level lists may differ: each
/// test only uses the levels that occur in its own values). Tests are numbered in arrival order
/// (part, characteristic, factor), and the result is the same, to the bit, as [`check_frame`]
/// on one frame holding all the parts, whatever the number of threads. The first error of
/// `frames` stops the check and is returned.
///
/// Threads: `options.threads` workers (0: one per core) compute the per-test statistics while
/// the calling thread produces the parts; the post-hoc pairs of the flagged tests (after the
/// run-level FDR) are then shared out over the same number of threads. `std::thread::scope` and
/// a bounded `std::sync::mpsc` channel instead of a thread-pool crate: the work is coarse (a few
/// hundred tests of thousands of values each, a few dozen loads), the producer must block when
/// the workers fall behind (that bounds memory), and the order is restored by test number.
pub fn check_frames<F, I>(
    frames: I,
    options: &CheckOptions,
    previous_flags: Option<&HashSet<(String, String)>>,
) -> crate::Result<RunContent>
where
    F: std::ops::Deref<Target = Frame> + Clone + Send,
    I: IntoIterator<Item = crate::Result<F>>,
{
    let threads = worker_count(options);
    // At most two tests per worker wait in the queue: the calling thread blocks instead of
    // loading further ahead, so memory holds about three parts however long the period is.
    let (sender, receiver) = std::sync::mpsc::sync_channel::<Job<F>>(2 * threads);
    let receiver = std::sync::Mutex::new(receiver);
    let mut partials: Vec<(usize, Partial)> = Vec::new();
    let mut failure = None;
    std::thread::scope(|scope| {
        let handles: Vec<_> = (0..threads)
            .map(|_| {
                scope.spawn(|| {
                    let mut done = Vec::new();
                    loop {
                        // The lock is held only while waiting for the next job.
                        let job = receiver
                            .lock()
                            .map_err(|_| ())
                            .and_then(|r| r.recv().map_err(|_| ()));
                        let Ok(job) = job else { break };
                        let task = Task {
                            test_idx: job.test_idx,
                            characteristic: &job.frame.characteristics[job.characteristic_idx],
                            factor_idx: job.factor_idx,
                        };
                        done.push((job.test_idx, one_test(&job.frame, &task, options)));
                    }
                    done
                })
            })
            .collect();
        let mut n_tests = 0usize;
        'parts: for part in frames {
            let frame = match part {
                Ok(frame) => frame,
                Err(e) => {
                    failure = Some(e);
                    break;
                }
            };
            let factor_ids: Vec<usize> = (0..frame.factors.len())
                .filter(|&f| {
                    options
                        .factors
                        .as_ref()
                        .is_none_or(|sel| sel.contains(&frame.factors[f].name))
                })
                .collect();
            for (characteristic_idx, c) in frame.characteristics.iter().enumerate() {
                let selected = match &options.characteristics {
                    Some(sel) => sel.contains(&c.characteristic.name),
                    None => c.characteristic.is_active,
                };
                if !selected {
                    continue;
                }
                for &factor_idx in &factor_ids {
                    let job = Job {
                        frame: frame.clone(),
                        test_idx: n_tests,
                        characteristic_idx,
                        factor_idx,
                    };
                    n_tests += 1;
                    if sender.send(job).is_err() {
                        // Every worker is gone (a panic, raised again at the join below).
                        break 'parts;
                    }
                }
            }
        }
        drop(sender);
        for h in handles {
            partials.extend(h.join().expect("analysis worker panicked"));
        }
    });
    if let Some(e) = failure {
        return Err(e);
    }
    partials.sort_unstable_by_key(|(i, _)| *i);
    let mut partials: Vec<Partial> = partials.into_iter().map(|(_, p)| p).collect();
    let p: Vec<Option<f64>> = partials.iter().map(|t| t.row.leading.p).collect();
    let q = run_q_values(&p, options.fdr_method)?;
    for (partial, q) in partials.iter_mut().zip(q) {
        let material = match q {
            Some(q) if q <= options.fdr_level => Some(materiality(partial, options)),
            _ => None,
        };
        let row = &mut partial.row;
        row.q_value = q;
        row.state = match q {
            Some(q) if q <= options.fdr_level => match material {
                Some(Ok((is_material, note))) => {
                    push_note(&mut row.notes, &note);
                    if is_material {
                        TestState::DiffersMaterial
                    } else {
                        TestState::Differs
                    }
                }
                Some(Err(reason)) => {
                    push_note(&mut row.notes, &reason);
                    TestState::Differs
                }
                None => TestState::Differs,
            },
            Some(_) => TestState::NoEvidence,
            None if row.n_groups_used < 2 => TestState::TooLittleData,
            None if partial.declined => TestState::TooFewToCompare,
            None => TestState::NoEvidence,
        };
        if let (Some((deff, p_adjusted)), Some(p), Some(q)) =
            (partial.dependence, row.leading.p, row.q_value)
        {
            if row.state.is_flag() {
                // The q-value the adjusted p would have in the same family (BH scales p).
                let q_adjusted = p_adjusted.map(|pa| (q * pa / p.max(f64::MIN_POSITIVE)).min(1.0));
                let found = format!(
                    "values not independent: in time order within the groups, neighbouring values are alike (lag-1 serial correlation {:.2}, z = {:.1}, p = {}; design effect {:.1}), as when parts measured together share a deviation or the process drifts within the period",
                    row.serial_dependence.r1.unwrap_or(f64::NAN),
                    row.serial_dependence.z.unwrap_or(f64::NAN),
                    oneway::short(row.serial_dependence.p.unwrap_or(f64::NAN)),
                    deff
                );
                match (p_adjusted, q_adjusted) {
                    (Some(pa), Some(qa)) if qa <= options.fdr_level => push_note(
                        &mut row.notes,
                        &format!(
                            "{found}; the difference holds with the statistic divided by the design effect (p = {}, q = {})",
                            oneway::short(pa),
                            oneway::short(qa)
                        ),
                    ),
                    _ => {
                        push_note(
                            &mut row.notes,
                            &format!(
                                "{found}; with the statistic divided by the design effect it no longer holds ({}), so the p-value of a test that counts every value as independent is too small to trust. Name the column that identifies measurements taken together (subgroup = \"COLUMN\" in the layout, or subgroup_window) to test on the right unit",
                                p_adjusted.map_or("no F scale to divide".to_string(), |pa| format!("p = {}", oneway::short(pa)))
                            ),
                        );
                        row.state = TestState::DiffersDependent;
                    }
                }
            }
        }
        let flagged = row.state.is_flag();
        row.is_new = flagged
            && previous_flags.is_none_or(|prev| {
                !prev.contains(&(row.characteristic.clone(), row.factor.clone()))
            });
    }
    let flagged: Vec<&Partial> = partials.iter().filter(|p| p.row.state.is_flag()).collect();
    let pairs = parallel_map(&flagged, threads, |partial| {
        let pairs = match partial.leading {
            _ if partial.pairs_ready.is_some() => partial.pairs_ready.clone().unwrap_or_default(),
            Some(LeadingMethod::Welch) => {
                posthoc::games_howell(&partial.summaries, partial.confidence)
            }
            _ => posthoc::tukey_kramer(&partial.summaries, partial.confidence),
        };
        pairs
            .into_iter()
            .flatten()
            .map(|pair| PairResult::named(&partial.levels, &pair))
            .collect::<Vec<_>>()
    });
    let mut pairs = pairs.into_iter();
    let mut content = RunContent::default();
    for mut partial in partials {
        if partial.row.state.is_flag() {
            partial.row.pairs = pairs.next().unwrap_or_default();
        }
        content.tests.push(partial.row);
    }
    Ok(content)
}

/// `items.iter().map(f)` on up to `threads` threads (items handed out one at a time, so slow
/// items do not hold up a whole share), results in the order of `items`.
fn parallel_map<T: Sync, R: Send>(
    items: &[T],
    threads: usize,
    f: impl Fn(&T) -> R + Sync,
) -> Vec<R> {
    let threads = threads.min(items.len());
    if threads <= 1 {
        return items.iter().map(f).collect();
    }
    let next = AtomicUsize::new(0);
    let mut out: Vec<Option<R>> = (0..items.len()).map(|_| None).collect();
    std::thread::scope(|scope| {
        let handles: Vec<_> = (0..threads)
            .map(|_| {
                scope.spawn(|| {
                    let mut done = Vec::new();
                    loop {
                        let i = next.fetch_add(1, Ordering::Relaxed);
                        let Some(item) = items.get(i) else { break };
                        done.push((i, f(item)));
                    }
                    done
                })
            })
            .collect();
        for h in handles {
            for (i, r) in h.join().expect("analysis worker panicked") {
                out[i] = Some(r);
            }
        }
    });
    out.into_iter()
        .map(|r| r.expect("every item was mapped"))
        .collect()
}

/// Whether a flagged test's difference is material: the bound nearest zero of the standing-out
/// group's interval against the rest ([`crate::stats::materiality`]) reaches `material_share` of
/// the reference (tolerance width, or the distance to a single limit). `Err` says why it cannot
/// be judged.
fn materiality(partial: &Partial, options: &CheckOptions) -> Result<(bool, String), String> {
    let Some((reference, what)) = partial.material_reference else {
        return Err("no specification limit configured: materiality not judged".into());
    };
    let Some(level) = &partial.row.stands_out.level else {
        return Err("no standing-out group: materiality not judged".into());
    };
    let standout = partial
        .levels
        .iter()
        .position(|l| l == level)
        .ok_or_else(|| "standing-out group not found: materiality not judged".to_string())?;
    let pooled = partial.row.anova.resid_sd.zip(partial.row.anova.df_within);
    let supported = if partial.leading == Some(LeadingMethod::ExactPermutation) {
        // Constant groups: the difference is known exactly as far as the gauge resolves.
        let g = &partial.summaries[standout];
        let rest = partial
            .summaries
            .iter()
            .enumerate()
            .filter(|&(i, _)| i != standout)
            .fold(Summary::default(), |acc, (_, s)| acc.merge(s));
        (g.mean - rest.mean).abs()
    } else {
        let pooled =
            pooled.ok_or("materiality not judged: the pooled within-group SD is unavailable")?;
        crate::stats::materiality::standout_interval(
            &partial.summaries,
            standout,
            pooled,
            partial.confidence,
        )
        .map_err(|e| format!("materiality not judged: {}", e.reason))?
        .supported
    };
    let share = supported / reference;
    Ok((
        share >= options.material_share,
        format!(
            "materiality: {level} differs from the rest by at least {} (the near end of its interval), {:.1}% of {what} (material from {:.0}%)",
            oneway::short(supported),
            100.0 * share,
            100.0 * options.material_share
        ),
    ))
}

fn push_note(notes: &mut String, note: &str) {
    if !notes.is_empty() {
        notes.push_str("; ");
    }
    notes.push_str(note);
}

/// An interval of the statistics core as an interval of the results (`None` ends when it
/// could not be computed).
fn opt_interval(
    ci: &Stat<crate::stats::variance_components::Interval>,
) -> crate::results::OptInterval {
    crate::results::OptInterval {
        low: ci.as_ref().ok().map(|c| c.low),
        high: ci.as_ref().ok().map(|c| c.high),
    }
}

fn ok<T: Copy>(s: &Stat<T>) -> Option<T> {
    s.as_ref().ok().copied()
}

fn note_unavailable<T>(notes: &mut String, what: &str, s: &Stat<T>) {
    if let Err(e) = s {
        push_note(notes, &format!("{what}: {}", e.reason));
    }
}

/// Tolerance as offsets from the characteristic's origin (exact decimal subtraction).
fn tolerance_of(c: &FrameCharacteristic) -> Option<Tolerance> {
    let off = |x: Option<f64>| {
        x.and_then(|v| Decimal::parse(&format!("{v}")).ok())
            .map(|d| d.offset_from(&c.origin))
    };
    let cfg = &c.characteristic;
    if cfg.lsl.is_none() && cfg.usl.is_none() && cfg.target.is_none() {
        return None;
    }
    Some(Tolerance {
        lsl: off(cfg.lsl),
        usl: off(cfg.usl),
        target: off(cfg.target),
    })
}

fn one_test(frame: &Frame, task: &Task<'_>, options: &CheckOptions) -> Partial {
    let c = task.characteristic;
    let factor = &frame.factors[task.factor_idx];
    let idx = &c.level_idx[task.factor_idx];
    let n_levels = factor.levels.len();
    // Counting sort of the values by level: one pass to count, one to place.
    let mut counts = vec![0usize; n_levels];
    for &l in idx {
        counts[l as usize] += 1;
    }
    let min_n = options.min_per_group.max(2) as usize;
    let mut notes = String::new();
    let mut small = Vec::new();
    let used: Vec<usize> = (0..n_levels)
        .filter(|&l| {
            if counts[l] == 0 {
                return false;
            }
            if counts[l] < min_n {
                small.push(format!("{} (n = {})", factor.levels[l], counts[l]));
                return false;
            }
            true
        })
        .collect();
    if !small.is_empty() {
        push_note(
            &mut notes,
            &format!("left out, fewer than {min_n} values: {}", small.join(", ")),
        );
    }
    let mut slot = vec![usize::MAX; n_levels];
    let mut offsets = Vec::with_capacity(used.len() + 1);
    let mut total = 0usize;
    for (k, &l) in used.iter().enumerate() {
        slot[l] = k;
        offsets.push(total);
        total += counts[l];
    }
    offsets.push(total);
    let mut fill = offsets.clone();
    let mut grouped = vec![0.0f64; total];
    for (row, &l) in idx.iter().enumerate() {
        let k = slot[l as usize];
        if k != usize::MAX {
            grouped[fill[k]] = c.values[row];
            fill[k] += 1;
        }
    }
    let mut groups: Vec<&[f64]> = (0..used.len())
        .map(|k| &grouped[offsets[k]..offsets[k + 1]])
        .collect();
    let mut levels: Vec<String> = used.iter().map(|&l| factor.levels[l].clone()).collect();
    // The sampling structure: nested and mixed designs test the subgroup (cell) means.
    let mut design_kind = DesignKind::Independent;
    let mut n_subgroups = None;
    let mut units: Vec<Vec<f64>> = Vec::new();
    let mut block_units: Vec<Vec<f64>>;
    let mut arranged = None;
    let mut nested_fit = None;
    match design::arrange(&c.values, &c.subgroup, |row| {
        let k = slot[idx[row] as usize];
        (k != usize::MAX).then_some(k as u32)
    }) {
        Err(NoStructure::NoSubgroups) => {}
        Err(NoStructure::Incomplete(reason)) => push_note(&mut notes, &reason),
        Ok(a) => {
            design_kind = a.kind;
            n_subgroups = Some(a.n_subgroups as u64);
            arranged = Some(a);
        }
    }
    if let Some(a) = arranged
        .as_ref()
        .filter(|a| matches!(a.kind, DesignKind::Nested | DesignKind::CellMeans))
    {
        let what = if a.kind == DesignKind::Nested {
            format!(
                "nested design: {} is constant within each of the {} subgroups, so the subgroup is the unit: tested on the subgroup means (ANOVA on subgroup means), against the variation between subgroups within each level",
                factor.name, a.n_subgroups
            )
        } else {
            format!(
                "mixed design: {}; tested on the mean of each level within each subgroup",
                a.reason.as_deref().unwrap_or("neither nested nor crossed")
            )
        };
        push_note(&mut notes, &what);
        if a.kind == DesignKind::Nested {
            match nested::nested_anova(&a.nested_groups(used.len()), options.confidence) {
                Ok(n) => nested_fit = Some(n),
                Err(e) => push_note(&mut notes, &format!("nested ANOVA: {}", e.reason)),
            }
        }
        let means = a.cell_means(used.len());
        let mut few = Vec::new();
        let mut kept_levels = Vec::new();
        for (k, m) in means.into_iter().enumerate() {
            if m.len() < 2 {
                few.push(format!("{} ({} subgroup)", levels[k], m.len()));
            } else {
                units.push(m);
                kept_levels.push(levels[k].clone());
            }
        }
        if !few.is_empty() {
            push_note(
                &mut notes,
                &format!("left out, fewer than 2 subgroups: {}", few.join(", ")),
            );
        }
        groups = units.iter().map(Vec::as_slice).collect();
        levels = kept_levels;
    }
    // Blocked: the factor varies within the subgroups. The test is the additive model's F; the
    // requirement checks and the group table use the values adjusted for the subgroups
    // (residual + the level's adjusted mean).
    let mut blocked = None;
    if let Some(a) = arranged.as_ref().filter(|a| a.kind == DesignKind::Blocked) {
        let (slots, blocks) = a.labels();
        match block_design::blocked_anova(
            &a.values,
            &slots,
            &blocks,
            used.len(),
            a.n_subgroups,
            options.confidence,
        ) {
            Err(e) => {
                push_note(
                    &mut notes,
                    &format!(
                        "blocked design: {}; the values are tested as independent",
                        e.reason
                    ),
                );
                design_kind = DesignKind::Independent;
            }
            Ok(fit) => {
                push_note(
                    &mut notes,
                    &format!(
                        "blocked design: {} varies within the {} subgroups, so each subgroup's own deviation is taken out: F of the levels adjusted for the subgroups (additive two-way ANOVA, subgroups as blocks, Type II){}",
                        factor.name,
                        a.n_subgroups,
                        if fit.is_connected {
                            ""
                        } else {
                            "; the levels are not all linked through shared subgroups, so the test has fewer df"
                        }
                    ),
                );
                for note in &fit.notes {
                    push_note(&mut notes, &format!("blocked design: {note}"));
                }
                // Each level's values adjusted for the subgroups: its least-squares mean plus
                // the residuals (its raw mean where the design does not link every level).
                block_units = vec![Vec::new(); used.len()];
                for (i, &slot) in slots.iter().enumerate() {
                    block_units[slot as usize].push(fit.residuals[i]);
                }
                for (slot, u) in block_units.iter_mut().enumerate() {
                    let centre = Some(fit.adjusted_means[slot])
                        .filter(|m| m.is_finite())
                        .unwrap_or_else(|| {
                            groups[slot].iter().sum::<f64>() / groups[slot].len() as f64
                        });
                    for v in u.iter_mut() {
                        *v += centre;
                    }
                }
                groups = block_units.iter().map(Vec::as_slice).collect();
                blocked = Some(fit);
            }
        }
    }
    let tolerance = tolerance_of(c);
    let tol_width = tolerance.and_then(|t| t.width());
    let mut row = TestResult {
        index: task.test_idx as u32,
        characteristic: c.characteristic.name.clone(),
        factor: factor.name.clone(),
        n_obs: c.values.len() as u64,
        n_groups: counts.iter().filter(|&&n| n > 0).count() as u64,
        n_groups_used: groups.len() as u64,
        tolerance: tol_width,
        design: crate::results::DesignResult {
            kind: Some(design_kind),
            n_subgroups,
            ..Default::default()
        },
        ..TestResult::default()
    };
    if design_kind == DesignKind::Independent && groups.len() >= 2 {
        // Values treated as independent: are they, in time order within their groups?
        match serial::serial_dependence(&groups) {
            Ok(s) => {
                row.serial_dependence = crate::results::SerialResult {
                    r1: Some(s.r1),
                    z: Some(s.z),
                    p: Some(s.p),
                };
            }
            Err(e) => push_note(&mut notes, &format!("serial dependence: {}", e.reason)),
        }
    }
    let origin = c.origin.to_string();
    let mut summaries: Vec<Summary> = groups.iter().map(|g| Summary::from_slice(g)).collect();
    let mut leading = None;
    let mut declined = false;
    let mut bundle_vc = None;
    let mut bundle_sensitivity = None;
    let mut dependence = None;
    let mut pairs_ready = None;
    if groups.len() < 2 {
        push_note(
            &mut notes,
            &if design_kind == DesignKind::Independent {
                format!("fewer than two groups with at least {min_n} values")
            } else {
                "fewer than two groups with at least 2 subgroups".to_string()
            },
        );
    } else {
        let oneway_options = OneWayOptions {
            alpha: options.alpha,
            confidence: options.confidence,
            power_target: options.power_target,
            detect: None,
            tolerance,
            // Pairs are computed below, only for the tests flagged after the FDR adjustment.
            with_pairs: false,
        };
        match oneway::analyze(&groups, &oneway_options) {
            Err(e) => push_note(&mut notes, &format!("one-way analysis: {}", e.reason)),
            Ok(ow) => {
                summaries = ow.summaries.clone();
                leading = Some(ow.leading.method);
                declined = ow.leading.declined.is_some();
                row.leading = crate::results::LeadingResult {
                    method: Some(ow.leading.method.into()),
                    reason: Some(ow.leading.reason.clone()),
                    statistic: ow.leading.statistic,
                    p: ow.leading.p,
                    recommend_kruskal_wallis: Some(ow.leading.recommend_kruskal_wallis),
                };
                if ow.leading.p.is_none() && !declined {
                    push_note(&mut notes, "the leading test has no p-value");
                }
                if let Ok(c) = &ow.constant_groups {
                    // F is infinite; the table's defined parts are still given.
                    row.anova.ss_between = Some(c.ss_between);
                    row.anova.ss_within = Some(0.0);
                    row.anova.df_between = Some(c.df_between);
                    row.anova.df_within = Some(c.df_within);
                    row.anova.ms_within = Some(0.0);
                    row.anova.r_squared = Some(1.0);
                    row.effect.eta_squared = Some(1.0);
                }
                note_unavailable(&mut notes, "ANOVA", &ow.anova);
                if let Ok(t) = &ow.anova {
                    row.anova = crate::results::AnovaResult {
                        f: Some(t.f),
                        df_between: Some(t.df_between),
                        df_within: Some(t.df_within),
                        p: Some(t.p),
                        ss_between: Some(t.ss_between),
                        ss_within: Some(t.ss_within),
                        ms_within: Some(t.ms_within),
                        r_squared: Some(t.r_squared),
                        resid_sd: Some(t.resid_sd),
                    };
                }
                note_unavailable(&mut notes, "Welch", &ow.welch);
                if let Ok(w) = &ow.welch {
                    row.welch = crate::results::WelchResult {
                        f: Some(w.statistic),
                        df1: w.df1,
                        df2: w.df2,
                        p: Some(w.p),
                    };
                }
                let pick = |t: &Stat<crate::stats::TestResult>| crate::results::StatP {
                    statistic: t.as_ref().ok().map(|t| t.statistic),
                    p: t.as_ref().ok().map(|t| t.p),
                };
                note_unavailable(&mut notes, "Kruskal-Wallis", &ow.kruskal_wallis);
                let kw = pick(&ow.kruskal_wallis);
                row.kruskal_wallis = crate::results::KruskalResult {
                    h: kw.statistic,
                    p: kw.p,
                };
                note_unavailable(&mut notes, "Levene", &ow.levene);
                row.levene = pick(&ow.levene);
                note_unavailable(&mut notes, "Brown-Forsythe", &ow.brown_forsythe);
                row.brown_forsythe = pick(&ow.brown_forsythe);
                note_unavailable(&mut notes, "Bartlett", &ow.bartlett);
                row.bartlett = pick(&ow.bartlett);
                row.sd_ratio = ok(&ow.sd_ratio);
                row.n_beyond_3sd = ok(&ow.n_beyond_3sd).map(|n| n as u64);
                if let Ok(e) = &ow.effect {
                    row.effect.eta_squared = Some(e.eta_squared);
                    row.effect.omega_squared = Some(e.omega_squared);
                }
                // Shapiro-Wilk on the residuals (value - group mean), as the bundle computed it.
                match (&ow.shapiro_wilk, &ow.dagostino_pearson) {
                    (Err(_), Ok(dp)) if dp.n > crate::stats::normality::MAX_N => {
                        push_note(&mut notes, &normality_note(dp));
                    }
                    _ => note_unavailable(&mut notes, "Shapiro-Wilk", &ow.shapiro_wilk),
                }
                if let Ok(sw) = &ow.shapiro_wilk {
                    row.shapiro_wilk.w = Some(sw.w);
                    row.shapiro_wilk.p = Some(sw.p);
                }
                if let (Some(stat), Some(p)) = (ow.leading.statistic, ow.leading.p) {
                    let serial_fails = row.serial_dependence.p.is_some_and(|sp| sp < options.alpha);
                    if serial_fails && p <= options.fdr_level {
                        // What the leading test gives when the dependence is allowed for.
                        let deff = serial::design_effect(&groups);
                        let df = match ow.leading.method {
                            LeadingMethod::ClassicF => {
                                ow.anova.as_ref().ok().map(|t| (t.df_between, t.df_within))
                            }
                            // The bootstrap's statistic is Welch's F: its df serve the
                            // dependence allowance as for Welch's test.
                            LeadingMethod::Welch | LeadingMethod::WelchBootstrap => {
                                ow.welch.as_ref().ok().and_then(|t| t.df1.zip(t.df2))
                            }
                            LeadingMethod::FStar => {
                                ow.f_star.as_ref().ok().and_then(|t| t.df1.zip(t.df2))
                            }
                            LeadingMethod::ExactPermutation => None,
                        };
                        // The effective number of values is n / deff (Bayley and Hammersley
                        // 1946): the statistic and the denominator df shrink with it.
                        let k = groups.len() as f64;
                        let p_adjusted = df.and_then(|(d1, d2)| {
                            let d2 = ((d2 + k) / deff - k).max(1.0);
                            crate::stats::distributions::f_sf(stat / deff, d1, d2).ok()
                        });
                        dependence = Some((deff, p_adjusted));
                    }
                }
                bundle_vc = Some(ow.variance_components);
                bundle_sensitivity = Some(ow.sensitivity);
            }
        }
        if let Some(fit) = &blocked {
            leading = Some(LeadingMethod::ClassicF);
            declined = false;
            row.leading.method = Some(LeadingTest::BlockedF);
            row.leading.reason = Some(
                "the factor varies within the subgroups: F of the levels adjusted for the subgroups (blocks)"
                    .into(),
            );
            row.welch = crate::results::WelchResult::default();
            push_note(
                &mut notes,
                "Welch: no Welch-type test is used with subgroups as blocks; the spreads are checked on the residuals of the additive model",
            );
            match &fit.levels_test {
                Ok(t) => {
                    row.leading.statistic = Some(t.statistic);
                    row.leading.p = Some(t.p);
                    row.anova.f = Some(t.statistic);
                    row.anova.p = Some(t.p);
                }
                Err(e) => {
                    row.leading.statistic = None;
                    row.leading.p = None;
                    row.anova.f = None;
                    row.anova.p = None;
                    push_note(&mut notes, &format!("blocked F: {}", e.reason));
                }
            }
            row.anova.df_between = Some(fit.df_levels);
            row.anova.df_within = Some(fit.df_resid);
            row.anova.ss_between = Some(fit.ss_levels);
            row.anova.ss_within = Some(fit.ss_resid);
            row.anova.ms_within = Some(fit.ms_resid).filter(|m| m.is_finite());
            row.anova.resid_sd = row.anova.ms_within.map(f64::sqrt);
            let total = fit.ss_levels + fit.ss_blocks + fit.ss_resid;
            row.anova.r_squared = (total > 0.0).then(|| 1.0 - fit.ss_resid / total);
            // Between-subgroup variance (one-way ANOVA estimator on the subgroup sizes).
            if let Ok(b) = &fit.blocks_test {
                let n = fit.n as f64;
                let sizes = arranged
                    .as_ref()
                    .map(|a| a.block_sizes())
                    .unwrap_or_default();
                let n0 = (n - sizes.iter().map(|&x| (x * x) as f64).sum::<f64>() / n)
                    / (fit.n_blocks as f64 - 1.0);
                let ms_blocks = b.statistic * fit.ms_resid;
                if n0 > 0.0 {
                    row.design.var_subgroups = Some(((ms_blocks - fit.ms_resid) / n0).max(0.0));
                }
            }
            pairs_ready = Some(
                fit.pairs
                    .iter()
                    .map(|p| p.as_ref().map(Pair::from).map_err(Clone::clone))
                    .collect(),
            );
        }
        let vc = bundle_vc.unwrap_or_else(|| one_way_random(&summaries, options.confidence));
        note_unavailable(&mut notes, "variance components", &vc);
        if let Ok(vc) = &vc {
            let out = &mut row.variance_components;
            out.between = Some(vc.between);
            out.within = Some(vc.within);
            out.share_between = Some(vc.share_between);
            if let Some(sub) = row.design.var_subgroups {
                let total = vc.between + vc.within + sub;
                if total > 0.0 {
                    out.share_between = Some(vc.between / total);
                    row.design.share_subgroups = Some(sub / total);
                }
            }
            out.icc = Some(vc.icc);
            out.icc_ci = opt_interval(&vc.icc_ci);
            out.between_ci = opt_interval(&vc.between_ci);
            out.within_ci = opt_interval(&Ok(vc.within_ci));
            if let Err(e) = &vc.between_ci {
                push_note(
                    &mut notes,
                    &format!(
                        "variance components: no between-group interval: {}",
                        e.reason
                    ),
                );
            }
        }
        if let Some(n) = &nested_fit {
            // The nested ANOVA table beside the test on subgroup means, and the three-level
            // variance components (levels, subgroups within a level, values within a subgroup).
            match &n.levels_test {
                Ok(t) => push_note(
                    &mut notes,
                    &format!(
                        "nested ANOVA: F = MS levels / {} = {} on {} and {} df, p = {} ({})",
                        if t.method == nested::NestedMethod::Exact {
                            "MS subgroups"
                        } else {
                            "synthesised MS"
                        },
                        oneway::short(t.f),
                        oneway::short(t.df1),
                        oneway::short(t.df2),
                        oneway::short(t.p),
                        t.method.name()
                    ),
                ),
                Err(e) => push_note(&mut notes, &format!("nested ANOVA: {}", e.reason)),
            }
            match &n.components {
                Ok(c) => {
                    row.variance_components = crate::results::ComponentsResult {
                        between: Some(c.levels),
                        within: Some(c.within),
                        share_between: Some(c.share_levels),
                        between_ci: opt_interval(&c.levels_ci),
                        within_ci: opt_interval(&Ok(c.within_ci)),
                        ..Default::default()
                    };
                    row.design.var_subgroups = Some(c.subgroups);
                    row.design.share_subgroups = Some(c.share_subgroups);
                    row.design.var_subgroups_ci = opt_interval(&c.subgroups_ci);
                    for (what, ci) in [
                        ("between-level", &c.levels_ci),
                        ("between-subgroup", &c.subgroups_ci),
                    ] {
                        if let Err(e) = ci {
                            push_note(
                                &mut notes,
                                &format!(
                                    "three-level components: no {what} interval: {}",
                                    e.reason
                                ),
                            );
                        }
                    }
                    push_note(
                        &mut notes,
                        &format!(
                            "variance components: three levels ({}): the ICC of the subgroup means is not given",
                            c.method
                        ),
                    );
                    for note in &c.notes {
                        push_note(&mut notes, &format!("three-level components: {note}"));
                    }
                }
                Err(e) => push_note(&mut notes, &format!("three-level components: {}", e.reason)),
            }
        }
        if let Some(sd) = row.anova.resid_sd.filter(|s| *s > 0.0) {
            let sens = bundle_sensitivity.unwrap_or_else(|| {
                sensitivity(
                    &summaries,
                    sd,
                    options.alpha,
                    options.power_target,
                    None,
                    tol_width,
                )
            });
            note_unavailable(&mut notes, "sensitivity", &sens);
            if let Ok(s) = sens {
                row.sensitivity.min_detectable_diff = ok(&s.min_detectable_diff);
                row.sensitivity.min_detectable_pct_tolerance = s.min_detectable_pct_tolerance;
            }
        }
    }
    if let Some(r) = c.characteristic.resolution {
        push_resolution_notes(&mut notes, r, tol_width, row.anova.resid_sd, &groups);
    }
    // Group table, spread of means and the group that stands out.
    let effects = posthoc::group_effects(&summaries, row.anova.resid_sd, tol_width);
    row.groups = summaries
        .iter()
        .enumerate()
        .map(|(k, s)| {
            let effect = effects.iter().find(|e| e.group_idx == k);
            GroupResult::from_offsets(
                levels[k].clone(),
                s.n,
                origin.clone(),
                s.mean,
                s.sd(),
                s.min,
                s.max,
                effect.map(|e| e.diff_from_grand),
            )
        })
        .collect();
    if summaries.len() >= 2 {
        let (lo, hi) = summaries
            .iter()
            .fold((f64::INFINITY, f64::NEG_INFINITY), |(lo, hi), s| {
                (lo.min(s.mean), hi.max(s.mean))
            });
        row.spread_of_means = Some(hi - lo);
        row.spread_pct_tolerance = tol_width.map(|t| 100.0 * (hi - lo) / t);
        if let Some(e) = effects
            .iter()
            .max_by(|a, b| a.diff_from_grand.abs().total_cmp(&b.diff_from_grand.abs()))
        {
            row.stands_out = crate::results::StandsOut {
                level: Some(levels[e.group_idx].clone()),
                diff: Some(e.diff_from_grand),
                sd_units: ok(&e.diff_sd_units),
                pct_tolerance: e.diff_pct_tolerance,
            };
        }
    }
    row.notes = notes;
    let material_reference = material_reference(c, &summaries);
    Partial {
        row,
        summaries,
        levels,
        leading,
        declined,
        material_reference,
        confidence: options.confidence,
        dependence,
        pairs_ready,
    }
}

/// The normality line of a test beyond Shapiro-Wilk's range: D'Agostino-Pearson K^2 with the
/// size of the departure (skewness, excess kurtosis, each with its standard error).
fn normality_note(dp: &crate::stats::normality::DagostinoPearson) -> String {
    format!(
        "normality: {} residuals, beyond Shapiro-Wilk's 5,000, so D'Agostino-Pearson K2 = {}, p = {}; skewness {} (SE {}), excess kurtosis {} (SE {}){}",
        dp.n,
        oneway::short(dp.k2),
        oneway::short(dp.p),
        oneway::short(dp.skewness),
        oneway::short(dp.skewness_se),
        oneway::short(dp.excess_kurtosis),
        oneway::short(dp.excess_kurtosis_se),
        if dp.skewness.abs() < 1.0 && dp.excess_kurtosis.abs() < 2.0 {
            "; at this size the F test is robust to a departure this moderate"
        } else {
            "; a marked departure: read Kruskal-Wallis beside the leading test"
        }
    )
}

/// Notes on a coarse gauge: a resolution above a tenth of the tolerance, or above a tenth of the
/// process spread (six within-group SDs), both common practice ("the ten-to-one rule"); and, when
/// it is coarse, how few distinct values the readings take.
fn push_resolution_notes(
    notes: &mut String,
    resolution: f64,
    tolerance: Option<f64>,
    within_sd: Option<f64>,
    groups: &[&[f64]],
) {
    let mut coarse = Vec::new();
    if let Some(t) = tolerance.filter(|t| resolution > t / 10.0) {
        coarse.push(format!(
            "{:.0}% of the tolerance (at most 10% is common practice)",
            100.0 * resolution / t
        ));
    }
    if let Some(sd) = within_sd.filter(|sd| *sd > 0.0 && resolution > 0.6 * sd) {
        coarse.push(format!(
            "{:.2} within-group SDs (at most a tenth of the process spread, 0.6 SD, is common practice)",
            resolution / sd
        ));
    }
    if coarse.is_empty() {
        return;
    }
    let mut steps: Vec<i64> = groups
        .iter()
        .flat_map(|g| g.iter().map(|v| (v / resolution).round() as i64))
        .collect();
    steps.sort_unstable();
    steps.dedup();
    push_note(
        notes,
        &format!(
            "coarse gauge: its resolution {} is {}; the readings take {} distinct values, so tests lose power and Kruskal-Wallis works on many ties{}",
            oneway::short(resolution),
            coarse.join(" and "),
            steps.len(),
            if steps.len() < 5 { " (fewer than 5 distinct values: read every p-value with care)" } else { "" }
        ),
    );
}

/// What a difference is judged against for materiality: the tolerance width when both limits
/// are set; with one limit, the distance from the target (or, without one, the grand mean of the
/// test) to that limit.
fn material_reference(
    c: &FrameCharacteristic,
    summaries: &[Summary],
) -> Option<(f64, &'static str)> {
    let t = tolerance_of(c)?;
    if let Some(w) = t.width() {
        return Some((w, "the tolerance"));
    }
    let centre = t.target.or_else(|| {
        let n: f64 = summaries.iter().map(|s| s.n as f64).sum();
        (n > 0.0).then(|| summaries.iter().map(|s| s.n as f64 * s.mean).sum::<f64>() / n)
    })?;
    let (distance, what) = match (t.lsl, t.usl) {
        (Some(l), None) => (
            centre - l,
            if t.target.is_some() {
                "the distance from the target to the LSL"
            } else {
                "the distance from the mean to the LSL"
            },
        ),
        (None, Some(u)) => (
            u - centre,
            if t.target.is_some() {
                "the distance from the target to the USL"
            } else {
                "the distance from the mean to the USL"
            },
        ),
        _ => return None,
    };
    (distance > 0.0).then_some((distance, what))
}
pub mod investigate;

#[cfg(test)]
mod tests {
    use super::*;
    use crate::scenario::{study_options, Cell, Shape, Sizes, Spread};

    fn two_groups(shift: f64) -> Frame {
        let cell = Cell {
            k: 2,
            sizes: Sizes::Balanced(50),
            spread: Spread::Equal,
            shape: Shape::Normal,
            shift,
        };
        let mut rng = crate::sample::Rng::new(7);
        cell.frame(&cell.groups(&mut rng))
    }

    // A one-sided characteristic (USL only, target 0): a 2-SD shift is judged against the
    // distance from the target to the USL (4 SD), so it is material; before, a characteristic
    // without both limits could never be.
    #[test]
    fn one_sided_limits_can_be_material() {
        let mut frame = two_groups(-2.0);
        frame.characteristics[0].characteristic.lsl = None;
        let content = check_frame(&frame, &study_options(), None).unwrap();
        let t = &content.tests[0];
        assert_eq!(t.state, TestState::DiffersMaterial, "{}", t.notes);
        assert!(
            t.notes.contains("the distance from the target to the USL"),
            "{}",
            t.notes
        );
    }

    // Both limits, a shift of 0.3 SD (3.75 % of the 8-SD tolerance) found with many values: it
    // differs, but the supported difference is below 10 % of the tolerance: not material.
    #[test]
    fn a_small_supported_difference_is_not_material() {
        let cell = Cell {
            k: 2,
            sizes: Sizes::Balanced(2000),
            spread: Spread::Equal,
            shape: Shape::Normal,
            shift: 0.3,
        };
        let mut rng = crate::sample::Rng::new(11);
        let frame = cell.frame(&cell.groups(&mut rng));
        let content = check_frame(&frame, &study_options(), None).unwrap();
        let t = &content.tests[0];
        assert_eq!(t.state, TestState::Differs, "{}", t.notes);
        assert!(t.notes.contains("materiality:"), "{}", t.notes);
    }

    // A gauge step of one within-group SD: noted as coarse against the process spread (it is
    // 12.5 % of the tolerance too), with the count of distinct readings.
    #[test]
    fn coarse_gauge_is_noted() {
        let cell = Cell {
            k: 3,
            sizes: Sizes::Balanced(20),
            spread: Spread::Equal,
            shape: Shape::Coarse { step: 1.0 },
            shift: 0.0,
        };
        let mut rng = crate::sample::Rng::new(3);
        let frame = cell.frame(&cell.groups(&mut rng));
        let content = check_frame(&frame, &study_options(), None).unwrap();
        let notes = &content.tests[0].notes;
        assert!(notes.contains("coarse gauge"), "{notes}");
        assert!(notes.contains("12% of the tolerance"), "{notes}");
        assert!(notes.contains("distinct values"), "{notes}");
    }

    // A month's test beyond Shapiro-Wilk's 5,000 residuals: normality is still judged, by
    // D'Agostino-Pearson with the skewness and kurtosis and their standard errors, never a bare
    // "not available".
    #[test]
    fn normality_beyond_shapiro_wilk_range() {
        let cell = Cell {
            k: 2,
            sizes: Sizes::Balanced(3000),
            spread: Spread::Equal,
            shape: Shape::Skewed,
            shift: 0.0,
        };
        let mut rng = crate::sample::Rng::new(5);
        let frame = cell.frame(&cell.groups(&mut rng));
        let content = check_frame(&frame, &study_options(), None).unwrap();
        let notes = &content.tests[0].notes;
        assert!(notes.contains("D'Agostino-Pearson K2"), "{notes}");
        assert!(notes.contains("skewness"), "{notes}");
        assert!(!notes.contains("Shapiro-Wilk unavailable"), "{notes}");
        assert!(notes.contains("marked departure"), "{notes}");
    }
}
