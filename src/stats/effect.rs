//! Effect sizes of a one-way ANOVA: how much of the total variation the grouping explains, and how
//! far apart the group means are compared with the tolerance.
//!
//! - eta-squared `η² = SS_between / SS_total` (the sample R-squared; biased upwards).
//! - omega-squared `ω² = (SS_between - df_between MS_within) / (SS_total + MS_within)` (Hays 1963;
//!   less biased; negative when F < 1, reported as computed).
//! - The spread of the group means `max(mean_i) - min(mean_i)`, and as a percentage of the
//!   tolerance `USL - LSL` when both limits are known.

use super::anova::AnovaTable;
use super::describe::Summary;

/// Effect sizes for one ANOVA.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Effect {
    /// SS_between / SS_total.
    pub eta_squared: f64,
    /// (SS_between - df_between MS_within) / (SS_total + MS_within); may be negative.
    pub omega_squared: f64,
    /// Largest group mean minus smallest, in measurement units.
    pub mean_spread: f64,
    /// `mean_spread` as a percentage of the tolerance (USL - LSL), when it is known and positive.
    pub mean_spread_pct_tolerance: Option<f64>,
}

/// Effect sizes from the ANOVA table and the group summaries; `tolerance` is USL - LSL.
pub fn effect_sizes(table: &AnovaTable, groups: &[Summary], tolerance: Option<f64>) -> Effect {
    let max = groups
        .iter()
        .map(|g| g.mean)
        .fold(f64::NEG_INFINITY, f64::max);
    let min = groups.iter().map(|g| g.mean).fold(f64::INFINITY, f64::min);
    let mean_spread = max - min;
    Effect {
        eta_squared: table.ss_between / table.ss_total,
        omega_squared: (table.ss_between - table.df_between * table.ms_within)
            / (table.ss_total + table.ms_within),
        mean_spread,
        mean_spread_pct_tolerance: tolerance
            .filter(|t| t.is_finite() && *t > 0.0)
            .map(|t| 100.0 * mean_spread / t),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::anova::one_way;
    use crate::stats::lre;

    // Hand check: groups [1,2,3] and [4,5,6]: SS_between 13.5, SS_total 17.5, MS_within 1, df 1.
    // eta^2 = 13.5/17.5; omega^2 = (13.5 - 1)/(17.5 + 1) = 12.5/18.5; mean spread 3.
    #[test]
    fn hand_example() {
        let g = [
            Summary::from_slice(&[1.0, 2.0, 3.0]),
            Summary::from_slice(&[4.0, 5.0, 6.0]),
        ];
        let t = one_way(&g).unwrap();
        let e = effect_sizes(&t, &g, Some(12.0));
        assert!(lre(e.eta_squared, 13.5 / 17.5) > 14.0);
        assert!(lre(e.omega_squared, 12.5 / 18.5) > 14.0);
        assert!(lre(e.mean_spread, 3.0) > 14.0);
        assert!(lre(e.mean_spread_pct_tolerance.unwrap(), 25.0) > 14.0);
        assert_eq!(effect_sizes(&t, &g, None).mean_spread_pct_tolerance, None);
        assert_eq!(
            effect_sizes(&t, &g, Some(0.0)).mean_spread_pct_tolerance,
            None
        );
    }

    // F < 1 gives a negative omega-squared, reported as computed.
    #[test]
    fn negative_omega() {
        let g = [
            Summary::from_slice(&[1.0, 5.0, 3.0]),
            Summary::from_slice(&[3.0, 1.0, 5.0, 3.1]),
        ];
        let t = one_way(&g).unwrap();
        assert!(t.f < 1.0);
        assert!(effect_sizes(&t, &g, None).omega_squared < 0.0);
    }
}
