//! Exact decimal numbers, and centring on an exact origin.
//!
//! Gauges often report values with a large offset and a tiny spread (a length of
//! `1000000000000.4` next to `1000000000000.3`). Parsing such text straight into `f64` keeps only
//! about 16 significant digits of the *whole* value, which leaves few for the spread, and every
//! statistic computed afterwards inherits the loss. samewise therefore parses the decimal text
//! exactly ([`Decimal`]: an `i128` mantissa and a power-of-ten scale), picks one exact origin per
//! data set (per characteristic in the store), and converts only the exact difference
//! `value - origin` to `f64`, with a single rounding ([`Decimal::offset_from`]). Statistics are
//! computed on those offsets; means are reported as origin + offset.
//!
//! The ANOVA, Welch, Kruskal-Wallis, Levene, Bartlett and variance-component statistics are all
//! invariant to adding a constant, so centring changes no result; it only keeps the digits.
//!
//! Accepted text: optional sign, digits with an optional `.` fraction, optional exponent
//! (`e`/`E`), surrounding ASCII whitespace ignored. Rejected with a reason: empty cells, a comma
//! decimal separator, `NaN`, `inf`, units or other trailing text, and magnitudes outside the range
//! of finite `f64` values.

use std::cmp::Ordering;
use std::fmt;
use std::str::FromStr;

/// Largest number of significant digits kept exactly (an `i128` holds 38).
const MAX_DIGITS: usize = 36;

/// An exact decimal number `mantissa x 10^-scale` (a negative scale multiplies by a power of ten).
#[derive(Debug, Clone, Copy)]
pub struct Decimal {
    mantissa: i128,
    scale: i32,
}

/// Why a text is not a number samewise accepts.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct DecimalError {
    /// The offending text (trimmed).
    pub text: String,
    /// Plain-language reason, with the fix where one exists.
    pub reason: String,
}

impl fmt::Display for DecimalError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(f, "value \"{}\" {}", self.text, self.reason)
    }
}

impl std::error::Error for DecimalError {}

fn pow10(exp: u32) -> Option<i128> {
    10i128.checked_pow(exp)
}

impl Decimal {
    /// Zero.
    pub const ZERO: Decimal = Decimal {
        mantissa: 0,
        scale: 0,
    };

    /// Builds `mantissa x 10^-scale`.
    pub fn from_parts(mantissa: i128, scale: i32) -> Decimal {
        Decimal { mantissa, scale }
    }

    /// The mantissa (`self = mantissa x 10^-scale`).
    pub fn mantissa(&self) -> i128 {
        self.mantissa
    }

    /// The scale (number of decimal places of the mantissa).
    pub fn scale(&self) -> i32 {
        self.scale
    }

    /// Parses decimal text exactly. See the module docs for what is accepted.
    pub fn parse(text: &str) -> Result<Decimal, DecimalError> {
        let trimmed = text.trim_matches(|c: char| c.is_ascii_whitespace());
        let fail = |reason: &str| DecimalError {
            text: trimmed.to_string(),
            reason: reason.to_string(),
        };
        if trimmed.is_empty() {
            return Err(fail("is empty"));
        }
        let lower = trimmed.to_ascii_lowercase();
        let unsigned = lower.trim_start_matches(['+', '-']);
        if unsigned.starts_with("nan") {
            return Err(fail("is not a number (NaN is not a measurement)"));
        }
        if unsigned.starts_with("inf") {
            return Err(fail("is not a finite number"));
        }
        let bytes = trimmed.as_bytes();
        let mut pos = 0;
        let negative = match bytes.first() {
            Some(b'-') => {
                pos += 1;
                true
            }
            Some(b'+') => {
                pos += 1;
                false
            }
            _ => false,
        };
        let mut mantissa: i128 = 0;
        let mut n_digits = 0usize; // significant digits kept in the mantissa
        let mut any_digit = false;
        let mut frac_digits: i64 = 0;
        let mut seen_point = false;
        // Zeros after the last non-zero digit so far, before and after the point.
        let mut pending_int_zeros: i64 = 0;
        let mut pending_frac_zeros: i64 = 0;
        while pos < bytes.len() {
            let b = bytes[pos];
            match b {
                b'0'..=b'9' => {
                    any_digit = true;
                    if b == b'0' && mantissa != 0 {
                        // A zero after a significant digit is significant only if a non-zero
                        // digit follows: held back, so 1e36-sized integers written out in full
                        // parse as their exponent form does.
                        if seen_point {
                            pending_frac_zeros += 1;
                        } else {
                            pending_int_zeros += 1;
                        }
                    } else if b == b'0' {
                        // A leading zero: no significant digit, only a decimal place.
                        if seen_point {
                            frac_digits += 1;
                        }
                    } else {
                        let zeros = pending_int_zeros + pending_frac_zeros;
                        n_digits += zeros as usize + 1;
                        if n_digits > MAX_DIGITS {
                            return Err(fail("has more significant digits than samewise keeps (36)"));
                        }
                        mantissa = mantissa * pow10(zeros as u32).unwrap_or(i128::MAX / 10)
                            * 10
                            + i128::from(b - b'0');
                        frac_digits += pending_frac_zeros;
                        if seen_point {
                            frac_digits += 1;
                        }
                        pending_int_zeros = 0;
                        pending_frac_zeros = 0;
                    }
                }
                b'.' if !seen_point => seen_point = true,
                b'.' => return Err(fail("has more than one decimal point")),
                b',' => {
                    return Err(fail(
                        "is not a number (use '.' as the decimal separator, no thousands separators; a file written with a decimal comma needs decimal = \",\" in its layout)",
                    ))
                }
                b'e' | b'E' => break,
                _ => {
                    return Err(fail(
                        "is not a number (only digits, one '.', a sign and an exponent are allowed; no units)",
                    ))
                }
            }
            pos += 1;
        }
        if !any_digit {
            return Err(fail("is not a number"));
        }
        let mut exponent: i64 = 0;
        if pos < bytes.len() {
            // bytes[pos] is 'e' or 'E'
            pos += 1;
            let exp_text = &trimmed[pos..];
            if exp_text.is_empty() {
                return Err(fail("has an empty exponent"));
            }
            let valid = exp_text
                .trim_start_matches(['+', '-'])
                .bytes()
                .all(|b| b.is_ascii_digit())
                && exp_text.len() - exp_text.trim_start_matches(['+', '-']).len() <= 1
                && !exp_text.trim_start_matches(['+', '-']).is_empty();
            if !valid {
                return Err(fail(
                    "is not a number (only digits, one '.', a sign and an exponent are allowed; no units)",
                ));
            }
            exponent = match exp_text.parse::<i64>() {
                Ok(e) if e.abs() <= 100_000 => e,
                _ => return Err(fail("is out of range")),
            };
        }
        if negative {
            mantissa = -mantissa;
        }
        // value = mantissa x 10^(exponent - frac_digits), with the trailing zeros of the integer
        // part (held back above) as powers of ten; trailing fractional zeros change nothing.
        let power = exponent - frac_digits + pending_int_zeros;
        if mantissa == 0 {
            return Ok(Decimal::ZERO);
        }
        // normalized() below strips trailing zeros; the scale may become negative (1e5 = 1 x 10^5).
        // Magnitude check against the finite f64 range: value ~ 10^(n_digits - 1 + power).
        let order = n_digits as i64 - 1 + power;
        if order > 308 {
            return Err(fail("is out of range (larger than a finite number)"));
        }
        if order < -307 {
            return Err(fail("is out of range (too small to represent)"));
        }
        let value = Decimal {
            mantissa,
            scale: (-power) as i32,
        }
        .normalized();
        if !value.to_f64().is_finite() {
            return Err(fail("is out of range (larger than a finite number)"));
        }
        Ok(value)
    }

    /// Removes trailing zeros of the mantissa (1.50 becomes 1.5); the value is unchanged.
    pub fn normalized(self) -> Decimal {
        let mut d = self;
        while d.mantissa != 0 && d.mantissa % 10 == 0 {
            d.mantissa /= 10;
            d.scale -= 1;
        }
        d
    }

    /// Both numbers on a common scale, if that fits in the mantissa.
    fn aligned(&self, other: &Decimal) -> Option<(i128, i128, i32)> {
        let scale = self.scale.max(other.scale);
        let a = self
            .mantissa
            .checked_mul(pow10((scale - self.scale) as u32)?)?;
        let b = other
            .mantissa
            .checked_mul(pow10((scale - other.scale) as u32)?)?;
        Some((a, b, scale))
    }

    /// The exact difference `self - other`, or `None` if it does not fit in 38 digits.
    pub fn checked_sub(&self, other: &Decimal) -> Option<Decimal> {
        let (a, b, scale) = self.aligned(other)?;
        Some(
            Decimal {
                mantissa: a.checked_sub(b)?,
                scale,
            }
            .normalized(),
        )
    }

    /// The exact sum `self + other`, or `None` if it does not fit in 38 digits.
    pub fn checked_add(&self, other: &Decimal) -> Option<Decimal> {
        let (a, b, scale) = self.aligned(other)?;
        Some(
            Decimal {
                mantissa: a.checked_add(b)?,
                scale,
            }
            .normalized(),
        )
    }

    /// The nearest `f64` (correctly rounded).
    pub fn to_f64(&self) -> f64 {
        const EXACT: i128 = 1 << 53;
        if self.mantissa.abs() <= EXACT && (0..=22).contains(&self.scale) {
            // Both operands are exact in f64, so the quotient is correctly rounded.
            return self.mantissa as f64 / 10f64.powi(self.scale);
        }
        format!("{}e{}", self.mantissa, -self.scale)
            .parse::<f64>()
            .unwrap_or(f64::NAN)
    }

    /// `self - origin` computed exactly, then rounded once to `f64`.
    ///
    /// When the exact difference does not fit in 38 digits (values of wildly different
    /// magnitude, such as 1e-30 against an origin of 1e10), the difference of the two rounded
    /// values is returned: at such magnitudes the rounding of the value itself dominates anyway.
    pub fn offset_from(&self, origin: &Decimal) -> f64 {
        match self.checked_sub(origin) {
            Some(d) => d.to_f64(),
            None => self.to_f64() - origin.to_f64(),
        }
    }

    /// `origin + offset` as the nearest `f64` to report a mean or limit in the original units.
    pub fn plus_offset(&self, offset: f64) -> f64 {
        self.to_f64() + offset
    }
}

/// Picks an exact origin for a set of values and returns it with every value's offset from it.
///
/// The origin is the first value: any exact value inside the data's range keeps the offsets as
/// small as the spread. An empty input gives origin zero.
pub fn centre(values: &[Decimal]) -> (Decimal, Vec<f64>) {
    let origin = values.first().copied().unwrap_or(Decimal::ZERO);
    let offsets = values.iter().map(|v| v.offset_from(&origin)).collect();
    (origin, offsets)
}

impl FromStr for Decimal {
    type Err = DecimalError;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        Decimal::parse(s)
    }
}

impl PartialEq for Decimal {
    fn eq(&self, other: &Self) -> bool {
        self.cmp(other) == Ordering::Equal
    }
}

impl Eq for Decimal {}

impl PartialOrd for Decimal {
    fn partial_cmp(&self, other: &Self) -> Option<Ordering> {
        Some(self.cmp(other))
    }
}

impl Ord for Decimal {
    fn cmp(&self, other: &Self) -> Ordering {
        match self.aligned(other) {
            Some((a, b, _)) => a.cmp(&b),
            None => {
                // Only for values whose alignment overflows: compare sign, then by f64
                // (their magnitudes then differ by many orders, so f64 decides correctly).
                self.to_f64()
                    .partial_cmp(&other.to_f64())
                    .unwrap_or(Ordering::Equal)
            }
        }
    }
}

impl fmt::Display for Decimal {
    /// The exact value as plain decimal text (no exponent), e.g. `1000000000000.4`.
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let negative = self.mantissa < 0;
        let digits = self.mantissa.unsigned_abs().to_string();
        let sign = if negative { "-" } else { "" };
        if self.scale <= 0 {
            let zeros = if self.mantissa == 0 {
                0
            } else {
                (-self.scale) as usize
            };
            return write!(f, "{sign}{digits}{}", "0".repeat(zeros));
        }
        let scale = self.scale as usize;
        if digits.len() > scale {
            let (int, frac) = digits.split_at(digits.len() - scale);
            write!(f, "{sign}{int}.{frac}")
        } else {
            write!(f, "{sign}0.{}{digits}", "0".repeat(scale - digits.len()))
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn d(s: &str) -> Decimal {
        Decimal::parse(s).unwrap()
    }

    #[test]
    fn parses_plain_and_exponent_forms() {
        assert_eq!(d("12.50").to_string(), "12.5");
        assert_eq!(d("-0.001").to_string(), "-0.001");
        assert_eq!(d("+3").to_string(), "3");
        assert_eq!(d("1e-3").to_string(), "0.001");
        assert_eq!(d("2.5E2").to_string(), "250");
        assert_eq!(d(" 7 ").to_string(), "7");
        assert_eq!(d(".5").to_string(), "0.5");
        assert_eq!(d("5.").to_string(), "5");
        assert_eq!(d("-0").to_string(), "0");
        assert_eq!(d("1000000000000.4").to_string(), "1000000000000.4");
    }

    #[test]
    fn trailing_zeros_are_not_significant_digits() {
        // Found by tests/fuzz.rs: 36 digits x 10 was accepted in exponent form and refused
        // written out, so a printed value could not be read back.
        let e = d("211295914056093639173286363064728744E1");
        let text = e.to_string();
        assert_eq!(text, "2112959140560936391732863630647287440");
        assert_eq!(d(&text), e);
        assert_eq!(d("1200.00").to_string(), "1200");
        assert_eq!(d("1200.05").to_string(), "1200.05");
        assert_eq!(d("-10.0100").to_string(), "-10.01");
        assert_eq!(d("0.000").to_string(), "0");
        assert_eq!(d("100e-2").to_string(), "1");
        let long = format!("1{}", "0".repeat(300));
        assert_eq!(d(&long).to_string(), long);
        // 37 significant digits stay refused, zeros inside them counted.
        assert!(Decimal::parse("1000000000000000000000000000000000001").is_err());
        assert!(Decimal::parse(&format!("1{}", "0".repeat(400))).is_err());
    }

    #[test]
    fn rejects_with_reasons() {
        for (text, needle) in [
            ("", "empty"),
            ("-", "not a number"),
            ("1,5", "use '.'"),
            ("NaN", "NaN"),
            ("inf", "finite"),
            ("-Infinity", "finite"),
            ("12.5 mm", "no units"),
            ("1e400", "out of range"),
            ("1e-400", "out of range"),
            ("1.2.3", "more than one decimal point"),
            ("1e", "empty exponent"),
            ("1e+-3", "not a number"),
            ("0x10", "not a number"),
        ] {
            let err = Decimal::parse(text).unwrap_err();
            assert!(
                err.to_string().contains(needle),
                "{text:?}: {err} should mention {needle:?}"
            );
        }
    }

    // NIST StRD SmLs07-type values: 1000000000000.4 and 1000000000000.3 differ by exactly 0.1;
    // straight f64 parsing cannot say so (the spacing of f64 near 1e12 is 1.2e-4).
    #[test]
    fn large_offset_keeps_the_digits() {
        let origin = d("1000000000000.4");
        let v = d("1000000000000.3");
        assert_eq!(v.offset_from(&origin), -0.1);
        assert_eq!(d("1000000000000.5").offset_from(&origin), 0.1);
        let (o, offsets) = centre(&[d("1000000.4"), d("1000000.3"), d("1000000.5")]);
        assert_eq!(o.to_string(), "1000000.4");
        assert_eq!(offsets, vec![0.0, -0.1, 0.1]);
    }

    #[test]
    fn conversion_is_correctly_rounded() {
        for text in [
            "0.1",
            "123456.789",
            "1e-300",
            "9007199254740993",
            "0.30000000000000004",
            "1.7976931348623157e308",
            "2.2250738585072014e-300",
        ] {
            assert_eq!(d(text).to_f64(), text.parse::<f64>().unwrap(), "{text}");
        }
    }

    #[test]
    fn ordering_and_equality_ignore_trailing_zeros() {
        assert_eq!(d("1.50"), d("1.5"));
        assert!(d("1.49") < d("1.5"));
        assert!(d("-2") < d("-1.999"));
        assert_eq!(d("1.5").checked_add(&d("2.25")).unwrap(), d("3.75"));
        assert_eq!(d("1.5").checked_sub(&d("2.25")).unwrap(), d("-0.75"));
    }

    #[test]
    fn wild_magnitudes_fall_back_without_panicking() {
        let tiny = d("1e-200");
        let big = d("1e10");
        assert_eq!(tiny.offset_from(&big), 1e-200 - 1e10);
        assert!(tiny < big);
    }
}
