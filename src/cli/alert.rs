//! The `[alert]` command: run (without a shell) when a check or a scheduler pass made findings
//! new, closed or reopened, with those findings as one JSON document on its standard input.
//! It never blocks or fails the checks: it is stopped after its timeout, and whatever happens
//! is written to the alert log (`samewise status` shows the latest) and returned as a message.

use std::io::{Read, Write};
use std::process::{Command, Stdio};
use std::time::{Duration, Instant};

use crate::outputs::AlertDocument;
use chrono::{DateTime, Utc};

use crate::config::AlertConfig;
use crate::storage::AlertRecord;
use crate::storage::PlantStore;

/// Most bytes of the command's stderr kept in the log.
const STDERR_KEPT: usize = 2000;

/// Runs the alert command with `document` on its stdin; records and describes the outcome.
/// `now` reads the wall clock (start and end are recorded).
pub fn run_alert(
    store: &dyn PlantStore,
    alert: &AlertConfig,
    document: &AlertDocument,
    n_findings: u32,
    now: &dyn Fn() -> DateTime<Utc>,
) -> String {
    let started = now();
    let command_line = alert.command.join(" ");
    let timeout = alert.timeout.to_std().unwrap_or(Duration::from_secs(30));
    let (exit_code, error) = match execute(alert, document, timeout) {
        Ok((Some(0), _)) => (Some(0), None),
        Ok((Some(code), stderr)) => (
            Some(code),
            Some(format!("exited with status {code}{}", tail(&stderr))),
        ),
        Ok((None, stderr)) => (None, Some(format!("ended by a signal{}", tail(&stderr)))),
        Err(e) => (None, Some(e)),
    };
    let record = AlertRecord {
        started,
        finished: now(),
        n_findings,
        command: command_line.clone(),
        exit_code,
        error: error.clone(),
    };
    let logged = store.log_alert(&record);
    let mut message = match &error {
        None => format!("alert: `{command_line}` received {n_findings} finding(s)"),
        Some(e) => format!(
            "alert: `{command_line}` failed ({e}); the checks are not affected, `samewise status` shows the latest alert"
        ),
    };
    if let Err(e) = logged {
        message.push_str(&format!(" (not logged: {e})"));
    }
    message
}

fn tail(stderr: &str) -> String {
    let s = stderr.trim();
    if s.is_empty() {
        String::new()
    } else {
        format!(": {s}")
    }
}

/// Spawns the command, feeds the document, waits up to `timeout` (then kills it). Returns the
/// exit code (None for a signal) and the start of its stderr.
fn execute(
    alert: &AlertConfig,
    document: &AlertDocument,
    timeout: Duration,
) -> std::result::Result<(Option<i32>, String), String> {
    let mut child = Command::new(&alert.command[0])
        .args(&alert.command[1..])
        .stdin(Stdio::piped())
        .stdout(Stdio::null())
        .stderr(Stdio::piped())
        .spawn()
        .map_err(|e| format!("could not start {}: {e}", alert.command[0]))?;
    let bytes = serde_json::to_vec_pretty(document).unwrap_or_default();
    let mut stdin = child.stdin.take();
    // Writing and reading on threads of their own: a command that reads slowly or writes much
    // cannot hold the wait past its timeout.
    // Not joined: a process the command left behind could keep the pipe open.
    std::thread::spawn(move || {
        if let Some(s) = stdin.as_mut() {
            let _ = s.write_all(&bytes);
        }
    });
    let mut stderr = child.stderr.take();
    let (sender, receiver) = std::sync::mpsc::channel();
    std::thread::spawn(move || {
        let mut kept = Vec::new();
        if let Some(e) = stderr.as_mut() {
            let mut buf = [0u8; 4096];
            while let Ok(n) = e.read(&mut buf) {
                if n == 0 {
                    break;
                }
                if kept.len() < STDERR_KEPT {
                    kept.extend_from_slice(&buf[..n.min(STDERR_KEPT - kept.len())]);
                }
            }
        }
        let _ = sender.send(String::from_utf8_lossy(&kept).into_owned());
    });
    let deadline = Instant::now() + timeout;
    let status = loop {
        match child.try_wait() {
            Ok(Some(status)) => break Ok(status),
            Ok(None) if Instant::now() >= deadline => {
                let _ = child.kill();
                let _ = child.wait();
                break Err(format!(
                    "stopped after its timeout of {} s",
                    timeout.as_secs_f64()
                ));
            }
            Ok(None) => std::thread::sleep(Duration::from_millis(20)),
            Err(e) => break Err(format!("could not wait for it: {e}")),
        }
    };
    // A process the command left behind may keep its stderr open: do not wait for it long.
    let stderr = receiver
        .recv_timeout(Duration::from_secs(1))
        .unwrap_or_default();
    status.map(|s| (s.code(), stderr))
}
