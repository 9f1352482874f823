//! The null-rate and power study of the flag rule: every cell of `samewise::scenario::grid`
//! through the tool's own decision path, `reps` replicates each (default 2,000, enough to tell a
//! rate of 0.075 from 0.05: the binomial SD at 0.05 is 0.0049).
//!
//! `cargo run --release --example null_rates [REPS] [--power]` prints a Markdown table: per
//! cell the replicates with a verdict, the rate of "differs" among them and whether it lies in
//! Bradley's liberal band (0.025-0.075 at the default level 0.05), the share of replicates the
//! tool declined to judge, and the leading methods. With `--power` group 0 is shifted by one SD
//! (the smallest group SD) and the rate is the power.

use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::Mutex;

use samewise::scenario::{bradley_liberal, cell_state, grid, rate, study_options, Cell, CellRate};

fn main() {
    let args: Vec<String> = std::env::args().skip(1).collect();
    let reps: usize = args.iter().find_map(|a| a.parse().ok()).unwrap_or(2000);
    let power = args.iter().any(|a| a == "--power");
    let only = only(&args);
    if args.iter().any(|a| a == "--methods") {
        return methods(reps, if power { 1.0 } else { 0.0 }, &only);
    }
    let shift = if power { 1.0 } else { 0.0 };
    let cells = grid(shift);
    let chosen: Vec<usize> = (0..cells.len())
        .filter(|&i| selected(&cells[i], &only))
        .collect();
    let options = study_options();
    let (low, high) = bradley_liberal(options.fdr_level);
    let next = AtomicUsize::new(0);
    let results: Mutex<Vec<Option<CellRate>>> = Mutex::new(vec![None; cells.len()]);
    let threads = std::thread::available_parallelism().map_or(1, |n| n.get());
    let started = std::time::Instant::now();
    std::thread::scope(|scope| {
        for _ in 0..threads {
            scope.spawn(|| loop {
                let j = next.fetch_add(1, Ordering::Relaxed);
                let Some(&i) = chosen.get(j) else {
                    break;
                };
                let r = rate(&cells[i], reps, cell_state(i, shift), &options)
                    .expect("a simulated check runs");
                results.lock().expect("no panic")[i] = Some(r);
            });
        }
    });
    let results = results.into_inner().expect("no panic");
    println!(
        "| k | n per group | variance ratio | values | verdicts | {} | in band | material | declined | leading |",
        if power { "power" } else { "rate of differs" }
    );
    println!("|---|---|---|---|---|---|---|---|---|---|");
    let (mut outside, mut judged, mut declined_cells) = (0, 0, 0);
    for (cell, r) in cells.iter().zip(&results) {
        let Some(r) = r.as_ref() else {
            continue;
        };
        let rate = r.flag_rate();
        let band = match rate {
            None => "-",
            Some(x) if power => {
                let _ = x;
                "-"
            }
            Some(x) if x >= low && x <= high => "yes",
            Some(x) if x < low => "conservative",
            Some(_) => "LIBERAL",
        };
        if rate.is_some() {
            judged += 1;
            if !power && rate.is_some_and(|x| x > high) {
                outside += 1;
            }
        }
        let declined = r.reps - r.verdicts();
        if declined * 2 > r.reps {
            declined_cells += 1;
        }
        let mut leading: Vec<String> = r
            .leading
            .iter()
            .map(|(m, n)| format!("{m} {:.0}%", 100.0 * *n as f64 / r.reps as f64))
            .collect();
        leading.sort();
        println!(
            "| {} | {} | {} | {} | {} | {} | {} | {} | {:.1}% | {} |",
            cell.k,
            cell.sizes.label(),
            cell.spread.label(),
            cell.shape.label(),
            r.verdicts(),
            rate.map_or("-".into(), |x| format!("{x:.4}")),
            band,
            r.count("differs_material"),
            100.0 * declined as f64 / r.reps as f64,
            leading.join(", ")
        );
    }
    eprintln!(
        "{} cells x {reps} replicates in {:.0} s; {judged} cells with verdicts, {outside} above Bradley's liberal bound {high}; {declined_cells} cells mostly declined",
        chosen.len(),
        started.elapsed().as_secs_f64()
    );
}

/// `--only PATTERN[;PATTERN...]`: run only the cells whose row label `|k|n|variance ratio|values|`
/// (as in the tables, e.g. `|5|5/50|16 on small|skewed|`) contains one of the patterns, e.g.
/// `--only '|40|3|;skewed'`. The cells keep their random states, so their rates are those of the
/// full run.
fn only(args: &[String]) -> Vec<String> {
    args.iter()
        .position(|a| a == "--only")
        .and_then(|i| args.get(i + 1))
        .map(|p| p.split(';').map(str::to_string).collect())
        .unwrap_or_default()
}

fn label(cell: &Cell) -> String {
    format!(
        "|{}|{}|{}|{}|",
        cell.k,
        cell.sizes.label(),
        cell.spread.label(),
        cell.shape.label()
    )
}

fn selected(cell: &Cell, only: &[String]) -> bool {
    only.is_empty() || only.iter().any(|p| label(cell).contains(p.as_str()))
}

/// `--methods`: the raw rejection rate at 0.05 of each candidate test on its own, per cell,
/// outside the decision path: what the leading-method rule is chosen from. Classic F, Welch,
/// Kruskal-Wallis; Brown and Forsythe's (1974) F* (the classic F's statistic for equal sizes with
/// Satterthwaite's denominator df from the group variances); Mehrotra's (1997) F* (the same
/// statistic with his modified numerator df); "F and KW" (a flag only when the classic F and
/// Kruskal-Wallis both reject: the concordance rule); Welch's F calibrated by the bootstrap-t
/// (`stats::bootstrap::welch_bootstrap_t`, 599 resamples) and Krishnamoorthy, Lu and Mathew's
/// parametric bootstrap (`stats::bootstrap::parametric_bootstrap`, 599 resamples).
fn methods(reps: usize, shift: f64, only: &[String]) {
    use samewise::sample::Rng;
    use samewise::stats::bootstrap::{
        data_state, parametric_bootstrap, welch_bootstrap_t, BOOTSTRAP_RESAMPLES,
    };
    use samewise::stats::describe::Summary;
    use samewise::stats::{anova::one_way, kruskal::kruskal_wallis, welch::welch};
    const ALPHA: f64 = 0.05;
    const METHODS: usize = 8;
    let cells = grid(shift);
    let chosen: Vec<usize> = (0..cells.len())
        .filter(|&i| selected(&cells[i], only))
        .collect();
    let next = AtomicUsize::new(0);
    let results: Mutex<Vec<Option<[usize; METHODS]>>> = Mutex::new(vec![None; cells.len()]);
    let threads = std::thread::available_parallelism().map_or(1, |n| n.get());
    let started = std::time::Instant::now();
    std::thread::scope(|scope| {
        for _ in 0..threads {
            scope.spawn(|| loop {
                let j = next.fetch_add(1, Ordering::Relaxed);
                let Some(&i) = chosen.get(j) else {
                    break;
                };
                let mut rng = Rng::new(cell_state(i, shift));
                let mut count = [0usize; METHODS];
                for _ in 0..reps {
                    let groups = cells[i].groups(&mut rng);
                    let s: Vec<Summary> = groups.iter().map(|g| Summary::from_slice(g)).collect();
                    let refs: Vec<&[f64]> = groups.iter().map(Vec::as_slice).collect();
                    let p_f = one_way(&s).map_or(1.0, |t| t.p);
                    let p_welch = welch(&s).map_or(1.0, |t| t.p);
                    let p_kw = kruskal_wallis(&refs).map_or(1.0, |t| t.p);
                    let (p_bf, p_mehrotra) = brown_forsythe_means(&s);
                    let state = data_state(&refs);
                    let p_boot =
                        welch_bootstrap_t(&refs, BOOTSTRAP_RESAMPLES, state).map_or(1.0, |t| t.p);
                    let p_pb =
                        parametric_bootstrap(&s, BOOTSTRAP_RESAMPLES, state).map_or(1.0, |t| t.p);
                    let ps = [
                        p_f,
                        p_welch,
                        p_kw,
                        p_bf,
                        p_mehrotra,
                        p_f.max(p_kw),
                        p_boot,
                        p_pb,
                    ];
                    for (c, p) in count.iter_mut().zip(ps) {
                        if p <= ALPHA {
                            *c += 1;
                        }
                    }
                }
                results.lock().expect("no panic")[i] = Some(count);
            });
        }
    });
    println!(
        "| k | n | variance ratio | values | F | Welch | Kruskal-Wallis | Brown-Forsythe F* | Mehrotra F* | F and KW | Welch bootstrap-t | parametric bootstrap |"
    );
    println!("|---|---|---|---|---|---|---|---|---|---|---|---|");
    for (cell, c) in cells.iter().zip(results.into_inner().expect("no panic")) {
        let Some(c) = c else {
            continue;
        };
        let r = |x: usize| x as f64 / reps as f64;
        let cols: Vec<String> = c.iter().map(|&x| format!("{:.3}", r(x))).collect();
        println!(
            "| {} | {} | {} | {} | {} |",
            cell.k,
            cell.sizes.label(),
            cell.spread.label(),
            cell.shape.label(),
            cols.join(" | ")
        );
    }
    eprintln!(
        "{} cells x {reps} replicates in {:.0} s",
        chosen.len(),
        started.elapsed().as_secs_f64()
    );
}

/// The p-values of Brown and Forsythe's (1974) F* for means and of Mehrotra's (1997) version
/// (Mehrotra, "Improving the Brown-Forsythe solution to the generalized Behrens-Fisher problem",
/// Communications in Statistics - Simulation and Computation 26, 1139-1145): the statistic
/// sum n_j (mean_j - grand mean)^2 / sum (1 - n_j/N) s_j^2, the denominator df by Satterthwaite,
/// the numerator df k - 1 (Brown-Forsythe) or Mehrotra's
/// (sum s_j^2 - sum n_j s_j^2 / N)^2 / (sum s_j^4 + (sum n_j s_j^2 / N)^2 - 2 sum n_j s_j^4 / N).
/// 1 where undefined (a zero denominator).
fn brown_forsythe_means(s: &[samewise::stats::describe::Summary]) -> (f64, f64) {
    use samewise::stats::distributions::f_sf;
    let n: f64 = s.iter().map(|g| g.n as f64).sum();
    let v: Vec<f64> = s.iter().map(|g| g.variance().unwrap_or(0.0)).collect();
    let grand = s.iter().map(|g| g.n as f64 * g.mean).sum::<f64>() / n;
    let c: Vec<f64> = s
        .iter()
        .zip(&v)
        .map(|(g, v)| (1.0 - g.n as f64 / n) * v)
        .collect();
    let numerator: f64 = s
        .iter()
        .map(|g| g.n as f64 * (g.mean - grand).powi(2))
        .sum();
    let denominator: f64 = c.iter().sum();
    if denominator <= 0.0 {
        return (1.0, 1.0);
    }
    let df2 = denominator * denominator
        / s.iter()
            .zip(&c)
            .map(|(g, ci)| ci * ci / (g.n as f64 - 1.0))
            .sum::<f64>();
    let sum_v: f64 = v.iter().sum();
    let weighted: f64 = s.iter().zip(&v).map(|(g, v)| g.n as f64 * v).sum::<f64>() / n;
    let df1_mehrotra = (sum_v - weighted).powi(2)
        / (v.iter().map(|x| x * x).sum::<f64>() + weighted * weighted
            - 2.0
                * s.iter()
                    .zip(&v)
                    .map(|(g, v)| g.n as f64 * v * v)
                    .sum::<f64>()
                / n);
    let statistic = numerator / denominator;
    let k1 = (s.len() - 1) as f64;
    (
        f_sf(statistic, k1, df2).unwrap_or(1.0),
        f_sf(statistic, df1_mehrotra, df2).unwrap_or(1.0),
    )
}
