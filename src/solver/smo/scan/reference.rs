//! The scalar scans the lane-wise passes must reproduce, and checks that compare every
//! pass of a test build with them (so that every SMO fit run by the unit tests, over
//! whatever sizes, shrinking and cache patterns it meets, is checked pass by pass).
//!
//! The scalar scans visit every variable in order (α⁺ then α⁻ of each row) with a
//! strict comparison, as written in Fan, Chen & Lin (JMLR 6, 2005): the maximal
//! violating pair and WSS2.

use super::{Extremes, Second, Update, View, NONE};

/// `m(α)`, `M(α)` and their variables by one scalar scan.
pub(super) fn sequential(g: &[f64], ap: &[f64], am: &[f64], c: f64, eps: f64) -> Extremes {
    let mut e = Extremes {
        m: f64::NEG_INFINITY,
        i: NONE,
        big_m: f64::INFINITY,
        j: NONE,
    };
    for p in 0..g.len() {
        let (vp, vm) = (-g[p] - eps, -g[p] + eps);
        let code = 2 * p as u64;
        for (up, down, v, k) in [
            (ap[p] < c, ap[p] > 0.0, vp, code),
            (am[p] > 0.0, am[p] < c, vm, code + 1),
        ] {
            if up && v > e.m {
                (e.m, e.i) = (v, k);
            }
            if down && v < e.big_m {
                (e.big_m, e.j) = (v, k);
            }
        }
    }
    e
}

/// The WSS2 choice by one scalar scan.
pub(super) fn sequential_wss2(
    g: &[f64],
    s: &View,
    diag: &[f64],
    ki: &[f64],
    kii: f64,
    m: f64,
    tau: f64,
) -> u64 {
    let (mut best, mut j) = (f64::INFINITY, NONE);
    for p in 0..g.len() {
        let a = kii + diag[p] - 2.0 * ki[p];
        let a = if a > 0.0 { a } else { tau };
        for (ok, v, k) in [
            (s.ap[p] > 0.0, -g[p] - s.eps, 2 * p as u64),
            (s.am[p] < s.c, -g[p] + s.eps, 2 * p as u64 + 1),
        ] {
            let b = m - v;
            if ok && b > 0.0 && -b * b / a < best {
                (best, j) = (-b * b / a, k);
            }
        }
    }
    j
}

/// Checks a pass of [`super::extremes`]: every slice has the active length, the gradient
/// went from `before` to `after` by exactly `g += di·ki + dj·kj`, and the extremes are
/// those of the scalar scan.
pub(super) fn check_extremes(
    before: &[f64],
    after: &[f64],
    update: Option<&Update>,
    s: &View,
    e: &Extremes,
) {
    let n = before.len();
    assert_eq!((s.ap.len(), s.am.len()), (n, n), "scan: state lengths");
    let expect: Vec<f64> = match update {
        Some(u) => {
            assert_eq!((u.ki.len(), u.kj.len()), (n, n), "scan: kernel row lengths");
            (0..n)
                .map(|p| before[p] + (u.di * u.ki[p] + u.dj * u.kj[p]))
                .collect()
        }
        None => before.to_vec(),
    };
    assert!(
        expect
            .iter()
            .zip(after)
            .all(|(a, b)| a.to_bits() == b.to_bits()),
        "scan: gradient update differs from the scalar one ({n} positions)"
    );
    let r = sequential(&expect, s.ap, s.am, s.c, s.eps);
    assert_eq!(
        (e.m.to_bits(), e.i, e.big_m.to_bits(), e.j),
        (r.m.to_bits(), r.i, r.big_m.to_bits(), r.j),
        "scan: extremes differ from the scalar scan ({n} positions)"
    );
}

/// Checks a pass of [`super::wss2`] against the scalar scan.
pub(super) fn check_wss2(g: &[f64], w: &Second, s: &View, got: u64) {
    let n = g.len();
    assert_eq!((w.diag.len(), w.ki.len()), (n, n), "wss2: lengths");
    let want = sequential_wss2(g, s, w.diag, w.ki, w.kii, w.m, w.tau);
    assert_eq!(
        got, want,
        "wss2: choice differs from the scalar scan ({n} positions)"
    );
}
