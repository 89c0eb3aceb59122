//! Accuracy measures: worked examples by hand and the streaming accumulator against the
//! one-shot functions.

use kernlake::metrics::{mae, r2, rmse, support_share, tube_share, MetricsAccumulator};
use ndarray::{array, Array1};

fn close(a: f64, b: f64, tol: f64) -> bool {
    (a - b).abs() <= tol * b.abs().max(1.0)
}

#[test]
fn worked_example_by_hand() {
    // common practice: the textbook definitions, worked by hand.
    // residuals 0.5, −0.5, 0, −1; Σr² = 1.5; Σ|r| = 2; ȳ = 2.875; Σ(y − ȳ)² = 29.1875.
    let y = array![3.0, -0.5, 2.0, 7.0];
    let f = array![2.5, 0.0, 2.0, 8.0];
    assert!(close(
        rmse(y.view(), f.view()),
        (1.5f64 / 4.0).sqrt(),
        1e-15
    ));
    assert!(close(mae(y.view(), f.view()), 0.5, 1e-15));
    assert!(close(r2(y.view(), f.view()), 1.0 - 1.5 / 29.1875, 1e-15));
    // |r| ≤ 0.5 for three rows of four (the boundary counts as inside).
    assert_eq!(tube_share(y.view(), f.view(), 0.5), 0.75);
    assert_eq!(tube_share(y.view(), f.view(), 0.4), 0.25);
    // common practice: a support vector is a row with a non-zero dual variable.
    assert_eq!(support_share(&[0.0, 1.2, -0.3, 0.0, 0.0]), 0.4);
}

#[test]
fn perfect_and_mean_predictions() {
    // common practice: exact predictions give RMSE 0 and R² 1; predicting the mean gives
    // R² 0 and RMSE equal to the population standard deviation (here √2 for 1..5).
    let y = array![1.0, 2.0, 3.0, 4.0, 5.0];
    assert_eq!(rmse(y.view(), y.view()), 0.0);
    assert_eq!(r2(y.view(), y.view()), 1.0);
    let m = Array1::from_elem(5, 3.0);
    assert!(close(r2(y.view(), m.view()), 0.0, 1e-15));
    assert!(close(rmse(y.view(), m.view()), 2f64.sqrt(), 1e-15));
    assert!(close(mae(y.view(), m.view()), 1.2, 1e-15));
}

#[test]
fn empty_and_constant_targets_give_nan() {
    // common practice: R² is undefined when the targets do not vary; nothing is defined
    // on zero rows.
    let y = array![2.0, 2.0, 2.0];
    assert!(r2(y.view(), array![1.0, 2.0, 3.0].view()).is_nan());
    let e = Array1::<f64>::zeros(0);
    assert!(rmse(e.view(), e.view()).is_nan());
    assert!(MetricsAccumulator::new(0.1).finish().rmse.is_nan());
}

#[test]
fn accumulator_equals_one_shot() {
    // common practice: a streaming evaluation must agree with the one-shot definitions;
    // batches of uneven sizes, including an empty one, on a deterministic sequence.
    let n = 1000;
    let y = Array1::from_shape_fn(n, |i| {
        100.0 + 10.0 * ((i as f64) * 0.37).sin() + (i % 7) as f64
    });
    let f = Array1::from_shape_fn(n, |i| y[i] + 0.8 * ((i as f64) * 1.3).cos());
    let eps = 0.5;
    let mut acc = MetricsAccumulator::new(eps);
    let cuts = [0, 1, 1, 97, 350, 351, 800, 1000];
    for w in cuts.windows(2) {
        acc.add(
            y.slice(ndarray::s![w[0]..w[1]]),
            f.slice(ndarray::s![w[0]..w[1]]),
        );
    }
    let m = acc.finish();
    assert_eq!(m.n, n as u64);
    let tol = 1e-12 * (n as f64).sqrt();
    assert!(close(m.rmse, rmse(y.view(), f.view()), tol));
    assert!(close(m.mae, mae(y.view(), f.view()), tol));
    assert!(close(m.r2, r2(y.view(), f.view()), tol));
    assert_eq!(m.tube_share, tube_share(y.view(), f.view(), eps));
    // the sequence is not trivial: some rows in, some out of the tube, R² strictly in (0, 1).
    assert!(m.tube_share > 0.1 && m.tube_share < 0.9);
    assert!(m.r2 > 0.0 && m.r2 < 1.0);
}

#[test]
#[should_panic(expected = "same length")]
fn length_mismatch_panics() {
    let _ = rmse(array![1.0, 2.0].view(), array![1.0].view());
}
