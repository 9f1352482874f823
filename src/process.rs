//! This process and others on the same host: the host name and whether a process still runs.
//! Used to name the holder of a lease or of the database's write lock, and to take over a lease
//! whose holder has died (Linux `/proc`; elsewhere every holder counts as alive, and its lease
//! expires as usual).

use std::path::Path;

/// The host name (`/proc/sys/kernel/hostname`, then `$HOSTNAME`, then "localhost").
pub fn host_name() -> String {
    std::fs::read_to_string("/proc/sys/kernel/hostname")
        .ok()
        .map(|h| h.trim().to_string())
        .filter(|h| !h.is_empty())
        .or_else(|| std::env::var("HOSTNAME").ok())
        .unwrap_or_else(|| "localhost".into())
}

/// Whether process `pid` of this host is known to be gone: the host has `/proc`, the pid is not
/// this process and `/proc/PID` does not exist. Without `/proc` it counts as alive.
pub fn pid_is_gone(pid: u32) -> bool {
    Path::new("/proc/self").exists()
        && pid != std::process::id()
        && !Path::new(&format!("/proc/{pid}")).exists()
}

/// Whether process `pid` of host `host` is known to be gone: `host` is this host and
/// [`pid_is_gone`]. Any doubt (another host, no `/proc`) counts as alive.
pub fn is_gone(host: &str, pid: u32) -> bool {
    host == host_name() && pid_is_gone(pid)
}
