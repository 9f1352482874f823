//! The PostgreSQL backend over TLS, command by command, on a real server that speaks TLS only:
//! `SAMEWISE_TEST_POSTGRES_TLS` names it and `SAMEWISE_TEST_POSTGRES_TLS_CERTS` the folder with
//! its test CA (`scripts/pg-tls-server` starts one and prints both; `.ci/run` does so). The
//! server refuses every TCP connection without TLS (pg_hba.conf `hostnossl ... reject`), so a
//! command that succeeds there has used TLS. `SAMEWISE_TEST_POSTGRES` names a server without TLS
//! for `require` and `prefer` against it. Unset: skipped, except in CI, where they fail.
//!
//! What each sslmode must do is libpq's definition (PostgreSQL documentation, libpq chapter,
//! "SSL Support", table "SSL Mode Descriptions"): prefer falls back to plain text, require
//! refuses it, verify-ca checks the CA, verify-full the CA and the host name.

mod common;

use std::path::{Path, PathBuf};

use common::{output_text, samewise, samewise_ok, temp_dir};
use serde_json::Value;

struct Servers {
    /// postgresql://user@localhost:port/db of the TLS-only server, without sslmode.
    tls: String,
    /// The folder with ca.pem, other-ca.pem, client.pem and client.key.
    certs: PathBuf,
    /// The server without TLS.
    plain: String,
}

fn servers() -> Option<Servers> {
    let vars = (
        std::env::var("SAMEWISE_TEST_POSTGRES_TLS"),
        std::env::var("SAMEWISE_TEST_POSTGRES_TLS_CERTS"),
        std::env::var("SAMEWISE_TEST_POSTGRES"),
    );
    let (Ok(tls), Ok(certs), Ok(plain)) = vars else {
        assert!(
            std::env::var_os("CI").is_none(),
            "SAMEWISE_TEST_POSTGRES_TLS, SAMEWISE_TEST_POSTGRES_TLS_CERTS and \
             SAMEWISE_TEST_POSTGRES must be set in CI (.ci/run starts both servers)"
        );
        eprintln!("the PostgreSQL TLS test servers are not named: test skipped");
        return None;
    };
    let certs = PathBuf::from(certs);
    assert!(certs.join("ca.pem").is_file(), "{}", certs.display());
    Some(Servers { tls, certs, plain })
}

/// The schemas a test made, dropped at its end (on the TLS server through psql with TLS).
struct Schemas(Vec<(String, String)>);

impl Schemas {
    fn name(&mut self, server_url: &str, tag: &str) -> String {
        let name = format!("tls_{tag}_{}", std::process::id());
        self.0.push((server_url.to_string(), name.clone()));
        name
    }
}

impl Drop for Schemas {
    fn drop(&mut self) {
        for (url, name) in &self.0 {
            let sep = if url.contains('?') { '&' } else { '?' };
            let _ = std::process::Command::new("psql")
                .args([
                    &format!("{url}{sep}sslmode=prefer"),
                    "-qc",
                    &format!("DROP SCHEMA IF EXISTS {name} CASCADE"),
                ])
                .output();
        }
    }
}

/// A plant folder whose configuration names `url` and `schema`, with `extra` lines in
/// `[database]`, and the invented measurements of tests/common (made in an SQLite plant beside
/// it, then copied).
fn plant(tag: &str, url: &str, schema: &str, extra: &str) -> PathBuf {
    let lite = temp_dir(&format!("tls-{tag}-sqlite"));
    common::invented_plant(&lite, 5);
    let dir = temp_dir(&format!("tls-{tag}"));
    std::fs::copy(lite.join("measurements.csv"), dir.join("measurements.csv")).unwrap();
    let config = common::CONFIG.replace("database = \"plant.db\"\n", "");
    std::fs::write(
        dir.join("plant.toml"),
        format!("{config}\n[database]\nurl = \"{url}\"\nschema = \"{schema}\"\n{extra}"),
    )
    .unwrap();
    dir
}

fn with_mode(url: &str, query: &str) -> String {
    let sep = if url.contains('?') { '&' } else { '?' };
    format!("{url}{sep}{query}")
}

/// `samewise init` fails; its message.
fn init_fails(dir: &Path) -> String {
    let out = samewise(dir, &["init"]);
    let text = output_text(&out);
    assert!(!out.status.success(), "init succeeded: {text}");
    text
}

#[test]
fn require_runs_init_import_and_check_of_the_invented_plant_over_tls() {
    let Some(s) = servers() else { return };
    let mut schemas = Schemas(vec![]);
    let schema = schemas.name(&s.tls, "require");
    let dir = plant(
        "require",
        &with_mode(&s.tls, "sslmode=require"),
        &schema,
        "",
    );
    let text = samewise_ok(&dir, &["init"]);
    assert!(text.contains(&format!("created schema {schema}")), "{text}");
    let text = samewise_ok(&dir, &["import", "measurements.csv"]);
    assert!(text.contains("2400 measurements: 2400 stored"), "{text}");
    let out = samewise(&dir, &["check", "--day", "2026-12-01", "--json"]);
    let doc: Value = serde_json::from_slice(&out.stdout)
        .unwrap_or_else(|e| panic!("{e}: {}", output_text(&out)));
    // The invented shift of tests/common (bore on M2 0.03 mm high from 2026-11-30) is found.
    let bore = doc["tests"]
        .as_array()
        .unwrap()
        .iter()
        .find(|t| t["characteristic"] == "bore" && t["factor"] == "machine")
        .unwrap_or_else(|| panic!("no bore x machine test: {doc}"));
    assert!(
        bore["state"].as_str().unwrap_or("").starts_with("differs"),
        "{bore}"
    );
}

#[test]
fn verify_full_with_the_right_ca_connects_from_the_key_or_the_url() {
    let Some(s) = servers() else { return };
    let mut schemas = Schemas(vec![]);
    // [database] tls_ca, relative to the configuration file.
    let schema = schemas.name(&s.tls, "full_key");
    let dir = plant(
        "full-key",
        &with_mode(&s.tls, "sslmode=verify-full"),
        &schema,
        "tls_ca = \"ca.pem\"\n",
    );
    std::fs::copy(s.certs.join("ca.pem"), dir.join("ca.pem")).unwrap();
    let text = samewise_ok(&dir, &["init"]);
    assert!(text.contains(&format!("created schema {schema}")), "{text}");
    samewise_ok(&dir, &["status"]);
    // sslrootcert in the URL, absolute.
    let schema = schemas.name(&s.tls, "full_url");
    let url = with_mode(
        &s.tls,
        &format!(
            "sslmode=verify-full&sslrootcert={}",
            s.certs.join("ca.pem").display()
        ),
    );
    let dir = plant("full-url", &url, &schema, "");
    let text = samewise_ok(&dir, &["init"]);
    assert!(text.contains(&format!("created schema {schema}")), "{text}");
}

#[test]
fn verify_full_with_a_wrong_ca_fails_naming_the_host_and_the_ca() {
    let Some(s) = servers() else { return };
    let mut schemas = Schemas(vec![]);
    let schema = schemas.name(&s.tls, "wrong_ca");
    let other = s.certs.join("other-ca.pem");
    let dir = plant(
        "wrong-ca",
        &with_mode(&s.tls, "sslmode=verify-full"),
        &schema,
        &format!("tls_ca = \"{}\"\n", other.display()),
    );
    let text = init_fails(&dir);
    let port = s.tls.rsplit(':').next().unwrap().split('/').next().unwrap();
    assert!(
        text.contains(&format!(
            "the certificate of the server at localhost:{port}"
        )),
        "{text}"
    );
    assert!(text.contains("unknown issuer"), "{text}");
    assert!(text.contains(&other.display().to_string()), "{text}");
    assert!(text.contains("tls_ca"), "what to fix: {text}");
    // The system's roots (verify-full without a CA) do not hold the test CA either.
    let dir = plant(
        "system-roots",
        &with_mode(&s.tls, "sslmode=verify-full"),
        &schema,
        "",
    );
    let text = init_fails(&dir);
    assert!(
        text.contains("system's trusted root certificates"),
        "{text}"
    );
}

#[test]
fn verify_full_checks_the_host_name_and_verify_ca_does_not() {
    let Some(s) = servers() else { return };
    let mut schemas = Schemas(vec![]);
    let schema = schemas.name(&s.tls, "by_address");
    // The server's certificate names localhost only; 127.0.0.1 is the same server.
    let by_address = s.tls.replace("@localhost:", "@127.0.0.1:");
    assert_ne!(by_address, s.tls, "the TLS server URL names localhost");
    let ca = format!("tls_ca = \"{}\"\n", s.certs.join("ca.pem").display());
    let dir = plant(
        "name",
        &with_mode(&by_address, "sslmode=verify-full"),
        &schema,
        &ca,
    );
    let text = init_fails(&dir);
    assert!(text.contains("not valid for that host name"), "{text}");
    assert!(text.contains("127.0.0.1"), "{text}");
    assert!(text.contains("verify-ca"), "what to change: {text}");
    let dir = plant(
        "ca-only",
        &with_mode(&by_address, "sslmode=verify-ca"),
        &schema,
        &ca,
    );
    let text = samewise_ok(&dir, &["init"]);
    assert!(text.contains(&format!("created schema {schema}")), "{text}");
    // require with the CA given checks the chain (libpq: as verify-ca), so the wrong CA fails.
    let dir = plant(
        "require-ca",
        &with_mode(&s.tls, "sslmode=require"),
        &schema,
        &format!("tls_ca = \"{}\"\n", s.certs.join("other-ca.pem").display()),
    );
    let text = init_fails(&dir);
    assert!(text.contains("unknown issuer"), "{text}");
}

#[test]
fn require_against_a_server_without_tls_fails_saying_what_to_change() {
    let Some(s) = servers() else { return };
    let mut schemas = Schemas(vec![]);
    let schema = schemas.name(&s.plain, "plain_require");
    let dir = plant(
        "plain-require",
        &with_mode(&s.plain, "sslmode=require"),
        &schema,
        "",
    );
    let text = init_fails(&dir);
    assert!(text.contains("does not accept TLS connections"), "{text}");
    assert!(text.contains("ssl = on"), "what to change: {text}");
    assert!(text.contains("sslmode=require"), "{text}");
    assert!(
        text.contains("could not connect to PostgreSQL at"),
        "{text}"
    );
}

#[test]
fn prefer_connects_to_a_server_with_and_one_without_tls() {
    let Some(s) = servers() else { return };
    let mut schemas = Schemas(vec![]);
    for (tag, server) in [("prefer_tls", &s.tls), ("prefer_plain", &s.plain)] {
        let schema = schemas.name(server, tag);
        let dir = plant(tag, &with_mode(server, "sslmode=prefer"), &schema, "");
        let text = samewise_ok(&dir, &["init"]);
        assert!(text.contains(&format!("created schema {schema}")), "{text}");
    }
    // Without TLS the TLS-only server refuses (its pg_hba.conf), so prefer's success above
    // went over TLS.
    let dir = plant(
        "disable",
        &with_mode(&s.tls, "sslmode=disable"),
        "tls_disable_unused",
        "",
    );
    let text = init_fails(&dir);
    assert!(text.contains("no encryption"), "{text}");
    assert!(text.contains("sslmode=require"), "what to change: {text}");
}

#[test]
fn a_client_certificate_logs_in_where_the_server_asks_for_one() {
    let Some(s) = servers() else { return };
    let mut schemas = Schemas(vec![]);
    let schema = schemas.name(&s.tls, "client_cert");
    let url = s.tls.replace("postgres@", "tls_client@");
    assert_ne!(url, s.tls, "the TLS server URL names the user postgres");
    let ca = format!("tls_ca = \"{}\"\n", s.certs.join("ca.pem").display());
    let dir = plant(
        "client-cert",
        &with_mode(&url, "sslmode=verify-full"),
        &schema,
        &format!(
            "{ca}tls_cert = \"{}\"\ntls_key = \"{}\"\n",
            s.certs.join("client.pem").display(),
            s.certs.join("client.key").display()
        ),
    );
    let text = samewise_ok(&dir, &["init"]);
    assert!(text.contains(&format!("created schema {schema}")), "{text}");
    // Without it the server refuses, and the message says what to give.
    let dir = plant(
        "no-client-cert",
        &with_mode(&url, "sslmode=verify-full"),
        &schema,
        &ca,
    );
    let text = init_fails(&dir);
    assert!(text.contains("certificate"), "{text}");
    assert!(text.contains("tls_cert"), "what to give: {text}");
}
