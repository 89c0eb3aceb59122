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
use super::change::{largest_rise, Rise};
use super::runs::{outside_runs, Run};

/// Runs listed in a report, largest first.
pub const DEFAULT_RUNS_SHOWN: usize = 20;

/// Most points kept per group for the plot (thinned evenly in row order).
const PLOT_POINTS: usize = 500;

/// One scored row with a measured value.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct BandRow {
    /// Time key (the time column as an integer, or the row's position in its file).
    pub time: i64,
    /// The measured target.
    pub measured: f64,
    /// The prediction.
    pub expected: f64,
    /// The band's low end.
    pub low: f64,
    /// The band's high end.
    pub high: f64,
}

impl BandRow {
    /// Whether the measured value lies outside the band.
    pub fn outside(&self) -> bool {
        self.measured < self.low || self.measured > self.high
    }
}

/// Running sums of one group, added in row order.
#[derive(Clone, Copy, Debug, Default, PartialEq)]
struct Tally {
    rows: u64,
    outside: u64,
    uncovered: u64,
    sum: f64,
    sum_sq: f64,
}

impl Tally {
    fn merge(&mut self, o: &Tally) {
        self.rows += o.rows;
        self.outside += o.outside;
        self.uncovered += o.uncovered;
        self.sum += o.sum;
        self.sum_sq += o.sum_sq;
    }
}

/// Points kept for a plot: every `stride`-th row, the stride doubling when full.
#[derive(Clone, Debug, Default, PartialEq)]
struct Thinned {
    stride: u64,
    seen: u64,
    points: Vec<BandRow>,
}

impl Thinned {
    fn push(&mut self, r: BandRow) {
        if self.stride == 0 {
            self.stride = 1;
        }
        if self.seen.is_multiple_of(self.stride) {
            self.points.push(r);
            if self.points.len() > PLOT_POINTS {
                let mut i = 0;
                self.points.retain(|_| {
                    i += 1;
                    i % 2 == 1
                });
                self.stride *= 2;
            }
        }
        self.seen += 1;
    }
}

#[derive(Clone, Debug, Default)]
struct GroupPart {
    tally: Tally,
    points: Vec<(i64, u64, bool)>,
    plot: Thinned,
    runs: Vec<Run>,
    /// The largest rise of the outside share, with the time keys of its first and
    /// last rows.
    rise: Option<(Rise, i64, i64)>,
}

/// What one file contributes, built by one thread in row order.
#[derive(Clone, Debug, Default)]
pub struct FileDeviation {
    name: String,
    total: Tally,
    groups: BTreeMap<String, GroupPart>,
    position: u64,
    finished: bool,
}

impl FileDeviation {
    /// An empty tally for the file called `name` in the report.
    pub fn new(name: impl Into<String>) -> Self {
        FileDeviation {
            name: name.into(),
            ..Default::default()
        }
    }

    /// Adds the next row of the file (in file order) to `group` ("" without groups).
    pub fn add(&mut self, group: &str, row: BandRow) {
        let r = row.measured - row.expected;
        let out = row.outside();
        let t = Tally {
            rows: 1,
            outside: out as u64,
            uncovered: 0,
            sum: r,
            sum_sq: r * r,
        };
        self.total.merge(&t);
        let g = match self.groups.get_mut(group) {
            Some(g) => g,
            None => self.groups.entry(group.to_string()).or_default(),
        };
        g.tally.merge(&t);
        g.points.push((row.time, self.position, out));
        g.plot.push(row);
        self.position += 1;
    }

    /// Counts the next row of the file as outside the training data's coverage (not
    /// judged against the band; it breaks no run and joins none).
    pub fn add_uncovered(&mut self, group: &str) {
        let t = Tally {
            uncovered: 1,
            ..Tally::default()
        };
        self.total.merge(&t);
        let g = match self.groups.get_mut(group) {
            Some(g) => g,
            None => self.groups.entry(group.to_string()).or_default(),
        };
        g.tally.merge(&t);
        self.position += 1;
    }

    /// Finds each group's runs and drops the per-row points.
    pub fn finish(&mut self) {
        for g in self.groups.values_mut() {
            g.runs = outside_runs(&mut g.points);
            g.runs.truncate(DEFAULT_RUNS_SHOWN);
            // `outside_runs` left the points in time order.
            let flags: Vec<bool> = g.points.iter().map(|p| p.2).collect();
            g.rise = largest_rise(&flags).map(|r| {
                let last = g.points.last().expect("a rise has rows after it").0;
                (r, g.points[r.at].0, last)
            });
            g.points = Vec::new();
        }
        self.finished = true;
    }

    /// Rows tallied.
    pub fn rows(&self) -> u64 {
        self.total.rows
    }
}

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

fn figures(name: &str, t: &Tally, expected_outside: f64) -> GroupFigures {
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
    v.sort_by(|a, b| {
        a.p_value
            .total_cmp(&b.p_value)
            .then(b.outside_share.total_cmp(&a.outside_share))
    });
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
                .flat_map(|g| g.plot.points.iter().copied())
                .collect(),
            (Some(w), false) => files
                .iter()
                .find(|f| &f.name == w)
                .map(|f| {
                    f.groups
                        .values()
                        .flat_map(|g| g.plot.points.iter().copied())
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
