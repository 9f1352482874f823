//! Everyday paths that must not lose or spoil data, driven as a binary (issue 15): imports from a
//! FIFO, a pipe and `-`; output paths that point at the database, its configuration or an input;
//! 0-byte and foreign database files; a closed stdout or a full device; an import that stores
//! nothing; a dead check's lease; a writer waiting for the database's lock. Data are invented
//! (a fixed-state generator); every expectation is the tool's own contract (README, "Exit codes").

use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};

use chrono::{Duration, TimeZone, Utc};

mod common;
use common::{output_text as text, samewise as run, temp_dir, Rng, CONFIG};

fn bin() -> &'static str {
    env!("CARGO_BIN_EXE_samewise")
}

/// An invented long export: `days` production days from 2026-11-28, 300 rows per characteristic
/// per day (about 60 kB per day, so a pipe's buffer is filled several times over).
fn export(days: i64) -> String {
    export_from(0, days)
}

/// [`export`] starting `first` days after 2026-11-28.
fn export_from(first: i64, days: i64) -> String {
    let mut csv = String::from("timestamp,characteristic,value,machine,supplier\n");
    let mut rng = Rng(0x5AFE_2026 + first as u64);
    let t0 = Utc.with_ymd_and_hms(2026, 11, 28, 6, 0, 0).unwrap() + Duration::days(first);
    for day in 0..days {
        for i in 0..300 {
            let ts = t0 + Duration::days(day) + Duration::seconds(i * 288);
            let machine = 1 + rng.below(3);
            let supplier = 1 + rng.below(2);
            for (name, centre) in [("bore", 10.0), ("width", 5.0)] {
                let v = centre + 0.01 * rng.normal();
                csv.push_str(&format!(
                    "{},{name},{v:.4},M{machine},S{supplier}\n",
                    ts.format("%Y-%m-%dT%H:%M:%SZ")
                ));
            }
        }
    }
    csv
}

/// A directory with plant.toml, an initialised plant.db and `export.csv`.
fn plant(name: &str, days: i64) -> PathBuf {
    let dir = temp_dir(name);
    std::fs::write(dir.join("plant.toml"), CONFIG).unwrap();
    let o = run(&dir, &["init"]);
    assert!(o.status.success(), "{}", text(&o));
    std::fs::write(dir.join("export.csv"), export(days)).unwrap();
    dir
}

/// Every stored measurement, in one frame (2026-11-01 .. 2027-01-01).
fn frame(dir: &Path) -> samewise::storage::PeriodFrame {
    let store = common::open_store(dir, "plant.db");
    let start = Utc.with_ymd_and_hms(2026, 11, 1, 0, 0, 0).unwrap();
    let end = Utc.with_ymd_and_hms(2027, 1, 1, 0, 0, 0).unwrap();
    store.load_period(start, end, None).unwrap()
}

fn n_stored(dir: &Path) -> usize {
    frame(dir)
        .characteristics
        .iter()
        .map(|c| c.values.len())
        .sum()
}

/// Runs the binary in `dir` with `input` on its standard input.
fn run_with_stdin(dir: &Path, args: &[&str], input: Vec<u8>, env: &[(&str, &str)]) -> Output {
    let mut child = Command::new(bin())
        .current_dir(dir)
        .args(args)
        .envs(env.iter().copied())
        .env_remove("SAMEWISE_CONFIG")
        .stdin(Stdio::piped())
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let mut stdin = child.stdin.take().unwrap();
    let writer = std::thread::spawn(move || {
        // The reader may stop early (an error); a broken pipe here is its business.
        let _ = stdin.write_all(&input);
    });
    let out = child.wait_with_output().unwrap();
    writer.join().unwrap();
    out
}

fn sha256(path: &Path) -> String {
    samewise::ingest::file_sha256(path).unwrap()
}

#[test]
fn issue_15_fifo_pipe_and_stdin_imports_match_a_file_import_row_by_row() {
    let days = 6; // 3,600 rows, about 190 kB: many pipe buffers
    let by_file = plant("safety-file", days);
    let o = run(&by_file, &["import", "export.csv"]);
    assert!(o.status.success(), "{}", text(&o));
    let expected = frame(&by_file);
    assert_eq!(n_stored(&by_file), 3600);

    // `-`: standard input, named <stdin> in messages and in the import record.
    let by_dash = plant("safety-dash", days);
    let bytes = std::fs::read(by_dash.join("export.csv")).unwrap();
    let o = run_with_stdin(&by_dash, &["import", "-"], bytes.clone(), &[]);
    assert!(o.status.success(), "{}", text(&o));
    assert!(text(&o).contains("<stdin>: import #1"), "{}", text(&o));
    assert_eq!(frame(&by_dash), expected);
    let store = common::open_store(&by_dash, "plant.db");
    let record = store
        .find_import_by_sha256(&sha256(&by_dash.join("export.csv")))
        .unwrap()
        .expect("the import is recorded with the hash of the bytes read");
    assert_eq!(record.file_name, "<stdin>");
    assert_eq!(record.accepted, 3600);
    drop(store);
    // The same bytes again through stdin: a duplicate, refused, nothing doubled.
    let o = run_with_stdin(&by_dash, &["import", "-"], bytes.clone(), &[]);
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    assert!(text(&o).contains("already imported"), "{}", text(&o));
    assert_eq!(n_stored(&by_dash), 3600);

    // /dev/stdin from a pipe (the path is reopened by nobody but the one reader).
    let by_dev = plant("safety-devstdin", days);
    let o = run_with_stdin(&by_dev, &["import", "/dev/stdin"], bytes.clone(), &[]);
    assert!(o.status.success(), "{}", text(&o));
    assert_eq!(frame(&by_dev), expected);

    // A FIFO, written by another thread while the import reads it.
    let by_fifo = plant("safety-fifo", days);
    let fifo = by_fifo.join("export.fifo");
    let made = Command::new("mkfifo").arg(&fifo).status().unwrap();
    assert!(made.success());
    let writer = {
        let fifo = fifo.clone();
        let bytes = bytes.clone();
        std::thread::spawn(move || {
            let mut f = std::fs::OpenOptions::new().write(true).open(&fifo).unwrap();
            f.write_all(&bytes).unwrap();
        })
    };
    let o = run(&by_fifo, &["import", fifo.to_str().unwrap()]);
    writer.join().unwrap();
    assert!(o.status.success(), "{}", text(&o));
    assert_eq!(frame(&by_fifo), expected);
    // A duplicate through the FIFO is refused at its end (no early hash of a pipe).
    let writer = {
        let fifo = fifo.clone();
        std::thread::spawn(move || {
            let mut f = std::fs::OpenOptions::new().write(true).open(&fifo).unwrap();
            let _ = f.write_all(&bytes);
        })
    };
    let o = run(&by_fifo, &["import", fifo.to_str().unwrap()]);
    writer.join().unwrap();
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    assert!(text(&o).contains("already imported"), "{}", text(&o));
    assert_eq!(frame(&by_fifo), expected);
}

#[test]
fn issue_15_outputs_onto_the_database_configuration_or_an_input_are_refused() {
    let dir = plant("safety-outputs", 2);
    let o = run(&dir, &["import", "export.csv"]);
    assert!(o.status.success(), "{}", text(&o));
    let db = dir.join("plant.db");
    let absolute_db = db.to_str().unwrap().to_string();
    let before = (
        sha256(&db),
        sha256(&dir.join("plant.toml")),
        sha256(&dir.join("export.csv")),
    );
    let refused: &[(&[&str], &str)] = &[
        (
            &["report", "--month", "2026-11", "--out", "plant.db"],
            "the plant database",
        ),
        (
            &["report", "--month", "2026-11", "--out", "./plant.db"],
            "the plant database",
        ),
        (
            &["report", "--month", "2026-11", "--out", &absolute_db],
            "the plant database",
        ),
        (
            &["report", "--month", "2026-11", "--out", "plant.toml"],
            "the plant configuration",
        ),
        (
            &["report", "--month", "2026-11", "--out", "review.pdf"],
            "must end in .html",
        ),
        (
            &[
                "chart",
                "trend",
                "--characteristic",
                "bore",
                "--by",
                "machine",
                "--out",
                "plant.db",
            ],
            "the plant database",
        ),
        (
            &["check", "--day", "2026-11-28", "--csv", "./plant.toml"],
            "the plant configuration",
        ),
        (
            &["check", "--day", "2026-11-28", "--csv", "plant.db-wal"],
            "plant database (-wal)",
        ),
        (
            &["import", "export.csv", "--rejects", "export.csv"],
            "an input of this import",
        ),
        (
            &["import", "export.csv", "--rejects", "plant.db"],
            "the plant database",
        ),
        (&["db", "backup", "./plant.db"], "the plant database"),
        (&["db", "backup", "plant.db-shm"], "plant database (-shm)"),
    ];
    for (args, why) in refused {
        let o = run(&dir, args);
        assert_eq!(o.status.code(), Some(1), "{args:?}: {}", text(&o));
        assert!(text(&o).contains(why), "{args:?}: {}", text(&o));
        let after = (
            sha256(&db),
            sha256(&dir.join("plant.toml")),
            sha256(&dir.join("export.csv")),
        );
        assert_eq!(after, before, "{args:?} changed a file");
    }
    assert_eq!(n_stored(&dir), 1200);
    let o = run(&dir, &["db", "check"]);
    assert!(o.status.success(), "{}", text(&o));

    // A hard link to the database is the same file.
    std::fs::hard_link(&db, dir.join("alias.html")).unwrap();
    let o = run(
        &dir,
        &["report", "--month", "2026-11", "--out", "alias.html"],
    );
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    assert_eq!(sha256(&db), before.0);
    std::fs::remove_file(dir.join("alias.html")).unwrap();

    // Proper outputs are written whole, with no temporary file left beside them.
    let o = run(&dir, &["db", "backup", "copy.db"]);
    assert!(o.status.success(), "{}", text(&o));
    let o = run(
        &dir,
        &["check", "--day", "2026-11-28", "--csv", "tests.csv"],
    );
    assert!(matches!(o.status.code(), Some(0 | 3)), "{}", text(&o));
    let o = run(
        &dir,
        &["report", "--month", "2026-11", "--out", "review.html"],
    );
    assert!(o.status.success(), "{}", text(&o));
    let leftovers: Vec<String> = std::fs::read_dir(&dir)
        .unwrap()
        .map(|e| e.unwrap().file_name().to_string_lossy().into_owned())
        .filter(|n| n.ends_with(".tmp"))
        .collect();
    assert!(leftovers.is_empty(), "{leftovers:?}");
    assert!(std::fs::read_to_string(dir.join("tests.csv"))
        .unwrap()
        .starts_with("period_kind,period,period_start,run_id,version,characteristic,factor"));
    let copy = common::open_store(&dir, "copy.db");
    assert_eq!(copy.status().unwrap().characteristics.len(), 2);
}

#[test]
fn issue_15_a_zero_byte_or_foreign_database_is_refused() {
    let dir = temp_dir("safety-dbfile");
    std::fs::write(dir.join("plant.toml"), CONFIG).unwrap();
    std::fs::write(dir.join("export.csv"), export(1)).unwrap();
    let db = dir.join("plant.db");

    // 0 bytes: every command but init refuses it, naming the file and what to do.
    std::fs::write(&db, b"").unwrap();
    for args in [
        &["status"][..],
        &["db", "check"],
        &["import", "export.csv"],
        &["event", "list"],
    ] {
        let o = run(&dir, args);
        assert_eq!(o.status.code(), Some(1), "{args:?}: {}", text(&o));
        let t = text(&o);
        assert!(
            t.contains("plant.db is an empty file (0 bytes)"),
            "{args:?}: {t}"
        );
        assert!(t.contains("samewise init"), "{t}");
        assert_eq!(
            std::fs::metadata(&db).unwrap().len(),
            0,
            "{args:?} wrote to it"
        );
    }
    // An SQLite file without any table (an interrupted copy) is refused too.
    std::fs::remove_file(&db).unwrap();
    rusqlite::Connection::open(&db)
        .unwrap()
        .execute_batch("PRAGMA user_version = 0; VACUUM;")
        .unwrap();
    let o = run(&dir, &["status"]);
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    assert!(text(&o).contains("without any table"), "{}", text(&o));
    // init creates the database in an empty file.
    std::fs::write(&db, b"").unwrap();
    let o = run(&dir, &["init"]);
    assert!(o.status.success(), "{}", text(&o));
    let o = run(&dir, &["import", "export.csv"]);
    assert!(o.status.success(), "{}", text(&o));

    // Another program's database: refused by init and by every other command, left as it was.
    std::fs::remove_file(&db).unwrap();
    for suffix in ["-wal", "-shm"] {
        let _ = std::fs::remove_file(dir.join(format!("plant.db{suffix}")));
    }
    {
        let c = rusqlite::Connection::open(&db).unwrap();
        c.execute_batch("CREATE TABLE parts (id INTEGER PRIMARY KEY, serial TEXT); INSERT INTO parts (serial) VALUES ('A-1');")
            .unwrap();
    }
    let before = sha256(&db);
    for args in [&["init"][..], &["status"], &["import", "export.csv"]] {
        let o = run(&dir, args);
        assert_eq!(o.status.code(), Some(1), "{args:?}: {}", text(&o));
        assert!(
            text(&o).contains("another program's SQLite database"),
            "{args:?}: {}",
            text(&o)
        );
        assert_eq!(sha256(&db), before, "{args:?} changed it");
    }
    // A database of another program with its own application id.
    std::fs::remove_file(&db).unwrap();
    rusqlite::Connection::open(&db)
        .unwrap()
        .execute_batch("PRAGMA application_id = 1234;")
        .unwrap();
    let o = run(&dir, &["init"]);
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    // Not SQLite at all.
    std::fs::write(&db, b"timestamp,characteristic,value\n").unwrap();
    let o = run(&dir, &["status"]);
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    assert!(text(&o).contains("not an SQLite file"), "{}", text(&o));
}

/// The write end of a pipe whose read end is already closed: every write fails with a broken
/// pipe, as after `| head -1` has read its line.
fn closed_pipe() -> Stdio {
    let mut reader = Command::new("true").stdin(Stdio::piped()).spawn().unwrap();
    let write_end = reader.stdin.take().unwrap();
    reader.wait().unwrap();
    Stdio::from(write_end)
}

fn run_into(dir: &Path, args: &[&str], stdout: Stdio) -> Output {
    Command::new(bin())
        .current_dir(dir)
        .args(args)
        .env_remove("SAMEWISE_CONFIG")
        .stdout(stdout)
        .stderr(Stdio::piped())
        .output()
        .unwrap()
}

#[test]
fn issue_15_a_closed_stdout_or_a_full_device_never_panics() {
    let dir = plant("safety-stdout", 2);
    std::fs::write(dir.join("more.csv"), export_from(2, 2)).unwrap();
    std::fs::write(
        dir.join("groups.csv"),
        "machine,bore\nM1,10.01\nM1,10.02\nM1,10.00\nM2,10.04\nM2,10.05\nM2,10.03\n",
    )
    .unwrap();
    // A multi-file import into a closed pipe: every file is imported, stderr names them.
    let o = run_into(&dir, &["import", "export.csv", "more.csv"], closed_pipe());
    let err = String::from_utf8_lossy(&o.stderr).into_owned();
    assert_eq!(o.status.code(), Some(0), "{err}");
    assert!(
        err.contains("stored 2 of 2 files: export.csv (import #1), more.csv (import #2)"),
        "{err}"
    );
    assert_eq!(n_stored(&dir), 2400);
    let o = run(
        &dir,
        &[
            "event",
            "add",
            "--at",
            "2026-11-29 10:00",
            "--note",
            "new insert",
        ],
    );
    assert!(o.status.success(), "{}", text(&o));

    // stderr closed as well (`2>&1 | head -1`): an error message that cannot be written is
    // dropped, the status stays.
    let o = Command::new(bin())
        .current_dir(&dir)
        .args(["import", "missing.csv"])
        .env_remove("SAMEWISE_CONFIG")
        .stdout(closed_pipe())
        .stderr(closed_pipe())
        .status()
        .unwrap();
    assert_eq!(o.code(), Some(1));
    let o = Command::new(bin())
        .current_dir(&dir)
        .args(["schedule", "due", "--now", "2026-12-01T12:00:00Z"])
        .env_remove("SAMEWISE_CONFIG")
        .stdout(closed_pipe())
        .stderr(closed_pipe())
        .status()
        .unwrap();
    assert_eq!(o.code(), Some(0));

    let printing: &[&[&str]] = &[
        &["status"],
        &["db", "check"],
        &["event", "list"],
        &["check", "--day", "2026-11-29"],
        &["check", "--day", "2026-11-29", "--json"],
        &["schedule", "due", "--now", "2026-12-01T12:00:00Z"],
        &["history", "bore", "--by", "machine"],
        &["investigate", "bore", "--by", "machine", "--event", "1"],
        &["report", "--month", "2026-11", "--out", "review.html"],
        &[
            "chart",
            "trend",
            "--characteristic",
            "bore",
            "--by",
            "machine",
            "--month",
            "2026-11",
            "--out",
            "trend.svg",
        ],
        &[
            "compare",
            "groups.csv",
            "--by",
            "machine",
            "--measure",
            "bore",
        ],
        &["completions", "bash"],
        &["completions", "zsh"],
        &["init"],
        &["db", "backup", "copy.db"],
        &["import", "--help"],
        &["--help"],
    ];
    for args in printing {
        for (how, stdout) in [
            ("closed pipe", closed_pipe()),
            ("full device", full_device()),
        ] {
            if how == "full device" && args.contains(&"backup") {
                continue; // the copy exists after the first run
            }
            let o = run_into(&dir, args, stdout);
            let err = String::from_utf8_lossy(&o.stderr).into_owned();
            let code = o.status.code();
            assert_ne!(code, Some(101), "{args:?} into a {how} panicked: {err}");
            assert!(code.is_some(), "{args:?} into a {how} was killed: {err}");
            assert!(!err.contains("panicked"), "{args:?} into a {how}: {err}");
            if how == "closed pipe" {
                // Quiet: the status the command would have had (3 = flagged for check).
                assert!(
                    matches!(code, Some(0 | 3)),
                    "{args:?} into a {how}: {code:?} {err}"
                );
                assert!(!err.contains("Broken pipe"), "{args:?}: {err}");
            } else if code == Some(1) {
                // Nothing could be written: the error status, naming stdout.
                assert!(err.contains("<stdout>"), "{args:?} into a {how}: {err}");
            } else {
                // Only a command that prints nothing on stdout (`schedule` logs to stderr;
                // clap's help ignores a failed write) finishes as usual.
                assert!(
                    matches!(code, Some(0 | 3))
                        && (args.contains(&"schedule") || args.contains(&"--help")),
                    "{args:?} into a {how}: {code:?} {err}"
                );
            }
        }
    }
}

/// `/dev/full`: every write fails with "no space left on device".
fn full_device() -> Stdio {
    Stdio::from(
        std::fs::OpenOptions::new()
            .write(true)
            .open("/dev/full")
            .unwrap(),
    )
}

#[test]
fn issue_15_an_import_that_stores_nothing_exits_non_zero_and_is_not_done() {
    let dir = plant("safety-nothing", 1);
    // Every row names a characteristic the configuration does not have yet.
    let csv = export(1)
        .replace(",bore,", ",depth,")
        .replace(",width,", ",depth,");
    std::fs::write(dir.join("depth.csv"), &csv).unwrap();
    let o = run(&dir, &["import", "depth.csv", "--rejects", "rejected.csv"]);
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    let t = text(&o);
    assert!(
        t.contains("nothing was stored (600 of 600 measurements rejected)"),
        "{t}"
    );
    assert!(t.contains("no --force needed"), "{t}");
    // Every rejection is in the --rejects file (header + 600 lines).
    let rejected = std::fs::read_to_string(dir.join("rejected.csv")).unwrap();
    assert_eq!(rejected.lines().count(), 601);
    assert_eq!(n_stored(&dir), 0);
    // The same bytes once the characteristic is configured: imported, no --force.
    let config = format!("{CONFIG}\n[[characteristic]]\nname = \"depth\"\nunit = \"mm\"\n");
    std::fs::write(dir.join("plant.toml"), config).unwrap();
    let o = run(&dir, &["import", "depth.csv"]);
    assert!(o.status.success(), "{}", text(&o));
    assert_eq!(n_stored(&dir), 600);
    // Now it counts as imported.
    let o = run(&dir, &["import", "depth.csv"]);
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    assert!(text(&o).contains("already imported"), "{}", text(&o));

    // A header without rows, and an empty file: exit 1, nothing recorded as done.
    std::fs::write(
        dir.join("header.csv"),
        "timestamp,characteristic,value,machine,supplier\n",
    )
    .unwrap();
    std::fs::write(dir.join("empty.csv"), "").unwrap();
    for file in ["header.csv", "empty.csv"] {
        let o = run(&dir, &["import", file]);
        assert_eq!(o.status.code(), Some(1), "{file}: {}", text(&o));
    }
    let o = run(&dir, &["import", "header.csv"]);
    assert!(!text(&o).contains("already imported"), "{}", text(&o));
    // In a multi-file import the others still go in; the status says one stored nothing.
    std::fs::write(dir.join("next.csv"), export_from(1, 1)).unwrap();
    let o = run(&dir, &["import", "header.csv", "next.csv"]);
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    assert!(
        text(&o).contains("1 of 2 files were not imported"),
        "{}",
        text(&o)
    );
    assert_eq!(n_stored(&dir), 1200);
}

#[test]
fn issue_15_the_lease_of_a_check_whose_process_is_gone_is_taken_over() {
    let dir = plant("safety-lease", 2);
    let o = run(&dir, &["import", "export.csv"]);
    assert!(o.status.success(), "{}", text(&o));
    // A check killed outright left its lease: host and pid of a process that has exited.
    let mut gone = Command::new("true").spawn().unwrap();
    let dead_pid = gone.id();
    gone.wait().unwrap();
    let host = samewise::process::host_name();
    let key = samewise::storage::runs::LeaseKey {
        schedule: String::new(),
        period_kind: "day".into(),
        period_label: "2026-11-28".into(),
    };
    let now_ms = Utc::now().timestamp_millis();
    {
        let store = common::open_store(&dir, "plant.db");
        let taken = store
            .take_lease(&key, &format!("{host}:{dead_pid}:1"), now_ms, 600_000)
            .unwrap();
        assert!(taken);
    }
    let o = run(&dir, &["check", "--day", "2026-11-28"]);
    assert!(matches!(o.status.code(), Some(0 | 3)), "{}", text(&o));
    // A live holder (this test process) is respected, and named.
    let me = format!("{host}:{}:2", std::process::id());
    {
        let store = common::open_store(&dir, "plant.db");
        assert!(store
            .take_lease(&key, &me, Utc::now().timestamp_millis(), 600_000)
            .unwrap());
    }
    let o = run(&dir, &["check", "--day", "2026-11-28"]);
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    assert!(text(&o).contains(&me), "{}", text(&o));
    // The scheduler takes a dead holder's lease over as well.
    {
        let store = common::open_store(&dir, "plant.db");
        let key = samewise::storage::runs::LeaseKey {
            schedule: "daily".into(),
            period_kind: "day".into(),
            period_label: "2026-11-29".into(),
        };
        assert!(store
            .take_lease(
                &key,
                &format!("{host}:{dead_pid}:3"),
                Utc::now().timestamp_millis(),
                600_000
            )
            .unwrap());
    }
    let o = run(&dir, &["schedule", "due", "--now", "2026-11-30T12:00:00Z"]);
    assert!(o.status.success(), "{}", text(&o));
    assert!(text(&o).contains("took over the lease"), "{}", text(&o));
}

#[test]
fn issue_15_a_writer_waits_for_the_lock_and_names_what_holds_it() {
    let dir = plant("safety-lock", 1);
    let db = dir.join("plant.db");
    // This process plays an import that holds the write lock, with its writer note.
    let holder = rusqlite::Connection::open(&db).unwrap();
    holder.execute_batch("BEGIN IMMEDIATE").unwrap();
    std::fs::write(
        samewise::storage::writer_note_path(&db),
        format!(
            "{}\t{}\t{}\timport #12 of line-2026-11.csv\n",
            std::process::id(),
            samewise::process::host_name(),
            Utc.with_ymd_and_hms(2026, 11, 30, 14, 3, 0)
                .unwrap()
                .timestamp_millis()
        ),
    )
    .unwrap();
    let add = [
        "event",
        "add",
        "--at",
        "2026-11-28 10:00",
        "--note",
        "tool change",
    ];
    let o = run_with_stdin(
        &dir,
        &add,
        Vec::new(),
        &[(samewise::storage::BUSY_TIMEOUT_ENV, "0.3")],
    );
    assert_eq!(o.status.code(), Some(1), "{}", text(&o));
    let t = text(&o);
    assert!(
        t.contains(
            "plant.db is busy: import #12 of line-2026-11.csv, started 2026-11-30 14:03 UTC"
        ),
        "{t}"
    );
    // With time to wait, `event add` waits for the lock and then records the event.
    let waiting = Command::new(bin())
        .current_dir(&dir)
        .args(add)
        .env_remove("SAMEWISE_CONFIG")
        .env(samewise::storage::BUSY_TIMEOUT_ENV, "30")
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    std::thread::sleep(std::time::Duration::from_millis(700));
    holder.execute_batch("COMMIT").unwrap();
    std::fs::remove_file(samewise::storage::writer_note_path(&db)).unwrap();
    let o = waiting.wait_with_output().unwrap();
    assert!(o.status.success(), "{}", text(&o));
    assert!(text(&o).contains("recorded event #1"), "{}", text(&o));
}

/// The shell completions offer what a user can type: no hidden benchmark helper, every visible
/// command (issue 17, build hygiene).
#[test]
fn completions_leave_out_hidden_commands() {
    for shell in ["bash", "zsh", "fish"] {
        let out = std::process::Command::new(env!("CARGO_BIN_EXE_samewise"))
            .args(["completions", shell])
            .output()
            .unwrap();
        assert!(out.status.success());
        let script = String::from_utf8_lossy(&out.stdout);
        assert!(!script.contains("generate-bench-data"), "{shell}");
        for visible in ["import", "check", "investigate", "schedule", "report"] {
            assert!(script.contains(visible), "{shell}: {visible}");
        }
    }
}
