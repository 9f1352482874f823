//! The monthly report in a real browser: headless Chromium opens it from a file URL.
//!
//! - A test copy of the report gets one injected probe script (the report itself has none) that
//!   records `window.onerror`, `console.error` and failed resource loads, measures every SVG
//!   with `getBoundingClientRect`, counts script elements and `alert` calls, and writes all of it
//!   as JSON into the DOM; `--dump-dom` with `--virtual-time-budget` reads it back.
//! - A screenshot of the unmodified report is saved to `target/test-artifacts/browser/`.
//! - Hostile user text (`<script>alert(1)</script>`, `M&M "A"`) must show up as text.
//!
//! Chromium is `/usr/bin/chromium` (Debian package `chromium`, installed by .ci/run). When it is
//! missing the test fails if the environment variable `CI` is set and is skipped with a notice
//! otherwise. All report inputs are INVENTED (tests/report_inputs).

#[path = "report_inputs/mod.rs"]
mod inputs;

use std::path::{Path, PathBuf};
use std::process::Command;

use samewise::report::render_month_report;

const CHROMIUM: &str = "/usr/bin/chromium";
const HOSTILE_SCRIPT: &str = "<script>alert(1)</script>";
const HOSTILE_QUOTES: &str = "M&M \"A\"";

/// The probe: collects errors from the first moment and reports after load.
const PROBE: &str = r#"<script id="samewise-probe">
(function () {
  var errors = [];
  var alerts = 0;
  window.alert = function () { alerts += 1; };
  window.addEventListener('error', function (e) {
    var t = e.target;
    if (t && t !== window && (t.src || t.href)) { errors.push('resource failed: ' + (t.src || t.href)); }
    else { errors.push('error: ' + (e.message || String(e))); }
  }, true);
  window.addEventListener('unhandledrejection', function (e) { errors.push('rejection: ' + e.reason); });
  var origError = console.error;
  console.error = function () { errors.push('console.error: ' + Array.prototype.join.call(arguments, ' ')); origError.apply(console, arguments); };
  window.addEventListener('load', function () {
    var svgs = Array.prototype.map.call(document.querySelectorAll('svg'), function (s) {
      var r = s.getBoundingClientRect();
      return { w: r.width, h: r.height, label: s.getAttribute('aria-label') };
    });
    var svgText = Array.prototype.map.call(document.querySelectorAll('svg text'), function (t) { return t.textContent.trim(); });
    var cells = Array.prototype.map.call(document.querySelectorAll('td, h1, li'), function (t) { return t.textContent; });
    var out = {
      errors: errors,
      alerts: alerts,
      scripts: document.querySelectorAll('script').length,
      svgs: svgs,
      svgText: svgText,
      cells: cells,
      title: document.title,
      resources: performance.getEntriesByType('resource').map(function (r) { return r.name; })
    };
    var pre = document.createElement('pre');
    pre.id = 'samewise-probe-result';
    pre.textContent = JSON.stringify(out);
    document.body.appendChild(pre);
  });
})();
</script>"#;

fn chromium_or_skip() -> Option<&'static str> {
    if Path::new(CHROMIUM).exists() {
        return Some(CHROMIUM);
    }
    if std::env::var_os("CI").is_some() {
        panic!("{CHROMIUM} is missing; CI must install the Debian package chromium (see .ci/run)");
    }
    eprintln!("NOTICE: {CHROMIUM} not found; browser test skipped (install the Debian package chromium; with CI set this fails)");
    None
}

fn fresh_dir(name: &str) -> PathBuf {
    let dir = Path::new(env!("CARGO_TARGET_TMPDIR")).join(name);
    let _ = std::fs::remove_dir_all(&dir);
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

/// Runs Chromium headless with the isolation flags of the brief plus `extra`; returns stdout
/// and stderr.
fn chromium(bin: &str, profile: &Path, extra: &[String], url: &str) -> (String, String) {
    let mut cmd = Command::new(bin);
    cmd.args([
        "--headless",
        "--no-sandbox",
        "--disable-gpu",
        "--disable-quic",
        "--no-first-run",
        "--disable-background-networking",
        "--disable-component-update",
        "--disable-sync",
        "--disable-dev-shm-usage",
        "--enable-logging=stderr",
        "--v=0",
    ])
    .arg(format!("--user-data-dir={}", profile.display()))
    .args(extra)
    .arg(url);
    let out = cmd.output().expect("run chromium");
    let stdout = String::from_utf8_lossy(&out.stdout).into_owned();
    let stderr = String::from_utf8_lossy(&out.stderr).into_owned();
    assert!(
        out.status.success(),
        "chromium failed ({}):\n{stderr}",
        out.status
    );
    (stdout, stderr)
}

fn unescape_html_text(s: &str) -> String {
    s.replace("&lt;", "<")
        .replace("&gt;", ">")
        .replace("&quot;", "\"")
        .replace("&#39;", "'")
        .replace("&amp;", "&")
}

#[test]
fn report_opens_in_chromium_without_errors_and_shows_hostile_text_as_text() {
    let Some(bin) = chromium_or_skip() else {
        return;
    };
    let levels = [HOSTILE_SCRIPT, HOSTILE_QUOTES, "M7", "M9"];
    let report = inputs::month_report(
        &format!("Plant {HOSTILE_SCRIPT} {HOSTILE_QUOTES}"),
        3,
        &["machine", "supplier"],
        &levels,
        30,
    );
    let html = render_month_report(&report);
    assert!(
        !html.contains("<script"),
        "the report itself must carry no script"
    );

    let work = fresh_dir("browser_report");
    let artefacts = inputs::artifact_dir("browser");
    let report_path = artefacts.join("report.html");
    std::fs::write(&report_path, &html).unwrap();
    let probe_path = work.join("report-probe.html");
    let probed = html.replacen("<head>", &format!("<head>\n{PROBE}"), 1);
    std::fs::write(&probe_path, probed).unwrap();

    // 1. The probe copy: errors, SVG sizes, scripts, text.
    let (dom, stderr) = chromium(
        bin,
        &work.join("profile-dom"),
        &[
            "--dump-dom".to_string(),
            "--virtual-time-budget=10000".to_string(),
        ],
        &format!("file://{}", probe_path.display()),
    );
    let start = dom
        .find("<pre id=\"samewise-probe-result\">")
        .unwrap_or_else(|| panic!("probe result missing from the dumped DOM; stderr:\n{stderr}"));
    let rest = &dom[start + "<pre id=\"samewise-probe-result\">".len()..];
    let json = unescape_html_text(&rest[..rest.find("</pre>").unwrap()]);
    let probe: serde_json::Value = serde_json::from_str(&json).expect("probe JSON");

    let errors = probe["errors"].as_array().unwrap();
    assert!(errors.is_empty(), "page errors: {errors:?}");
    let console_errors: Vec<&str> = stderr
        .lines()
        .filter(|l| l.contains(":CONSOLE") && (l.contains("Uncaught") || l.contains("ERROR")))
        .collect();
    assert!(console_errors.is_empty(), "console: {console_errors:?}");
    assert_eq!(probe["alerts"], 0, "an alert ran");
    assert_eq!(
        probe["scripts"], 1,
        "only the probe may be a script element"
    );
    // Nothing fetched: the only resources are data URLs (the inlined font).
    for r in probe["resources"].as_array().unwrap() {
        let r = r.as_str().unwrap();
        assert!(r.starts_with("data:"), "fetched {r}");
    }

    // Every SVG rendered with a non-zero size: grid + 3 x 2 x (trend + share) + before/after.
    let svgs = probe["svgs"].as_array().unwrap();
    assert_eq!(svgs.len(), 1 + 3 * 2 * 2 + 1);
    for s in svgs {
        let (w, h) = (s["w"].as_f64().unwrap(), s["h"].as_f64().unwrap());
        assert!(w > 100.0 && h > 100.0, "svg {} is {w} x {h}", s["label"]);
    }

    // Hostile text is displayed as text: in the page title, the tables, and the chart legends.
    let title = probe["title"].as_str().unwrap();
    assert!(
        title.contains(HOSTILE_SCRIPT) && title.contains(HOSTILE_QUOTES),
        "{title}"
    );
    // The probe's list of strings under `key`.
    let strings = |key: &str| -> Vec<&str> {
        probe[key]
            .as_array()
            .unwrap()
            .iter()
            .map(|v| v.as_str().unwrap())
            .collect()
    };
    let cells = strings("cells");
    assert!(
        cells.iter().any(|c| c.contains(HOSTILE_SCRIPT)),
        "no table cell shows the script text"
    );
    assert!(cells.iter().any(|c| c.contains(HOSTILE_QUOTES)));
    let svg_text = strings("svgText");
    assert!(
        svg_text.contains(&HOSTILE_SCRIPT),
        "legend lacks the script text"
    );
    assert!(svg_text.contains(&HOSTILE_QUOTES));

    // 2. A screenshot of the unmodified report, kept as a test artefact.
    let shot = artefacts.join("report.png");
    let _ = std::fs::remove_file(&shot);
    chromium(
        bin,
        &work.join("profile-shot"),
        &[
            format!("--screenshot={}", shot.display()),
            "--window-size=1280,4000".to_string(),
            "--hide-scrollbars".to_string(),
        ],
        &format!("file://{}", report_path.display()),
    );
    let meta = std::fs::metadata(&shot).expect("screenshot written");
    assert!(
        meta.len() > 10_000,
        "screenshot is only {} bytes",
        meta.len()
    );
    println!("screenshot: {}", shot.display());
}
