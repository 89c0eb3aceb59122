//! The primal Newton solver for the squared loss, checked against the same QP reference
//! (clarabel) as dual coordinate descent, against DCD itself, and for weak duality.

use super::qp::{check_fit_against_qp, tight};
use super::support::{ccpp, friedman_features, inputs_and_target, read_table, rff};
use kernlake::solver::dcd::{self, Loss};
use kernlake::solver::newton;

#[test]
fn newton_matches_qp_with_the_exact_hessian() {
    // dataset: Gerritsma et al. (1981), yacht hydrodynamics, 308 rows, raw linear inputs.
    let (x, y) = inputs_and_target(&read_table("yacht_hydrodynamics.txt"));
    let set = tight(0.5, 0.5, Loss::L2);
    let fitted = newton::fit(x.view(), y.view(), &set, usize::MAX).unwrap();
    // reference library: clarabel — optimum value within 1e-6 relative, predictions 1e-5.
    check_fit_against_qp(x.view(), y.view(), &set, &fitted);
    let (z, y) = friedman_features();
    let set = tight(1.0, 0.5, Loss::L2);
    let fitted = newton::fit(z.view(), y.view(), &set, usize::MAX).unwrap();
    check_fit_against_qp(z.view(), y.view(), &set, &fitted);
    // published: the generalized Newton method on this piecewise-quadratic primal ends in
    // finitely many steps (Mangasarian 2002; Keerthi & DeCoste, JMLR 2005); the bound of
    // 30 passes is ours, far above what it needs here.
    assert!(
        fitted.report.epochs <= 30,
        "{} passes",
        fitted.report.epochs
    );
}

#[test]
fn newton_with_a_sampled_hessian_reaches_the_same_optimum() {
    // published: sub-sampled Newton with exact gradients converges to the optimum (Byrd,
    // Chin, Neveitt & Nocedal, SIAM J. Optim. 2011); a quarter of the rows here.
    let (z, y) = friedman_features();
    let set = tight(1.0, 0.5, Loss::L2);
    let fitted = newton::fit(z.view(), y.view(), &set, 50).unwrap();
    check_fit_against_qp(z.view(), y.view(), &set, &fitted);
}

#[test]
fn newton_and_coordinate_descent_agree_on_ccpp_with_weak_duality_throughout() {
    // dataset: CCPP (Tüfekci, 2014), 2,000 rows, Gaussian random Fourier features
    // (Rahimi & Recht 2007), D = 300; the setting of ../shared/CHECKS.md (squared loss,
    // C = 10, epsilon = 0.05 on the standardized target).
    let (x, y) = ccpp(2_000);
    let z = rff(x.view(), 300, 3);
    let sd = super::support::sd(y.view());
    let mut set = tight(10.0, 0.05 * sd, Loss::L2);
    set.tol = 1e-9;
    let n = newton::fit(z.view(), y.view(), &set, usize::MAX).unwrap();
    assert!(n.report.converged, "{:?}", n.report.objective);
    // common practice (weak duality): every certificate has dual ≤ primal, and the
    // Newton iterates never raise the primal value (Armijo line search).
    for pair in n.report.history.windows(2) {
        assert!(pair[1].primal <= pair[0].primal * (1.0 + 1e-12));
    }
    for o in &n.report.history {
        assert!(o.dual <= o.primal * (1.0 + 1e-12), "{o:?}");
    }
    let d = dcd::fit(z.view(), y.view(), &set, 2_000).unwrap();
    let (pn, pd) = (n.predict(z.view()), d.predict(z.view()));
    let worst = (&pn - &pd).mapv(f64::abs).fold(0.0f64, |a, &b| a.max(b));
    // Both certified within 1e-9 of the optimum: predictions agree to 1e-4 sd.
    assert!(worst <= 1e-4 * sd, "largest difference {worst} (sd {sd})");
}

#[test]
fn newton_refuses_the_linear_loss_and_bad_settings() {
    let (z, y) = friedman_features();
    let set = tight(1.0, 0.5, Loss::L1);
    assert!(matches!(
        newton::fit(z.view(), y.view(), &set, 100),
        Err(kernlake::Error::InvalidParameter { .. })
    ));
    let set = tight(1.0, 0.5, Loss::L2);
    assert!(newton::fit(z.view(), y.view(), &set, 0).is_err());
}
