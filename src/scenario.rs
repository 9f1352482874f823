//! Simulated plants for proving the flag rule: many small random plants of known truth, checked
//! through the tool's own decision path ([`crate::analysis::check_frame`]), so the rate of
//! "differs" under no real difference (the null rate) and the power against a real one can be
//! counted.
//!
//! **Everything here is invented**: each replicate is one characteristic x one factor of a plant
//! whose groups (machines, cavities, lots) have the sizes, spreads and value shapes of a cell of
//! the study grid. Only the truth is known, which is the point.
//!
//! Start at [`Cell`] (one point of the grid), [`Cell::groups`] (one replicate's values) and
//! [`rate`] (the share of replicates in each flag state). `examples/null_rates.rs` runs the whole
//! grid and prints the table written into `docs/null-rates.md`; `tests/null_rates.rs` keeps a
//! subset with binomial bounds.
//!
//! The yardstick is Bradley's liberal criterion (Bradley 1978, "Robustness?", British Journal of
//! Mathematical and Statistical Psychology 31, 144-152): a test whose nominal level is alpha is
//! robust in a cell when its empirical rejection rate lies within 0.5 alpha to 1.5 alpha.

use std::collections::HashMap;

use crate::analysis::{check_frame, CheckOptions, Frame, FrameCharacteristic, FrameFactor};
use crate::config::CharacteristicConfig;
use crate::sample::Rng;
use crate::stats::decimal::Decimal;

/// How the values of a group are distributed around its mean (unit variance before scaling).
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Shape {
    /// Normal.
    Normal,
    /// Right-skewed: a standardized lognormal with log-SD 0.5 (skewness about 1.75).
    Skewed,
    /// Heavy-tailed: Student's t with 3 degrees of freedom, scaled to unit variance.
    HeavyTailed,
    /// Normal, then rounded to a gauge step of `step` (in units of the smallest group SD), the
    /// grid placed at random against the true mean in each replicate.
    Coarse {
        /// The gauge step in units of the smallest group SD.
        step: f64,
    },
}

impl Shape {
    /// A short name for tables.
    pub fn label(&self) -> String {
        match self {
            Shape::Normal => "normal".into(),
            Shape::Skewed => "skewed".into(),
            Shape::HeavyTailed => "heavy-tailed".into(),
            Shape::Coarse { step } => format!("gauge step {step} SD"),
        }
    }
}

/// Group sizes of a cell.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Sizes {
    /// Every group has `n` values.
    Balanced(usize),
    /// Groups alternate between `small` values (even groups) and `large` values (odd groups).
    Alternating {
        /// Size of the even groups.
        small: usize,
        /// Size of the odd groups.
        large: usize,
    },
}

impl Sizes {
    /// Size of group `g`.
    pub fn of(&self, g: usize) -> usize {
        match *self {
            Sizes::Balanced(n) => n,
            Sizes::Alternating { small, large } => {
                if g % 2 == 0 {
                    small
                } else {
                    large
                }
            }
        }
    }

    /// A short name for tables.
    pub fn label(&self) -> String {
        match self {
            Sizes::Balanced(n) => format!("{n}"),
            Sizes::Alternating { small, large } => format!("{small}/{large}"),
        }
    }
}

/// Group spreads of a cell.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Spread {
    /// Every group has SD 1.
    Equal,
    /// Half the groups (the even ones, which are the small ones of [`Sizes::Alternating`]) have
    /// `variance_ratio` times the variance of the others; with `on_small` false the odd (large)
    /// groups have it instead.
    Unequal {
        /// Largest to smallest group variance.
        variance_ratio: f64,
        /// Whether the larger variance sits on the even (small) groups.
        on_small: bool,
    },
}

impl Spread {
    fn sd(&self, g: usize) -> f64 {
        match *self {
            Spread::Equal => 1.0,
            Spread::Unequal {
                variance_ratio,
                on_small,
            } => {
                if (g % 2 == 0) == on_small {
                    variance_ratio.sqrt()
                } else {
                    1.0
                }
            }
        }
    }

    /// A short name for tables.
    pub fn label(&self) -> String {
        match self {
            Spread::Equal => "1".into(),
            Spread::Unequal {
                variance_ratio,
                on_small: true,
            } => format!("{variance_ratio} on small"),
            Spread::Unequal {
                variance_ratio,
                on_small: false,
            } => format!("{variance_ratio} on large"),
        }
    }
}

/// One point of the study grid.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Cell {
    /// Number of groups.
    pub k: usize,
    /// Their sizes.
    pub sizes: Sizes,
    /// Their spreads.
    pub spread: Spread,
    /// The shape of the values.
    pub shape: Shape,
    /// True shift of group 0's mean, in units of the smallest group SD (0: the null).
    pub shift: f64,
}

/// Half-width of the simulated tolerance, in units of the smallest group SD: LSL -4, USL +4, so
/// a 1-SD shift is 12.5 % of the tolerance (a realistic, capable process: Cp = 8 / 6 = 1.33).
pub const HALF_TOLERANCE: f64 = 4.0;

impl Cell {
    /// One replicate's values, one vector per group.
    pub fn groups(&self, rng: &mut Rng) -> Vec<Vec<f64>> {
        let origin = rng.uniform();
        (0..self.k)
            .map(|g| {
                let sd = self.spread.sd(g);
                let mean = if g == 0 { self.shift } else { 0.0 };
                (0..self.sizes.of(g))
                    .map(|_| {
                        let e = match self.shape {
                            Shape::Normal | Shape::Coarse { .. } => rng.normal(),
                            Shape::Skewed => {
                                // Lognormal(0, 0.5): mean e^(1/8), variance (e^(1/4) - 1) e^(1/4).
                                let s2: f64 = 0.25;
                                let m = (s2 / 2.0).exp();
                                let v = (s2.exp() - 1.0) * s2.exp();
                                ((0.5 * rng.normal()).exp() - m) / v.sqrt()
                            }
                            Shape::HeavyTailed => {
                                let z = rng.normal();
                                let chi: f64 = (0..3).map(|_| rng.normal().powi(2)).sum();
                                // t with 3 df has variance 3.
                                z / (chi / 3.0).sqrt() / 3f64.sqrt()
                            }
                        };
                        let x = mean + sd * e;
                        match self.shape {
                            Shape::Coarse { step } => {
                                ((x + origin * step) / step).round() * step - origin * step
                            }
                            _ => x,
                        }
                    })
                    .collect()
            })
            .collect()
    }

    /// A frame of one characteristic (tolerance +-[`HALF_TOLERANCE`]) and one factor, as the
    /// store would hand it to the analysis.
    pub fn frame(&self, groups: &[Vec<f64>]) -> Frame {
        let resolution = match self.shape {
            Shape::Coarse { step } => Some(step),
            _ => None,
        };
        let mut values = Vec::new();
        let mut level_idx = Vec::new();
        for (g, v) in groups.iter().enumerate() {
            values.extend_from_slice(v);
            level_idx.extend(std::iter::repeat_n(g as u32, v.len()));
        }
        Frame {
            factors: vec![FrameFactor {
                name: "group".into(),
                levels: (0..groups.len()).map(|g| format!("G{}", g + 1)).collect(),
            }],
            characteristics: vec![FrameCharacteristic {
                characteristic: CharacteristicConfig {
                    name: "simulated".into(),
                    unit: "SD".into(),
                    lsl: Some(-HALF_TOLERANCE),
                    usl: Some(HALF_TOLERANCE),
                    target: Some(0.0),
                    resolution,
                    is_active: true,
                    plausible: None,
                },
                origin: Decimal::parse("0").expect("zero is a decimal"),
                values,
                level_idx: vec![level_idx],
                subgroup: Vec::new(),
            }],
        }
    }
}

/// How the replicates of one cell came out.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct CellRate {
    /// Replicates run.
    pub reps: usize,
    /// Replicates in each state (stored state names).
    pub states: HashMap<String, usize>,
    /// Replicates led by each method (stored method names; `none` without a leading test).
    pub leading: HashMap<String, usize>,
}

impl CellRate {
    /// Replicates flagged (`differs` or `differs_material`).
    pub fn flagged(&self) -> usize {
        self.count("differs") + self.count("differs_material")
    }

    /// Replicates with a verdict (flagged or `no_evidence`).
    pub fn verdicts(&self) -> usize {
        self.flagged() + self.count("no_evidence")
    }

    /// Replicates in `state`.
    pub fn count(&self, state: &str) -> usize {
        self.states.get(state).copied().unwrap_or(0)
    }

    /// Share of the verdicts that are flags (`None` without a verdict).
    pub fn flag_rate(&self) -> Option<f64> {
        let v = self.verdicts();
        (v > 0).then(|| self.flagged() as f64 / v as f64)
    }
}

/// Runs `reps` replicates of `cell` through [`check_frame`] with `options` (a run of one test, so
/// its q equals its p) and counts the states. The random stream starts from `state`, so a cell's
/// rate is the same on every machine and thread count.
pub fn rate(
    cell: &Cell,
    reps: usize,
    state: u64,
    options: &CheckOptions,
) -> crate::Result<CellRate> {
    let mut rng = Rng::new(state);
    let mut out = CellRate {
        reps,
        ..CellRate::default()
    };
    for _ in 0..reps {
        let groups = cell.groups(&mut rng);
        let content = check_frame(&cell.frame(&groups), options, None)?;
        let test = &content.tests[0];
        *out.states
            .entry(test.state.as_str().to_string())
            .or_default() += 1;
        let method = test
            .leading
            .method
            .map_or("none".to_string(), |m| m.as_str().to_string());
        *out.leading.entry(method).or_default() += 1;
    }
    Ok(out)
}

/// Default options of the study: the configuration defaults (BH at 0.05, material share 10 %,
/// groups of two or more), one worker thread (the study runs cells in parallel instead).
pub fn study_options() -> CheckOptions {
    let config = crate::config::CheckSettings::default();
    CheckOptions {
        fdr_method: crate::stats::fdr::FdrMethod::BenjaminiHochberg,
        fdr_level: config.fdr_level,
        material_share: config.material_share,
        min_per_group: config.min_per_group,
        alpha: config.alpha,
        power_target: config.power_target,
        confidence: 0.95,
        characteristics: None,
        factors: None,
        threads: 1,
    }
}

/// Bradley's liberal band for a nominal level `alpha`: `[0.5 alpha, 1.5 alpha]`.
pub fn bradley_liberal(alpha: f64) -> (f64, f64) {
    (0.5 * alpha, 1.5 * alpha)
}

/// The study grid: k 2-40; balanced groups of 2-200 and very unbalanced ones (sizes alternating
/// 2/20, 5/50, 20/200); equal spreads and variance ratios 4 and 16 (on the small groups, on the
/// large ones; the same thing when balanced); normal, skewed, heavy-tailed and coarse-gauge
/// values. `shift` moves group 0 (0 for the null study).
pub fn grid(shift: f64) -> Vec<Cell> {
    let ks = [2usize, 3, 5, 10, 20, 40];
    let sizes = [
        Sizes::Balanced(2),
        Sizes::Balanced(3),
        Sizes::Balanced(5),
        Sizes::Balanced(10),
        Sizes::Balanced(30),
        Sizes::Balanced(200),
        Sizes::Alternating {
            small: 2,
            large: 20,
        },
        Sizes::Alternating {
            small: 5,
            large: 50,
        },
        Sizes::Alternating {
            small: 20,
            large: 200,
        },
    ];
    let shapes = [
        Shape::Normal,
        Shape::Skewed,
        Shape::HeavyTailed,
        Shape::Coarse { step: 1.0 },
    ];
    let mut cells = Vec::new();
    for &k in &ks {
        for &size in &sizes {
            let mut spreads = vec![Spread::Equal];
            for ratio in [4.0, 16.0] {
                spreads.push(Spread::Unequal {
                    variance_ratio: ratio,
                    on_small: true,
                });
                if matches!(size, Sizes::Alternating { .. }) {
                    spreads.push(Spread::Unequal {
                        variance_ratio: ratio,
                        on_small: false,
                    });
                }
            }
            for &spread in &spreads {
                for &shape in &shapes {
                    cells.push(Cell {
                        k,
                        sizes: size,
                        spread,
                        shape,
                        shift,
                    });
                }
            }
        }
    }
    cells
}

/// A random state for cell number `index` of a study (SplitMix64's own mixing of the index).
pub fn cell_state(index: usize, shift: f64) -> u64 {
    let mut r = Rng::new(0x6e75_6c6c_5f72_6174 ^ (index as u64) ^ shift.to_bits());
    r.next_u64()
}
