//! The committed JSON Schemas (docs/schema/) are the ones the result types generate, and real
//! outputs validate against them (validated with the `jsonschema` crate, a general-purpose
//! JSON Schema 2020-12 validator). After an intended change to a result type, regenerate with
//! `SAMEWISE_WRITE_SCHEMAS=1 cargo test --release --test schema` and review the diff.

mod common;

use common::{invented_plant, samewise, temp_dir};

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
