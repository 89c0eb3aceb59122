//! The report's binomial tail P(X ≥ k), X ~ Binomial(n, p), against independent exact
//! computations (common practice: the tail is a finite sum of masses
//! C(n, j) p^j (1 − p)^(n − j); computed here with exact integer binomial coefficients,
//! and for larger n from logarithms summed term by term), within 1e-12.

use kernlake::band::binomial_upper_tail;

/// C(n, j) exactly, as u128 (n ≤ 120 fits).
fn choose(n: u64, j: u64) -> u128 {
    let j = j.min(n - j);
    let mut c: u128 = 1;
    for i in 0..j {
        c = c * (n - i) as u128 / (i + 1) as u128;
    }
    c
}

/// Σ_{j ≥ k} C(n, j) p^j q^(n−j), with exact coefficients.
fn tail_exact(k: u64, n: u64, p: f64) -> f64 {
    (k..=n)
        .map(|j| choose(n, j) as f64 * p.powi(j as i32) * (1.0 - p).powi((n - j) as i32))
        .sum()
}

/// The same sum with ln C(n, j) = Σ_{i=1..j} ln((n − j + i) / i), summed in the log
/// domain term by term (no ln Γ, no recurrence between masses).
fn tail_logsum(k: u64, n: u64, p: f64) -> f64 {
    let (lp, lq) = (p.ln(), (1.0 - p).ln());
    let mut total = 0.0;
    for j in k..=n {
        let jj = j.min(n - j);
        let mut lc = 0.0;
        for i in 1..=jj {
            lc += (((n - jj + i) as f64) / i as f64).ln();
        }
        total += (lc + j as f64 * lp + (n - j) as f64 * lq).exp();
    }
    total
}

#[test]
fn tail_matches_exact_sums() {
    let mut checked = 0;
    for &n in &[1u64, 2, 5, 17, 40, 63, 100, 120] {
        for &p in &[0.01, 0.05, 0.1, 0.2, 0.5, 0.77] {
            for k in 0..=n + 1 {
                let want = if k > n { 0.0 } else { tail_exact(k, n, p) };
                let got = binomial_upper_tail(k, n, p);
                assert!(
                    (got - want).abs() <= 1e-12,
                    "n {n} p {p} k {k}: {got} vs exact {want}"
                );
                checked += 1;
            }
        }
    }
    assert!(checked > 2000);
}

#[test]
fn tail_matches_log_sums_for_larger_n() {
    for &(n, p) in &[(1_000u64, 0.05), (2_500, 0.1), (5_000, 0.05), (5_000, 0.2)] {
        let mean = n as f64 * p;
        let sd = (mean * (1.0 - p)).sqrt();
        for z in [-6.0, -2.0, -0.5, 0.0, 0.7, 2.0, 4.0, 8.0] {
            let k = (mean + z * sd).round().max(0.0) as u64;
            let want = tail_logsum(k, n, p);
            let got = binomial_upper_tail(k, n, p);
            assert!(
                (got - want).abs() <= 1e-12,
                "n {n} p {p} k {k}: {got} vs log sum {want}"
            );
        }
    }
}
