//! The invented sample plant: a deterministic generator of realistic CSV exports.
//!
//! **Everything here is invented** for the demo and the end-to-end tests: the plant, its machines,
//! suppliers, operators and every value. The scenario: a plant that die-casts and machines
//! aluminium pump housings on six machining centres (M1-M6), three shifts (the night shift crosses
//! midnight), castings from three alloy suppliers and four-cavity dies, 90 production days.
//!
//! Known, documented effects are injected (see `sample-plant/README.md`):
//! - castings from supplier `Castalloy` run heavier (housing_mass + 5.0 g, 12.5% of the tolerance);
//! - machine `M4`'s bore diameter drifts upwards after the tooling change logged on
//!   2026-10-19 06:30 (+0.00025 mm per production day, capped at +0.010 mm);
//! - the night shift has more spread in wall thickness (SD x 1.8);
//! - every other characteristic x factor shows nothing.
//!
//! Two exports are written per month, as gauges and line systems really deliver them: a long
//! coordinate-measuring-machine export with explicit UTC offsets, and a wide line export with local
//! times and one column per characteristic. A few bad rows of the kinds real exports contain are
//! mixed in (decimal commas, `NaN`, units in a cell, an unknown characteristic, a ragged row, a
//! broken timestamp); the line export's local times also fall into the repeated hour of the
//! October DST change, which the import must reject rather than guess.
//!
//! The random numbers come from SplitMix64 (Steele, Lea and Flood 2014, "Fast splittable
//! pseudorandom number generators", OOPSLA) with a fixed random state, so the files are the same
//! on every machine.

use std::fmt::Write as _;
use std::fs;
use std::io;
use std::path::{Path, PathBuf};

use chrono::{Datelike, Duration, NaiveDate, NaiveDateTime, NaiveTime, TimeZone};
use chrono_tz::Europe::Berlin;

/// The fixed random state of the generator.
pub const RNG_STATE: u64 = 0x5a3e_2026_0901;

/// First production day of the sample plant.
pub fn first_day() -> NaiveDate {
    NaiveDate::from_ymd_opt(2026, 9, 1).expect("valid date")
}

/// Number of production days generated.
pub const N_DAYS: i64 = 90;

/// The production day of the logged tooling change on machine M4.
pub fn tooling_change_day() -> NaiveDate {
    NaiveDate::from_ymd_opt(2026, 10, 19).expect("valid date")
}

/// Machines of the sample plant.
pub const MACHINES: [&str; 6] = ["M1", "M2", "M3", "M4", "M5", "M6"];
/// Alloy suppliers (invented names).
pub const SUPPLIERS: [&str; 3] = ["Alunord", "Castalloy", "Metaltec"];
/// Die cavities.
pub const CAVITIES: [&str; 4] = ["C1", "C2", "C3", "C4"];
/// Shift names and their local start hours.
pub const SHIFTS: [(&str, u32); 3] = [("early", 6), ("late", 14), ("night", 22)];

/// A process-change event of the sample plant's logbook.
#[derive(Debug, Clone)]
pub struct SampleEvent {
    /// Local time in the plant zone, `YYYY-MM-DD HH:MM`.
    pub at_local: &'static str,
    /// What changed.
    pub note: &'static str,
    /// The characteristic concerned, if one.
    pub characteristic: Option<&'static str>,
    /// The factor level concerned (`factor=level`), if one.
    pub where_level: Option<&'static str>,
}

/// The sample plant's logbook of process changes.
pub fn events() -> Vec<SampleEvent> {
    vec![
        SampleEvent {
            at_local: "2026-09-14 06:10",
            note: "Coolant concentration raised from 6 % to 7 % on all machines",
            characteristic: None,
            where_level: None,
        },
        SampleEvent {
            at_local: "2026-10-05 14:20",
            note: "New alloy lot AL-2610 from Castalloy put into use",
            characteristic: Some("housing_mass"),
            where_level: Some("supplier=Castalloy"),
        },
        SampleEvent {
            at_local: "2026-10-19 06:30",
            note: "New boring-bar insert holder fitted on M4",
            characteristic: Some("bore_diameter"),
            where_level: Some("machine=M4"),
        },
        SampleEvent {
            at_local: "2026-11-09 22:15",
            note: "Leak-test fixture seals replaced",
            characteristic: Some("leak_decay"),
            where_level: None,
        },
    ]
}

/// SplitMix64 with normal deviates by the Marsaglia polar method (also drives the simulated
/// plants of [`crate::scenario`]).
#[derive(Debug, Clone)]
pub struct Rng {
    state: u64,
    spare: Option<f64>,
}

impl Rng {
    /// A generator started from `state`.
    pub fn new(state: u64) -> Self {
        Rng { state, spare: None }
    }

    /// The next 64 random bits.
    pub fn next_u64(&mut self) -> u64 {
        self.state = self.state.wrapping_add(0x9e37_79b9_7f4a_7c15);
        let mut z = self.state;
        z = (z ^ (z >> 30)).wrapping_mul(0xbf58_476d_1ce4_e5b9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94d0_49bb_1331_11eb);
        z ^ (z >> 31)
    }

    /// Uniform on [0, 1).
    pub fn uniform(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 / (1u64 << 53) as f64
    }

    /// Uniform on `0..n`.
    pub fn below(&mut self, n: usize) -> usize {
        (self.uniform() * n as f64) as usize % n
    }

    /// A standard normal deviate.
    pub fn normal(&mut self) -> f64 {
        if let Some(z) = self.spare.take() {
            return z;
        }
        loop {
            let u = 2.0 * self.uniform() - 1.0;
            let v = 2.0 * self.uniform() - 1.0;
            let s = u * u + v * v;
            if s > 0.0 && s < 1.0 {
                let m = (-2.0 * s.ln() / s).sqrt();
                self.spare = Some(v * m);
                return u * m;
            }
        }
    }
}

/// Where a characteristic is measured.
#[derive(Clone, Copy, PartialEq, Eq)]
enum Gauge {
    /// Coordinate measuring machine, long export.
    Cmm,
    /// In-line gauges, wide export.
    Line,
}

struct Spec {
    name: &'static str,
    column: &'static str,
    gauge: Gauge,
    target: f64,
    sd: f64,
    decimals: usize,
    /// Lognormal-shaped (positive, skewed) instead of normal.
    is_skewed: bool,
}

const SPECS: [Spec; 8] = [
    Spec {
        name: "bore_diameter",
        column: "bore_diameter",
        gauge: Gauge::Cmm,
        target: 42.000,
        sd: 0.004,
        decimals: 4,
        is_skewed: false,
    },
    Spec {
        name: "flange_flatness",
        column: "flange_flatness",
        gauge: Gauge::Cmm,
        target: 0.020,
        sd: 0.005,
        decimals: 4,
        is_skewed: true,
    },
    Spec {
        name: "thread_depth",
        column: "thread_depth",
        gauge: Gauge::Cmm,
        target: 18.00,
        sd: 0.03,
        decimals: 3,
        is_skewed: false,
    },
    Spec {
        name: "port_position",
        column: "port_position",
        gauge: Gauge::Cmm,
        target: 0.030,
        sd: 0.010,
        decimals: 4,
        is_skewed: true,
    },
    Spec {
        name: "housing_mass",
        column: "Mass [g]",
        gauge: Gauge::Line,
        target: 1250.0,
        sd: 3.0,
        decimals: 1,
        is_skewed: false,
    },
    Spec {
        name: "wall_thickness",
        column: "Wall [mm]",
        gauge: Gauge::Line,
        target: 3.50,
        sd: 0.04,
        decimals: 3,
        is_skewed: false,
    },
    Spec {
        name: "leak_decay",
        column: "Leak decay [Pa]",
        gauge: Gauge::Line,
        target: 8.0,
        sd: 2.0,
        decimals: 2,
        is_skewed: true,
    },
    Spec {
        name: "roughness_ra",
        column: "Ra [um]",
        gauge: Gauge::Line,
        target: 0.80,
        sd: 0.08,
        decimals: 3,
        is_skewed: false,
    },
];

/// Parts measured per machine per shift on the CMM and on the line gauges: the CMM takes two
/// samples of two parts from one shot each, the line gauges four shots of three parts.
const CMM_PARTS: usize = 4;
const LINE_PARTS: usize = 12;
/// Parts per CMM sample and per gauged line shot.
const CMM_SAMPLE: usize = 2;
const LINE_SHOT: usize = 3;
/// Of each characteristic's SD, the share of the variance that is shot to shot (the parts of
/// one shot share it) and the part-to-part rest: 0.36 and 0.64 (SDs 0.6 and 0.8 of the total).
const SHOT_SD: f64 = 0.6;
const PART_SD: f64 = 0.8;

/// One generated part with its factor levels and local time.
struct Part {
    local: NaiveDateTime,
    day: NaiveDate,
    machine: usize,
    shift: usize,
    supplier: usize,
    operator: usize,
    cavity: usize,
    serial: u64,
    /// The subgroup: the CMM sample number, or the line's shot counter of the machine.
    subgroup: u64,
    /// The shot's deviation per characteristic (standard normal, scaled by [`SHOT_SD`] x SD).
    shot: [f64; 8],
}

fn value(rng: &mut Rng, spec: &Spec, part: &Part) -> f64 {
    let mut sd = spec.sd;
    if spec.name == "wall_thickness" && part.shift == 2 {
        sd *= 1.8; // injected: night shift spread
    }
    let shot = part.shot[SPECS.iter().position(|s| s.name == spec.name).unwrap_or(0)];
    let mut v = if spec.is_skewed {
        // Lognormal with the given median and a spread of about sd; the shot shares its part
        // of the log deviation.
        let sigma = (spec.sd / spec.target).min(0.6);
        spec.target * (sigma * (SHOT_SD * shot + PART_SD * rng.normal())).exp()
    } else {
        spec.target + sd * (SHOT_SD * shot + PART_SD * rng.normal())
    };
    if spec.name == "housing_mass" && part.supplier == 1 {
        v += 5.0; // injected: heavier castings from Castalloy
    }
    if spec.name == "bore_diameter" && part.machine == 3 {
        let days_after = (part.day - tooling_change_day()).num_days();
        if days_after >= 0 {
            v += (0.00025 * (days_after + 1) as f64).min(0.010); // injected: M4 drift
        }
    }
    v
}

fn fmt_value(v: f64, decimals: usize) -> String {
    format!("{v:.decimals$}")
}

/// Writes the sample plant's exports into `dir` and returns their paths, in import order.
pub fn write_exports(dir: &Path) -> io::Result<Vec<PathBuf>> {
    fs::create_dir_all(dir)?;
    let mut rng = Rng::new(RNG_STATE);
    let mut parts_by_month: Vec<(String, Vec<Part>, Vec<Part>)> = Vec::new();
    let mut serial = 100_000u64;
    let mut cmm_sample = 0u64;
    let mut shot_counter = [40_000u64; MACHINES.len()];
    for d in 0..N_DAYS {
        let day = first_day() + Duration::days(d);
        let month = day.format("%Y-%m").to_string();
        if parts_by_month.last().map(|m| &m.0) != Some(&month) {
            parts_by_month.push((month.clone(), Vec::new(), Vec::new()));
        }
        let week = day.iso_week().week() as usize;
        // The supplier mix changes by day, as lots are used up.
        let supplier_of_day = |rng: &mut Rng| rng.below(SUPPLIERS.len());
        for (shift_idx, &(_, start_hour)) in SHIFTS.iter().enumerate() {
            for (machine, counter) in shot_counter.iter_mut().enumerate() {
                // Three operators per shift, rotating weekly; each looks after two machines.
                let operator = ((shift_idx + week) % 3) * 3 + machine / 2;
                for (gauge_parts, per_shot, is_cmm) in [
                    (CMM_PARTS, CMM_SAMPLE, true),
                    (LINE_PARTS, LINE_SHOT, false),
                ] {
                    let mut shot = [0.0f64; 8];
                    let mut supplier = 0;
                    let mut local = day.and_time(NaiveTime::MIN);
                    let mut first_cavity = 0;
                    for k in 0..gauge_parts {
                        if k % per_shot == 0 {
                            // A new shot (a CMM sample is taken from one shot): its time, its
                            // alloy lot, its deviation; its parts come from different cavities.
                            let minutes = ((k / per_shot) as i64 * 480)
                                / (gauge_parts / per_shot) as i64
                                + rng.below(50) as i64
                                + machine as i64 * 7;
                            local = day
                                .and_time(NaiveTime::from_hms_opt(start_hour, 0, 0).unwrap())
                                + Duration::minutes(minutes)
                                + Duration::seconds(rng.below(60) as i64);
                            supplier = supplier_of_day(&mut rng);
                            for z in shot.iter_mut() {
                                *z = rng.normal();
                            }
                            first_cavity = rng.below(CAVITIES.len());
                            if is_cmm {
                                cmm_sample += 1;
                            } else {
                                *counter += 1 + rng.below(40) as u64;
                            }
                        }
                        serial += 1;
                        let part = Part {
                            local: local + Duration::seconds(20 * (k % per_shot) as i64),
                            day,
                            machine,
                            shift: shift_idx,
                            supplier,
                            operator,
                            cavity: (first_cavity + k % per_shot) % CAVITIES.len(),
                            serial,
                            subgroup: if is_cmm { cmm_sample } else { *counter },
                            shot,
                        };
                        let month_entry = parts_by_month.last_mut().expect("pushed above");
                        if is_cmm {
                            month_entry.1.push(part);
                        } else {
                            month_entry.2.push(part);
                        }
                    }
                }
            }
        }
    }

    let mut paths = Vec::new();
    for (month_idx, (month, cmm_parts, line_parts)) in parts_by_month.iter().enumerate() {
        // Long CMM export with explicit UTC offsets.
        let mut long = String::from(
            "timestamp,part,sample,machine,cavity,supplier,operator,characteristic,value\n",
        );
        let mut line_no = 1usize;
        for part in cmm_parts {
            let ts = Berlin
                .from_local_datetime(&part.local)
                .earliest()
                .expect("generated times avoid the missing hour");
            for spec in SPECS.iter().filter(|s| s.gauge == Gauge::Cmm) {
                let v = value(&mut rng, spec, part);
                let mut cell = fmt_value(v, spec.decimals);
                let mut characteristic = spec.name.to_string();
                line_no += 1;
                // A few bad rows of the kinds real exports contain.
                match (month_idx, line_no) {
                    (0, 137) => cell = format!("\"{}\"", cell.replace('.', ",")),
                    (0, 2203) => cell = "NaN".into(),
                    (1, 911) => cell = String::new(),
                    (1, 4410) => characteristic = "bore_dia".into(),
                    (2, 1288) => cell = format!("{cell} mm"),
                    _ => {}
                }
                let _ = writeln!(
                    long,
                    "{},SN{},S{:05},{},{},{},OP{:02},{},{}",
                    ts.format("%Y-%m-%dT%H:%M:%S%:z"),
                    part.serial,
                    part.subgroup,
                    MACHINES[part.machine],
                    CAVITIES[part.cavity],
                    SUPPLIERS[part.supplier],
                    part.operator + 1,
                    characteristic,
                    cell
                );
            }
        }
        let long_path = dir.join(format!("cmm-{month}.csv"));
        fs::write(&long_path, long)?;
        paths.push(long_path);

        // Wide line export with local times (no zone), CRLF line ends and a BOM, as some
        // line systems write them.
        let line_specs: Vec<&Spec> = SPECS.iter().filter(|s| s.gauge == Gauge::Line).collect();
        let mut wide =
            String::from("\u{feff}Time;Serial;Machine;Shot;Cavity;Alloy supplier;Operator");
        for spec in &line_specs {
            wide.push(';');
            wide.push_str(spec.column);
        }
        wide.push_str("\r\n");
        for (i, part) in line_parts.iter().enumerate() {
            let mut row = format!(
                "{};SN{};{};{};{};{};OP{:02}",
                part.local.format("%d.%m.%Y %H:%M:%S"),
                part.serial,
                MACHINES[part.machine],
                part.subgroup,
                CAVITIES[part.cavity],
                SUPPLIERS[part.supplier],
                part.operator + 1
            );
            for spec in &line_specs {
                let v = value(&mut rng, spec, part);
                row.push(';');
                row.push_str(&fmt_value(v, spec.decimals));
            }
            match (month_idx, i) {
                (0, 500) => row = row.rsplit_once(';').map(|(a, _)| a.to_string()).unwrap(),
                (1, 1500) => {
                    row = row.replacen(&part.local.format("%d.%m.%Y").to_string(), "31.09.2026", 1)
                }
                (2, 700) => row.push_str(";n/a"),
                _ => {}
            }
            wide.push_str(&row);
            wide.push_str("\r\n");
        }
        let wide_path = dir.join(format!("line-{month}.csv"));
        fs::write(&wide_path, wide)?;
        paths.push(wide_path);
    }
    Ok(paths)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn exports_are_deterministic_and_complete() {
        let base = std::env::temp_dir().join(format!("samewise-sample-{}", std::process::id()));
        let a = write_exports(&base.join("a")).unwrap();
        let b = write_exports(&base.join("b")).unwrap();
        assert_eq!(a.len(), 6, "two exports for each of three months");
        for (x, y) in a.iter().zip(&b) {
            assert_eq!(fs::read(x).unwrap(), fs::read(y).unwrap());
        }
        let long = fs::read_to_string(&a[0]).unwrap();
        // September 2026: 30 days x 3 shifts x 6 machines x 4 parts x 4 characteristics.
        assert_eq!(long.lines().count(), 1 + 30 * 3 * 6 * 4 * 4);
        assert!(long.contains(",NaN\n"));
        let _ = fs::remove_dir_all(base);
    }

    /// The sample configuration reads the generated exports: every measurement is accepted or
    /// rejected, and the rejections are the planted bad rows plus the repeated DST hour.
    #[test]
    fn sample_config_reads_the_exports() {
        let config = crate::config::Config::from_toml_str(
            include_str!("../sample-plant/plant.toml"),
            "sample-plant/plant.toml",
        )
        .unwrap();
        let base =
            std::env::temp_dir().join(format!("samewise-sample-read-{}", std::process::id()));
        let paths = write_exports(&base).unwrap();
        let mut reasons = Vec::new();
        let mut accepted = 0u64;
        let mut rejected = 0u64;
        for path in &paths {
            let mut stream = crate::ingest::read_file(path, &config, None).unwrap();
            for outcome in stream.by_ref() {
                match outcome {
                    crate::ingest::RowOutcome::Accepted(_) => accepted += 1,
                    crate::ingest::RowOutcome::Rejected(r) => {
                        rejected += r.measurements;
                        reasons.push(r.reason)
                    }
                }
            }
            assert!(stream.take_error().is_none());
            let counts = stream.counts();
            assert_eq!(counts.accepted + counts.rejected, counts.measurements_read);
        }
        // 90 days x 3 shifts x 6 machines x (4 CMM parts x 4 + 12 line parts x 4) measurements.
        assert_eq!(accepted + rejected, 90 * 3 * 6 * (4 * 4 + 12 * 4));
        assert!(reasons.len() >= 8, "planted bad rows: {reasons:?}");
        assert!(reasons.len() < 200, "too many rejections: {reasons:?}");
        let _ = fs::remove_dir_all(base);
    }

    #[test]
    fn rng_is_uniform_enough() {
        // SplitMix64 mean of 100000 uniforms is 0.5 within 4 standard errors (1/sqrt(12 n)).
        let mut rng = Rng::new(RNG_STATE);
        let n = 100_000;
        let mean: f64 = (0..n).map(|_| rng.uniform()).sum::<f64>() / n as f64;
        assert!((mean - 0.5).abs() < 4.0 / (12.0 * n as f64).sqrt());
        let z: Vec<f64> = (0..n).map(|_| rng.normal()).collect();
        let m = z.iter().sum::<f64>() / n as f64;
        let v = z.iter().map(|x| (x - m) * (x - m)).sum::<f64>() / (n - 1) as f64;
        assert!(m.abs() < 4.0 / (n as f64).sqrt());
        assert!((v - 1.0).abs() < 4.0 * (2.0 / n as f64).sqrt());
    }
}
