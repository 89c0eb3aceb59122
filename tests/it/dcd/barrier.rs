//! The barrier solver for the linear loss, checked against the same QP reference
//! (clarabel) as dual coordinate descent, and for weak duality of its certificates.

use super::qp::{check_fit_against_qp, tight};
use super::support::{friedman_features, inputs_and_target, read_table, rff, sd};
use kernlake::solver::barrier;
use kernlake::solver::dcd::{DcdFit, Loss};
use ndarray::{s, Array1, Array2, Axis};

/// common practice (weak duality): every certificate has dual ≤ primal up to rounding.
fn gap_never_negative(fit: &DcdFit) {
    for o in &fit.report.history {
        assert!(o.dual <= o.primal + 1e-12 * o.primal.abs(), "{o:?}");
    }
}

#[test]
fn barrier_matches_qp_on_yacht_friedman_and_airfoil() {
    // dataset: Gerritsma et al. (1981), yacht hydrodynamics, 308 rows, raw linear inputs.
    let (x, y) = inputs_and_target(&read_table("yacht_hydrodynamics.txt"));
    let set = tight(10.0, 0.5, Loss::L1);
    let fitted = barrier::fit(x.view(), y.view(), &set).unwrap();
    gap_never_negative(&fitted);
    // reference library: clarabel — optimum value within 1e-6 relative, predictions 1e-5·σ_y.
    check_fit_against_qp(x.view(), y.view(), &set, &fitted);

    // dataset: Friedman #1 (Friedman, Annals of Statistics 1991), 200 rows, seed 11.
    let (z, y) = friedman_features();
    let set = tight(1.0, 0.5, Loss::L1);
    let fitted = barrier::fit(z.view(), y.view(), &set).unwrap();
    gap_never_negative(&fitted);
    check_fit_against_qp(z.view(), y.view(), &set, &fitted);

    // dataset: Brooks, Pope & Marcolini, NASA RP-1218 (1989), airfoil self-noise; every
    // 6th row (251 rows), standardized inputs and their pairwise products.
    let t = read_table("airfoil_self_noise.tsv");
    let (x, y) = inputs_and_target(&t.slice(s![..;6, ..]).to_owned());
    let (n, d) = x.dim();
    let mut cols: Vec<Array1<f64>> = x.axis_iter(Axis(1)).map(|c| c.to_owned()).collect();
    for a in 0..d {
        for b in a..d {
            cols.push(&x.column(a) * &x.column(b));
        }
    }
    let z = Array2::from_shape_fn((n, cols.len()), |(i, j)| cols[j][i]);
    let set = tight(1.0, 1.0, Loss::L1);
    let fitted = barrier::fit(z.view(), y.view(), &set).unwrap();
    gap_never_negative(&fitted);
    check_fit_against_qp(z.view(), y.view(), &set, &fitted);
}

/// Measurement harness (not a check): passes of the barrier solver to a relative gap of
/// 1e-3 on CCPP with Gaussian random Fourier features, epsilon 0.1 and C on the
/// standardized target. Run with
/// `cargo test --test it dcd::barrier::passes_on_ccpp -- --ignored --nocapture`.
#[test]
#[ignore]
fn passes_on_ccpp() {
    // dataset: CCPP (Tüfekci, 2014), all 9,568 rows.
    let (x, y) = inputs_and_target(&read_table("ccpp_folds5x2_sheet1.csv"));
    let s = sd(y.view());
    for dim in [512, 1024] {
        let z = rff(x.view(), dim, 3);
        for c in [1.0, 10.0, 100.0] {
            let mut set = tight(c * s, 0.1 * s, Loss::L1);
            set.tol = 1e-3;
            set.max_epochs = 300;
            let t0 = std::time::Instant::now();
            let fitted = barrier::fit(z.view(), y.view(), &set).unwrap();
            gap_never_negative(&fitted);
            let gaps: Vec<String> = fitted
                .report
                .history
                .iter()
                .map(|o| format!("{:.1e}", o.gap))
                .collect();
            println!(
                "D={dim} C={c}: {} passes, converged {}, gap {:.2e}, {:.1}s; gaps {}",
                fitted.report.epochs,
                fitted.report.converged,
                fitted.report.objective.gap,
                t0.elapsed().as_secs_f64(),
                gaps.join(" ")
            );
        }
    }
}

#[test]
fn ccpp_with_the_default_settings_ends_within_the_tolerance() {
    // dataset: CCPP (Tüfekci, 2014), all 9,568 rows; every setting at its default
    // (median-heuristic gamma, Cherkassky & Ma C and epsilon, D = 1,024, tolerance 1e-3),
    // the linear loss, so `auto` picks the barrier solver.
    let (x, y) = kernlake::testing::ccpp();
    let model = kernlake::fit::Fitter::new()
        .with_loss(Loss::L1)
        .fit(x.view(), y.view())
        .unwrap();
    let r = &model.report;
    assert_eq!(r.method, kernlake::solver::blocks::Method::Barrier);
    // common practice (weak duality) for every pass, and the stop on the certificate.
    for h in &r.history {
        let o = h.objective;
        assert!(o.dual <= o.primal + 1e-12 * o.primal.abs(), "{o:?}");
    }
    assert!(
        r.objective.gap <= 1e-3,
        "{:?} after {} passes",
        r.objective,
        r.epochs
    );
}
