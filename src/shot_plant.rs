//! Simulated moulding plants whose parts come in shots: the proof that samewise's subgroup
//! designs keep their flags honest when parts of one shot share its deviation.
//!
//! **Everything here is invented.** A plant day: `machines` machines each make
//! `shots_per_machine` shots; a shot makes one part per cavity (`cavities`), all sharing the
//! shot's deviation (SD `shot_sd`, in units of the part-to-part SD). The machines run side by
//! side, so in time order the parts of one shot are neighbours and the machines' shots
//! interleave. One characteristic ("weight", tolerance +-4 part SDs) is checked against two
//! factors in one run: machine (constant within a shot: nested) and cavity (varies within every
//! shot: blocked), with Benjamini-Hochberg across the run, through the tool's own decision path
//! ([`crate::analysis::check_frame`]).
//!
//! [`ShotPlant::day`] builds one day's frame, with the shot as the subgroup or without it (as an
//! export without a shot column arrives); [`run_days`] counts the states over many days.
//! `examples/subgroup_rates.rs` prints the null rates and the power written into
//! docs/null-rates.md; `tests/subgroups.rs` keeps them with binomial bounds.

use crate::results::TestState;
use std::collections::BTreeMap;

use crate::analysis::{check_frame, CheckOptions, Frame, FrameCharacteristic, FrameFactor};
use crate::config::CharacteristicConfig;
use crate::sample::Rng;
use crate::stats::decimal::Decimal;

/// One simulated plant shape.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ShotPlant {
    /// Machines (the nested factor).
    pub machines: usize,
    /// Cavities per mould (the crossed factor): parts per shot.
    pub cavities: usize,
    /// Shots per machine per day.
    pub shots_per_machine: usize,
    /// SD of the shot-to-shot deviation, in part-to-part SDs.
    pub shot_sd: f64,
    /// Offset of cavity 1 (index 0), in part-to-part SDs (0: no cavity effect).
    pub cavity_offset: f64,
    /// Offset of machine 1 (index 0), in part-to-part SDs (0: no machine effect).
    pub machine_offset: f64,
}

/// Half the tolerance width, in part-to-part SDs.
pub const HALF_TOLERANCE: f64 = 4.0;

impl ShotPlant {
    /// One day's frame. `with_subgroups`: every value carries its shot; otherwise none does.
    pub fn day(&self, rng: &mut Rng, with_subgroups: bool) -> Frame {
        let n = self.machines * self.shots_per_machine * self.cavities;
        let mut values = Vec::with_capacity(n);
        let mut machine_idx = Vec::with_capacity(n);
        let mut cavity_idx = Vec::with_capacity(n);
        let mut subgroup = Vec::with_capacity(if with_subgroups { n } else { 0 });
        for shot in 0..self.shots_per_machine {
            for m in 0..self.machines {
                let shot_dev = self.shot_sd * rng.normal();
                let id = (shot * self.machines + m) as u32;
                for c in 0..self.cavities {
                    let mut v = shot_dev + rng.normal();
                    if m == 0 {
                        v += self.machine_offset;
                    }
                    if c == 0 {
                        v += self.cavity_offset;
                    }
                    values.push(v);
                    machine_idx.push(m as u32);
                    cavity_idx.push(c as u32);
                    if with_subgroups {
                        subgroup.push(id);
                    }
                }
            }
        }
        Frame {
            factors: vec![
                FrameFactor {
                    name: "machine".into(),
                    levels: (1..=self.machines).map(|i| format!("M{i}")).collect(),
                },
                FrameFactor {
                    name: "cavity".into(),
                    levels: (1..=self.cavities).map(|i| format!("C{i}")).collect(),
                },
            ],
            characteristics: vec![FrameCharacteristic {
                characteristic: CharacteristicConfig {
                    name: "weight".into(),
                    unit: "SD".into(),
                    lsl: Some(-HALF_TOLERANCE),
                    usl: Some(HALF_TOLERANCE),
                    target: Some(0.0),
                    resolution: None,
                    is_active: true,
                    plausible: None,
                },
                origin: Decimal::ZERO,
                values,
                level_idx: vec![machine_idx, cavity_idx],
                subgroup,
            }],
        }
    }
}

/// What many simulated days gave.
#[derive(Debug, Clone, Default, PartialEq)]
pub struct DaysOutcome {
    /// Days run.
    pub days: usize,
    /// Days whose run flagged anything (differs or differs and material).
    pub days_with_flag: usize,
    /// Per factor: state -> days.
    pub states: BTreeMap<String, BTreeMap<String, usize>>,
    /// Per factor: days on which the serial-dependence check failed (p < alpha).
    pub serial_fired: BTreeMap<String, usize>,
    /// Per factor: the design used (the last day's).
    pub design: BTreeMap<String, String>,
}

impl DaysOutcome {
    /// Days on which `factor`'s test was in `state`.
    pub fn count(&self, factor: &str, state: TestState) -> usize {
        self.states
            .get(factor)
            .and_then(|s| s.get(state.as_str()))
            .copied()
            .unwrap_or(0)
    }

    /// Days on which `factor`'s test was flagged.
    pub fn flagged(&self, factor: &str) -> usize {
        self.count(factor, TestState::Differs) + self.count(factor, TestState::DiffersMaterial)
    }
}

fn design_name(kind: Option<crate::results::DesignKind>) -> &'static str {
    kind.map_or("", |d| d.as_str())
}

/// Runs `days` simulated days of `plant` from the random state `state`.
pub fn run_days(
    plant: &ShotPlant,
    days: usize,
    state: u64,
    with_subgroups: bool,
    options: &CheckOptions,
) -> crate::Result<DaysOutcome> {
    let mut rng = Rng::new(state);
    let mut out = DaysOutcome {
        days,
        ..DaysOutcome::default()
    };
    for _ in 0..days {
        let frame = plant.day(&mut rng, with_subgroups);
        let content = check_frame(&frame, options, None)?;
        let mut any = false;
        for t in &content.tests {
            any |= t.state.is_flag();
            *out.states
                .entry(t.factor.clone())
                .or_default()
                .entry(t.state.as_str().to_string())
                .or_default() += 1;
            if t.serial_dependence.p.is_some_and(|p| p < options.alpha) {
                *out.serial_fired.entry(t.factor.clone()).or_default() += 1;
            }
            out.design
                .insert(t.factor.clone(), design_name(t.design.kind).to_string());
        }
        out.days_with_flag += usize::from(any);
    }
    Ok(out)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_day_has_the_shape_asked_for() {
        let plant = ShotPlant {
            machines: 3,
            cavities: 8,
            shots_per_machine: 5,
            shot_sd: 1.0,
            cavity_offset: 0.0,
            machine_offset: 0.0,
        };
        let mut rng = Rng::new(1);
        let f = plant.day(&mut rng, true);
        let c = &f.characteristics[0];
        assert_eq!(c.values.len(), 120);
        assert_eq!(c.subgroup.len(), 120);
        // The parts of one shot are neighbours and share one machine.
        assert_eq!(&c.subgroup[..9], &[0, 0, 0, 0, 0, 0, 0, 0, 1]);
        assert!(c.level_idx[0][..8].iter().all(|&m| m == 0));
        assert!(plant.day(&mut rng, false).characteristics[0]
            .subgroup
            .is_empty());
    }
}
