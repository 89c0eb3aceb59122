//! Runs of consecutive rows outside the band, in time order: a fault that pushes a
//! machine off its model shows as a long run, where noise gives short scattered ones.

/// One run of consecutive outside rows.
#[derive(Clone, Copy, Debug, PartialEq, Eq)]
pub struct Run {
    /// Time key of the run's first row.
    pub start: i64,
    /// Time key of the run's last row.
    pub end: i64,
    /// Rows in the run.
    pub rows: u64,
}

/// The runs of `outside` rows among `points` = (time key, position in the source,
/// outside), ordered by time and then by position (so equal times keep file order),
/// largest first, then earliest first. `points` is sorted in place.
pub fn outside_runs(points: &mut [(i64, u64, bool)]) -> Vec<Run> {
    points.sort_unstable_by_key(|&(t, pos, _)| (t, pos));
    let mut runs = Vec::new();
    let mut current: Option<Run> = None;
    for &(t, _, out) in points.iter() {
        match (&mut current, out) {
            (Some(r), true) => {
                r.end = t;
                r.rows += 1;
            }
            (None, true) => {
                current = Some(Run {
                    start: t,
                    end: t,
                    rows: 1,
                })
            }
            (Some(_), false) => runs.extend(current.take()),
            (None, false) => {}
        }
    }
    runs.extend(current);
    runs.sort_by(|a, b| b.rows.cmp(&a.rows).then(a.start.cmp(&b.start)));
    runs
}
