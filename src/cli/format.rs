//! Number formatting shared by the terminal views of the subcommands, and the JSON numbers of
//! their `--json` output.

use serde_json::Value;

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

/// Below this a p-value is past what the tail computations (and a double) resolve: it is shown
/// as a bound, `< 1e-300`, never as `0`.
pub const P_FLOOR: f64 = 1e-300;

/// A p-value for reading: 4 decimals, exponent form below 1e-4, `< 1e-300` below [`P_FLOOR`].
pub fn pval(p: f64) -> String {
    if p < P_FLOOR {
        "< 1e-300".into()
    } else if p < 1e-4 {
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

/// A p-value table cell: [`pval`]'s bound below [`P_FLOOR`], otherwise 4 significant digits;
/// `-` when absent.
pub fn p_cell(p: Option<f64>) -> String {
    match p {
        None => "-".into(),
        Some(p) if p < P_FLOOR => "< 1e-300".into(),
        Some(p) if p < 1e-3 => format!("{p:.2e}"),
        Some(p) => {
            let digits = (3 - p.log10().floor() as i32).clamp(0, 6) as usize;
            format!("{p:.digits$}")
        }
    }
}

/// Every p-value of a JSON document (a number under a key `p`, `*_p` or `p_*`) below
/// [`P_FLOOR`], including an underflow to 0, becomes the bound `1e-300` with a sibling
/// `<key>_is_bound: true`, so a script never reads "p = 0".
pub fn bound_tiny_p(value: &mut Value) {
    match value {
        Value::Object(map) => {
            let keys: Vec<String> = map.keys().cloned().collect();
            for key in keys {
                let is_p = key == "p" || key.ends_with("_p") || key.starts_with("p_");
                let tiny = map
                    .get(&key)
                    .and_then(Value::as_f64)
                    .is_some_and(|p| p < P_FLOOR);
                if is_p && tiny {
                    map.insert(key.clone(), json_number(P_FLOOR));
                    map.insert(format!("{key}_is_bound"), Value::Bool(true));
                } else if let Some(v) = map.get_mut(&key) {
                    bound_tiny_p(v);
                }
            }
        }
        Value::Array(items) => items.iter_mut().for_each(bound_tiny_p),
        _ => {}
    }
}

/// A document as pretty JSON text: its `Serialize` form with p-values below the floor written
/// as bounds ([`bound_tiny_p`]).
pub fn document_json(doc: &impl serde::Serialize) -> String {
    let mut v = serde_json::to_value(doc).unwrap_or(Value::Null);
    bound_tiny_p(&mut v);
    serde_json::to_string_pretty(&v).unwrap_or_default()
}

/// A finite number as JSON, or null (callers pair a null with a reason).
fn json_number(x: f64) -> Value {
    serde_json::Number::from_f64(x).map_or(Value::Null, Value::Number)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn tiny_p_values_become_bounds() {
        let mut v = serde_json::json!({"p": 0.0, "welch": {"p": 1e-320, "f": 0.0},
            "pairs": [{"p_adj": 0.0}, {"p_adj": 0.5}], "kruskal_p": 0.2});
        bound_tiny_p(&mut v);
        assert_eq!(v["p"], json_number(1e-300));
        assert_eq!(v["p_is_bound"], true);
        assert_eq!(v["welch"]["p_is_bound"], true);
        assert_eq!(v["welch"]["f"], json_number(0.0));
        assert_eq!(v["pairs"][0]["p_adj_is_bound"], true);
        assert!(v["pairs"][1].get("p_adj_is_bound").is_none());
        assert!(v.get("kruskal_p_is_bound").is_none());
    }

    #[test]
    fn formats_for_reading() {
        assert_eq!(sig(0.0123456, 3), "0.0123");
        assert_eq!(sig(1234.6, 3), "1235");
        assert_eq!(sig(1.5e-7, 3), "1.50e-7");
        assert_eq!(sig(f64::NAN, 3), "-");
        assert_eq!(pval(0.0227), "0.0227");
        assert_eq!(pval(2.18e-12), "2.18e-12");
        assert_eq!(pval(0.0), "< 1e-300");
        assert_eq!(pval(1e-310), "< 1e-300");
        assert_eq!(p_cell(Some(0.0)), "< 1e-300");
        assert_eq!(p_cell(Some(0.01129)), "0.01129");
        assert_eq!(p_cell(Some(2.18e-12)), "2.18e-12");
        assert_eq!(dfmt(90.0), "90");
        assert_eq!(dfmt(36.5512), "36.55");
    }
}
