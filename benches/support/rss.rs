//! Peak resident set size of the bench process (Linux `/proc`), shared by the benches
//! that report memory.

/// Resets the peak resident set size (Linux: writing 5 to `/proc/self/clear_refs`), so
/// that the next reading covers only what runs after it; ignored where unsupported.
pub fn reset_peak_rss() {
    let _ = std::fs::write("/proc/self/clear_refs", "5");
}

/// Peak resident set size of this process since the last reset, in MiB (VmHWM); NaN
/// where unsupported.
pub fn peak_rss_mib() -> f64 {
    let status = std::fs::read_to_string("/proc/self/status").unwrap_or_default();
    status
        .lines()
        .find(|l| l.starts_with("VmHWM:"))
        .and_then(|l| l.split_whitespace().nth(1))
        .and_then(|v| v.parse::<f64>().ok())
        .map_or(f64::NAN, |kb| kb / 1024.0)
}
