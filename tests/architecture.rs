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

/// The PostgreSQL driver and the TLS library are named only inside `storage` (ARCHITECTURE.md:
/// the configuration holds the URL and certificate paths, the backend makes the connection).
#[test]
fn postgres_and_tls_types_only_in_storage() {
    let needles = ["postgres::", "tokio_postgres", "rustls"];
    let found = offenders(&needles, &["src/storage/"]);
    assert!(
        found.is_empty(),
        "the PostgreSQL driver or rustls named outside src/storage:\n{}",
        found.join("\n")
    );
    // Not vacuous: the backend does name them.
    let inside = offenders(&needles, &[]);
    for file in ["src/storage/postgres/mod.rs", "src/storage/postgres/tls.rs"] {
        assert!(
            inside.iter().any(|u| u.starts_with(file)),
            "no use of the driver or rustls found in {file}: is the scan reading the sources?"
        );
    }
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

/// The kind of a `{ ... }` block while scanning for public signatures.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Block {
    /// The body of a `pub trait`: every method, type and constant in it is public.
    PubTrait,
    /// The body of `impl Trait for Type`: its items have the trait's reach.
    TraitImpl,
    /// Anything else (a module, an inherent impl, a function body, a struct, ...).
    Other,
}

/// The lines of the public signatures in `code` (code lines with their numbers): every `pub`
/// item (not `pub(crate)` or `pub(super)`) from its `pub` line to its opening brace or `;` (a
/// field to its `,`), the header of every `impl Trait for Type`, and every method, type and
/// constant signature inside a `pub trait` block or a trait impl, whose default or implementing
/// bodies are not signatures. Braces are counted outside string and character literals.
fn public_signature_lines(code: &[(usize, String)]) -> Vec<(usize, String)> {
    let private = private_names(code);
    public_signature_lines_with(code, &private)
}

/// The names of the traits and types `code` declares without `pub` (private, `pub(crate)`,
/// `pub(super)`): an implementation of such a trait, or for such a type, reaches no further than
/// they do, so it is not a public signature.
fn private_names(code: &[(usize, String)]) -> Vec<String> {
    let mut out = Vec::new();
    for (_, line) in code {
        let t = line.trim_start();
        if t.starts_with("pub ") {
            continue;
        }
        let rest = ["pub(crate) ", "pub(super) ", ""]
            .iter()
            .find_map(|v| t.strip_prefix(v))
            .unwrap_or(t);
        for kind in ["trait ", "struct ", "enum ", "type "] {
            if let Some(name) = rest.strip_prefix(kind) {
                let name: String = name
                    .chars()
                    .take_while(|c| c.is_alphanumeric() || *c == '_')
                    .collect();
                if !name.is_empty() {
                    out.push(name);
                }
            }
        }
    }
    out
}

/// Whether `impl Trait for Type` implements a trait or is for a type named in `private`.
fn impl_is_private(line: &str, private: &[String]) -> bool {
    let Some((head, self_type)) = line.split_once(" for ") else {
        return false;
    };
    let word = |text: &str| -> String {
        text.trim_start_matches(['&', ' '])
            .rsplit("::")
            .next()
            .unwrap_or("")
            .chars()
            .take_while(|c| c.is_alphanumeric() || *c == '_')
            .collect()
    };
    let trait_part = head.trim_start_matches("impl").trim_start();
    // `impl<'a> Trait for ...`: skip the generics.
    let trait_part = match trait_part.strip_prefix('<') {
        Some(rest) => rest.split_once('>').map_or(rest, |(_, r)| r).trim_start(),
        None => trait_part,
    };
    let trait_name = word(trait_part.split('<').next().unwrap_or(""));
    let type_name = word(self_type.split(['<', ' ', '{']).next().unwrap_or(""));
    private.contains(&trait_name) || private.contains(&type_name)
}

fn public_signature_lines_with(
    code: &[(usize, String)],
    private: &[String],
) -> Vec<(usize, String)> {
    let mut stack: Vec<Block> = Vec::new();
    let mut pending = Block::Other;
    // The signature being read, and whether it is a function's (which ends at `{` or `;` only).
    let mut signature: Option<bool> = None;
    let mut out = Vec::new();
    for (n, line) in code {
        let t = line.trim_start();
        let inside = stack.last().copied();
        if signature.is_none() {
            let item_in_trait = matches!(inside, Some(Block::PubTrait | Block::TraitImpl))
                && ["fn ", "type ", "const ", "unsafe fn ", "async fn "]
                    .iter()
                    .any(|k| t.starts_with(k));
            let trait_impl =
                t.starts_with("impl") && t.contains(" for ") && !impl_is_private(t, private);
            if t.starts_with("pub ") || item_in_trait || trait_impl {
                signature = Some(t.contains("fn "));
                pending = if t.starts_with("pub trait ") {
                    Block::PubTrait
                } else if trait_impl {
                    Block::TraitImpl
                } else {
                    Block::Other
                };
            }
        }
        if signature.is_some() {
            out.push((*n, t.to_string()));
        }
        let code_only = without_literals(t);
        let ends = t.trim_end();
        if let Some(is_fn) = signature {
            if code_only.contains('{') || ends.ends_with(';') || (!is_fn && ends.ends_with(',')) {
                signature = None;
            }
        }
        for c in code_only.chars() {
            match c {
                '{' => {
                    stack.push(pending);
                    pending = Block::Other;
                }
                '}' => {
                    stack.pop();
                }
                _ => {}
            }
        }
    }
    assert!(
        stack.is_empty(),
        "unbalanced braces: the scan lost its place"
    );
    out
}

/// `line` without the contents of its string and character literals (so that a `{` in a
/// format string or `'{'` is not taken for a block).
fn without_literals(line: &str) -> String {
    let mut out = String::new();
    let mut chars = line.chars().peekable();
    let mut in_string = false;
    while let Some(c) = chars.next() {
        if in_string {
            match c {
                '\\' => {
                    chars.next();
                }
                '"' => in_string = false,
                _ => {}
            }
            continue;
        }
        match c {
            '"' => in_string = true,
            '\'' => {
                // A character literal ('{', '\'', '\n'); a lifetime ('a) has no closing quote.
                let rest: String = chars.clone().take(3).collect();
                if let Some(escaped) = rest.strip_prefix('\\') {
                    // The escaped character, then the closing quote.
                    if let Some(end) = escaped.get(1..).and_then(|e| e.find('\'')) {
                        for _ in 0..end + 3 {
                            chars.next();
                        }
                    }
                } else if rest.chars().nth(1) == Some('\'') {
                    chars.next();
                    chars.next();
                }
            }
            '/' if chars.peek() == Some(&'/') => break,
            _ => out.push(c),
        }
    }
    out
}

/// SQLite's types, as they would appear in a signature.
const SQLITE_TYPES: [&str; 6] = [
    "rusqlite",
    "Connection",
    "Transaction",
    "Row<",
    "&Row",
    "Statement",
];

/// The one public item that names a SQLite type, on purpose: the `From` conversion that lets `?`
/// turn a SQLite error into `Error::Storage` inside `storage`. Code outside `storage` cannot use
/// it without depending on rusqlite itself, and it carries no SQLite type out.
const ALLOWED: [&str; 2] = [
    "impl From<rusqlite::Error> for Error {",
    "fn from(e: rusqlite::Error) -> Self {",
];

/// No SQLite type in a public signature of `storage` either (a `pub` item, not `pub(crate)` or
/// `pub(super)`, and every method of a public trait or a trait implementation): the traits and
/// the types they carry are all that leaves the module.
#[test]
fn no_sqlite_type_in_public_storage_signatures() {
    let root = Path::new(env!("CARGO_MANIFEST_DIR"));
    let mut files = Vec::new();
    sources(&root.join("src/storage"), &mut files);
    assert!(files.len() >= 5, "storage sources not found");
    let mut found = Vec::new();
    let mut trait_methods = 0;
    let private: Vec<String> = files
        .iter()
        .flat_map(|f| private_names(&code_lines(f)))
        .collect();
    for f in &files {
        for (n, t) in public_signature_lines_with(&code_lines(f), &private) {
            if t.starts_with("fn ") {
                trait_methods += 1;
            }
            if SQLITE_TYPES.iter().any(|s| t.contains(s)) && !ALLOWED.contains(&t.as_str()) {
                found.push(format!("{}:{n}: {}", f.display(), t));
            }
        }
    }
    assert!(
        found.is_empty(),
        "SQLite types in public signatures of src/storage:\n{}",
        found.join("\n")
    );
    // Not vacuous: the methods of the six store traits and their SQLite implementations are
    // read (well over a hundred signatures).
    assert!(
        trait_methods > 100,
        "only {trait_methods} trait method signatures seen: is the scan reading the traits?"
    );
}

/// The scan sees a SQLite type wherever a public signature carries it: a trait method, a trait
/// implementation, a multi-line signature, a public field; and not in bodies or private items.
#[test]
fn the_signature_scan_looks_inside_traits_and_impls() {
    let lines = |text: &str| -> Vec<(usize, String)> {
        text.lines()
            .enumerate()
            .map(|(i, l)| (i + 1, l.to_string()))
            .collect()
    };
    let flagged = |text: &str| -> Vec<usize> {
        public_signature_lines(&lines(text))
            .into_iter()
            .filter(|(_, t)| SQLITE_TYPES.iter().any(|s| t.contains(s)))
            .map(|(n, _)| n)
            .collect()
    };
    let text = r#"
pub trait RunStore {
    fn conn(&self) -> &rusqlite::Connection;
    fn fine(&self) -> usize;
    fn with_default(&self) -> usize {
        let c: Option<&Connection> = None;
        0
    }
    fn long(
        &self,
        tx: &Transaction<'_>,
    ) -> usize;
}
impl RunStore for Store {
    fn conn(&self) -> &rusqlite::Connection {
        &self.conn
    }
}
pub struct S {
    pub conn: Connection,
    private: Connection,
}
impl S {
    pub fn statement(&self) -> Statement<'_> { todo() }
    fn private(&self) -> Statement<'_> { todo() }
    pub(crate) fn shared(&self) -> &Connection { &self.private }
}
fn format_braces() -> String { format!("{{ {x} }}") }
fn quotes() -> [char; 3] { ['{', '\'', '\\'] }
pub(super) trait Hidden {
    fn row(&self) -> Row<'_>;
}
pub fn after_literals(c: &Connection) {}
impl Hidden for rusqlite::Row<'_> {
    fn row(&self) -> Row<'_> { todo() }
}
pub(crate) enum Value { Int(i64) }
impl rusqlite::ToSql for Value {
    fn to_sql(&self) -> rusqlite::Result<()> { todo() }
}
impl<'a> From<&'a Connection> for Store {
    fn from(c: &'a Connection) -> Store { todo() }
}
"#;
    // Line 3 (trait method), 11 (a multi-line method), 15 (its implementation), 20 (a public
    // field), 24 (a public method); not the default body (7), the private field (21), the
    // private and crate-wide methods (25, 26) or a private trait's method (31); the braces in
    // literals do not lose the place (33); not the implementations of a crate-wide trait or
    // for a crate-wide type (34-40); a public trait's implementation for a public type with a
    // SQLite type in it is public (41, 42).
    assert_eq!(flagged(text), [3, 11, 15, 20, 24, 33, 41, 42]);
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
