//! ARCHITECTURE.md's invariants, checked on the sources (issue 17): SQL and SQLite types only in
//! `storage`, the store reached only through its traits, clap only in `cli`, wall-clock reads
//! only in `cli`, and a statistics core without I/O, printing, SQL or clocks. Test modules
//! (`#[cfg(test)]` to the end of a file) are not checked; comment lines are not code.

use std::path::{Path, PathBuf};

fn sources(dir: &Path, out: &mut Vec<PathBuf>) {
    for entry in std::fs::read_dir(dir).unwrap() {
        let path = entry.unwrap().path();
        if path.is_dir() {
            sources(&path, out);
        } else if path.extension().is_some_and(|e| e == "rs") {
            out.push(path);
        }
    }
}

/// The code lines of a source file (comments and test modules left out), with their numbers.
fn code_lines(path: &Path) -> Vec<(usize, String)> {
    let text = std::fs::read_to_string(path).unwrap();
    let code = match text.find("#[cfg(test)]") {
        Some(at) => &text[..at],
        None => &text[..],
    };
    code.lines()
        .enumerate()
        .filter(|(_, l)| !l.trim_start().starts_with("//"))
        .map(|(i, l)| (i + 1, l.to_string()))
        .collect()
}

/// Every use of one of `needles` outside the modules whose path starts with one of `allowed`.
fn offenders(needles: &[&str], allowed: &[&str]) -> Vec<String> {
    offenders_where(
        |line| needles.iter().any(|needle| line.contains(needle)),
        allowed,
    )
}

/// Whether `line` names the identifier `ident` as a whole word (so `Store` is found in
/// `storage::Store` and `Store::open`, not in `RunStore` or `StoredRun`).
fn names_identifier(line: &str, ident: &str) -> bool {
    let is_ident = |c: char| c.is_alphanumeric() || c == '_';
    line.match_indices(ident).any(|(at, _)| {
        let before = line[..at].chars().next_back();
        let after = line[at + ident.len()..].chars().next();
        !before.is_some_and(is_ident) && !after.is_some_and(is_ident)
    })
}

/// Every code line for which `hit` holds, outside the modules whose path starts with one of
/// `allowed`.
fn offenders_where(hit: impl Fn(&str) -> bool, allowed: &[&str]) -> Vec<String> {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let mut files = Vec::new();
    sources(&root.join("src"), &mut files);
    let mut out = Vec::new();
    for f in files {
        let rel = f
            .strip_prefix(root)
            .unwrap()
            .to_string_lossy()
            .replace('\\', "/");
        if allowed.iter().any(|a| rel.starts_with(a)) {
            continue;
        }
        for (n, line) in code_lines(&f) {
            if hit(&line) {
                out.push(format!("{rel}:{n}: {}", line.trim()));
            }
        }
    }
    out
}

#[test]
fn sqlite_only_in_storage() {
    let found = offenders(
        &[
            "rusqlite",
            "Connection",
            "SELECT ",
            "INSERT INTO",
            "UPDATE ",
        ],
        &["src/storage/"],
    );
    assert!(
        found.is_empty(),
        "SQLite or SQL outside src/storage:\n{}",
        found.join("\n")
    );
}

/// The SQLite implementation (`storage::Store`) is named only inside `storage`: cli, analysis,
/// schedule, report and every other module reach the database through the store's traits
/// (`storage::PlantStore` and its parts) and open it with `storage::open` and its siblings, so a
/// second backend is a change inside `storage` only.
#[test]
fn store_reached_only_through_its_traits() {
    let found = offenders_where(|line| names_identifier(line, "Store"), &["src/storage/"]);
    assert!(
        found.is_empty(),
        "the SQLite store named outside src/storage (use the traits of storage::PlantStore and \
         storage::open):\n{}",
        found.join("\n")
    );
    // Not vacuous: the modules that use the store do reach it, through the traits.
    let users = offenders(&["PlantStore"], &["src/storage/"]);
    for dir in ["src/cli/", "src/analysis/", "src/schedule/"] {
        assert!(
            users.iter().any(|u| u.starts_with(dir)),
            "no use of storage::PlantStore found in {dir}: is the scan reading the sources?"
        );
    }
}

/// No SQLite type in a public signature of `storage` either (a `pub` item, not `pub(crate)` or
/// `pub(super)`): the traits and the types they carry are all that leaves the module.
#[test]
fn no_sqlite_type_in_public_storage_signatures() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let mut files = Vec::new();
    sources(&root.join("src/storage"), &mut files);
    assert!(files.len() >= 5, "storage sources not found");
    let sqlite = [
        "rusqlite",
        "Connection",
        "Transaction",
        "Row<",
        "&Row",
        "Statement",
    ];
    let mut found = Vec::new();
    for f in &files {
        let mut signature = false;
        for (n, line) in code_lines(f) {
            let t = line.trim_start();
            // A public item's signature runs from its `pub` line to its opening brace or `;`.
            if t.starts_with("pub ") {
                signature = true;
            }
            if signature && sqlite.iter().any(|s| t.contains(s)) {
                found.push(format!("{}:{n}: {}", f.display(), t));
            }
            if signature && (t.ends_with('{') || t.ends_with(';') || t.ends_with(',')) {
                signature = false;
            }
        }
    }
    assert!(
        found.is_empty(),
        "SQLite types in public signatures of src/storage:\n{}",
        found.join("\n")
    );
}

#[test]
fn identifier_match_is_whole_word() {
    assert!(names_identifier("use crate::storage::Store;", "Store"));
    assert!(names_identifier("let s = Store::open(path)?;", "Store"));
    assert!(names_identifier("fn f(s: &Store) {}", "Store"));
    assert!(!names_identifier("fn f(s: &dyn PlantStore) {}", "Store"));
    assert!(!names_identifier("use crate::storage::RunStore;", "Store"));
    assert!(!names_identifier("let run: StoredRun = x;", "Store"));
}

#[test]
fn clap_only_in_cli() {
    let found = offenders(&["clap"], &["src/cli/", "src/main.rs"]);
    assert!(
        found.is_empty(),
        "clap outside src/cli:\n{}",
        found.join("\n")
    );
}

#[test]
fn wall_clock_only_in_cli() {
    let found = offenders(
        &["Utc::now", "Local::now", "SystemTime::now", "chrono::Local"],
        &["src/cli/", "src/main.rs"],
    );
    assert!(
        found.is_empty(),
        "wall-clock reads outside src/cli:\n{}",
        found.join("\n")
    );
}

#[test]
fn statistics_core_is_pure() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let mut files = Vec::new();
    sources(&root.join("src/stats"), &mut files);
    let needles = [
        "std::fs",
        "File::",
        "println!",
        "eprintln!",
        "print!",
        "std::io",
        "Instant::now",
        "rusqlite",
        "crate::storage",
        "crate::cli",
        "crate::analysis",
        "crate::report",
        "crate::ingest",
        "crate::schedule",
    ];
    let mut found = Vec::new();
    for f in files {
        for (n, line) in code_lines(&f) {
            if needles.iter().any(|needle| line.contains(needle)) {
                found.push(format!("{}:{n}: {}", f.display(), line.trim()));
            }
        }
    }
    assert!(
        found.is_empty(),
        "the statistics core does I/O or reaches up:\n{}",
        found.join("\n")
    );
}
