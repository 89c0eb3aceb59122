//! The deviation report: for each input file (and each group of a chosen column), how
//! the measured values sit against their bands: rows, mean and RMSE of the residual
//! (measured − expected), the share of rows outside the band against the 1 − level
//! expected, with the exact binomial tail P(X ≥ outside) under Binomial(rows, 1 − level),
//! runs of consecutive outside rows in time order, largest first, and the largest rises
//! of the outside share within a file and group (a change that sets in part-way through
//! the period, [`super::change`]), strongest first: the report names these first.
//!
//! Rows outside the training data's coverage (see [`crate::coverage`]) are counted per
//! group but not judged against the band: the model has no expectation there, and the
//! band's guarantee is for rows like the holdout.
//!
//! Deterministic by construction: each file is tallied by one thread in row order, files
//! are merged in the order given, so the report is the same whatever the thread count or
//! batch size. Runs are found within a file (a run that crosses files is two runs).
//!
//! The p-value assumes rows are independent draws like the holdout; consecutive rows of
//! a time series are usually correlated, so read a small p-value as "look here", not as
//! a calibrated false-alarm rate.

use std::collections::BTreeMap;

use serde::Serialize;

use super::binomial::binomial_upper_tail;
use super::tally::{BandRow, FileDeviation, Tally, DEFAULT_RUNS_SHOWN};

/// Figures of one file or group.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct GroupFigures {
    /// The file, or the group's value.
    pub name: String,
    /// Rows with a measured value and a prediction, inside the training data's coverage.
    pub rows: u64,
    /// Rows with a measured value outside the training data's coverage (not judged).
    pub uncovered: u64,
    /// Mean of measured − expected.
    pub residual_mean: f64,
    /// Root mean square of measured − expected.
    pub residual_rmse: f64,
    /// Rows outside the band.
    pub outside: u64,
    /// Share of rows outside the band.
    pub outside_share: f64,
    /// P(X ≥ outside) for X ~ Binomial(rows, 1 − level).
    pub p_value: f64,
}

/// One run of consecutive outside rows.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct RunFigures {
    /// The file it is in.
    pub file: String,
    /// Its group ("" without groups).
    pub group: String,
    /// Rows in the run.
    pub rows: u64,
    /// Time key of its first row.
    pub start: i64,
    /// Time key of its last row.
    pub end: i64,
    /// Its first row's time as text.
    pub start_text: String,
    /// Its last row's time as text.
    pub end_text: String,
}

/// A rise of the share of rows outside the band within one file and group.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct ChangeFigures {
    /// The file it is in.
    pub file: String,
    /// Its group ("" without groups).
    pub group: String,
    /// Time key of the first row after the change.
    pub start: i64,
    /// Time key of the sequence's last row.
    pub end: i64,
    /// The change's first time as text.
    pub start_text: String,
    /// The last time as text.
    pub end_text: String,
    /// Rows before the change.
    pub rows_before: u64,
    /// Share outside the band before the change.
    pub share_before: f64,
    /// Rows from the change on.
    pub rows_after: u64,
    /// Share outside the band from the change on.
    pub share_after: f64,
    /// Log-likelihood ratio of the change (Worsley 1983); larger is stronger.
    pub statistic: f64,
}

/// A scoring run's deviation report.
#[derive(Clone, Debug, PartialEq, Serialize)]
pub struct DeviationReport {
    /// Band level used.
    pub level: f64,
    /// Share of rows expected outside the band: 1 − level.
    pub expected_outside: f64,
    /// Column the groups are values of, if any.
    pub by: Option<String>,
    /// Column giving the time order, if any (else row order within a file).
    pub time: Option<String>,
    /// All rows together.
    pub overall: GroupFigures,
    /// One entry per file, smallest p-value first.
    pub files: Vec<GroupFigures>,
    /// One entry per group value (with `by`), smallest p-value first.
    pub groups: Vec<GroupFigures>,
    /// Longest runs of consecutive outside rows, largest first.
    pub runs: Vec<RunFigures>,
    /// Largest rises of the outside share within a file and group, strongest first.
    pub changes: Vec<ChangeFigures>,
    /// The group (or file) the plot shows: the first of `groups` (or `files`).
    pub worst: Option<String>,
    /// Points of the worst group for the plot, in time order (not in JSON).
    #[serde(skip)]
    pub worst_points: Vec<BandRow>,
}

pub(super) fn figures(name: &str, t: &Tally, expected_outside: f64) -> GroupFigures {
    let n = t.rows.max(1) as f64;
    GroupFigures {
        name: name.to_string(),
        rows: t.rows,
        uncovered: t.uncovered,
        residual_mean: t.sum / n,
        residual_rmse: (t.sum_sq / n).sqrt(),
        outside: t.outside,
        outside_share: t.outside as f64 / n,
        p_value: binomial_upper_tail(t.outside, t.rows, expected_outside),
    }
}

/// Smallest p-value first; then the larger outside share; then the given order.
fn worst_first(v: &mut [GroupFigures]) {
    v.sort_by(rank);
}

fn rank(a: &GroupFigures, b: &GroupFigures) -> std::cmp::Ordering {
    a.p_value
        .total_cmp(&b.p_value)
        .then(b.outside_share.total_cmp(&a.outside_share))
}

/// Whether `a` ranks strictly before `b` (worse) in the report.
pub(super) fn is_worse(a: &GroupFigures, b: &GroupFigures) -> bool {
    rank(a, b) == std::cmp::Ordering::Less
}

impl DeviationReport {
    /// Merges the files' tallies (in the order given) into a report at band `level`.
    pub fn build(
        level: f64,
        by: Option<String>,
        time: Option<String>,
        mut files: Vec<FileDeviation>,
    ) -> DeviationReport {
        let expected = 1.0 - level;
        let mut overall = Tally::default();
        let mut groups: BTreeMap<String, Tally> = BTreeMap::new();
        let mut file_figs = Vec::with_capacity(files.len());
        let mut runs = Vec::new();
        let mut changes = Vec::new();
        for f in files.iter_mut() {
            if !f.finished {
                f.finish();
            }
            overall.merge(&f.total);
            file_figs.push(figures(&f.name, &f.total, expected));
            for (g, part) in &f.groups {
                groups.entry(g.clone()).or_default().merge(&part.tally);
                runs.extend(part.runs.iter().map(|r| RunFigures {
                    file: f.name.clone(),
                    group: g.clone(),
                    rows: r.rows,
                    start: r.start,
                    end: r.end,
                    start_text: r.start.to_string(),
                    end_text: r.end.to_string(),
                }));
                if let Some((r, start, end)) = part.rise {
                    let share = |(n, x): (u64, u64)| x as f64 / n.max(1) as f64;
                    changes.push(ChangeFigures {
                        file: f.name.clone(),
                        group: g.clone(),
                        start,
                        end,
                        start_text: start.to_string(),
                        end_text: end.to_string(),
                        rows_before: r.before.0,
                        share_before: share(r.before),
                        rows_after: r.after.0,
                        share_after: share(r.after),
                        statistic: r.statistic,
                    });
                }
            }
        }
        // Stable: equal statistics keep file order.
        changes.sort_by(|a, b| b.statistic.total_cmp(&a.statistic));
        changes.truncate(DEFAULT_RUNS_SHOWN);
        // Stable: equal runs keep file order.
        runs.sort_by_key(|r| std::cmp::Reverse(r.rows));
        runs.truncate(DEFAULT_RUNS_SHOWN);
        let mut group_figs: Vec<GroupFigures> = if by.is_some() {
            groups
                .iter()
                .map(|(g, t)| figures(g, t, expected))
                .collect()
        } else {
            Vec::new()
        };
        worst_first(&mut file_figs);
        worst_first(&mut group_figs);
        let worst = if by.is_some() {
            group_figs.first().map(|g| g.name.clone())
        } else {
            file_figs.first().map(|g| g.name.clone())
        };
        let worst_points = match (&worst, by.is_some()) {
            // Only the worst group's points are gathered (in file order).
            (Some(w), true) => files
                .iter()
                .filter_map(|f| f.groups.get(w))
                .flat_map(|g| g.plot.points.iter().map(|&p| BandRow::from(p)))
                .collect(),
            (Some(w), false) => files
                .iter()
                .find(|f| &f.name == w)
                .map(|f| {
                    f.groups
                        .values()
                        .flat_map(|g| g.plot.points.iter().map(|&p| BandRow::from(p)))
                        .collect()
                })
                .unwrap_or_default(),
            (None, _) => Vec::new(),
        };
        let mut worst_points = worst_points;
        worst_points.sort_by_key(|p| p.time);
        DeviationReport {
            level,
            expected_outside: expected,
            by,
            time,
            overall: figures("all rows", &overall, expected),
            files: file_figs,
            groups: group_figs,
            runs,
            changes,
            worst,
            worst_points,
        }
    }

    /// Rewrites the runs' time texts with `format` (the scoring layer knows the time
    /// column's type).
    pub fn format_times(&mut self, format: &dyn Fn(i64) -> String) {
        for r in &mut self.runs {
            r.start_text = format(r.start);
            r.end_text = format(r.end);
        }
        for c in &mut self.changes {
            c.start_text = format(c.start);
            c.end_text = format(c.end);
        }
    }

    /// The report as JSON text.
    pub fn to_json(&self) -> String {
        serde_json::to_string_pretty(self).expect("a report serializes")
    }
}
