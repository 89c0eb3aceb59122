//! Settings shared by every layer: each default written once (read by the library's
//! options, the command line's help and the other front doors), the machine's limits,
//! and the thread pool every parallel loop of a run goes through. The fit's options and
//! their checks are [`crate::fit::FitOptions`].

use crate::error::{Error, Result};

/// The defaults, written once.
pub mod defaults {
    /// Band level when scoring with a model that stores a band.
    pub const BAND_LEVEL: f64 = 0.95;
    /// Mapped features D.
    pub const DIM: usize = 1024;
    /// Largest number of passes over the data.
    pub const EPOCHS: usize = 100;
    /// Relative duality gap at which training stops.
    pub const TOL: f64 = 1e-3;
    /// Dual solver: coordinate-descent sweeps over a block before the next.
    pub const SWEEPS: usize = 3;
    /// Seed of every random choice.
    pub const SEED: u64 = 0;
    /// Threads (0 = one per processor).
    pub const THREADS: usize = 0;
    /// Rows per block read.
    pub const BLOCK_ROWS: usize = 16_384;
    /// Bytes of mapped blocks kept in memory between passes.
    pub const MEMORY: usize = 1 << 30;
    /// Share of rows held out for validation.
    pub const HOLDOUT: f64 = 0.05;
    /// Passes without a holdout improvement before stopping (0 = never).
    pub const PATIENCE: usize = 3;
    /// Rows in the survey's uniform sample.
    pub const SAMPLE: usize = 10_000;
}

/// The caution every front door shows (`--help`, the README, the Python package):
/// predictions can feed decisions about equipment.
pub const SAFETY: &str = "Predictions from a fitted model are an aid for monitoring and planning. \
They are no substitute for protective systems, alarms or interlocks; follow your site's \
procedures and defer to qualified engineers for any decision about equipment.";

/// Fewest sample rows: the median heuristic, the noise estimate and the coverage
/// threshold each need a handful of rows.
pub const MIN_SAMPLE: usize = 10;

/// Most threads accepted, even when oversubscribing is allowed.
pub const MAX_THREADS: usize = 256;

/// Processors this process may use (1 when unknown).
pub fn processors() -> usize {
    std::thread::available_parallelism().map_or(1, |n| n.get())
}

/// Checks a thread count before any work: at most the machine's processors (0 = one per
/// processor) unless `oversubscribe`, and never more than [`MAX_THREADS`] (thousands of
/// threads make a run crawl instead of failing).
pub fn check_threads(threads: usize, oversubscribe: bool) -> Result<()> {
    let cores = processors();
    if threads > MAX_THREADS {
        return Err(Error::invalid(
            "threads",
            format!("must be at most {MAX_THREADS}, got {threads}"),
        ));
    }
    if threads > cores && !oversubscribe {
        return Err(Error::invalid(
            "threads",
            format!(
                "{threads} is more than this machine's {cores} processors; give at most {cores} (0 = all), or add --oversubscribe to insist"
            ),
        ));
    }
    Ok(())
}

/// A pool of `threads` worker threads (0 = one per processor): every parallel loop of a
/// fit runs inside it, so the `threads` setting is honoured everywhere.
pub fn thread_pool(threads: usize) -> Result<rayon::ThreadPool> {
    rayon::ThreadPoolBuilder::new()
        .num_threads(threads)
        .build()
        .map_err(|source| Error::Threads { threads, source })
}

/// Physical memory in bytes, where the system tells it (Linux `/proc/meminfo`).
pub(crate) fn physical_memory() -> Option<u64> {
    let text = std::fs::read_to_string("/proc/meminfo").ok()?;
    let line = text.lines().find(|l| l.starts_with("MemTotal:"))?;
    let kib: u64 = line.split_whitespace().nth(1)?.parse().ok()?;
    Some(kib.saturating_mul(1024))
}

/// Refuses a run that needs more than this machine's physical memory: `need` bytes
/// estimated, `message` says what needs it given the need and the total as text.
pub(crate) fn check_memory(
    name: &'static str,
    need: u64,
    message: impl FnOnce(String, String) -> String,
) -> Result<()> {
    match physical_memory() {
        Some(total) if need > total => Err(Error::invalid(name, message(gib(need), gib(total)))),
        _ => Ok(()),
    }
}

pub(crate) fn gib(bytes: u64) -> String {
    format!("{:.1} GiB", bytes as f64 / (1u64 << 30) as f64)
}
