//! Suggesting the closest known names for a mistyped one ("did you mean ...?"), and the one
//! "unknown name" error ([`unknown_name`]) of every command and module that refuses an unknown
//! characteristic, factor or level: the command line against the configuration, the store
//! against the database, the report and the before/after study against what they load.
//!
//! Distance: Levenshtein edit distance (insertions, deletions, substitutions), ASCII letters
//! compared without case, so `imm1` is one step from nothing and zero from `IMM1`. A candidate is
//! suggested when its distance is at most half its length (at least 2): common practice for
//! "did you mean" hints, which keeps unrelated names out.

use crate::Error;

/// Edit distance between `a` and `b` (ASCII case ignored).
pub fn edit_distance(a: &str, b: &str) -> usize {
    let b: Vec<char> = b.chars().collect();
    let mut prev: Vec<usize> = (0..=b.len()).collect();
    let mut cur = Vec::with_capacity(b.len() + 1);
    for (i, ca) in a.chars().enumerate() {
        cur.clear();
        cur.push(i + 1);
        for (j, cb) in b.iter().enumerate() {
            let cost = usize::from(!ca.eq_ignore_ascii_case(cb));
            cur.push((prev[j] + cost).min(prev[j + 1] + 1).min(cur[j] + 1));
        }
        std::mem::swap(&mut prev, &mut cur);
    }
    prev[b.len()]
}

/// Up to `max` known names close to `name`, closest first (ties in the candidates' order).
pub fn closest_names<'a>(
    name: &str,
    candidates: impl IntoIterator<Item = &'a str>,
    max: usize,
) -> Vec<&'a str> {
    let mut scored: Vec<(usize, usize, &str)> = candidates
        .into_iter()
        .enumerate()
        .map(|(i, c)| (edit_distance(name, c), i, c))
        .filter(|(d, _, c)| *d <= (c.chars().count() / 2).max(2))
        .collect();
    scored.sort_unstable();
    scored.dedup_by(|a, b| a.2 == b.2);
    scored.into_iter().take(max).map(|(_, _, c)| c).collect()
}

/// The hint to append to an "unknown ..." message: ` (did you mean "a" or "b"?)`, or nothing.
pub fn did_you_mean<'a>(name: &str, candidates: impl IntoIterator<Item = &'a str>) -> String {
    let near = closest_names(name, candidates, 3);
    match near.as_slice() {
        [] => String::new(),
        [one] => format!(" (did you mean \"{one}\"?)"),
        [init @ .., last] => {
            let init: Vec<String> = init.iter().map(|c| format!("\"{c}\"")).collect();
            format!(" (did you mean {} or \"{last}\"?)", init.join(", "))
        }
    }
}

/// The kind of a name looked up ([`unknown_name`]).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum NameKind<'a> {
    /// A characteristic.
    Characteristic,
    /// A grouping factor.
    Factor,
    /// A level (group) of the factor named.
    Level {
        /// The factor the level was looked for in.
        factor: &'a str,
    },
}

/// The error for a name that is not among the `known` ones of `source` (a configuration file,
/// "the database", ...), in one wording everywhere: the name, the closest known names, and the
/// known ones (up to 12), e.g. `unknown characteristic "bor" (did you mean "bore"?); known in
/// plant.toml: bore, width`.
pub fn unknown_name<'a>(
    kind: NameKind<'_>,
    given: &str,
    known: impl IntoIterator<Item = &'a str> + Clone,
    source: &str,
) -> Error {
    let hint = did_you_mean(given, known.clone());
    let all: Vec<&str> = known.into_iter().collect();
    let listed = match all.len() {
        0 => format!("none is known in {source}"),
        n if n <= 12 => format!("known in {source}: {}", all.join(", ")),
        n => format!(
            "{n} known in {source}, among them {}, ...",
            all[..12].join(", ")
        ),
    };
    let what = match kind {
        NameKind::Characteristic => format!("characteristic \"{given}\""),
        NameKind::Factor => format!("factor \"{given}\""),
        NameKind::Level { factor } => format!("level \"{given}\" of factor \"{factor}\""),
    };
    Error::Usage(format!("unknown {what}{hint}; {listed}"))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn distances_of_textbook_pairs() {
        // Levenshtein's classic pairs (any algorithms text): kitten/sitting 3, flaw/lawn 2.
        assert_eq!(edit_distance("kitten", "sitting"), 3);
        assert_eq!(edit_distance("flaw", "lawn"), 2);
        assert_eq!(edit_distance("", "abc"), 3);
        assert_eq!(edit_distance("abc", ""), 3);
        assert_eq!(edit_distance("M4", "m4"), 0);
    }

    #[test]
    fn closest_first_and_unrelated_left_out() {
        let known = ["M1", "M2", "M4", "spindle", "M10"];
        assert_eq!(closest_names("M5", known, 3), vec!["M1", "M2", "M4"]);
        assert_eq!(closest_names("spindel", known, 3), vec!["spindle"]);
        assert!(closest_names("zzzzzzzz", known, 3).is_empty());
        assert_eq!(closest_names("M10", known, 1), vec!["M10"]);
    }

    #[test]
    fn unknown_names_list_the_closest_and_the_known() {
        let known = ["bore_diameter", "width", "flange_flatness"];
        let e = unknown_name(
            NameKind::Characteristic,
            "bore_diamter",
            known,
            "plant.toml",
        );
        assert_eq!(
            e.to_string(),
            "unknown characteristic \"bore_diamter\" (did you mean \"bore_diameter\"?); \
             known in plant.toml: bore_diameter, width, flange_flatness"
        );
        let many: Vec<String> = (1..=20).map(|i| format!("M{i}")).collect();
        let e = unknown_name(
            NameKind::Level { factor: "machine" },
            "X9",
            many.iter().map(String::as_str),
            "the database",
        )
        .to_string();
        assert!(
            e.starts_with(
                "unknown level \"X9\" of factor \"machine\" (did you mean \"M9\", \"M1\" or \
                 \"M2\"?); 20 known in the database, among them M1, M2,"
            ),
            "{e}"
        );
        assert!(!e.contains("M13"), "{e}");
        let e = unknown_name(NameKind::Factor, "shift", [], "the database").to_string();
        assert_eq!(e, "unknown factor \"shift\"; none is known in the database");
    }

    #[test]
    fn hint_wording() {
        assert_eq!(
            did_you_mean("mashine", ["machine", "shift"]),
            " (did you mean \"machine\"?)"
        );
        assert_eq!(
            did_you_mean("M5", ["M1", "M2"]),
            " (did you mean \"M1\" or \"M2\"?)"
        );
        assert_eq!(
            did_you_mean("M5", ["M1", "M2", "M3"]),
            " (did you mean \"M1\", \"M2\" or \"M3\"?)"
        );
        assert_eq!(did_you_mean("qqqqqq", ["M1"]), "");
    }
}
