//! Group summaries: n, mean, M2 (sum of squared deviations from the mean), min, max.
//!
//! Built in one pass with Welford's update and merged exactly with the parallel formula of Chan,
//! Golub and LeVeque (1979, "Updating formulae and a pairwise algorithm for computing sample
//! variances"), so summaries kept per shard or per period combine later without the raw values.

/// Summary of one group's values.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Summary {
    /// Number of values.
    pub n: u64,
    /// Mean of the values (0 when empty).
    pub mean: f64,
    /// Sum of squared deviations from the mean.
    pub m2: f64,
    /// Smallest value (+inf when empty).
    pub min: f64,
    /// Largest value (-inf when empty).
    pub max: f64,
}

impl Default for Summary {
    fn default() -> Self {
        Self::new()
    }
}

impl Summary {
    /// An empty summary.
    pub const fn new() -> Self {
        Summary {
            n: 0,
            mean: 0.0,
            m2: 0.0,
            min: f64::INFINITY,
            max: f64::NEG_INFINITY,
        }
    }

    /// Summarises a slice with the corrected two-pass algorithm (Chan, Golub and LeVeque 1983,
    /// "Algorithms for computing the sample variance: analysis and recommendations"): pass one
    /// gives the sum, min and max; pass two sums `d = x - mean` and `d^2`, and
    /// `M2 = Σ d^2 - (Σ d)^2 / n` removes the rounding of the mean. Both passes keep eight
    /// independent accumulators, so the compiler can use SIMD lanes and the pass runs at memory
    /// speed. Agrees with [`Summary::push`] (Welford) to rounding.
    pub fn from_slice(values: &[f64]) -> Self {
        const LANES: usize = 8;
        let n = values.len();
        if n == 0 {
            return Summary::new();
        }
        let chunks = values.chunks_exact(LANES);
        let tail = chunks.remainder();
        let mut sum = [0.0f64; LANES];
        let mut min = [f64::INFINITY; LANES];
        let mut max = [f64::NEG_INFINITY; LANES];
        for c in chunks {
            for i in 0..LANES {
                sum[i] += c[i];
                min[i] = if c[i] < min[i] { c[i] } else { min[i] };
                max[i] = if c[i] > max[i] { c[i] } else { max[i] };
            }
        }
        let mut total: f64 = sum.iter().sum();
        let mut lo = min.iter().copied().fold(f64::INFINITY, f64::min);
        let mut hi = max.iter().copied().fold(f64::NEG_INFINITY, f64::max);
        for &v in tail {
            total += v;
            lo = lo.min(v);
            hi = hi.max(v);
        }
        let nf = n as f64;
        if lo == hi {
            // All values equal: exact mean and M2 = 0 (a rounded mean would leave a tiny M2).
            return Summary {
                n: n as u64,
                mean: lo,
                m2: 0.0,
                min: lo,
                max: hi,
            };
        }
        let mean = total / nf;
        let mut dev = [0.0f64; LANES];
        let mut sq = [0.0f64; LANES];
        let chunks = values.chunks_exact(LANES);
        for c in chunks {
            for i in 0..LANES {
                let d = c[i] - mean;
                dev[i] += d;
                sq[i] += d * d;
            }
        }
        let mut dev_sum: f64 = dev.iter().sum();
        let mut sq_sum: f64 = sq.iter().sum();
        for &v in tail {
            let d = v - mean;
            dev_sum += d;
            sq_sum += d * d;
        }
        Summary {
            n: n as u64,
            mean: mean + dev_sum / nf,
            m2: (sq_sum - dev_sum * dev_sum / nf).max(0.0),
            min: lo,
            max: hi,
        }
    }

    /// Adds one value (Welford's update).
    #[inline]
    pub fn push(&mut self, x: f64) {
        self.n += 1;
        let delta = x - self.mean;
        self.mean += delta / self.n as f64;
        self.m2 += delta * (x - self.mean);
        if x < self.min {
            self.min = x;
        }
        if x > self.max {
            self.max = x;
        }
    }

    /// Combines the summaries of two disjoint sets of values (parallel formula).
    pub fn merge(&self, other: &Summary) -> Summary {
        if self.n == 0 {
            return *other;
        }
        if other.n == 0 {
            return *self;
        }
        let n = self.n + other.n;
        let (na, nb, nf) = (self.n as f64, other.n as f64, n as f64);
        let delta = other.mean - self.mean;
        let mean = if na >= nb {
            self.mean + delta * (nb / nf)
        } else {
            other.mean - delta * (na / nf)
        };
        let m2 = self.m2 + other.m2 + delta * delta * (na * nb / nf);
        Summary {
            n,
            mean,
            m2,
            min: self.min.min(other.min),
            max: self.max.max(other.max),
        }
    }

    /// Sample variance (n - 1 denominator); `None` when n < 2.
    pub fn variance(&self) -> Option<f64> {
        (self.n >= 2).then(|| self.m2 / (self.n - 1) as f64)
    }

    /// Sample standard deviation; `None` when n < 2.
    pub fn sd(&self) -> Option<f64> {
        self.variance().map(f64::sqrt)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::stats::lre;

    // Hand check: [2, 4, 4, 4, 5, 5, 7, 9] has mean 5, M2 = 32, sample variance 32/7.
    #[test]
    fn hand_example() {
        let s = Summary::from_slice(&[2.0, 4.0, 4.0, 4.0, 5.0, 5.0, 7.0, 9.0]);
        assert_eq!(s.n, 8);
        assert_eq!(s.mean, 5.0);
        assert_eq!(s.m2, 32.0);
        assert!(lre(s.variance().unwrap(), 32.0 / 7.0) > 15.0);
        assert_eq!((s.min, s.max), (2.0, 9.0));
    }

    #[test]
    fn merge_equals_union() {
        let a = [1.5, 2.25, 3.0, 10.0];
        let b = [0.5, 7.75, 8.0];
        let all: Vec<f64> = a.iter().chain(b.iter()).copied().collect();
        let merged = Summary::from_slice(&a).merge(&Summary::from_slice(&b));
        let whole = Summary::from_slice(&all);
        assert_eq!(merged.n, whole.n);
        assert!(lre(merged.mean, whole.mean) > 14.0);
        assert!(lre(merged.m2, whole.m2) > 14.0);
        assert_eq!((merged.min, merged.max), (whole.min, whole.max));
    }

    // The two-pass slice summary and Welford's one-pass update agree (hand data with an offset).
    #[test]
    fn slice_agrees_with_push() {
        let values: Vec<f64> = (0..1003)
            .map(|i| 1e6 + ((i * 37) % 101) as f64 * 0.01)
            .collect();
        let mut w = Summary::new();
        for &v in &values {
            w.push(v);
        }
        let s = Summary::from_slice(&values);
        assert_eq!(s.n, w.n);
        assert!(lre(s.mean, w.mean) > 14.0);
        assert!(lre(s.m2, w.m2) > 10.0);
        assert_eq!((s.min, s.max), (w.min, w.max));
    }

    #[test]
    fn empty_and_single() {
        let e = Summary::new();
        assert_eq!(e.variance(), None);
        let one = Summary::from_slice(&[3.0]);
        assert_eq!(one.variance(), None);
        assert_eq!(one.merge(&e), one);
        assert_eq!(e.merge(&one), one);
    }
}
