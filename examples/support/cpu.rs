//! CPU time of the whole process, shared by the timing examples through `#[path]` (nothing
//! added to the library).

/// CPU seconds used by the process so far (user + system, from `/proc/self/stat`; 0 where it
/// cannot be read).
pub fn cpu_seconds() -> f64 {
    let s = std::fs::read_to_string("/proc/self/stat").unwrap_or_default();
    let after = s.rsplit(')').next().unwrap_or("");
    let f: Vec<&str> = after.split_whitespace().collect();
    let ticks: f64 = f.get(11).and_then(|v| v.parse().ok()).unwrap_or(0.0)
        + f.get(12).and_then(|v| v.parse().ok()).unwrap_or(0.0);
    ticks / 100.0
}
