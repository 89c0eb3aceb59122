//! Running library work off the Python thread: the GIL is released, Ctrl-C is noticed
//! while the work runs, and a fit asked to stop ends at its next block or pass.

use std::io::IsTerminal;
use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::mpsc::{channel, RecvTimeoutError};
use std::sync::Mutex;
use std::time::Duration;

use indicatif::{ProgressBar, ProgressStyle};
use kernlake::solver::blocks::{EpochRecord, TrainObserver};
use pyo3::exceptions::PyRuntimeError;
use pyo3::prelude::*;

use crate::errors::to_py;

/// How often the waiting Python thread looks for a pending signal (Ctrl-C).
const SIGNAL_POLL: Duration = Duration::from_millis(50);

/// A stop request shared between the Python thread and the work.
#[derive(Default)]
pub struct StopFlag(AtomicBool);

impl StopFlag {
    /// Whether a stop was asked for.
    pub fn is_set(&self) -> bool {
        self.0.load(Ordering::Relaxed)
    }
}

/// Progress for a fit: one bar per pass on standard error when asked and a terminal is
/// attached, and the stop request.
pub struct FitObserver<'a> {
    show: bool,
    rows: u64,
    bar: Mutex<Option<ProgressBar>>,
    stop: &'a StopFlag,
}

impl<'a> FitObserver<'a> {
    /// Bars only with `progress` and a terminal on standard error; `rows` = rows per pass
    /// when known (0 = unknown).
    pub fn new(progress: bool, rows: u64, stop: &'a StopFlag) -> Self {
        FitObserver {
            show: progress && std::io::stderr().is_terminal(),
            rows,
            bar: Mutex::new(None),
            stop,
        }
    }

    /// A bar counting rows of a pass, or a hidden one.
    pub fn rows_bar(&self, label: &str) -> ProgressBar {
        if !self.show {
            return ProgressBar::hidden();
        }
        let bar = ProgressBar::new(self.rows);
        bar.set_style(
            ProgressStyle::with_template(
                "{prefix:>10} [{bar:32}] {human_pos}/{human_len} rows  {per_sec}  eta {eta}",
            )
            .expect("a valid template")
            .progress_chars("=> "),
        );
        bar.set_prefix(label.to_string());
        bar
    }
}

impl TrainObserver for FitObserver<'_> {
    fn pass_started(&self, epoch: usize, _rows: u64) {
        let bar = self.rows_bar(&format!("epoch {epoch}"));
        *self.bar.lock().expect("the bar's lock is never poisoned") = Some(bar);
    }
    fn rows_done(&self, rows: u64) {
        if let Some(b) = self
            .bar
            .lock()
            .expect("the bar's lock is never poisoned")
            .as_ref()
        {
            b.inc(rows);
        }
    }
    fn epoch_finished(&self, r: &EpochRecord) {
        let bar = self
            .bar
            .lock()
            .expect("the bar's lock is never poisoned")
            .take();
        if let Some(b) = bar {
            b.finish_and_clear();
        }
        if self.show {
            let holdout = match &r.holdout {
                Some(m) => format!("holdout rmse {:.4}  mae {:.4}", m.rmse, m.mae),
                None => "no holdout".to_string(),
            };
            eprintln!(
                "  epoch {:>3}  gap {:.2e}  {holdout}  {:.1}s",
                r.epoch, r.objective.gap, r.seconds
            );
        }
    }
    fn should_stop(&self) -> bool {
        self.stop.is_set()
    }
}

/// Runs `work` on a separate thread with the GIL released. While it runs, this thread
/// checks for signals; on Ctrl-C it sets the stop flag, waits for the work to end (a
/// fit stops at its next block or pass) and raises `KeyboardInterrupt`.
pub fn interruptible<T, F>(py: Python<'_>, work: F) -> PyResult<T>
where
    T: Send,
    F: FnOnce(&StopFlag) -> kernlake::Result<T> + Send,
{
    let stop = StopFlag::default();
    let (tx, rx) = channel();
    let rx = Mutex::new(rx);
    std::thread::scope(|s| {
        let stop = &stop;
        s.spawn(move || {
            let out = work(stop);
            let _ = tx.send(out);
        });
        loop {
            let got = py.detach(|| {
                rx.lock()
                    .expect("the result channel's lock is never poisoned")
                    .recv_timeout(SIGNAL_POLL)
            });
            match got {
                Ok(out) => return out.map_err(|e| to_py(py, e)),
                Err(RecvTimeoutError::Timeout) => {
                    if let Err(signal) = py.check_signals() {
                        stop.0.store(true, Ordering::Relaxed);
                        // Wait for the work to notice; its result is dropped.
                        let _ = py.detach(|| {
                            rx.lock()
                                .expect("the result channel's lock is never poisoned")
                                .recv()
                        });
                        return Err(signal);
                    }
                }
                Err(RecvTimeoutError::Disconnected) => {
                    return Err(PyRuntimeError::new_err(
                        "kernlake's worker thread ended without a result",
                    ))
                }
            }
        }
    })
}

/// Runs short work (scoring one table, loading a model) with the GIL released.
pub fn released<T, F>(py: Python<'_>, work: F) -> PyResult<T>
where
    T: Send,
    F: FnOnce() -> kernlake::Result<T> + Send,
{
    py.detach(work).map_err(|e| to_py(py, e))
}
