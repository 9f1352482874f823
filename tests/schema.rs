//! The committed JSON Schemas (docs/schema/) are the ones the result types generate, and real
//! outputs validate against them (validated with the `jsonschema` crate, a general-purpose
//! JSON Schema 2020-12 validator). After an intended change to a result type, regenerate with
//! `SAMEWISE_WRITE_SCHEMAS=1 cargo test --release --test schema` and review the diff.

mod common;

use common::{invented_plant, samewise, samewise_ok, temp_dir};

fn schema_dir() -> std::path::PathBuf {
    std::path::Path::new(env!("CARGO_MANIFEST_DIR")).join("docs/schema")
}

#[test]
fn committed_schemas_are_current() {
    let write = std::env::var_os("SAMEWISE_WRITE_SCHEMAS").is_some();
    for (name, schema) in samewise::schema::all() {
        let text = serde_json::to_string_pretty(&schema).unwrap() + "\n";
        let path = schema_dir().join(name);
        if write {
            std::fs::create_dir_all(schema_dir()).unwrap();
            std::fs::write(&path, &text).unwrap();
        }
        let committed = std::fs::read_to_string(&path).unwrap_or_else(|e| {
            panic!(
                "{}: {e} (write it with SAMEWISE_WRITE_SCHEMAS=1)",
                path.display()
            )
        });
        assert!(
            committed == text,
            "{} is not the schema the types generate: regenerate with SAMEWISE_WRITE_SCHEMAS=1 and review the diff",
            path.display()
        );
    }
}

fn validate(schema: &serde_json::Value, doc: &serde_json::Value, what: &str) {
    let validator = jsonschema::validator_for(schema).expect("a valid schema");
    let errors: Vec<String> = validator
        .iter_errors(doc)
        .take(10)
        .map(|e| format!("{} at {}", e, e.instance_path()))
        .collect();
    assert!(errors.is_empty(), "{what}: {errors:#?}");
}

#[test]
fn check_outputs_validate_against_the_committed_schema() {
    let schema: serde_json::Value =
        serde_json::from_str(&std::fs::read_to_string(schema_dir().join("check.json")).unwrap())
            .unwrap();
    let dir = temp_dir("schema-check");
    invented_plant(&dir, 4);
    // A flagged day (pairs, a material difference), its stored run (findings null with a
    // reason), a week, and a day without data (every test too little data).
    for args in [
        &["check", "--day", "2026-11-30", "--json"][..],
        &["check", "--day", "2026-11-30", "--stored", "--json"],
        &["check", "--week", "2026-W48", "--json"],
        &["check", "--day", "2026-11-20", "--json"],
    ] {
        let out = samewise(&dir, args);
        let doc: serde_json::Value = serde_json::from_slice(&out.stdout)
            .unwrap_or_else(|e| panic!("{args:?}: {e}: {}", String::from_utf8_lossy(&out.stderr)));
        validate(&schema, &doc, &format!("{args:?}"));
    }
    // The schema is not vacuous: an undeclared property, a null without its reason and a
    // state outside the enum are each refused.
    let out = samewise(
        &dir,
        &["check", "--day", "2026-11-30", "--stored", "--json"],
    );
    let good: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let validator = jsonschema::validator_for(&schema).unwrap();
    assert!(validator.is_valid(&good));
    let mut extra = good.clone();
    extra["tests"][0]["surprise"] = 1.into();
    assert!(!validator.is_valid(&extra), "an undeclared property passed");
    let mut state = good.clone();
    state["tests"][0]["state"] = "flagged".into();
    assert!(!validator.is_valid(&state), "an unknown state passed");
    let mut wrong = good.clone();
    wrong["tests"][0]["groups"][0]["n"] = "many".into();
    assert!(!validator.is_valid(&wrong), "a string count passed");
    let _ = std::fs::remove_dir_all(&dir);
}

/// `history --json` of bore by machine, asked before and after the scheduler's runs.
const BORE_HISTORY: [&str; 6] = [
    "history",
    "--characteristic",
    "bore",
    "--by",
    "machine",
    "--json",
];

fn committed(name: &str) -> serde_json::Value {
    serde_json::from_str(&std::fs::read_to_string(schema_dir().join(name)).unwrap())
        .unwrap_or_else(|e| panic!("{name}: {e}"))
}

fn stdout_json(dir: &std::path::Path, args: &[&str]) -> serde_json::Value {
    let out = samewise(dir, args);
    serde_json::from_slice(&out.stdout)
        .unwrap_or_else(|e| panic!("{args:?}: {e}: {}", String::from_utf8_lossy(&out.stderr)))
}

/// Every other command's JSON on the small invented plant, validated against its committed
/// schema: before anything is checked (no findings, no alert), after the scheduler made runs
/// and a finding, with an event logged, an import undone, and both modes of `investigate`.
#[test]
fn every_command_output_validates_against_its_schema() {
    let dir = temp_dir("schema-commands");
    invented_plant(&dir, 4);
    let check = |schema: &str, args: &[&str]| {
        validate(
            &committed(schema),
            &stdout_json(&dir, args),
            &format!("{schema}: {args:?}"),
        );
    };
    check("status.json", &["status", "--json"]);
    check("findings.json", &["findings", "--all", "--json"]);
    check("history.json", &BORE_HISTORY);
    check("event-list.json", &["event", "list", "--json"]);
    samewise_ok(
        &dir,
        &[
            "event",
            "add",
            "--at",
            "2026-11-30 05:00",
            "--note",
            "New boring bar on M2",
            "--where",
            "machine=M2",
        ],
    );
    samewise_ok(
        &dir,
        &[
            "event",
            "add",
            "--at",
            "2026-11-29 05:00",
            "--note",
            "coolant topped up",
        ],
    );
    samewise_ok(&dir, &["event", "remove", "2", "--reason", "logged twice"]);
    check("event-list.json", &["event", "list", "--all", "--json"]);

    // The scheduler's JSON lines: every line is a log line or the summary.
    let out = samewise(
        &dir,
        &["schedule", "due", "--now", "2026-12-02T09:00:00Z", "--json"],
    );
    let schema = committed("schedule-line.json");
    let stdout = String::from_utf8_lossy(&out.stdout);
    assert!(stdout.lines().count() > 3, "{stdout}");
    for line in stdout.lines() {
        let v: serde_json::Value =
            serde_json::from_str(line).unwrap_or_else(|e| panic!("{line}: {e}"));
        validate(&schema, &v, line);
    }
    assert!(
        stdout.lines().last().unwrap().starts_with("{\"summary\""),
        "{stdout}"
    );

    check("status.json", &["status", "--json"]);
    let findings = stdout_json(&dir, &["findings", "--all", "--json"]);
    assert_eq!(findings.as_array().unwrap().len(), 1, "{findings}");
    assert_eq!(findings[0]["nearest_event"]["id"], 1, "{findings}");
    validate(
        &committed("findings.json"),
        &findings,
        "findings after the scheduler",
    );
    check("history.json", &BORE_HISTORY);
    check(
        "history.json",
        &[
            "history",
            "--characteristic",
            "width",
            "--by",
            "supplier",
            "--json",
        ],
    );
    check("db-check.json", &["db", "check", "--json"]);
    check(
        "investigate.json",
        &[
            "investigate",
            "--characteristic",
            "bore",
            "--by",
            "machine",
            "--event",
            "1",
            "--json",
        ],
    );
    check(
        "investigate.json",
        &[
            "investigate",
            "--characteristic",
            "bore",
            "--by",
            "machine",
            "--to",
            "2026-12-02 06:00",
            "--before",
            "4d",
            "--json",
        ],
    );

    // An import and its undo: every row shape (the import, the undone import, the undo).
    check("import-list.json", &["import", "list", "--json"]);
    samewise_ok(&dir, &["import", "undo", "1"]);
    let list = stdout_json(&dir, &["import", "list", "--json"]);
    assert_eq!(list.as_array().unwrap().len(), 2, "{list}");
    validate(
        &committed("import-list.json"),
        &list,
        "import list after an undo",
    );
    check("status.json", &["status", "--json"]);

    // The schemas refuse a null without its reason and a reason beside a value.
    let schema = committed("findings.json");
    let validator = jsonschema::validator_for(&schema).unwrap();
    let mut bare = findings.clone();
    bare[0]["effect_now"] = serde_json::Value::Null;
    assert!(
        !validator.is_valid(&bare),
        "a null without its reason passed"
    );
    let mut stray = findings.clone();
    stray[0]["within_sd_reason"] = "why not".into();
    assert!(
        !validator.is_valid(&stray),
        "a reason beside a value passed"
    );
    let _ = std::fs::remove_dir_all(&dir);
}

/// `compare --json` on files of every shape the document has: independent values with limits
/// and `--detect`, subgroups crossed with the groups (blocked or mixed) and nested in them, a
/// coarse gauge (every group constant) and a group of one value.
#[test]
fn compare_outputs_validate_against_the_committed_schema() {
    let dir = temp_dir("schema-compare");
    invented_plant(&dir, 1);
    let csv = std::fs::read_to_string(dir.join("measurements.csv")).unwrap();
    let mut crossed = String::from("machine,hour,bore\n");
    let mut nested = String::from("machine,lot,bore\n");
    for line in csv.lines().skip(1) {
        let f: Vec<&str> = line.split(',').collect();
        if f[1] == "bore" {
            let hour = &f[0][11..13];
            crossed.push_str(&format!("{},{hour},{}\n", f[3], f[2]));
            nested.push_str(&format!("{},{}-{hour},{}\n", f[3], f[3], f[2]));
        }
    }
    std::fs::write(dir.join("crossed.csv"), crossed).unwrap();
    std::fs::write(dir.join("nested.csv"), nested).unwrap();
    std::fs::write(
        dir.join("coarse.csv"),
        "cavity,gap\nC1,0.2\nC1,0.2\nC1,0.2\nC2,0.3\nC2,0.3\nC2,0.3\n",
    )
    .unwrap();
    std::fs::write(
        dir.join("single.csv"),
        "cavity,gap\nC1,0.21\nC2,0.30\nC2,0.32\nC2,0.29\nC3,0.25\nC3,0.24\n",
    )
    .unwrap();
    let schema = committed("compare.json");
    let mut kinds = Vec::new();
    for args in [
        &[
            "compare",
            "crossed.csv",
            "--by",
            "machine",
            "--measure",
            "bore",
            "--lsl",
            "9.9",
            "--usl",
            "10.1",
            "--detect",
            "0.01",
            "--json",
        ][..],
        &[
            "compare",
            "crossed.csv",
            "--by",
            "machine",
            "--measure",
            "bore",
            "--subgroup",
            "hour",
            "--json",
        ],
        &[
            "compare",
            "nested.csv",
            "--by",
            "machine",
            "--measure",
            "bore",
            "--subgroup",
            "lot",
            "--json",
        ],
        &[
            "compare",
            "coarse.csv",
            "--by",
            "cavity",
            "--measure",
            "gap",
            "--json",
        ],
        &[
            "compare",
            "single.csv",
            "--by",
            "cavity",
            "--measure",
            "gap",
            "--json",
        ],
    ] {
        let doc = stdout_json(&dir, args);
        validate(&schema, &doc, &format!("{args:?}"));
        kinds.push(doc["design"]["kind"].as_str().unwrap().to_string());
        if args[1] == "coarse.csv" {
            assert!(doc["constant_groups"].is_object(), "{doc}");
            assert!(
                doc["anova"].is_null() && doc["anova_reason"].is_string(),
                "{doc}"
            );
        }
        if args[1] == "single.csv" {
            assert!(doc["groups"][0]["sd"].is_null(), "{doc}");
            assert!(doc["groups"][0]["sd_reason"].is_string(), "{doc}");
        }
    }
    assert_eq!(kinds[0], "independent");
    assert_ne!(
        kinds[1], "independent",
        "the hour is crossed with the machine"
    );
    assert_eq!(kinds[2], "nested");
    let _ = std::fs::remove_dir_all(&dir);
}
