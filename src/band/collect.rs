//! The files' tallies of one scoring run, gathered in file order for the deviation
//! report, holding plot points only where the plot may need them, so that what the run
//! keeps does not grow with the number of files it scores.
//!
//! Without groups the plot shows the worst file, and a file's rank is final when it
//! ends: only the worst file so far keeps its points (ties keep the earlier file, as the
//! report's stable ranking does). With groups a group's rank is known only at the end,
//! so every file keeps points for each of its groups, at most [`PLOT_BUDGET`] over the
//! run's files together (and at most 500 per group in a file).

use super::deviation::{figures, is_worse, DeviationReport};
use super::tally::{FileDeviation, PLOT_POINTS};

/// Plot points kept for all files of a grouped run together.
pub const PLOT_BUDGET: usize = 65_536;

/// Tallies of a scoring run, added in file order.
#[derive(Debug)]
pub struct DeviationTallies {
    level: f64,
    by: Option<String>,
    time: Option<String>,
    plot_cap: usize,
    files: Vec<FileDeviation>,
    /// Index in `files` of the worst file so far (without groups).
    worst: Option<usize>,
}

impl DeviationTallies {
    /// Tallies of a run at band `level` over `file_count` files, grouped by `by`, in
    /// `time` order.
    pub fn new(level: f64, by: Option<String>, time: Option<String>, file_count: usize) -> Self {
        let plot_cap = if by.is_some() {
            (PLOT_BUDGET / file_count.max(1)).clamp(16, PLOT_POINTS)
        } else {
            PLOT_POINTS
        };
        DeviationTallies {
            level,
            by,
            time,
            plot_cap,
            files: Vec::new(),
            worst: None,
        }
    }

    /// Plot points each file's tally keeps per group in this run.
    pub fn plot_points(&self) -> usize {
        self.plot_cap
    }

    /// Adds the next file's tally (files in their order).
    pub fn push(&mut self, mut f: FileDeviation) {
        if !f.finished {
            f.finish();
        }
        if self.by.is_none() {
            let expected = 1.0 - self.level;
            let fig = figures(&f.name, &f.total, expected);
            let worse = match self.worst {
                None => true,
                Some(w) => is_worse(
                    &fig,
                    &figures(&self.files[w].name, &self.files[w].total, expected),
                ),
            };
            if worse {
                if let Some(w) = self.worst {
                    self.files[w].drop_plot();
                }
                self.worst = Some(self.files.len());
            } else {
                f.drop_plot();
            }
        }
        self.files.push(f);
    }

    /// The report over the files added.
    pub fn build(self) -> DeviationReport {
        DeviationReport::build(self.level, self.by, self.time, self.files)
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::band::BandRow;

    /// A file of `n` rows with `out` of them outside a band of ±1 around 0.
    fn file(name: &str, n: usize, out: usize, cap: Option<usize>) -> FileDeviation {
        let mut f = FileDeviation::new(name);
        if let Some(c) = cap {
            f = f.with_plot_points(c);
        }
        for i in 0..n {
            let measured = if i < out { 5.0 } else { 0.5 };
            f.add(
                "",
                BandRow {
                    time: i as i64,
                    measured,
                    expected: 0.0,
                    low: -1.0,
                    high: 1.0,
                },
            );
        }
        f
    }

    #[test]
    fn only_the_worst_file_keeps_its_plot_and_the_report_is_unchanged() {
        let shares = [(1_000, 40), (1_000, 300), (1_000, 300), (1_000, 10)];
        let mut kept = DeviationTallies::new(0.95, None, None, shares.len());
        let mut all = Vec::new();
        for (i, &(n, out)) in shares.iter().enumerate() {
            kept.push(file(&format!("f{i}"), n, out, None));
            all.push(file(&format!("f{i}"), n, out, None));
        }
        let with_plot: Vec<bool> = kept
            .files
            .iter()
            .map(|f| f.groups.values().any(|g| !g.plot.points.is_empty()))
            .collect();
        // f1 and f2 tie; the earlier one ranks first, as in the report.
        assert_eq!(with_plot, [false, true, false, false]);
        let reference = DeviationReport::build(0.95, None, None, all);
        assert_eq!(kept.build(), reference);
        assert_eq!(reference.worst.as_deref(), Some("f1"));
    }

    #[test]
    fn grouped_runs_share_one_plot_budget() {
        let t = DeviationTallies::new(0.9, Some("site".into()), None, 10_000);
        assert_eq!(t.plot_points(), 16);
        let t = DeviationTallies::new(0.9, Some("site".into()), None, 480);
        assert_eq!(t.plot_points(), PLOT_BUDGET / 480);
        let t = DeviationTallies::new(0.9, Some("site".into()), None, 3);
        assert_eq!(t.plot_points(), PLOT_POINTS);
        let f = file("a", 10_000, 100, Some(t.plot_points()));
        let points = f.groups[""].plot.points.len();
        assert!(
            points <= PLOT_POINTS && points > PLOT_POINTS / 2,
            "{points}"
        );
    }
}
