//! Change-point scan on the mean of one time-ordered series (one group's values, or period means):
//! binary segmentation with the CUSUM (two-sample mean-split) statistic and a permutation p-value.
//!
//! It answers "since when?" when no process change was logged. Start reading at [`scan`].
//!
//! # Method
//! For a segment `x_s..x_{e-1}` of length `L` with total sum of squares `S` about its mean, the
//! split after `k` values (`min_segment <= k <= L - min_segment`) explains
//! `B_k = C_k^2 L / (k (L - k))`, where `C_k` is the cumulative sum of the centred values (the
//! standardized CUSUM, squared). The candidate change is the split with the largest `B_k`; its
//! statistic is the share `B_k / S`, equivalently the two-sample t of the split,
//! `t = sqrt((L - 2) r / (1 - r))`: the likelihood-ratio statistic for one change in the mean of
//! independent normal values with unknown variance (Worsley 1979; Hinkley 1970 — from memory).
//! Its null distribution is taken from `permutations` random reorderings of the segment (the
//! total sum of squares is the same in every reordering, so the permutation test on the largest
//! `B_k` is exact for exchangeable values): `p = (1 + #{max B* >= max B}) / (1 + permutations)`.
//! A split with `p <= alpha` is accepted and both halves are scanned again (binary segmentation,
//! Scott and Knott 1974; Vostrikova 1981 — from memory), up to `max_change_points`.
//!
//! # False alarms
//! A series gets any change point only if the first, whole-series test rejects, so for
//! exchangeable (independent, identically distributed) values the chance of reporting any change
//! point is exactly `alpha` when `alpha (permutations + 1)` is a whole number (999 permutations,
//! alpha 0.05: 50/1000). Later splits are tested at `alpha` each, conditional on the earlier ones.
//! Autocorrelated values (drifting processes, tool wear) are not exchangeable: expect more
//! false alarms than `alpha` on them; the scan then finds where the level moved, not that it moved
//! abruptly.
//!
//! # Uncertainty of each change point
//! - `se`: the Welch standard error of `after mean - before mean` between the neighbouring
//!   segments, *given* the change time (it ignores that the time was chosen to maximise the
//!   split, so it is optimistic).
//! - `shift_low/high` and `index_low/high`: percentile intervals from a residual bootstrap that
//!   repeats the choice of the time: each replicate rebuilds the local segment from the two
//!   fitted means plus residuals resampled with replacement within each side, and locates the
//!   split again (Hušková and Kirch's bootstrap for change-point estimators — from memory).
//!
//! Random numbers come from SplitMix64 ([`SplitMix64`]) with a fixed random state from the options,
//! so the same data and options give the same result on every machine.

use super::describe::Summary;
use super::{Stat, Unavailable};

/// SplitMix64 pseudo-random generator (Steele, Lea and Flood 2014, "Fast splittable pseudorandom
/// number generators", OOPSLA; the constants of Vigna's reference `splitmix64.c`).
///
/// Small, fast, and good enough for permutation and bootstrap resampling; not for cryptography.
#[derive(Debug, Clone)]
pub struct SplitMix64 {
    state: u64,
}

impl SplitMix64 {
    /// A generator starting from the given fixed random state.
    pub fn new(rng_state: u64) -> Self {
        SplitMix64 { state: rng_state }
    }

    /// The next 64 random bits.
    pub fn next_u64(&mut self) -> u64 {
        self.state = self.state.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.state;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }

    /// A uniform number in [0, 1) with 53 random bits.
    pub fn next_f64(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 * (1.0 / (1u64 << 53) as f64)
    }

    /// A uniform integer in `0..n` without bias (Lemire 2019, "Fast random integer generation in
    /// an interval", ACM TOMACS 29(1)). `n` must be positive.
    pub fn below(&mut self, n: u64) -> u64 {
        debug_assert!(n > 0);
        let mut m = (self.next_u64() as u128) * (n as u128);
        let mut low = m as u64;
        if low < n {
            let threshold = n.wrapping_neg() % n;
            while low < threshold {
                m = (self.next_u64() as u128) * (n as u128);
                low = m as u64;
            }
        }
        (m >> 64) as u64
    }

    /// Shuffles in place (Fisher-Yates / Durstenfeld).
    pub fn shuffle<T>(&mut self, x: &mut [T]) {
        for i in (1..x.len()).rev() {
            let j = self.below(i as u64 + 1) as usize;
            x.swap(i, j);
        }
    }
}

/// Settings of the scan.
#[derive(Debug, Clone, PartialEq)]
pub struct ScanOptions {
    /// Level of each permutation test (default 0.05): the false-alarm rate for a series.
    pub alpha: f64,
    /// Random reorderings per test (default 999).
    pub permutations: usize,
    /// Fewest values on each side of a change (default 5, at least 2).
    pub min_segment: usize,
    /// Most change points reported (default 5).
    pub max_change_points: usize,
    /// Bootstrap replicates for the intervals (default 499).
    pub bootstrap: usize,
    /// Coverage of the bootstrap intervals (default 0.95).
    pub confidence: f64,
    /// Fixed random state of the generator.
    pub rng_state: u64,
}

impl Default for ScanOptions {
    fn default() -> Self {
        ScanOptions {
            alpha: 0.05,
            permutations: 999,
            min_segment: 5,
            max_change_points: 5,
            bootstrap: 499,
            confidence: 0.95,
            rng_state: 0x5AFE_C0DE_2026,
        }
    }
}

/// One permutation test of one segment (every test run is kept, accepted or not).
#[derive(Debug, Clone, PartialEq)]
pub struct SegmentTest {
    /// First index of the segment.
    pub start: usize,
    /// One past the last index of the segment.
    pub end: usize,
    /// Best split: first index after the candidate change.
    pub index: usize,
    /// Share of the segment's sum of squares explained by the split, in [0, 1].
    pub share_explained: f64,
    /// Two-sample t of the split (None when the split leaves no variation within its sides).
    pub t: Option<f64>,
    /// Permutation p-value.
    pub p: f64,
    /// True when `p <= alpha` and the split became a change point.
    pub is_change: bool,
}

/// An accepted change in the mean.
#[derive(Debug, Clone, PartialEq)]
pub struct ChangePoint {
    /// First index after the change (the value at `index` belongs to the new level).
    pub index: usize,
    /// Values between the previous change point (or the start) and this one.
    pub before: Summary,
    /// Values between this change point and the next (or the end).
    pub after: Summary,
    /// `after.mean - before.mean`.
    pub shift: f64,
    /// Welch standard error of the shift given the change time (optimistic, see module docs).
    pub se: f64,
    /// Bootstrap percentile interval of the shift (includes the choice of the time).
    pub shift_low: f64,
    /// Upper end of the shift interval.
    pub shift_high: f64,
    /// Bootstrap percentile interval of the change index.
    pub index_low: usize,
    /// Upper end of the index interval.
    pub index_high: usize,
    /// Permutation p-value of the test that accepted it.
    pub p: f64,
    /// Share of the tested segment's sum of squares explained.
    pub share_explained: f64,
}

/// Result of a scan.
#[derive(Debug, Clone, PartialEq)]
pub struct Scan {
    /// Number of values scanned.
    pub n: usize,
    /// Method name, for reports.
    pub method: &'static str,
    /// Accepted change points, in time order.
    pub change_points: Vec<ChangePoint>,
    /// Every test run, in the order run.
    pub tests: Vec<SegmentTest>,
    /// Plain-language notes (segments too short to test, the cap reached).
    pub notes: Vec<String>,
}

/// Method label used in reports.
pub const METHOD: &str = "binary segmentation, CUSUM mean-split statistic, permutation p-value";

/// The best split of `x` (already centred or not): (k, B_k, S). `k` in `min..=len-min`.
fn best_split(x: &[f64], min_segment: usize) -> (usize, f64, f64) {
    let len = x.len();
    let mean = Summary::from_slice(x).mean;
    let lf = len as f64;
    let mut cum = 0.0;
    let mut total = 0.0;
    let mut best = (min_segment, -1.0);
    for (i, &v) in x.iter().enumerate() {
        let d = v - mean;
        total += d * d;
        cum += d;
        let k = i + 1;
        if k >= min_segment && k <= len - min_segment {
            let kf = k as f64;
            let b = cum * cum * lf / (kf * (lf - kf));
            if b > best.1 {
                best = (k, b);
            }
        }
    }
    (best.0, best.1.max(0.0), total)
}

/// Largest `B_k` only (permutation inner loop; `x` already centred).
fn max_split_centred(x: &[f64], min_segment: usize) -> f64 {
    let lf = x.len() as f64;
    let mut cum = 0.0;
    let mut best = 0.0f64;
    for (i, &d) in x.iter().enumerate() {
        cum += d;
        let k = i + 1;
        if k >= min_segment && k <= x.len() - min_segment {
            let kf = k as f64;
            best = best.max(cum * cum * lf / (kf * (lf - kf)));
        }
    }
    best
}

fn permutation_p(x: &[f64], observed: f64, options: &ScanOptions, rng: &mut SplitMix64) -> f64 {
    let mean = Summary::from_slice(x).mean;
    let mut work: Vec<f64> = x.iter().map(|v| v - mean).collect();
    // Guard against rounding: a reordering that ties the observed value counts as exceeding it.
    let bar = observed * (1.0 - 1e-12);
    let mut count = 0usize;
    for _ in 0..options.permutations {
        rng.shuffle(&mut work);
        if max_split_centred(&work, options.min_segment) >= bar {
            count += 1;
        }
    }
    (1 + count) as f64 / (1 + options.permutations) as f64
}

fn t_of(share: f64, len: usize) -> Option<f64> {
    (share < 1.0 && len > 2).then(|| ((len as f64 - 2.0) * share / (1.0 - share)).sqrt())
}

/// Percentile (linear interpolation between order statistics, Hyndman-Fan type 7).
fn percentile(sorted: &[f64], q: f64) -> f64 {
    let h = (sorted.len() - 1) as f64 * q;
    let lo = h.floor() as usize;
    let hi = h.ceil() as usize;
    sorted[lo] + (h - lo as f64) * (sorted[hi] - sorted[lo])
}

/// The start of a trend: a two-phase ("broken stick") regression whose first phase is level and
/// whose second rises or falls linearly, `x_t = a` for `t <= k` and `a + b (t - k)` after (a
/// segmented regression with an estimated join point: Hudson 1966, "Fitting segmented curves
/// whose join points have to be estimated", JASA 61, 1097-1129; Hinkley 1971, "Inference in
/// two-phase regression", JASA 66, 736-743 — from memory). A drift that grows after a change
/// (tool wear after a holder was fitted) has its onset at the join point, where a mean-split
/// scan would put it in the middle of the ramp.
#[derive(Debug, Clone, PartialEq)]
pub struct Trend {
    /// The join point: the last index of the level phase (the trend starts after it).
    pub index: usize,
    /// The level before the join.
    pub level: f64,
    /// The slope after it, per step.
    pub slope: f64,
    /// Residual sum of squares of the fit.
    pub rss: f64,
    /// Bootstrap percentile interval of the join point (residual bootstrap that refits it).
    pub index_low: usize,
    /// Upper end of the join-point interval.
    pub index_high: usize,
}

/// The least-squares join point of `x` over `k` in `first..=x.len() - 3` and its fit:
/// (k, level, slope, rss).
fn best_join(x: &[f64], first: usize) -> Option<(usize, f64, f64, f64)> {
    let n = x.len();
    let mean = x.iter().sum::<f64>() / n as f64;
    let syy: f64 = x.iter().map(|v| (v - mean) * (v - mean)).sum();
    let mut best: Option<(usize, f64, f64, f64)> = None;
    for k in first..n.saturating_sub(2) {
        // z_t = max(0, t - k); OLS of x on (1, z).
        let m = (n - 1 - k) as f64; // values with z > 0: z = 1..=m
        let sz = m * (m + 1.0) / 2.0;
        let szz_raw = m * (m + 1.0) * (2.0 * m + 1.0) / 6.0;
        let zbar = sz / n as f64;
        let szz = szz_raw - n as f64 * zbar * zbar;
        if szz <= 0.0 {
            continue;
        }
        let szy: f64 = x[k + 1..]
            .iter()
            .enumerate()
            .map(|(j, v)| (j + 1) as f64 * (v - mean))
            .sum();
        let slope = szy / szz;
        let rss = (syy - slope * szy).max(0.0);
        if best.is_none_or(|b| rss < b.3) {
            best = Some((k, mean - slope * zbar, slope, rss));
        }
    }
    best
}

/// Fits the two-phase trend model of [`Trend`] to `x` (time order), with a join point no
/// earlier than index `first`, and a residual-bootstrap interval for the join point
/// (`options.bootstrap` replicates, `options.confidence`, `options.rng_state`).
///
/// Unavailable with fewer than 5 values, a value that is not finite, or no join point to fit.
pub fn trend_onset(x: &[f64], first: usize, options: &ScanOptions) -> Stat<Trend> {
    if x.len() < 5 {
        return Err(Unavailable::new(format!(
            "{} values are too few to fit a trend's start (at least 5)",
            x.len()
        )));
    }
    if let Some(i) = x.iter().position(|v| !v.is_finite()) {
        return Err(Unavailable::new(format!("value {i} is not finite")));
    }
    let (k, level, slope, rss) = best_join(x, first)
        .ok_or_else(|| Unavailable::new("no join point leaves a trend phase to fit"))?;
    let fitted: Vec<f64> = (0..x.len())
        .map(|t| level + slope * t.saturating_sub(k) as f64)
        .collect();
    let residuals: Vec<f64> = x.iter().zip(&fitted).map(|(v, f)| v - f).collect();
    let mut rng = SplitMix64::new(options.rng_state);
    let mut joins: Vec<f64> = Vec::with_capacity(options.bootstrap);
    let mut sample = vec![0.0; x.len()];
    for _ in 0..options.bootstrap {
        for (t, s) in sample.iter_mut().enumerate() {
            *s = fitted[t] + residuals[rng.below(residuals.len() as u64) as usize];
        }
        if let Some((kb, ..)) = best_join(&sample, first) {
            joins.push(kb as f64);
        }
    }
    let (index_low, index_high) = if joins.is_empty() {
        (k, k)
    } else {
        joins.sort_by(f64::total_cmp);
        let tail = (1.0 - options.confidence) / 2.0;
        (
            percentile(&joins, tail).floor() as usize,
            percentile(&joins, 1.0 - tail).ceil() as usize,
        )
    };
    Ok(Trend {
        index: k,
        level,
        slope,
        rss,
        index_low,
        index_high,
    })
}

/// The residual sum of squares of the best single mean split of `x` (the step model), for
/// comparing it with [`trend_onset`]'s fit (both have two parameters).
pub fn step_rss(x: &[f64], min_segment: usize) -> Option<f64> {
    if x.len() < 2 * min_segment.max(1) {
        return None;
    }
    let (_, b, total) = best_split(x, min_segment.max(1));
    Some((total - b).max(0.0))
}

/// Scans `x` (time order) for changes in the mean. See the module documentation for the method.
///
/// Returns `Unavailable` when the options are invalid, a value is not finite, or the series is
/// shorter than `2 * min_segment`. A series with no variation is scanned and has no change point.
pub fn scan(x: &[f64], options: &ScanOptions) -> Stat<Scan> {
    if !(options.alpha > 0.0 && options.alpha < 1.0) {
        return Err(Unavailable::new(format!(
            "alpha {} is not between 0 and 1",
            options.alpha
        )));
    }
    if !(options.confidence > 0.0 && options.confidence < 1.0) {
        return Err(Unavailable::new(format!(
            "confidence {} is not between 0 and 1",
            options.confidence
        )));
    }
    if options.min_segment < 2 {
        return Err(Unavailable::new("min_segment must be at least 2"));
    }
    if options.permutations < 19 {
        return Err(Unavailable::new(
            "at least 19 permutations are needed for a p-value of 0.05",
        ));
    }
    if let Some(i) = x.iter().position(|v| !v.is_finite()) {
        return Err(Unavailable::new(format!("value {i} is not finite")));
    }
    if x.len() < 2 * options.min_segment {
        return Err(Unavailable::new(format!(
            "{} values are too few for a change-point scan: at least {} are needed ({} on each side)",
            x.len(),
            2 * options.min_segment,
            options.min_segment
        )));
    }
    let mut rng = SplitMix64::new(options.rng_state);
    let mut tests = Vec::new();
    let mut notes = Vec::new();
    let mut accepted: Vec<usize> = Vec::new();
    let mut queue = std::collections::VecDeque::from([(0usize, x.len())]);
    while let Some((start, end)) = queue.pop_front() {
        if accepted.len() >= options.max_change_points {
            notes.push(format!(
                "stopped at {} change points (the most asked for); segments left unscanned",
                options.max_change_points
            ));
            break;
        }
        let segment = &x[start..end];
        if segment.len() < 2 * options.min_segment {
            continue;
        }
        let (k, b, total) = best_split(segment, options.min_segment);
        if total <= 0.0 {
            notes.push(format!(
                "values {start}..{end} do not vary: no change can be tested there"
            ));
            continue;
        }
        let share = (b / total).min(1.0);
        let p = permutation_p(segment, b, options, &mut rng);
        let is_change = p <= options.alpha;
        tests.push(SegmentTest {
            start,
            end,
            index: start + k,
            share_explained: share,
            t: t_of(share, segment.len()),
            p,
            is_change,
        });
        if is_change {
            accepted.push(start + k);
            queue.push_back((start, start + k));
            queue.push_back((start + k, end));
        }
    }
    accepted.sort_unstable();
    let mut change_points = Vec::with_capacity(accepted.len());
    for (i, &index) in accepted.iter().enumerate() {
        let left = if i == 0 { 0 } else { accepted[i - 1] };
        let right = accepted.get(i + 1).copied().unwrap_or(x.len());
        let test = tests
            .iter()
            .find(|t| t.is_change && t.index == index)
            .expect("every accepted index has its test");
        change_points.push(describe_change(
            x, left, index, right, test, options, &mut rng,
        ));
    }
    Ok(Scan {
        n: x.len(),
        method: METHOD,
        change_points,
        tests,
        notes,
    })
}

fn describe_change(
    x: &[f64],
    left: usize,
    index: usize,
    right: usize,
    test: &SegmentTest,
    options: &ScanOptions,
    rng: &mut SplitMix64,
) -> ChangePoint {
    let before = Summary::from_slice(&x[left..index]);
    let after = Summary::from_slice(&x[index..right]);
    let shift = after.mean - before.mean;
    let var = |s: &Summary| s.variance().unwrap_or(0.0) / s.n as f64;
    let se = (var(&before) + var(&after)).sqrt();
    // Residual bootstrap within each side, locating the split again in every replicate.
    let res_before: Vec<f64> = x[left..index].iter().map(|v| v - before.mean).collect();
    let res_after: Vec<f64> = x[index..right].iter().map(|v| v - after.mean).collect();
    let len = right - left;
    let min_segment = options.min_segment.min(index - left).min(right - index);
    let mut shifts = Vec::with_capacity(options.bootstrap);
    let mut indices = Vec::with_capacity(options.bootstrap);
    let mut work = vec![0.0; len];
    for _ in 0..options.bootstrap {
        for (pos, w) in work.iter_mut().enumerate() {
            *w = if left + pos < index {
                before.mean + res_before[rng.below(res_before.len() as u64) as usize]
            } else {
                after.mean + res_after[rng.below(res_after.len() as u64) as usize]
            };
        }
        let (k, _, _) = best_split(&work, min_segment);
        let b = Summary::from_slice(&work[..k]).mean;
        let a = Summary::from_slice(&work[k..]).mean;
        shifts.push(a - b);
        indices.push((left + k) as f64);
    }
    let tail = (1.0 - options.confidence) / 2.0;
    let (shift_low, shift_high, index_low, index_high) = if shifts.is_empty() {
        (shift, shift, index, index)
    } else {
        shifts.sort_by(f64::total_cmp);
        indices.sort_by(f64::total_cmp);
        (
            percentile(&shifts, tail),
            percentile(&shifts, 1.0 - tail),
            percentile(&indices, tail).floor() as usize,
            percentile(&indices, 1.0 - tail).ceil() as usize,
        )
    };
    ChangePoint {
        index,
        before,
        after,
        shift,
        se,
        shift_low,
        shift_high,
        index_low,
        index_high,
        p: test.p,
        share_explained: test.share_explained,
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Standard normal by Box-Muller (for invented test series only).
    fn normal(rng: &mut SplitMix64) -> f64 {
        let u1 = 1.0 - rng.next_f64(); // (0, 1]
        let u2 = rng.next_f64();
        (-2.0 * u1.ln()).sqrt() * (2.0 * std::f64::consts::PI * u2).cos()
    }

    /// Invented series: `n` independent N(0, 1) values, plus `shift` from index `at` on.
    fn invented(n: usize, at: usize, shift: f64, rng_state: u64) -> Vec<f64> {
        let mut rng = SplitMix64::new(rng_state);
        (0..n)
            .map(|i| normal(&mut rng) + if i >= at { shift } else { 0.0 })
            .collect()
    }

    #[test]
    fn splitmix64_reference_output() {
        // Rosetta Code task "Pseudo-random numbers/Splitmix64": from state 1234567 the first five
        // outputs are 6457827717110365317, 3203168211198807973, 9817491932198370423,
        // 4593380528125082431, 16408922859458223821 (same as Vigna's splitmix64.c).
        let mut rng = SplitMix64::new(1234567);
        let expected = [
            6457827717110365317u64,
            3203168211198807973,
            9817491932198370423,
            4593380528125082431,
            16408922859458223821,
        ];
        for e in expected {
            assert_eq!(rng.next_u64(), e);
        }
    }

    #[test]
    fn below_is_uniform_and_shuffle_permutes() {
        // Chi-square check of 60 000 draws in 0..6 (10 000 expected each); the 0.999 quantile of
        // chi-square with 5 df is 20.515 (standard tables).
        let mut rng = SplitMix64::new(42);
        let mut counts = [0u32; 6];
        for _ in 0..60_000 {
            counts[rng.below(6) as usize] += 1;
        }
        let chi2: f64 = counts
            .iter()
            .map(|&c| (c as f64 - 10_000.0).powi(2) / 10_000.0)
            .sum();
        assert!(chi2 < 20.515, "chi2 = {chi2}");
        let mut v: Vec<u32> = (0..50).collect();
        rng.shuffle(&mut v);
        let mut sorted = v.clone();
        sorted.sort_unstable();
        assert_eq!(sorted, (0..50).collect::<Vec<u32>>());
        assert_ne!(v, sorted);
    }

    #[test]
    fn finds_a_known_shift() {
        // Invented series: 80 values, N(0, 1), mean steps up by 2 at index 40.
        // Tolerance stated: detected index within 3 of the true 40, one change point only,
        // estimated shift within 3 standard errors of 2, and the intervals cover the truth.
        let x = invented(80, 40, 2.0, 7);
        let scan = scan(&x, &ScanOptions::default()).unwrap();
        assert_eq!(scan.change_points.len(), 1, "{:?}", scan.tests);
        let cp = &scan.change_points[0];
        assert!(cp.index.abs_diff(40) <= 3, "index {}", cp.index);
        assert!(
            (cp.shift - 2.0).abs() < 3.0 * cp.se,
            "shift {} se {}",
            cp.shift,
            cp.se
        );
        assert!(cp.p <= 0.001 + 1e-12);
        assert!(cp.index_low <= 40 && 40 <= cp.index_high);
        assert!(cp.shift_low <= 2.0 && 2.0 <= cp.shift_high);
    }

    #[test]
    fn location_accuracy_over_many_random_states() {
        // Invented series, 300 random states: 60 independent N(0, 1) values, the mean steps up by
        // 2 SD at index 25. Stated tolerance: a change point within 3 of index 25. Expected share
        // 0.964, from an independent numpy simulation of the least-squares split (100 000 series,
        // numpy default_rng(1), same min_segment 5):
        //   x = rng.standard_normal((N, 60)); x[:, 25:] += 2; c = cumsum(x - mean, 1);
        //   B = c**2 * 60 / (k (60 - k)) for k in 5..=55; share of |argmax - 25| <= 3.
        // Test: the observed share lies within 3 binomial standard errors of 0.964.
        let options = ScanOptions {
            permutations: 199,
            bootstrap: 0,
            ..ScanOptions::default()
        };
        let n_series = 300;
        let mut hits = 0;
        for state in 0..n_series as u64 {
            let x = invented(60, 25, 2.0, 1000 + state);
            let scan = scan(&x, &options).unwrap();
            if scan.change_points.iter().any(|c| c.index.abs_diff(25) <= 3) {
                hits += 1;
            }
        }
        let share = hits as f64 / n_series as f64;
        let se = (0.964f64 * 0.036 / n_series as f64).sqrt();
        assert!((share - 0.964).abs() <= 3.0 * se, "share {share}");
    }

    #[test]
    fn two_changes_are_both_found() {
        // Invented series: level 0 for 30 values, +3 for 30, then back to +1 for 30.
        let mut x = invented(90, 30, 3.0, 99);
        for v in x.iter_mut().skip(60) {
            *v -= 2.0;
        }
        let scan = scan(&x, &ScanOptions::default()).unwrap();
        let found: Vec<usize> = scan.change_points.iter().map(|c| c.index).collect();
        assert_eq!(found.len(), 2, "{found:?}");
        assert!(
            found[0].abs_diff(30) <= 3 && found[1].abs_diff(60) <= 3,
            "{found:?}"
        );
        assert!((scan.change_points[1].shift + 2.0).abs() < 3.0 * scan.change_points[1].se);
    }

    #[test]
    fn null_series_false_alarm_rate() {
        // 500 invented null series (40 independent N(0, 1) values each, a different random state
        // for each series and for its permutations). With the default 999 permutations and alpha
        // 0.05 the chance of any change point is exactly 50/1000 = 0.05 per series. Stated test: the share
        // with any change point lies within 3 binomial standard errors of 0.05,
        // 3 * sqrt(0.05 * 0.95 / 500) = 0.0292, i.e. between 0.0208 and 0.0792.
        let mut alarms = 0;
        for state in 0..500u64 {
            let x = invented(40, 40, 0.0, 50_000 + state);
            let options = ScanOptions {
                bootstrap: 0,
                rng_state: 90_000 + state,
                ..ScanOptions::default()
            };
            if !scan(&x, &options).unwrap().change_points.is_empty() {
                alarms += 1;
            }
        }
        let share = alarms as f64 / 500.0;
        let se = (0.05f64 * 0.95 / 500.0).sqrt();
        assert!(
            (share - 0.05).abs() <= 3.0 * se,
            "false-alarm share {share}"
        );
    }

    #[test]
    fn permutation_p_is_exact_for_a_perfect_step() {
        // 5 zeros then 5 ones: the observed split is the best any ordering can give, so every
        // reordering that also puts the zeros first ties it. Exact p = P(some permutation reaches
        // share 1) under permutation = 2 / C(10, 5) = 2/252 (zeros first or ones first); with 999
        // random reorderings the estimate must be near that (stated tolerance: within 0.01).
        let x = [0.0, 0.0, 0.0, 0.0, 0.0, 1.0, 1.0, 1.0, 1.0, 1.0];
        let scan = scan(&x, &ScanOptions::default()).unwrap();
        let first = &scan.tests[0];
        assert_eq!(first.index, 5);
        assert!((first.share_explained - 1.0).abs() < 1e-12);
        assert!(first.t.is_none());
        assert!((first.p - 2.0 / 252.0).abs() < 0.01, "p {}", first.p);
    }

    #[test]
    fn bad_input_is_unavailable() {
        let options = ScanOptions::default();
        assert!(scan(&[1.0; 9], &options)
            .unwrap_err()
            .reason
            .contains("too few"));
        assert!(scan(&[1.0, f64::NAN, 2.0], &options).is_err());
        let bad = ScanOptions {
            alpha: 1.5,
            ..ScanOptions::default()
        };
        assert!(scan(&[0.0; 20], &bad).is_err());
        let bad = ScanOptions {
            min_segment: 1,
            ..ScanOptions::default()
        };
        assert!(scan(&[0.0; 20], &bad).is_err());
        // Constant series: scanned, no change point, a note says why.
        let flat = scan(&[3.0; 20], &options).unwrap();
        assert!(flat.change_points.is_empty());
        assert!(flat.notes[0].contains("do not vary"));
    }

    #[test]
    fn same_state_same_result() {
        let x = invented(50, 20, 1.0, 5);
        let a = scan(&x, &ScanOptions::default()).unwrap();
        let b = scan(&x, &ScanOptions::default()).unwrap();
        assert_eq!(a, b);
    }

    // A level series that starts to rise linearly after index 19: the join point is found there
    // (exactly, without noise), where a mean split would land in the middle of the ramp.
    #[test]
    fn trend_onset_finds_the_start_of_a_ramp() {
        let x: Vec<f64> = (0..40)
            .map(|t: usize| 1.0 + 0.25 * t.saturating_sub(19) as f64)
            .collect();
        let t = trend_onset(&x, 0, &ScanOptions::default()).unwrap();
        assert_eq!(t.index, 19);
        assert!((t.slope - 0.25).abs() < 1e-12, "{}", t.slope);
        assert!((t.level - 1.0).abs() < 1e-12, "{}", t.level);
        assert!(t.rss < 1e-18);
        assert_eq!((t.index_low, t.index_high), (19, 19));
        let (k, ..) = best_split(&x, 3);
        assert!(k > 25, "the mean split lands in the ramp: {k}");
        assert!(step_rss(&x, 3).unwrap() > 1.0);
    }

    // With noise the interval covers the true join point. Values from SplitMix64 (uniform
    // noise of half-width 0.5 around a ramp of slope 0.2 after index 29).
    #[test]
    fn trend_onset_interval_covers_the_join_with_noise() {
        let mut rng = SplitMix64::new(7);
        let x: Vec<f64> = (0..60)
            .map(|t: usize| 0.2 * t.saturating_sub(29) as f64 + rng.next_f64() - 0.5)
            .collect();
        let t = trend_onset(&x, 0, &ScanOptions::default()).unwrap();
        assert!(t.index_low <= 29 && 29 <= t.index_high, "{t:?}");
        assert!(t.index.abs_diff(29) <= 4, "{t:?}");
    }

    // Coverage of the change time's bootstrap interval, by simulation (issue 16): 200 invented
    // series of 60 independent N(0, 1) values whose mean steps up by 1 SD at index 30; among the
    // series where the step is found (p <= 0.05), the share whose [index_low, index_high] holds
    // the true index. Printed with `cargo test --release --lib coverage -- --nocapture`.
    #[test]
    fn change_time_interval_coverage_for_a_one_sd_step() {
        let options = ScanOptions {
            permutations: 199,
            max_change_points: 1,
            ..ScanOptions::default()
        };
        let (mut found, mut covered) = (0usize, 0usize);
        for state in 0..200u64 {
            let x = invented(60, 30, 1.0, 5000 + state);
            let scan = scan(&x, &options).unwrap();
            if let Some(c) = scan.change_points.first() {
                found += 1;
                if c.index_low <= 30 && 30 <= c.index_high {
                    covered += 1;
                }
            }
        }
        let rate = covered as f64 / found as f64;
        eprintln!("1-SD step: found in {found} of 200 series; interval covers the true index in {covered} of them ({rate:.3})");
        assert!(found >= 120, "found {found}");
        assert!(rate >= 0.90, "coverage {rate}");
    }
}
