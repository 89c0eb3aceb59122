//! The largest rise in the share of rows outside the band within one sequence, by the
//! likelihood-ratio scan for a change in a binomial probability (Worsley, "The power of
//! likelihood ratio and cumulative sum tests for a change in a binomial probability",
//! Biometrika 70, 1983).
//!
//! A fault that sets in part-way through a period (a compressor losing efficiency over
//! its last two weeks) leaves a sequence whose outside share jumps from about 1 − level to
//! much more; a steady bias (a site always above its model) does not change within the
//! period. The whole-period binomial test ranks both alike by their totals; this scan
//! finds the first and ranks it first. For every split k of the time-ordered flags
//! x₁…xₙ the statistic is the log-likelihood ratio of "share p₁ before k, p₂ from k on"
//! against "one share p": ℓ(x₁..ₖ) + ℓ(xₖ₊₁..ₙ) − ℓ(x₁..ₙ), with ℓ the binomial
//! log-likelihood at its maximum; only rises (p₂ > p₁) count. One pass over prefix sums.

/// The largest rise found in one sequence of outside flags.
#[derive(Clone, Copy, Debug, PartialEq)]
pub struct Rise {
    /// Position of the first row after the change.
    pub at: usize,
    /// Rows before the change, and how many of them were outside.
    pub before: (u64, u64),
    /// Rows from the change on, and how many of them were outside.
    pub after: (u64, u64),
    /// The log-likelihood ratio of the change (larger is stronger).
    pub statistic: f64,
}

/// The binomial log-likelihood of `x` successes in `n` trials at their own share.
fn log_likelihood(x: u64, n: u64) -> f64 {
    if n == 0 || x == 0 || x == n {
        return 0.0;
    }
    let (x, n) = (x as f64, n as f64);
    x * (x / n).ln() + (n - x) * ((n - x) / n).ln()
}

/// The split of `outside` (flags in time order) with the largest log-likelihood ratio
/// among those where the share rises; `None` when no split raises it.
pub fn largest_rise(outside: &[bool]) -> Option<Rise> {
    let n = outside.len() as u64;
    let total = outside.iter().filter(|&&o| o).count() as u64;
    let whole = log_likelihood(total, n);
    let mut best: Option<Rise> = None;
    let mut x1 = 0u64;
    for (k, &o) in outside
        .iter()
        .enumerate()
        .take(outside.len().saturating_sub(1))
    {
        x1 += o as u64;
        let n1 = k as u64 + 1;
        let (n2, x2) = (n - n1, total - x1);
        // A rise: x2 / n2 > x1 / n1, compared without division.
        if x2 * n1 <= x1 * n2 {
            continue;
        }
        let statistic = log_likelihood(x1, n1) + log_likelihood(x2, n2) - whole;
        if best.is_none_or(|b| statistic > b.statistic) {
            best = Some(Rise {
                at: k + 1,
                before: (n1, x1),
                after: (n2, x2),
                statistic,
            });
        }
    }
    best
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_jump_from_none_to_all_is_found_where_it_happens() {
        // 100 rows inside, then 100 outside: the split at 100 separates them exactly, and
        // the ratio is −ℓ(100 of 200) = 200 ln 2 (worked by hand).
        let flags: Vec<bool> = (0..200).map(|i| i >= 100).collect();
        let r = largest_rise(&flags).unwrap();
        assert_eq!(r.at, 100);
        assert_eq!((r.before, r.after), ((100, 0), (100, 100)));
        assert!((r.statistic - 200.0 * std::f64::consts::LN_2).abs() < 1e-9);
    }

    #[test]
    fn a_fall_or_a_constant_share_is_no_rise() {
        let falling: Vec<bool> = (0..50).map(|i| i < 25).collect();
        assert_eq!(largest_rise(&falling), None);
        assert_eq!(largest_rise(&[true; 30]), None);
        assert_eq!(largest_rise(&[]), None);
    }
}
