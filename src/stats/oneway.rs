//! Every one-way result for one characteristic x factor, bundled: the place to start reading the
//! statistics core.
//!
//! [`analyze`] takes the raw values of each group (as offsets from one exact origin, see
//! [`super::decimal`]) and returns a [`OneWay`]: group summaries, the ANOVA table, the requirement
//! checks, the robust alternatives (Welch, Kruskal-Wallis), effect sizes, and the choice of the
//! leading result with its reason. Names of groups stay with the caller; results refer to groups by
//! index in input order.
//!
//! The leading result (issue 2, item 7), with thresholds that are common practice (no published
//! source):
//! - Welch leads when the variances look different: Brown-Forsythe p < [`VARIANCE_CHECK_ALPHA`]
//!   (0.05) or the ratio of the largest to the smallest group SD exceeds [`SD_RATIO_LIMIT`] (2).
//! - Otherwise the classic F leads.
//! - Kruskal-Wallis is recommended in addition when the residuals are clearly non-normal
//!   (Shapiro-Wilk p < [`NORMALITY_ALPHA`], 0.01) and the groups are small (the smallest has fewer
//!   than [`SMALL_GROUP_N`], 15, values), where the F test cannot lean on the central limit theorem.

use super::anova::{one_way, AnovaTable};
use super::describe::Summary;
use super::effect::{effect_sizes, Effect};
use super::kruskal::kruskal_wallis;
use super::normality::{shapiro_wilk, ShapiroWilk};
use super::posthoc::{games_howell, group_effects, tukey_kramer, GroupEffect, Pair};
use super::power::{sensitivity, Sensitivity};
use super::spread::{bartlett, brown_forsythe, count_beyond, levene_mean, sd_ratio};
use super::variance_components::{one_way_random, VarianceComponents};
use super::welch::welch;
use super::{Stat, TestResult, Unavailable};

/// Brown-Forsythe p below this makes Welch lead (common practice).
pub const VARIANCE_CHECK_ALPHA: f64 = 0.05;
/// Largest / smallest group SD above this makes Welch lead (rule of thumb, common practice).
pub const SD_RATIO_LIMIT: f64 = 2.0;
/// Shapiro-Wilk p below this counts as clearly non-normal residuals (common practice).
pub const NORMALITY_ALPHA: f64 = 0.01;
/// Groups smaller than this count as small for the Kruskal-Wallis recommendation (common practice).
pub const SMALL_GROUP_N: u64 = 15;
/// Residuals beyond this many residual SDs are counted as outlying (common practice).
pub const OUTLIER_SD: f64 = 3.0;

/// Specification limits and target, as offsets from the same origin as the values.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct Tolerance {
    /// Lower specification limit.
    pub lsl: Option<f64>,
    /// Upper specification limit.
    pub usl: Option<f64>,
    /// Target (nominal) value.
    pub target: Option<f64>,
}

impl Tolerance {
    /// USL - LSL when both are known and USL > LSL.
    pub fn width(&self) -> Option<f64> {
        match (self.lsl, self.usl) {
            (Some(l), Some(u)) if u > l => Some(u - l),
            _ => None,
        }
    }
}

/// Options of the one-way analysis.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct OneWayOptions {
    /// Significance level of the tests (0.05).
    pub alpha: f64,
    /// Confidence level of intervals (0.95).
    pub confidence: f64,
    /// Power the sensitivity analysis aims for (0.8).
    pub power_target: f64,
    /// A difference between two group means the user wants to be able to detect.
    pub detect: Option<f64>,
    /// Specification limits, when known.
    pub tolerance: Option<Tolerance>,
    /// Compute the all-pairs comparisons (`OneWay::pairs`). A periodic check turns this off and
    /// computes pairs only for the tests it flags after the false-discovery adjustment.
    pub with_pairs: bool,
}

impl Default for OneWayOptions {
    fn default() -> Self {
        OneWayOptions {
            alpha: 0.05,
            confidence: 0.95,
            power_target: 0.8,
            detect: None,
            tolerance: None,
            with_pairs: true,
        }
    }
}

/// Which test the report leads with.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum LeadingMethod {
    /// The classic one-way ANOVA F test.
    ClassicF,
    /// Welch's ANOVA (unequal variances).
    Welch,
}

impl LeadingMethod {
    /// The published name.
    pub fn name(self) -> &'static str {
        match self {
            LeadingMethod::ClassicF => "classic one-way ANOVA F",
            LeadingMethod::Welch => "Welch ANOVA",
        }
    }
}

/// The leading result and why it was chosen.
#[derive(Debug, Clone, PartialEq)]
pub struct Leading {
    /// The test the report leads with.
    pub method: LeadingMethod,
    /// Why, in plain words, naming the check values.
    pub reason: String,
    /// Whether Kruskal-Wallis is recommended in addition (non-normal residuals, small groups).
    pub recommend_kruskal_wallis: bool,
    /// p-value of the leading test, when it could be computed.
    pub p: Option<f64>,
    /// Statistic (F) of the leading test, when it could be computed.
    pub statistic: Option<f64>,
}

/// Every one-way result for one set of groups.
#[derive(Debug, Clone)]
pub struct OneWay {
    /// Summary of each group, in input order.
    pub summaries: Vec<Summary>,
    /// The classic ANOVA table.
    pub anova: Stat<AnovaTable>,
    /// Welch's ANOVA.
    pub welch: Stat<TestResult>,
    /// Kruskal-Wallis H with tie correction.
    pub kruskal_wallis: Stat<TestResult>,
    /// Levene's test (mean-centred).
    pub levene: Stat<TestResult>,
    /// Brown-Forsythe test (median-centred Levene).
    pub brown_forsythe: Stat<TestResult>,
    /// Bartlett's test.
    pub bartlett: Stat<TestResult>,
    /// Largest / smallest group SD.
    pub sd_ratio: Stat<f64>,
    /// Number of residuals beyond [`OUTLIER_SD`] residual SDs.
    pub n_beyond_3sd: Stat<usize>,
    /// Shapiro-Wilk on the residuals (value minus its group mean, in group order).
    pub shapiro_wilk: Stat<ShapiroWilk>,
    /// Effect sizes.
    pub effect: Stat<Effect>,
    /// Variance components of the random-effects one-way model.
    pub variance_components: Stat<VarianceComponents>,
    /// The leading result.
    pub leading: Leading,
    /// All pairs (a < b): Games-Howell when Welch leads, Tukey-Kramer otherwise (empty when
    /// `OneWayOptions::with_pairs` is off).
    pub pairs: Vec<Stat<Pair>>,
    /// Each group's mean against the grand mean.
    pub group_effects: Vec<GroupEffect>,
    /// Sensitivity of the F test actually run (power, minimum detectable difference).
    pub sensitivity: Stat<Sensitivity>,
}

fn check_input(groups: &[&[f64]]) -> Stat<()> {
    if groups.len() < 2 {
        return Err(Unavailable::new(format!(
            "needs at least two groups (got {})",
            groups.len()
        )));
    }
    for (idx, g) in groups.iter().enumerate() {
        if g.is_empty() {
            return Err(Unavailable::new(format!("group {} has no values", idx + 1)));
        }
        if let Some(pos) = g.iter().position(|v| !v.is_finite()) {
            return Err(Unavailable::new(format!(
                "group {} value {} is not a finite number",
                idx + 1,
                pos + 1
            )));
        }
    }
    Ok(())
}

/// Chooses the leading result from the variance checks (see the module docs for the rule).
pub fn choose_leading(
    anova: &Stat<AnovaTable>,
    welch: &Stat<TestResult>,
    brown_forsythe: &Stat<TestResult>,
    sd_ratio: &Stat<f64>,
) -> Leading {
    let mut signals = Vec::new();
    if let Ok(bf) = brown_forsythe {
        if bf.p < VARIANCE_CHECK_ALPHA {
            signals.push(format!(
                "Brown-Forsythe p = {} < {VARIANCE_CHECK_ALPHA}",
                short(bf.p)
            ));
        }
    }
    if let Ok(r) = sd_ratio {
        if *r > SD_RATIO_LIMIT {
            signals.push(format!(
                "largest/smallest group SD = {} > {SD_RATIO_LIMIT}",
                short(*r)
            ));
        }
    }
    let classic = |reason: String| Leading {
        method: LeadingMethod::ClassicF,
        reason,
        recommend_kruskal_wallis: false,
        p: anova.as_ref().ok().map(|t| t.p),
        statistic: anova.as_ref().ok().map(|t| t.f),
    };
    if !signals.is_empty() {
        return match welch {
            Ok(w) => Leading {
                method: LeadingMethod::Welch,
                reason: format!(
                    "group variances look different ({}), so Welch's test, which does not assume equal variances, leads",
                    signals.join("; ")
                ),
                recommend_kruskal_wallis: false,
                p: Some(w.p),
                statistic: Some(w.statistic),
            },
            Err(e) => classic(format!(
                "group variances look different ({}), but Welch's test is unavailable ({}); read the classic F with care",
                signals.join("; "),
                e.reason
            )),
        };
    }
    let mut unknown = Vec::new();
    if let Err(e) = brown_forsythe {
        unknown.push(format!("Brown-Forsythe unavailable: {}", e.reason));
    }
    if let Err(e) = sd_ratio {
        unknown.push(format!("SD ratio unavailable: {}", e.reason));
    }
    if unknown.is_empty() {
        classic(format!(
            "the variance checks pass (Brown-Forsythe p >= {VARIANCE_CHECK_ALPHA}, largest/smallest group SD <= {SD_RATIO_LIMIT}), so the classic F leads"
        ))
    } else {
        classic(format!(
            "the variance checks could not all be made ({}), so the classic F leads by default",
            unknown.join("; ")
        ))
    }
}

/// A number in a short form for reasons (4 significant digits).
fn short(x: f64) -> String {
    if x != 0.0 && (x.abs() < 1e-3 || x.abs() >= 1e5) {
        format!("{x:.3e}")
    } else {
        let digits = (3 - x.abs().log10().floor() as i32).max(0) as usize;
        format!("{x:.digits$}")
    }
}

/// Runs every one-way analysis on raw group values (offsets from one origin).
///
/// Unavailable as a whole only when the input cannot be analysed at all: fewer than two groups, an
/// empty group, or a value that is not finite. Otherwise each statistic carries its own
/// `Unavailable` reason (for example zero within-group variance leaves F undefined while the
/// group table is still reported).
pub fn analyze(groups: &[&[f64]], options: &OneWayOptions) -> Stat<OneWay> {
    check_input(groups)?;
    let summaries: Vec<Summary> = groups.iter().map(|g| Summary::from_slice(g)).collect();
    let anova = one_way(&summaries);
    let welch_result = welch(&summaries);
    let kw = kruskal_wallis(groups);
    let levene = levene_mean(groups);
    let bf = brown_forsythe(groups);
    let bart = bartlett(&summaries);
    let ratio = sd_ratio(&summaries);
    let n_beyond = match &anova {
        Ok(t) => count_beyond(groups, &summaries, t.resid_sd, OUTLIER_SD),
        Err(e) => Err(e.clone()),
    };
    let tolerance = options.tolerance.and_then(|t| t.width());
    let effect = anova
        .as_ref()
        .map(|t| effect_sizes(t, &summaries, tolerance))
        .map_err(Clone::clone);
    let residuals: Vec<f64> = groups
        .iter()
        .zip(&summaries)
        .flat_map(|(g, s)| g.iter().map(move |v| v - s.mean))
        .collect();
    let sw = shapiro_wilk(&residuals);
    let mut leading = choose_leading(&anova, &welch_result, &bf, &ratio);
    let smallest = summaries.iter().map(|s| s.n).min().unwrap_or(0);
    if let Ok(test) = &sw {
        if test.p < NORMALITY_ALPHA && smallest < SMALL_GROUP_N {
            leading.recommend_kruskal_wallis = true;
            leading.reason.push_str(&format!(
                "; the residuals look clearly non-normal (Shapiro-Wilk p = {} < {NORMALITY_ALPHA}) and the smallest group has {smallest} values (< {SMALL_GROUP_N}), so read Kruskal-Wallis too",
                short(test.p)
            ));
        }
    }
    let variance_components = one_way_random(&summaries, options.confidence);
    let pairs = match leading.method {
        _ if !options.with_pairs => Vec::new(),
        LeadingMethod::Welch => games_howell(&summaries, options.confidence),
        LeadingMethod::ClassicF => tukey_kramer(&summaries, options.confidence),
    };
    let within_sd = anova.as_ref().ok().map(|t| t.resid_sd);
    let effects = group_effects(&summaries, within_sd, tolerance);
    let sens = match &anova {
        Ok(t) => sensitivity(
            &summaries,
            t.resid_sd,
            options.alpha,
            options.power_target,
            options.detect,
            tolerance,
        ),
        Err(e) => Err(Unavailable::new(format!(
            "needs the within-group SD, which is unavailable ({})",
            e.reason
        ))),
    };
    Ok(OneWay {
        summaries,
        anova,
        welch: welch_result,
        kruskal_wallis: kw,
        levene,
        brown_forsythe: bf,
        bartlett: bart,
        sd_ratio: ratio,
        n_beyond_3sd: n_beyond,
        shapiro_wilk: sw,
        effect,
        variance_components,
        leading,
        pairs,
        group_effects: effects,
        sensitivity: sens,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn classic_leads_when_checks_pass() {
        // Similar spreads, shifted means.
        let a = [1.0, 2.0, 3.0, 2.5, 1.5];
        let b = [2.0, 3.1, 4.0, 3.4, 2.6];
        let c = [3.0, 4.0, 5.2, 4.4, 3.5];
        let r = analyze(&[&a, &b, &c], &OneWayOptions::default()).unwrap();
        assert_eq!(r.leading.method, LeadingMethod::ClassicF);
        assert!(
            r.leading.reason.contains("checks pass"),
            "{}",
            r.leading.reason
        );
        assert_eq!(r.leading.p, Some(r.anova.as_ref().unwrap().p));
    }

    #[test]
    fn welch_leads_when_sd_ratio_large() {
        let a = [1.0, 1.1, 0.9, 1.05, 0.95];
        let b = [2.0, 5.0, -1.0, 3.0, 1.0];
        let r = analyze(&[&a, &b], &OneWayOptions::default()).unwrap();
        assert!(*r.sd_ratio.as_ref().unwrap() > 2.0);
        assert_eq!(r.leading.method, LeadingMethod::Welch);
        assert!(r.leading.reason.contains("SD"), "{}", r.leading.reason);
        assert_eq!(r.leading.p, Some(r.welch.as_ref().unwrap().p));
    }

    #[test]
    fn zero_variance_keeps_groups_and_reasons() {
        let r = analyze(&[&[1.0, 1.0], &[2.0, 2.0]], &OneWayOptions::default()).unwrap();
        assert_eq!(r.summaries.len(), 2);
        assert!(r.anova.unwrap_err().reason.contains("F is undefined"));
        assert!(r.welch.is_err());
        assert!(r.effect.is_err());
        assert!(r.leading.p.is_none());
    }

    // Clearly non-normal residuals (one far value per group) in groups of 10 (< 15): the report
    // recommends Kruskal-Wallis and says why; with 20 values per group it does not.
    #[test]
    fn kruskal_wallis_recommended_for_small_skewed_groups() {
        let skewed = |n: usize, shift: f64| -> Vec<f64> {
            let mut v: Vec<f64> = (0..n).map(|i| shift + (i % 3) as f64 * 0.1).collect();
            v[0] = shift + 25.0;
            v
        };
        let (a, b) = (skewed(10, 0.0), skewed(10, 0.5));
        let r = analyze(&[&a, &b], &OneWayOptions::default()).unwrap();
        assert!(r.shapiro_wilk.as_ref().unwrap().p < NORMALITY_ALPHA);
        assert!(r.leading.recommend_kruskal_wallis);
        assert!(
            r.leading.reason.contains("Kruskal-Wallis"),
            "{}",
            r.leading.reason
        );
        let (a, b) = (skewed(20, 0.0), skewed(20, 0.5));
        let r = analyze(&[&a, &b], &OneWayOptions::default()).unwrap();
        assert!(!r.leading.recommend_kruskal_wallis);
    }

    // Games-Howell pairs when Welch leads, Tukey-Kramer otherwise.
    #[test]
    fn pair_method_follows_leading() {
        use crate::stats::posthoc::PairMethod;
        let a = [1.0, 1.1, 0.9, 1.05, 0.95];
        let b = [2.0, 5.0, -1.0, 3.0, 1.0];
        let r = analyze(&[&a, &b], &OneWayOptions::default()).unwrap();
        assert_eq!(r.pairs.len(), 1);
        assert_eq!(r.pairs[0].as_ref().unwrap().method, PairMethod::GamesHowell);
        let c = [1.2, 1.0, 0.8, 1.1, 0.9];
        let r = analyze(&[&a, &c], &OneWayOptions::default()).unwrap();
        assert_eq!(r.pairs[0].as_ref().unwrap().method, PairMethod::TukeyKramer);
    }

    #[test]
    fn bad_input() {
        let o = OneWayOptions::default();
        assert!(analyze(&[&[1.0, 2.0]], &o).is_err());
        assert!(analyze(&[&[1.0, 2.0], &[]], &o).is_err());
        let e = analyze(&[&[1.0, 2.0], &[1.0, f64::INFINITY]], &o).unwrap_err();
        assert!(e.reason.contains("group 2 value 2"), "{e}");
    }

    use crate::stats::lre;
    use proptest::prelude::*;

    fn to_groups(ints: &[Vec<i32>]) -> Vec<Vec<f64>> {
        ints.iter()
            .map(|g| g.iter().map(|&v| f64::from(v) * 0.01).collect())
            .collect()
    }

    fn run(groups: &[Vec<f64>]) -> OneWay {
        let refs: Vec<&[f64]> = groups.iter().map(Vec::as_slice).collect();
        analyze(&refs, &OneWayOptions::default()).unwrap()
    }

    /// Both available and agreeing to `digits`, or both unavailable.
    fn same(a: &Stat<TestResult>, b: &Stat<TestResult>, digits: f64) -> bool {
        match (a, b) {
            (Ok(x), Ok(y)) => {
                lre(x.statistic, y.statistic) >= digits && (lre(x.p, y.p) >= digits - 1.0)
            }
            (Err(_), Err(_)) => true,
            _ => false,
        }
    }

    fn anova_as_test(r: &OneWay) -> Stat<TestResult> {
        r.anova.as_ref().map_err(Clone::clone).map(|t| TestResult {
            statistic: t.f,
            p: t.p,
            df1: None,
            df2: None,
        })
    }

    proptest! {
        #![proptest_config(ProptestConfig::with_cases(64))]

        // Location-scale invariance: F, Welch, Kruskal-Wallis, Levene, Brown-Forsythe and Bartlett
        // (statistic and p) do not change when every value is shifted by a constant or multiplied
        // by a positive constant.
        #[test]
        fn invariant_to_shift_and_scale(
            ints in prop::collection::vec(prop::collection::vec(-500i32..500, 2..10), 2..6),
            shift in -1000.0f64..1000.0,
            scale in 0.001f64..1000.0,
        ) {
            let base = to_groups(&ints);
            let moved: Vec<Vec<f64>> = base
                .iter()
                .map(|g| g.iter().map(|v| v * scale + shift).collect())
                .collect();
            let a = run(&base);
            let b = run(&moved);
            prop_assert!(same(&anova_as_test(&a), &anova_as_test(&b), 9.0));
            prop_assert!(same(&a.welch, &b.welch, 9.0));
            prop_assert!(same(&a.kruskal_wallis, &b.kruskal_wallis, 12.0));
            prop_assert!(same(&a.levene, &b.levene, 8.0));
            prop_assert!(same(&a.brown_forsythe, &b.brown_forsythe, 8.0));
            prop_assert!(same(&a.bartlett, &b.bartlett, 9.0));
        }

        // Group order does not matter (reversed order gives the same statistics).
        #[test]
        fn group_order_irrelevant(
            ints in prop::collection::vec(prop::collection::vec(-500i32..500, 1..10), 2..6),
        ) {
            let base = to_groups(&ints);
            let mut reversed = base.clone();
            reversed.reverse();
            let a = run(&base);
            let b = run(&reversed);
            prop_assert!(same(&anova_as_test(&a), &anova_as_test(&b), 12.0));
            prop_assert!(same(&a.welch, &b.welch, 12.0));
            prop_assert!(same(&a.kruskal_wallis, &b.kruskal_wallis, 12.0));
            prop_assert!(same(&a.levene, &b.levene, 12.0));
            prop_assert!(same(&a.brown_forsythe, &b.brown_forsythe, 12.0));
            prop_assert!(same(&a.bartlett, &b.bartlett, 12.0));
        }

        // Merging the summaries of two disjoint parts equals summarising the union.
        #[test]
        fn merge_equals_union(
            a in prop::collection::vec(-1e6f64..1e6, 0..50),
            b in prop::collection::vec(-1e6f64..1e6, 0..50),
        ) {
            let union: Vec<f64> = a.iter().chain(&b).copied().collect();
            let merged = Summary::from_slice(&a).merge(&Summary::from_slice(&b));
            let whole = Summary::from_slice(&union);
            prop_assert_eq!(merged.n, whole.n);
            if whole.n > 0 {
                prop_assert!((merged.mean - whole.mean).abs() <= 1e-9 * (1.0 + whole.mean.abs()));
                prop_assert!((merged.m2 - whole.m2).abs() <= 1e-10 * whole.m2 + 1e-6);
                prop_assert_eq!((merged.min, merged.max), (whole.min, whole.max));
            }
        }
    }
}
