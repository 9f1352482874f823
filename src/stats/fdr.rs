//! False-discovery-rate control over many p-values (one per characteristic x factor test).
//!
//! - Benjamini-Hochberg step-up (Benjamini and Hochberg 1995, JRSS B 57, 289-300): with the
//!   p-values sorted, `p_(1) <= ... <= p_(m)`, the adjusted value (q-value) is
//!   `q_(i) = min_{j >= i} min(1, m p_(j) / j)`, monotone in p. Rejecting every test with
//!   `q <= level` is the step-up procedure at FDR level `level` (valid for independent or
//!   positively dependent tests).
//! - Benjamini-Yekutieli (2001, Annals of Statistics 29, 1165-1188): the same with `m` replaced by
//!   `m Σ_{i=1}^m 1/i`, valid under any dependence.
//!
//! Ties get the same q-value; p = 0 gives q = 0; p = 1 gives q = 1. A NaN or a p outside [0, 1] is
//! an error naming its index, since a silently skipped test would change m.

use std::fmt;

/// The adjustment; serialized as its short name ([`FdrMethod::key`]).
#[derive(Debug, Clone, Copy, PartialEq, Eq, serde::Serialize, serde::Deserialize)]
pub enum FdrMethod {
    /// Benjamini-Hochberg (1995).
    #[serde(rename = "bh")]
    BenjaminiHochberg,
    /// Benjamini-Yekutieli (2001).
    #[serde(rename = "by")]
    BenjaminiYekutieli,
}

impl FdrMethod {
    /// The short stable name used in configuration files, the database and JSON (`bh`, `by`).
    pub fn key(self) -> &'static str {
        match self {
            FdrMethod::BenjaminiHochberg => "bh",
            FdrMethod::BenjaminiYekutieli => "by",
        }
    }

    /// The method of a short name (`bh`, `by`, any case).
    pub fn from_key(key: &str) -> Option<FdrMethod> {
        [FdrMethod::BenjaminiHochberg, FdrMethod::BenjaminiYekutieli]
            .into_iter()
            .find(|m| m.key().eq_ignore_ascii_case(key))
    }

    /// The published name of the method.
    pub fn name(self) -> &'static str {
        match self {
            FdrMethod::BenjaminiHochberg => "Benjamini-Hochberg",
            FdrMethod::BenjaminiYekutieli => "Benjamini-Yekutieli",
        }
    }
}

/// A p-value that cannot be adjusted.
#[derive(Debug, Clone, PartialEq)]
pub struct FdrError {
    /// 0-based position in the input.
    pub index: usize,
    /// The offending value.
    pub value: f64,
}

impl fmt::Display for FdrError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "p-value at position {} is {}, not a probability in [0, 1]",
            self.index, self.value
        )
    }
}

impl std::error::Error for FdrError {}

/// Adjusted p-values (q-values) in input order.
pub fn adjust(p: &[f64], method: FdrMethod) -> Result<Vec<f64>, FdrError> {
    for (index, &value) in p.iter().enumerate() {
        if !(0.0..=1.0).contains(&value) {
            return Err(FdrError { index, value });
        }
    }
    let m = p.len();
    if m == 0 {
        return Ok(Vec::new());
    }
    let mf = m as f64;
    let factor = match method {
        FdrMethod::BenjaminiHochberg => mf,
        FdrMethod::BenjaminiYekutieli => mf * (1..=m).map(|i| 1.0 / i as f64).sum::<f64>(),
    };
    let mut order: Vec<usize> = (0..m).collect();
    order.sort_by(|&a, &b| p[a].total_cmp(&p[b]));
    let mut q = vec![0.0; m];
    let mut running = 1.0f64;
    for rank in (0..m).rev() {
        let idx = order[rank];
        let candidate = (p[idx] * factor / (rank + 1) as f64).min(1.0);
        running = running.min(candidate);
        q[idx] = running;
    }
    Ok(q)
}

/// Reject flags: `q <= level` for each q-value.
pub fn reject(q: &[f64], level: f64) -> Vec<bool> {
    q.iter().map(|&v| v <= level).collect()
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::lre;

    // Benjamini and Hochberg (1995), section 3.2 worked example: 15 p-values
    // (tests/data/bh1995/bh1995_pvalues.csv). At q = 0.05 the 4 smallest are rejected. Exact
    // BH-adjusted values (shared/refs/SOURCES.md): 3/2000, 3/1000, 19/2000, 57/1600, 603/10000,
    // 447/7000, 447/7000, 129/2000, 153/2000, 243/500, 6393/11000, 5719/8000, 1224/1625,
    // 2277/2800, 1.
    const BH_P: [f64; 15] = [
        0.0001, 0.0004, 0.0019, 0.0095, 0.0201, 0.0278, 0.0298, 0.0344, 0.0459, 0.3240, 0.4262,
        0.5719, 0.6528, 0.7590, 1.000,
    ];
    const BH_Q: [f64; 15] = [
        3.0 / 2000.0,
        3.0 / 1000.0,
        19.0 / 2000.0,
        57.0 / 1600.0,
        603.0 / 10000.0,
        447.0 / 7000.0,
        447.0 / 7000.0,
        129.0 / 2000.0,
        153.0 / 2000.0,
        243.0 / 500.0,
        6393.0 / 11000.0,
        5719.0 / 8000.0,
        1224.0 / 1625.0,
        2277.0 / 2800.0,
        1.0,
    ];

    #[test]
    fn bh1995_worked_example() {
        let q = adjust(&BH_P, FdrMethod::BenjaminiHochberg).unwrap();
        for (got, want) in q.iter().zip(BH_Q) {
            assert!(lre(*got, want) >= 14.0, "{got} vs {want}");
        }
        let r = reject(&q, 0.05);
        assert_eq!(r.iter().filter(|&&x| x).count(), 4);
        assert!(r[..4].iter().all(|&x| x));
    }

    // Input order is kept: the same example reversed gives the reversed q-values.
    #[test]
    fn input_order_kept() {
        let mut p = BH_P;
        p.reverse();
        let q = adjust(&p, FdrMethod::BenjaminiHochberg).unwrap();
        for (got, want) in q.iter().rev().zip(BH_Q) {
            assert!(lre(*got, want) >= 14.0);
        }
    }

    // Benjamini-Yekutieli: c(m) = Σ 1/i; for m = 3, c = 11/6. p = [0.01, 0.02, 0.03]:
    // raw m c p_(i)/i = 0.055 each, so all q = 0.055 (hand check).
    #[test]
    fn by_hand_example() {
        let q = adjust(&[0.02, 0.01, 0.03], FdrMethod::BenjaminiYekutieli).unwrap();
        for v in q {
            assert!(lre(v, 0.055) > 14.0, "{v}");
        }
    }

    #[test]
    fn ties_zero_and_one() {
        let q = adjust(&[0.0, 0.5, 0.5, 1.0], FdrMethod::BenjaminiHochberg).unwrap();
        assert_eq!(q[0], 0.0);
        // Ties: ranks 2 and 3 both get min(0.5 * 4/3, 1) = 2/3.
        assert!(lre(q[1], 2.0 / 3.0) > 14.0);
        assert_eq!(q[1], q[2]);
        assert_eq!(q[3], 1.0);
        let all_one = adjust(&[1.0; 5], FdrMethod::BenjaminiYekutieli).unwrap();
        assert!(all_one.iter().all(|&v| v == 1.0));
        assert!(adjust(&[], FdrMethod::BenjaminiHochberg)
            .unwrap()
            .is_empty());
    }

    #[test]
    fn monotone_in_p() {
        let p = [0.04, 0.001, 0.3, 0.02, 0.02, 0.9, 0.011];
        let q = adjust(&p, FdrMethod::BenjaminiHochberg).unwrap();
        for i in 0..p.len() {
            for j in 0..p.len() {
                if p[i] <= p[j] {
                    assert!(q[i] <= q[j]);
                }
            }
            assert!(q[i] >= p[i]);
        }
    }

    #[test]
    fn bad_values_name_index() {
        let e = adjust(&[0.1, f64::NAN], FdrMethod::BenjaminiHochberg).unwrap_err();
        assert_eq!(e.index, 1);
        assert!(e.to_string().contains("position 1"));
        assert_eq!(
            adjust(&[1.5], FdrMethod::BenjaminiHochberg)
                .unwrap_err()
                .index,
            0
        );
        assert_eq!(
            adjust(&[0.2, -0.1], FdrMethod::BenjaminiYekutieli)
                .unwrap_err()
                .index,
            1
        );
    }

    // statsmodels multipletests(p, method="fdr_bh"/"fdr_by") on the cases of
    // tests/data/reference/fdr.json (scripts/reference.py): BH 1995 in published and shuffled
    // order, a single p, ties at the step-up boundary, p = 0 and 1, all ones, all zeros, p down
    // to 1e-300, three random lists of 250.
    #[test]
    fn statsmodels_reference_cases() {
        let text = include_str!("../../tests/data/reference/fdr.json");
        let v: serde_json::Value = serde_json::from_str(text).unwrap();
        let cases = v["cases"].as_array().unwrap();
        assert!(cases.len() >= 10);
        let nums = |x: &serde_json::Value| -> Vec<f64> {
            x.as_array()
                .unwrap()
                .iter()
                .map(|n| n.as_f64().unwrap())
                .collect()
        };
        for case in cases {
            let p = nums(&case["p"]);
            for (method, key) in [
                (FdrMethod::BenjaminiHochberg, "fdr_bh"),
                (FdrMethod::BenjaminiYekutieli, "fdr_by"),
            ] {
                let want = nums(&case[key]);
                let got = adjust(&p, method).unwrap();
                for (i, (g, w)) in got.iter().zip(&want).enumerate() {
                    assert!(
                        lre(*g, *w) >= 13.0 || (*w == 0.0 && *g == 0.0),
                        "{} {key}[{i}]: {g:e} vs statsmodels {w:e}",
                        case["name"]
                    );
                }
            }
        }
    }
}
