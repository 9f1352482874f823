//! The subgroup study: simulated moulding plants whose parts come in shots that share a
//! deviation (everything invented; see `samewise::shot_plant`). Prints, per plant shape, the
//! share of days with any flag when nothing differs (with the shot as the subgroup, and without
//! it), how often the serial-dependence check fires without it, and the power against a cavity
//! or machine offset of one part-to-part SD.
//!
//! ```sh
//! cargo run --release --example subgroup_rates 400
//! ```

use samewise::results::TestState;
use samewise::scenario::study_options;
use samewise::shot_plant::{run_days, ShotPlant};

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let days: usize = std::env::args()
        .nth(1)
        .map(|a| a.parse())
        .transpose()?
        .unwrap_or(400);
    let options = study_options();
    println!("{days} simulated days per row; BH at 0.05 across the run (machine and cavity tests)");
    println!();
    println!("| plant | shot SD | subgroup | days with a flag | machine: design, flagged, not independent, serial check fired | cavity: design, flagged |");
    println!("|---|---|---|---|---|---|");
    let shapes = [(4, 8, 12), (2, 4, 6), (6, 2, 20)];
    for (i, &(machines, cavities, shots)) in shapes.iter().enumerate() {
        for shot_sd in [1.0, 2.0] {
            for with in [true, false] {
                let plant = ShotPlant {
                    machines,
                    cavities,
                    shots_per_machine: shots,
                    shot_sd,
                    cavity_offset: 0.0,
                    machine_offset: 0.0,
                };
                let state = 0x5107_0000 ^ ((i as u64) << 8) ^ shot_sd.to_bits();
                let o = run_days(&plant, days, state, with, &options)?;
                let rate = |n: usize| format!("{:.3}", n as f64 / days as f64);
                println!(
                    "| {machines} machines x {cavities} cavities x {shots} shots | {shot_sd} | {} | {} | {}, {}, {}, {} | {}, {} |",
                    if with { "shot" } else { "none" },
                    rate(o.days_with_flag),
                    o.design.get("machine").map_or("-", String::as_str),
                    rate(o.flagged("machine")),
                    rate(o.count("machine", TestState::DiffersDependent)),
                    rate(o.serial_fired.get("machine").copied().unwrap_or(0)),
                    o.design.get("cavity").map_or("-", String::as_str),
                    rate(o.flagged("cavity")),
                );
            }
        }
    }
    println!();
    println!("Power (share of days the offset factor is flagged), one part-to-part SD:");
    println!();
    println!("| plant | shot SD | offset | subgroup | flagged | not independent |");
    println!("|---|---|---|---|---|---|");
    for (i, &(machines, cavities, shots)) in shapes.iter().enumerate() {
        for shot_sd in [1.0, 2.0] {
            for (what, cav, mac) in [
                ("cavity C1 +1 SD", 1.0, 0.0),
                ("machine M1 +1 SD", 0.0, 1.0),
            ] {
                for with in [true, false] {
                    let plant = ShotPlant {
                        machines,
                        cavities,
                        shots_per_machine: shots,
                        shot_sd,
                        cavity_offset: cav,
                        machine_offset: mac,
                    };
                    let state = 0x90e7_0000 ^ ((i as u64) << 8) ^ shot_sd.to_bits() ^ cav.to_bits();
                    let o = run_days(&plant, days, state, with, &options)?;
                    let factor = if cav > 0.0 { "cavity" } else { "machine" };
                    println!(
                        "| {machines} x {cavities} x {shots} | {shot_sd} | {what} | {} | {:.3} | {:.3} |",
                        if with { "shot" } else { "none" },
                        o.flagged(factor) as f64 / days as f64,
                        o.count(factor, TestState::DiffersDependent) as f64 / days as f64,
                    );
                }
            }
        }
    }
    Ok(())
}
