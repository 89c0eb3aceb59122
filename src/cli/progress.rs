//! Progress bars (indicatif) for the survey pass and the training epochs.

use indicatif::{ProgressBar, ProgressStyle};

use crate::solver::blocks::{EpochRecord, TrainObserver};

/// A row-counting bar, hidden when quiet.
pub fn rows_bar(quiet: bool, total: u64, label: &str) -> ProgressBar {
    if quiet {
        return ProgressBar::hidden();
    }
    let bar = ProgressBar::new(total);
    bar.set_style(
        ProgressStyle::with_template(
            "{prefix:>10} [{bar:32}] {human_pos}/{human_len} rows  {per_sec}  eta {eta}",
        )
        .expect("valid template")
        .progress_chars("=> "),
    );
    bar.set_prefix(label.to_string());
    bar
}

/// A bar counting whole pieces of work (`unit`, e.g. "machines") whose number is set
/// by the first update, hidden when quiet.
pub fn count_bar(quiet: bool, label: &str, unit: &str) -> ProgressBar {
    if quiet {
        return ProgressBar::hidden();
    }
    let bar = ProgressBar::new(0);
    bar.set_style(
        ProgressStyle::with_template(&format!(
            "{{prefix:>10}} [{{bar:32}}] {{pos}}/{{len}} {unit}  {{elapsed}}"
        ))
        .expect("valid template")
        .progress_chars("=> "),
    );
    bar.set_prefix(label.to_string());
    bar
}

/// Draws one bar per epoch and a line of figures when it ends.
pub struct EpochBars {
    quiet: bool,
    total: u64,
    bar: std::sync::Mutex<Option<ProgressBar>>,
}

impl EpochBars {
    /// Bars for passes of `total` rows.
    pub fn new(quiet: bool, total: u64) -> Self {
        EpochBars {
            quiet,
            total,
            bar: std::sync::Mutex::new(None),
        }
    }
}

impl TrainObserver for EpochBars {
    fn pass_started(&self, epoch: usize, _rows: u64) {
        let bar = rows_bar(self.quiet, self.total, &format!("epoch {epoch}"));
        *self.bar.lock().expect("bar lock") = Some(bar);
    }

    fn rows_done(&self, rows: u64) {
        if let Some(b) = self.bar.lock().expect("bar lock").as_ref() {
            b.inc(rows);
        }
    }

    fn epoch_finished(&self, r: &EpochRecord) {
        let bar = self.bar.lock().expect("bar lock").take();
        if let Some(b) = bar {
            b.finish_and_clear();
        }
        if self.quiet {
            return;
        }
        let holdout = match &r.holdout {
            Some(m) => format!("holdout rmse {:.4}  mae {:.4}", m.rmse, m.mae),
            None => "no holdout".to_string(),
        };
        eprintln!(
            "  epoch {:>3}  gap {:.2e}  {holdout}  {:.1}s  ({} blocks from memory)",
            r.epoch, r.objective.gap, r.seconds, r.resident_blocks
        );
    }
}
