//! Number formatting shared by the terminal views of the subcommands, and the JSON numbers of
//! their `--json` output.

use serde_json::{Map, Value};

use crate::stats::Stat;

/// `x` with `digits` significant digits, in plain or exponent notation as fits; `-` when not
/// finite.
pub fn sig(x: f64, digits: usize) -> String {
    if !x.is_finite() {
        return "-".into();
    }
    if x == 0.0 {
        return "0".into();
    }
    let mag = x.abs().log10().floor() as i32;
    if !(-4..=9).contains(&mag) {
        return format!("{:.*e}", digits.saturating_sub(1), x);
    }
    let decimals = (digits as i32 - 1 - mag).max(0) as usize;
    format!("{x:.decimals$}")
}

/// A p-value for reading: 4 decimals, exponent form below 1e-4.
pub fn pval(p: f64) -> String {
    if p < 1e-4 {
        format!("{p:.2e}")
    } else {
        format!("{p:.4}")
    }
}

/// Degrees of freedom: whole numbers as such, fractional ones (Welch) to 4 significant digits.
pub fn dfmt(df: f64) -> String {
    if df.fract() == 0.0 && df.abs() < 1e15 {
        format!("{df:.0}")
    } else {
        sig(df, 4)
    }
}

/// A finite number as JSON, or null (callers pair a null with a reason).
pub fn json_number(x: f64) -> Value {
    serde_json::Number::from_f64(x).map_or(Value::Null, Value::Number)
}

/// Inserts `key: value` or `key: null, key_reason: reason`.
pub fn put<T>(map: &mut Map<String, Value>, key: &str, stat: &Stat<T>, f: impl Fn(&T) -> Value) {
    match stat {
        Ok(v) => {
            map.insert(key.to_string(), f(v));
        }
        Err(e) => {
            map.insert(key.to_string(), Value::Null);
            map.insert(format!("{key}_reason"), Value::String(e.reason.clone()));
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn formats_for_reading() {
        assert_eq!(sig(0.0123456, 3), "0.0123");
        assert_eq!(sig(1234.6, 3), "1235");
        assert_eq!(sig(1.5e-7, 3), "1.50e-7");
        assert_eq!(sig(f64::NAN, 3), "-");
        assert_eq!(pval(0.0227), "0.0227");
        assert_eq!(pval(2.18e-12), "2.18e-12");
        assert_eq!(dfmt(90.0), "90");
        assert_eq!(dfmt(36.5512), "36.55");
    }
}
