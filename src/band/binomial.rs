//! The exact binomial tail P(X ≥ k) for X ~ Binomial(n, p): how surprising it is to see
//! `k` or more rows outside a band that should hold each row with probability 1 − p.
//!
//! Each probability mass comes from Loader's saddle-point form ("Fast and accurate
//! computation of binomial probabilities", C. Loader, 2000): the log of the mass is a sum
//! of Stirling-series remainders and deviance terms, accurate to a few units in the last
//! place for any n, where ln Γ differences lose digits as n grows. The tail then sums
//! masses away from the mean with the exact ratio of neighbouring masses, stopping when
//! a term no longer changes the sum; below the mean it is one minus the lower tail.

use std::f64::consts::PI;

/// ln(n!) − ln(√(2πn) (n/e)^n): the error of Stirling's formula at integer `n` ≥ 1.
fn stirling_error(n: f64) -> f64 {
    if n <= 15.0 {
        // Small n: ln(n!) summed exactly enough (at most 15 terms) minus the formula.
        let mut ln_fact = 0.0;
        let mut i = 2.0;
        while i <= n {
            ln_fact += f64::ln(i);
            i += 1.0;
        }
        return ln_fact - (0.5 * (2.0 * PI).ln() + (n + 0.5) * n.ln() - n);
    }
    // The asymptotic series 1/(12n) − 1/(360n³) + 1/(1260n⁵) − 1/(1680n⁷) + 1/(1188n⁹).
    const S0: f64 = 1.0 / 12.0;
    const S1: f64 = 1.0 / 360.0;
    const S2: f64 = 1.0 / 1260.0;
    const S3: f64 = 1.0 / 1680.0;
    const S4: f64 = 1.0 / 1188.0;
    let nn = n * n;
    if n > 500.0 {
        (S0 - S1 / nn) / n
    } else if n > 80.0 {
        (S0 - (S1 - S2 / nn) / nn) / n
    } else if n > 35.0 {
        (S0 - (S1 - (S2 - S3 / nn) / nn) / nn) / n
    } else {
        (S0 - (S1 - (S2 - (S3 - S4 / nn) / nn) / nn) / nn) / n
    }
}

/// The deviance term x·ln(x/m) + m − x, by its series when x is near m (where the
/// direct form cancels).
fn deviance(x: f64, m: f64) -> f64 {
    if (x - m).abs() < 0.1 * (x + m) {
        let v = (x - m) / (x + m);
        let v2 = v * v;
        let mut s = (x - m) * v;
        let mut ej = 2.0 * x * v;
        let mut j = 1.0;
        loop {
            ej *= v2;
            let next = s + ej / (2.0 * j + 1.0);
            if next == s {
                return next;
            }
            s = next;
            j += 1.0;
        }
    }
    x * (x / m).ln() + m - x
}

/// P(X = x) for X ~ Binomial(n, p), q = 1 − p (Loader 2000).
pub fn binomial_mass(x: u64, n: u64, p: f64) -> f64 {
    let q = 1.0 - p;
    if x > n {
        return 0.0;
    }
    if p == 0.0 {
        return if x == 0 { 1.0 } else { 0.0 };
    }
    if q == 0.0 {
        return if x == n { 1.0 } else { 0.0 };
    }
    let (xf, nf) = (x as f64, n as f64);
    if x == 0 {
        if n == 0 {
            return 1.0;
        }
        let lc = if p < 0.1 {
            -deviance(nf, nf * q) - nf * p
        } else {
            nf * q.ln()
        };
        return lc.exp();
    }
    if x == n {
        let lc = if q < 0.1 {
            -deviance(nf, nf * p) - nf * q
        } else {
            nf * p.ln()
        };
        return lc.exp();
    }
    let lc = stirling_error(nf)
        - stirling_error(xf)
        - stirling_error(nf - xf)
        - deviance(xf, nf * p)
        - deviance(nf - xf, nf * q);
    let lf = (2.0 * PI).ln() + xf.ln() + (-xf / nf).ln_1p();
    (lc - 0.5 * lf).exp()
}

/// P(X ≥ k) for X ~ Binomial(n, p): the one-sided p-value of seeing `k` or more rows
/// outside a band when each falls outside with probability `p`.
///
/// # Panics
/// If `p` is not in [0, 1].
pub fn binomial_upper_tail(k: u64, n: u64, p: f64) -> f64 {
    assert!(
        (0.0..=1.0).contains(&p),
        "binomial tail: p = {p} is not a probability"
    );
    if k == 0 {
        return 1.0;
    }
    if k > n {
        return 0.0;
    }
    let q = 1.0 - p;
    if p == 0.0 {
        return 0.0;
    }
    if q == 0.0 {
        return 1.0;
    }
    let mean = n as f64 * p;
    if k as f64 > mean {
        // Masses fall from k upward: add them until one no longer counts.
        let mut t = binomial_mass(k, n, p);
        let mut sum = t;
        let ratio = p / q;
        let mut j = k;
        while j < n && t > 0.0 {
            t *= (n - j) as f64 / (j + 1) as f64 * ratio;
            let next = sum + t;
            if next == sum {
                break;
            }
            sum = next;
            j += 1;
        }
        sum.min(1.0)
    } else {
        // Below the mean: 1 − P(X ≤ k − 1), masses falling from k − 1 downward.
        let mut t = binomial_mass(k - 1, n, p);
        let mut sum = t;
        let ratio = q / p;
        let mut j = k - 1;
        while j > 0 && t > 0.0 {
            t *= j as f64 / (n - j + 1) as f64 * ratio;
            let next = sum + t;
            if next == sum {
                break;
            }
            sum = next;
            j -= 1;
        }
        (1.0 - sum).max(0.0)
    }
}
