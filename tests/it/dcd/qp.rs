//! The reference: the same epsilon-SVR primal solved as a QP by clarabel.

use super::support::sd;
use clarabel::algebra::CscMatrix;
use clarabel::solver::{DefaultSettings, DefaultSolver, IPSolver, NonnegativeConeT, SolverStatus};
use kernlake::solver::dcd::{fit, DcdSettings, Loss};
use ndarray::{Array1, ArrayView1, ArrayView2};

/// The primal in user units with the bias regularised towards the target's mean m, which
/// is the problem `fit` solves (see `DcdSettings::in_standard_units`):
/// ½‖w‖² + ½(b − m)² + C Σ ℓ(y_i − wᵀz_i − b).
pub fn user_primal(
    z: ArrayView2<f64>,
    y: ArrayView1<f64>,
    w: ArrayView1<f64>,
    b: f64,
    set: &DcdSettings,
) -> f64 {
    let m = y.mean().unwrap();
    let f = z.dot(&w) + b;
    let loss: f64 = y
        .iter()
        .zip(f.iter())
        .map(|(a, p)| {
            let e = ((a - p).abs() - set.epsilon).max(0.0);
            if set.loss == Loss::L1 {
                e
            } else {
                e * e
            }
        })
        .sum();
    0.5 * w.dot(&w) + 0.5 * (b - m).powi(2) + set.c * loss
}

/// Solves the same primal with clarabel: variables (w, b, ξ), minimise
/// ½‖w‖² + ½b² − m·b + C Σ ξ_i (L1) or C Σ ξ_i² (L2) subject to
/// ξ_i ≥ y_i − wᵀz_i − b − ε, ξ_i ≥ wᵀz_i + b − y_i − ε, ξ_i ≥ 0.
/// Returns (optimal value including the constant ½m², w, b).
pub fn qp_reference(
    z: ArrayView2<f64>,
    y: ArrayView1<f64>,
    set: &DcdSettings,
) -> (f64, Array1<f64>, f64) {
    let (n, d) = z.dim();
    let m = y.mean().unwrap();
    let nv = d + 1 + n;
    let (mut pi, mut pj, mut pv) = (Vec::new(), Vec::new(), Vec::new());
    for k in 0..=d {
        pi.push(k);
        pj.push(k);
        pv.push(1.0);
    }
    let mut q = vec![0.0; nv];
    q[d] = -m;
    for i in 0..n {
        match set.loss {
            Loss::L1 => q[d + 1 + i] = set.c,
            Loss::L2 => {
                pi.push(d + 1 + i);
                pj.push(d + 1 + i);
                pv.push(2.0 * set.c);
            }
        }
    }
    let p = CscMatrix::new_from_triplets(nv, nv, pi, pj, pv);
    let (mut ai, mut aj, mut av) = (Vec::new(), Vec::new(), Vec::new());
    let mut rhs = Vec::new();
    for i in 0..n {
        // −wᵀz_i − b − ξ_i ≤ ε − y_i  and  wᵀz_i + b − ξ_i ≤ ε + y_i  and  −ξ_i ≤ 0.
        for (sign, row) in [(-1.0, 3 * i), (1.0, 3 * i + 1)] {
            for k in 0..d {
                ai.push(row);
                aj.push(k);
                av.push(sign * z[[i, k]]);
            }
            ai.push(row);
            aj.push(d);
            av.push(sign);
            ai.push(row);
            aj.push(d + 1 + i);
            av.push(-1.0);
        }
        ai.push(3 * i + 2);
        aj.push(d + 1 + i);
        av.push(-1.0);
        rhs.extend([set.epsilon - y[i], set.epsilon + y[i], 0.0]);
    }
    let a = CscMatrix::new_from_triplets(3 * n, nv, ai, aj, av);
    let cones = [NonnegativeConeT(3 * n)];
    let settings = DefaultSettings {
        verbose: false,
        tol_gap_abs: 1e-11,
        tol_gap_rel: 1e-11,
        tol_feas: 1e-11,
        max_iter: 500,
        ..DefaultSettings::default()
    };
    let mut solver = DefaultSolver::new(&p, &q, &a, &rhs, &cones, settings).expect("QP set-up");
    solver.solve();
    let status = solver.solution.status;
    assert!(
        matches!(status, SolverStatus::Solved | SolverStatus::AlmostSolved),
        "clarabel status {status:?}"
    );
    let x = &solver.solution.x;
    let w = Array1::from_iter(x[..d].iter().copied());
    (solver.solution.obj_val + 0.5 * m * m, w, x[d])
}

pub fn tight(c: f64, epsilon: f64, loss: Loss) -> DcdSettings {
    DcdSettings {
        c,
        epsilon,
        loss,
        tol: 1e-10,
        max_epochs: 2000,
        sweeps_per_block: 50,
        ..DcdSettings::default()
    }
}

pub fn check_against_qp(z: ArrayView2<f64>, y: ArrayView1<f64>, set: &DcdSettings) {
    let fitted = fit(z, y, set, z.nrows()).expect("fit");
    check_fit_against_qp(z, y, set, &fitted);
}

/// The checks of [`check_against_qp`] for a fit made by any solver.
pub fn check_fit_against_qp(
    z: ArrayView2<f64>,
    y: ArrayView1<f64>,
    set: &DcdSettings,
    fitted: &kernlake::solver::dcd::DcdFit,
) {
    assert!(fitted.report.converged, "gap {:?}", fitted.report.objective);
    let (qp_value, qw, qb) = qp_reference(z, y, set);
    let ours = user_primal(z, y, fitted.weights.view(), fitted.intercept, set);
    // reference library: clarabel — same optimum value within 1e-6 relative.
    assert!(
        (ours - qp_value).abs() <= 1e-6 * qp_value.abs(),
        "DCD primal {ours} vs QP {qp_value}"
    );
    // reference library: clarabel — same predictions within 1e-5 (in target sd units).
    let ref_pred = z.dot(&qw) + qb;
    let pred = fitted.predict(z);
    let worst = (&pred - &ref_pred)
        .mapv(f64::abs)
        .fold(0.0f64, |a, &b| a.max(b));
    assert!(
        worst <= 1e-5 * sd(y).max(1.0),
        "largest prediction difference {worst}"
    );
    // the report's standardized objective is the user one divided by sd²
    // (derivation in DcdSettings::in_standard_units).
    let scaled = fitted.report.objective.primal * sd(y).powi(2);
    assert!(
        (scaled - ours).abs() <= 1e-9 * ours.abs(),
        "{scaled} vs {ours}"
    );
}
