//! One file's contribution to the deviation report, tallied by one thread in row order:
//! per group, the residual sums, the outside count, the rows kept in time order until
//! the file ends (for its runs and its largest rise), and points thinned for the plot.

use std::collections::BTreeMap;

use super::change::{largest_rise, Rise};
use super::runs::{outside_runs, Run};

/// Runs listed in a report, largest first.
pub const DEFAULT_RUNS_SHOWN: usize = 20;

/// Most points kept per group for the plot (thinned evenly in row order).
pub(super) const PLOT_POINTS: usize = 500;

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
pub(super) struct Tally {
    pub(super) rows: u64,
    pub(super) outside: u64,
    pub(super) uncovered: u64,
    pub(super) sum: f64,
    pub(super) sum_sq: f64,
}

impl Tally {
    pub(super) fn merge(&mut self, o: &Tally) {
        self.rows += o.rows;
        self.outside += o.outside;
        self.uncovered += o.uncovered;
        self.sum += o.sum;
        self.sum_sq += o.sum_sq;
    }
}

/// A row kept for the plot, in single precision (24 bytes instead of 40): every file's
/// points stay until the report knows its worst group, and a plot needs no more.
#[derive(Clone, Copy, Debug, PartialEq)]
pub(super) struct PlotRow {
    time: i64,
    measured: f32,
    expected: f32,
    low: f32,
    high: f32,
}

impl From<PlotRow> for BandRow {
    fn from(p: PlotRow) -> BandRow {
        BandRow {
            time: p.time,
            measured: p.measured.into(),
            expected: p.expected.into(),
            low: p.low.into(),
            high: p.high.into(),
        }
    }
}

/// Points kept for a plot: every `stride`-th row, the stride doubling when full.
#[derive(Clone, Debug, Default, PartialEq)]
pub(super) struct Thinned {
    stride: u64,
    seen: u64,
    /// Most points kept (at least 2).
    cap: usize,
    pub(super) points: Vec<PlotRow>,
}

impl Thinned {
    fn with_cap(cap: usize) -> Thinned {
        Thinned {
            cap: cap.max(2),
            ..Thinned::default()
        }
    }

    fn push(&mut self, r: BandRow) {
        if self.stride == 0 {
            self.stride = 1;
        }
        if self.seen.is_multiple_of(self.stride) {
            self.points.push(PlotRow {
                time: r.time,
                measured: r.measured as f32,
                expected: r.expected as f32,
                low: r.low as f32,
                high: r.high as f32,
            });
            if self.points.len() > self.cap {
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
pub(super) struct GroupPart {
    pub(super) tally: Tally,
    points: Vec<(i64, u64, bool)>,
    pub(super) plot: Thinned,
    pub(super) runs: Vec<Run>,
    /// The largest rise of the outside share, with the time keys of its first and
    /// last rows.
    pub(super) rise: Option<(Rise, i64, i64)>,
}

/// What one file contributes, built by one thread in row order.
#[derive(Clone, Debug, Default)]
pub struct FileDeviation {
    pub(super) name: String,
    pub(super) total: Tally,
    pub(super) groups: BTreeMap<String, GroupPart>,
    position: u64,
    pub(super) finished: bool,
    /// Most plot points kept per group.
    plot_cap: usize,
}

impl FileDeviation {
    /// An empty tally for the file called `name` in the report.
    pub fn new(name: impl Into<String>) -> Self {
        FileDeviation {
            name: name.into(),
            plot_cap: PLOT_POINTS,
            ..Default::default()
        }
    }

    /// Keeps at most `cap` plot points per group (at least 2; 500 by default): a run
    /// over many files bounds what they hold together this way.
    pub fn with_plot_points(mut self, cap: usize) -> Self {
        self.plot_cap = cap;
        self
    }

    /// Drops the plot points (the report will not plot this file).
    pub(super) fn drop_plot(&mut self) {
        for g in self.groups.values_mut() {
            g.plot.points = Vec::new();
        }
    }

    fn group(&mut self, group: &str) -> &mut GroupPart {
        if !self.groups.contains_key(group) {
            let part = GroupPart {
                plot: Thinned::with_cap(self.plot_cap),
                ..GroupPart::default()
            };
            self.groups.insert(group.to_string(), part);
        }
        self.groups.get_mut(group).expect("inserted above")
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
        let position = self.position;
        let g = self.group(group);
        g.tally.merge(&t);
        g.points.push((row.time, position, out));
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
        let g = self.group(group);
        g.tally.merge(&t);
        self.position += 1;
    }

    /// Finds each group's runs and drops the per-row points.
    pub fn finish(&mut self) {
        for g in self.groups.values_mut() {
            g.runs = outside_runs(&mut g.points);
            g.runs.truncate(DEFAULT_RUNS_SHOWN);
            // Every file's tally lives until the report is assembled: keep only what it
            // holds (a file can have thousands of short runs).
            g.runs.shrink_to_fit();
            g.plot.points.shrink_to_fit();
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
