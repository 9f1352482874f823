//! Per-`k` tables of the range of `k` standard normals, so that the outer integral over the chi
//! density needs no inner quadrature.
//!
//! For one `k`, [`RangeTable`] holds both tails of `W` (the range of `k` standard normals) as
//! functions of `t = ln w`:
//!
//! ```text
//! L(t) = ln P(W <= e^t)          (lower tail)
//! M(t) = ln P(W >  e^t) + w^2/4  (upper tail without its Gaussian decay, w = e^t)
//! ```
//!
//! as piecewise Chebyshev series of degree [`DEGREE`] on `t_lo <= t <= t_hi`, the pieces bisected
//! until the last two coefficients of both series are below [`TOLERANCE`] (relative to the size of
//! the function on the piece, at least 1). The values at the interpolation points come from the
//! direct quadrature ([`range_inf`] with the ACCURATE settings), each tail integrated on its own,
//! so both keep relative accuracy: the tables hold `P` and `1 - P` to about 1e-14 relative where
//! the direct quadrature does (checked against it in the tests).
//!
//! Outside the tabulated range: below `t_lo` (where `w <= 1e-8`, or where `P(W <= w)` falls below
//! about 1e-280 for large `k`) the lower tail follows its asymptote `P ~ c w^(k-1)`, whose relative
//! error is of order `k w^2`; above `t_hi` (`w >= 50`, where `P(W > w)` is below about 1e-290) the
//! lower tail is 1 and the upper tail is integrated directly.
//!
//! A table takes a few milliseconds to build and is cached for the process ([`table_for`]); the
//! checks of one run use a handful of `k` (the numbers of machines, suppliers, shifts), so the
//! cost is paid once per `k` and every later probability or quantile, at any df, costs only the
//! outer sum.

use super::{range_inf, ACCURATE};
use std::collections::HashMap;
use std::f64::consts::PI;
use std::sync::{Arc, Mutex, OnceLock};

/// Degree of each Chebyshev piece (DEGREE + 1 Chebyshev-Lobatto points).
const DEGREE: usize = 16;

/// A piece is accepted when its last two coefficients are below this share of the size of the
/// function on it (at least 1).
const TOLERANCE: f64 = 2e-15;

/// Narrowest piece; reached only if the tolerance cannot be met (noise in the direct values).
const MIN_WIDTH: f64 = 1.0 / 256.0;

/// Smallest tabulated `w`: below it the lower tail's asymptote is exact to about `k * 1e-16`.
const W_LO: f64 = 1e-8;

/// Largest tabulated `w`: the upper tail there is below 1e-290 for every `k >= 2`.
const W_HI: f64 = 50.0;

/// Most tables kept (one per distinct `k`); the oldest is dropped beyond it.
const CACHE_SIZE: usize = 64;

/// Both tails of the range of `k` standard normals as piecewise Chebyshev series in `t = ln w`.
pub(super) struct RangeTable {
    k: f64,
    /// Piece boundaries, ascending: piece `i` covers `breaks[i]..=breaks[i + 1]`.
    breaks: Vec<f64>,
    /// Per piece: coefficients of L, of dL/dt, of M, of dM/dt.
    pieces: Vec<Piece>,
    /// L and dL/dt at the lowest break (for the asymptote below it).
    lo_value: f64,
}

struct Piece {
    lower: [f64; DEGREE + 1],
    lower_slope: [f64; DEGREE + 1],
    upper: [f64; DEGREE + 1],
    upper_slope: [f64; DEGREE + 1],
}

/// The cached table for `k`, built on first use.
pub(super) fn table_for(k: f64) -> Arc<RangeTable> {
    static CACHE: OnceLock<Mutex<Vec<Arc<RangeTable>>>> = OnceLock::new();
    let cache = CACHE.get_or_init(|| Mutex::new(Vec::new()));
    if let Some(t) = lock(cache).iter().find(|t| t.k.to_bits() == k.to_bits()) {
        return Arc::clone(t);
    }
    // Built outside the lock: two threads may both build the same table, which is harmless.
    let table = Arc::new(RangeTable::build(k));
    let mut tables = lock(cache);
    if !tables.iter().any(|t| t.k.to_bits() == k.to_bits()) {
        if tables.len() >= CACHE_SIZE {
            tables.remove(0);
        }
        tables.push(Arc::clone(&table));
    }
    table
}

fn lock<T>(m: &Mutex<T>) -> std::sync::MutexGuard<'_, T> {
    // A panic while holding the lock cannot leave the Vec inconsistent (push / remove only).
    m.lock().unwrap_or_else(|e| e.into_inner())
}

/// `(L(t), M(t))` from the direct quadrature at `w = e^t`, and whether the lower tail is at least
/// 1/2 there.
///
/// Each log comes from the tail that holds it with relative accuracy: the smaller tail `P` gives
/// `ln P` and, for the other, `ln(1 - P)`. `upper_first` guesses which tail is the smaller one, so
/// that most points need one quadrature, not two.
fn direct(t: f64, k: f64, upper_first: bool) -> ((f64, f64), bool) {
    let w = t.exp();
    let from_lower = |lower: f64| (lower.ln(), (-lower).ln_1p() + 0.25 * w * w);
    let from_upper = |upper: f64| ((-upper).ln_1p(), upper.ln() + 0.25 * w * w);
    if upper_first {
        let upper = range_inf(w, k, true, &ACCURATE).0;
        if upper < 0.5 {
            return (from_upper(upper), true);
        }
        (from_lower(range_inf(w, k, false, &ACCURATE).0), false)
    } else {
        let lower = range_inf(w, k, false, &ACCURATE).0;
        if lower < 0.5 {
            return (from_lower(lower), false);
        }
        (from_upper(range_inf(w, k, true, &ACCURATE).0), true)
    }
}

impl RangeTable {
    fn build(k: f64) -> RangeTable {
        // Lower end: w = 1e-8, or higher for large k where P(W <= w) ~ sqrt(k) (w / sqrt(2 pi))^(k-1)
        // would be below e^-645 (1e-280) there.
        let half_ln_2pi = 0.5 * (2.0 * PI).ln();
        let t_floor = half_ln_2pi + (-645.0 - 0.5 * k.ln()) / (k - 1.0);
        let t_lo = W_LO.ln().max(t_floor);
        let t_hi = W_HI.ln();
        // Start from pieces of width at most 1, then bisect each until it meets the tolerance.
        let n_start = ((t_hi - t_lo).ceil() as usize).max(1);
        let width = (t_hi - t_lo) / n_start as f64;
        let mut pending: Vec<(f64, f64)> = (0..n_start)
            .rev()
            .map(|i| (t_lo + i as f64 * width, t_lo + (i + 1) as f64 * width))
            .collect();
        let mut breaks = vec![t_lo];
        let mut pieces = Vec::new();
        // End points and midpoints are shared between a piece and its halves or neighbours.
        let mut known: HashMap<u64, (f64, f64)> = HashMap::new();
        // Lowest t seen where P(W <= e^t) >= 1/2 (the upper tail is then the smaller one).
        let mut median_above = f64::INFINITY;
        while let Some((a, b)) = pending.pop() {
            let (mid, half) = (0.5 * (a + b), 0.5 * (b - a));
            let mut lower = [0.0; DEGREE + 1];
            let mut upper = [0.0; DEGREE + 1];
            for i in 0..=DEGREE {
                // Point i = 0 is b, point DEGREE is a.
                let t = if i == 0 {
                    b
                } else if i == DEGREE {
                    a
                } else if 2 * i == DEGREE {
                    mid
                } else {
                    mid + half * (PI * i as f64 / DEGREE as f64).cos()
                };
                let (l, m) = *known.entry(t.to_bits()).or_insert_with(|| {
                    let (values, is_upper_half) = direct(t, k, t >= median_above);
                    if is_upper_half {
                        median_above = median_above.min(t);
                    }
                    values
                });
                lower[i] = l;
                upper[i] = m;
            }
            let lower_coef = chebyshev_coefficients(&lower);
            let upper_coef = chebyshev_coefficients(&upper);
            // Sizes: the upper series holds M + w^2/4, so its rounding is that of M, up to w_b^2/4.
            let size =
                |values: &[f64; DEGREE + 1]| values.iter().fold(1.0f64, |m, v| m.max(v.abs()));
            let lower_scale = size(&lower);
            let upper_scale = size(&upper) + 0.25 * (2.0 * b).exp();
            let tail = |coef: &[f64; DEGREE + 1]| coef[DEGREE - 1].abs().max(coef[DEGREE].abs());
            let is_accepted = tail(&lower_coef) <= TOLERANCE * lower_scale
                && tail(&upper_coef) <= TOLERANCE * upper_scale
                || b - a <= MIN_WIDTH;
            if !is_accepted {
                pending.push((mid, b));
                pending.push((a, mid));
                continue;
            }
            breaks.push(b);
            pieces.push(Piece {
                lower_slope: derivative(&lower_coef, half),
                lower: lower_coef,
                upper_slope: derivative(&upper_coef, half),
                upper: upper_coef,
            });
        }
        let lo_value = clenshaw(&pieces[0].lower, -1.0);
        RangeTable {
            k,
            breaks,
            pieces,
            lo_value,
        }
    }

    /// Number of Chebyshev pieces (for the tests' and benchmarks' reports).
    #[cfg(test)]
    pub(super) fn piece_count(&self) -> usize {
        self.pieces.len()
    }

    /// `(P(W <= w) or P(W > w), density of W at w)`, like [`range_inf`].
    pub(super) fn tail(&self, w: f64, upper: bool) -> (f64, f64) {
        self.tail_at(w, w.ln(), upper)
    }

    /// [`RangeTable::tail`] with `t = ln w` given (the outer integral has it without a log).
    pub(super) fn tail_at(&self, w: f64, t: f64, upper: bool) -> (f64, f64) {
        if w <= 0.0 {
            return (if upper { 1.0 } else { 0.0 }, 0.0);
        }
        if !w.is_finite() {
            return (if upper { 0.0 } else { 1.0 }, 0.0);
        }
        let t_lo = self.breaks[0];
        let t_hi = self.breaks[self.breaks.len() - 1];
        if t < t_lo {
            // P ~ c w^(k-1): ln P linear in t with slope k - 1.
            let km1 = self.k - 1.0;
            let p = (self.lo_value + km1 * (t - t_lo)).exp();
            let density = p * km1 / w;
            return (if upper { 1.0 - p } else { p }, density);
        }
        if t > t_hi {
            return if upper {
                range_inf(w, self.k, true, &ACCURATE)
            } else {
                // P(W > w) < 1e-290 here: the lower tail is 1 and the density negligible.
                (1.0, range_inf(w, self.k, true, &ACCURATE).1)
            };
        }
        // Piece containing t: the last break <= t (t_hi belongs to the last piece).
        let i = self
            .breaks
            .partition_point(|&b| b <= t)
            .clamp(1, self.pieces.len())
            - 1;
        let (a, b) = (self.breaks[i], self.breaks[i + 1]);
        let x = (2.0 * t - a - b) / (b - a);
        let piece = &self.pieces[i];
        // Value and density from the smaller tail, which the table holds with relative accuracy;
        // the other tail is 1 minus it.
        let l = clenshaw(&piece.lower, x);
        let (lower, upper_tail, density) = if l < -std::f64::consts::LN_2 {
            let p = l.exp();
            (p, 1.0 - p, p * clenshaw(&piece.lower_slope, x) / w)
        } else {
            let m = clenshaw(&piece.upper, x) - 0.25 * w * w;
            let slope = clenshaw(&piece.upper_slope, x) - 0.5 * w * w;
            let p = m.exp();
            (1.0 - p, p, -p * slope / w)
        };
        (if upper { upper_tail } else { lower }, density)
    }
}

/// `sum c_j T_j(x)` by Clenshaw's recurrence.
fn clenshaw(c: &[f64; DEGREE + 1], x: f64) -> f64 {
    let (mut b1, mut b2) = (0.0, 0.0);
    let two_x = 2.0 * x;
    for &cj in c[1..].iter().rev() {
        let b0 = two_x * b1 - b2 + cj;
        b2 = b1;
        b1 = b0;
    }
    c[0] + x * b1 - b2
}

/// Chebyshev coefficients of the interpolant through the values at `cos(pi i / DEGREE)`.
fn chebyshev_coefficients(values: &[f64; DEGREE + 1]) -> [f64; DEGREE + 1] {
    let n = DEGREE;
    let mut coef = [0.0; DEGREE + 1];
    for (j, c) in coef.iter_mut().enumerate() {
        let mut sum = 0.0;
        for (i, v) in values.iter().enumerate() {
            let end = if i == 0 || i == n { 0.5 } else { 1.0 };
            sum += end * v * (PI * ((i * j) % (2 * n)) as f64 / n as f64).cos();
        }
        *c = 2.0 * sum / n as f64;
    }
    coef[0] *= 0.5;
    coef[n] *= 0.5;
    coef
}

/// Coefficients of the derivative with respect to `t` (the series is in `x = (t - mid) / half`).
fn derivative(coef: &[f64; DEGREE + 1], half: f64) -> [f64; DEGREE + 1] {
    // f' = sum d_j T_j with d_(j-1) = d_(j+1) + 2 j c_j, then d_0 halved.
    let mut d = [0.0; DEGREE + 3];
    for j in (1..=DEGREE).rev() {
        d[j - 1] = d[j + 1] + 2.0 * j as f64 * coef[j];
    }
    d[0] *= 0.5;
    let mut out = [0.0; DEGREE + 1];
    for (o, v) in out.iter_mut().zip(d.iter()) {
        *o = v / half;
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::lre;

    // The table against the direct quadrature it was built from, at points between its
    // interpolation nodes, both tails: relative agreement (log relative error).
    #[test]
    fn table_matches_direct_quadrature() {
        let mut report = Vec::new();
        for k in [2.0, 3.0, 5.0, 7.5, 10.0, 20.0, 50.0, 100.0] {
            let start = std::time::Instant::now();
            let table = RangeTable::build(k);
            let built = start.elapsed();
            let (mut worst_lower, mut worst_upper) = (f64::INFINITY, f64::INFINITY);
            let mut state = 0x9E37_79B9_7F4A_7C15u64;
            for _ in 0..400 {
                // Fixed random state: w log-uniform on [1e-9, 60].
                state = state
                    .wrapping_mul(6364136223846793005)
                    .wrapping_add(1442695040888963407);
                let u = (state >> 11) as f64 / (1u64 << 53) as f64;
                let w = (1e-9f64.ln() + u * (60.0f64.ln() - 1e-9f64.ln())).exp();
                let (lo, lo_d) = table.tail(w, false);
                let (up, up_d) = table.tail(w, true);
                let (lo_ref, lo_d_ref) =
                    range_inf(w, k, false, &super::super::ACCURATE_WITH_DENSITY);
                let (up_ref, _) = range_inf(w, k, true, &ACCURATE);
                if lo_ref > 1e-280 {
                    worst_lower = worst_lower.min(lre(lo, lo_ref));
                    if lo_d_ref > 1e-280 {
                        assert!(
                            lre(lo_d, lo_d_ref) >= 10.0,
                            "k {k} w {w}: density {lo_d} vs {lo_d_ref}"
                        );
                    }
                }
                if up_ref > 1e-290 {
                    worst_upper = worst_upper.min(lre(up, up_ref));
                }
                // The density of W is one function whichever tail is asked for.
                assert_eq!(up_d, lo_d, "k {k} w {w}: density differs by tail");
            }
            report.push(format!(
                "k {k}: {} pieces, built in {:.1} ms, worst lower {worst_lower:.2}, upper {worst_upper:.2} digits",
                table.piece_count(),
                built.as_secs_f64() * 1e3
            ));
            assert!(
                worst_lower >= 12.0 && worst_upper >= 12.0,
                "{}",
                report.last().unwrap()
            );
        }
        eprintln!("{}", report.join("\n"));
    }
}
