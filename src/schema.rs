//! JSON Schemas of the documents samewise prints, generated from the result types
//! (`schemars`) and made strict: the conventions of docs/json.md are written into them (a string
//! `<key>_reason` beside every property that can be `null`, a `<key>_is_bound: true` beside every
//! p-value that can be a bound), and every object then refuses properties the types do not
//! declare, so an output that drifts from its type fails validation. The committed copies live
//! in docs/schema/; tests/schema.rs checks they are current and validates real outputs.

use serde_json::{Map, Value};

/// The schema of `samewise check --json` ([`crate::results::CheckDocument`]).
pub fn check_document() -> Value {
    document::<crate::results::CheckDocument>()
}

/// The strict schema of a document type.
fn document<T: schemars::JsonSchema>() -> Value {
    strict(serde_json::to_value(schemars::schema_for!(T)).unwrap_or(Value::Null))
}

/// Every named schema, as `(file name, schema)`, for docs/schema/.
pub fn all() -> Vec<(&'static str, Value)> {
    use crate::outputs as o;
    vec![
        ("check.json", check_document()),
        ("check-sites.json", document::<o::sites::SitesDocument>()),
        ("status.json", document::<o::StatusDocument>()),
        ("db-check.json", document::<o::DbCheckDocument>()),
        ("event-list.json", document::<o::EventListDocument>()),
        ("import-list.json", document::<Vec<o::ImportLine>>()),
        ("history.json", document::<o::HistoryDocument>()),
        ("findings.json", document::<Vec<o::FindingLine>>()),
        ("alert.json", document::<o::AlertDocument>()),
        ("schedule-line.json", document::<o::ScheduleLine>()),
        ("compare.json", document::<o::compare::CompareDocument>()),
        (
            "investigate.json",
            document::<o::investigate::InvestigateDocument>(),
        ),
    ]
}

/// The schema with the JSON conventions added and unknown properties refused.
fn strict(mut schema: Value) -> Value {
    let defs = schema.get("$defs").cloned().unwrap_or(Value::Null);
    tighten(&mut schema, &defs);
    schema
}

/// Whether `schema` (resolving one local `$ref`) accepts `null`.
fn accepts_null(schema: &Value, defs: &Value) -> bool {
    match schema {
        Value::Bool(b) => *b,
        Value::Object(m) => {
            if let Some(r) = m.get("$ref").and_then(Value::as_str) {
                let name = r.trim_start_matches("#/$defs/");
                return defs.get(name).is_some_and(|d| accepts_null(d, defs));
            }
            match m.get("type") {
                Some(Value::String(t)) => t == "null",
                Some(Value::Array(ts)) => ts.iter().any(|t| t == "null"),
                None => {
                    let any = |key: &str| {
                        m.get(key)
                            .and_then(Value::as_array)
                            .is_some_and(|alts| alts.iter().any(|a| accepts_null(a, defs)))
                    };
                    // No type and no alternatives: anything, null included.
                    any("anyOf")
                        || any("oneOf")
                        || !(m.contains_key("anyOf")
                            || m.contains_key("oneOf")
                            || m.contains_key("allOf")
                            || m.contains_key("enum")
                            || m.contains_key("const"))
                }
                _ => false,
            }
        }
        _ => false,
    }
}

/// Whether a property name holds a p-value (the rule of `cli::format::bound_tiny_p`).
fn is_p_name(name: &str) -> bool {
    name == "p" || name.ends_with("_p") || name.starts_with("p_")
}

fn tighten(schema: &mut Value, defs: &Value) {
    match schema {
        Value::Object(m) => {
            // `(name, its reason's name)` of every property that can be null.
            let mut nullable = Vec::new();
            if let Some(Value::Object(props)) = m.get("properties") {
                let mut extra = Map::new();
                for (name, sub) in props {
                    let is_reason = name
                        .strip_suffix("_reason")
                        .is_some_and(|base| props.contains_key(base));
                    if is_reason {
                        // A declared reason is a string whenever it is written.
                        let mut reason = sub.clone();
                        if let Value::Object(r) = &mut reason {
                            r.insert("type".into(), "string".into());
                        }
                        extra.insert(name.clone(), reason);
                        continue;
                    }
                    if accepts_null(sub, defs) {
                        let reason = format!("{name}_reason");
                        if !props.contains_key(&reason) {
                            extra.insert(
                                reason.clone(),
                                serde_json::json!({"type": "string",
                                    "description": format!("Why `{name}` is null (present exactly when it is).")}),
                            );
                        }
                        nullable.push((name.clone(), reason));
                    }
                    if is_p_name(name) {
                        extra.insert(
                            format!("{name}_is_bound"),
                            serde_json::json!({"const": true,
                                "description": format!("`{name}` is a bound: the p-value is below it.")}),
                        );
                    }
                }
                if let Some(Value::Object(props)) = m.get_mut("properties") {
                    for (k, v) in extra {
                        props.insert(k, v);
                    }
                }
                m.insert("additionalProperties".into(), Value::Bool(false));
            }
            for (_, child) in m.iter_mut() {
                tighten(child, defs);
            }
            // A reason is there exactly when its value is null (added after the walk: these
            // conditions are not objects to close).
            if !nullable.is_empty() {
                let rules: Vec<Value> = nullable
                    .iter()
                    .map(|(name, reason)| {
                        serde_json::json!({
                            "if": {"properties": {name: {"type": "null"}}, "required": [name]},
                            "then": {"required": [reason]},
                            "else": {"not": {"required": [reason]}}
                        })
                    })
                    .collect();
                let all_of = m.entry("allOf").or_insert_with(|| Value::Array(Vec::new()));
                if let Value::Array(items) = all_of {
                    items.extend(rules);
                }
            }
        }
        Value::Array(items) => items.iter_mut().for_each(|i| tighten(i, defs)),
        _ => {}
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn nullable_properties_get_a_reason_and_objects_are_closed() {
        let s = check_document();
        let test = &s["$defs"]["CheckedTest"];
        assert_eq!(test["additionalProperties"], false);
        assert_eq!(test["properties"]["lsl_reason"]["type"], "string");
        assert_eq!(test["properties"]["q_value_reason"]["type"], "string");
        // A property that is never null has no reason; `state` is always there.
        assert!(test["properties"].get("state_reason").is_none());
        assert_eq!(
            s["$defs"]["LeadingResult"]["properties"]["p_is_bound"]["const"],
            true
        );
        assert_eq!(s["properties"]["findings_reason"]["type"], "string");
        // The reason is required with a null and refused beside a value.
        let rules = s["$defs"]["CheckedTest"]["allOf"].as_array().unwrap();
        assert!(rules
            .iter()
            .any(|r| r["then"]["required"][0] == "q_value_reason"));
        // A declared reason is a plain string, with no reason of its own.
        let history = all()
            .into_iter()
            .find(|(n, _)| *n == "history.json")
            .unwrap()
            .1;
        let period = &history["$defs"]["HistoryPeriod"]["properties"];
        assert_eq!(period["p_reason"]["type"], "string");
        assert!(period.get("p_reason_reason").is_none());
        assert_eq!(period["p_is_bound"]["const"], true);
    }
}
