//! Linear epsilon-SVR by dual coordinate descent, checked against a general QP solver
//! (clarabel), the optimality conditions of the epsilon tube, weak duality and the
//! unit conversion of C and epsilon, on open datasets and Friedman #1.

mod barrier;
mod newton;
mod qp;
mod support;

use kernlake::solver::dcd::{
    fit, solve_block, BlockWorkspace, DcdSettings, DcdState, Loss, PrimalAccumulator,
};
use kernlake::Error;
use ndarray::{s, Array1, Array2, Axis};
use qp::{check_against_qp, tight};
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use support::{ccpp, friedman_features, inputs_and_target, read_table, rff, sd};

#[test]
fn matches_qp_on_yacht_linear_l1_and_l2() {
    // dataset: Gerritsma et al. (1981), yacht hydrodynamics, 308 rows, raw linear inputs.
    let (x, y) = inputs_and_target(&read_table("yacht_hydrodynamics.txt"));
    assert_eq!(x.dim(), (308, 6));
    check_against_qp(x.view(), y.view(), &tight(10.0, 0.5, Loss::L1));
    check_against_qp(x.view(), y.view(), &tight(0.5, 0.5, Loss::L2));
}

#[test]
fn matches_qp_on_friedman1_nonlinear_features_l2() {
    // dataset: Friedman #1 (Friedman, Annals of Statistics 1991), 200 rows, fixed seed;
    // features x, x² and sin(π x1 x2), deterministic nonlinear functions of the inputs.
    let (z, y) = friedman_features();
    check_against_qp(z.view(), y.view(), &tight(1.0, 0.5, Loss::L2));
    check_against_qp(z.view(), y.view(), &tight(1.0, 0.5, Loss::L1));
}

#[test]
fn matches_qp_on_airfoil_products_l1() {
    // dataset: Brooks, Pope & Marcolini, NASA RP-1218 (1989), airfoil self-noise; every
    // 6th row (251 rows), standardized inputs and their pairwise products.
    let t = read_table("airfoil_self_noise.tsv");
    let t = t.slice(s![..;6, ..]).to_owned();
    let (x, y) = inputs_and_target(&t);
    let (n, d) = x.dim();
    let mut cols: Vec<Array1<f64>> = x.axis_iter(Axis(1)).map(|c| c.to_owned()).collect();
    for a in 0..d {
        for b in a..d {
            cols.push(&x.column(a) * &x.column(b));
        }
    }
    let z = Array2::from_shape_fn((n, cols.len()), |(i, j)| cols[j][i]);
    check_against_qp(z.view(), y.view(), &tight(1.0, 1.0, Loss::L1));
}

#[test]
fn epsilon_tube_conditions_at_the_optimum() {
    // dataset: Yeh (1998) concrete strength, first 300 rows, D = 60 Gaussian features.
    let t = read_table("concrete_yeh1998.csv");
    let (x, y) = inputs_and_target(&t.slice(s![..300, ..]).to_owned());
    let z = rff(x.view(), 60, 3);
    let set = tight(5.0, 3.0, Loss::L1);
    let fitted = fit(z.view(), y.view(), &set, 300).unwrap();
    assert!(fitted.report.converged);
    let r = &y - &fitted.predict(z.view());
    let margin = 1e-6 * sd(y.view());
    let (mut inside, mut outside) = (0, 0);
    for (ri, bi) in r.iter().zip(&fitted.beta) {
        if ri.abs() < set.epsilon - margin {
            // common practice: strictly inside the tube ⇒ β = 0.
            assert_eq!(*bi, 0.0, "residual {ri} inside the tube but β = {bi}");
            inside += 1;
        } else if ri.abs() > set.epsilon + margin {
            // common practice: strictly outside ⇒ |β| = C, with the residual's sign (L1).
            assert!(
                (bi - set.c * ri.signum()).abs() <= 1e-9 * set.c,
                "residual {ri}, β = {bi}"
            );
            outside += 1;
        } else {
            // common practice: on the edge, |β| ≤ C.
            assert!(bi.abs() <= set.c * (1.0 + 1e-12));
        }
    }
    assert!(
        inside > 10 && outside > 10,
        "inside {inside}, outside {outside}"
    );
}

#[test]
fn huge_epsilon_gives_constant_model() {
    // common practice: when every target lies inside the tube around the mean, the
    // minimiser is w = 0 and the prediction is that constant.
    let (x, y) = ccpp(400);
    let z = rff(x.view(), 50, 5);
    let m = y.mean().unwrap();
    let spread = y.iter().map(|v| (v - m).abs()).fold(0.0, f64::max);
    let fitted = fit(
        z.view(),
        y.view(),
        &tight(10.0, 1.01 * spread, Loss::L1),
        128,
    )
    .unwrap();
    assert!(fitted.weights.iter().all(|w| *w == 0.0));
    assert!(fitted.beta.iter().all(|b| *b == 0.0));
    assert!((fitted.intercept - m).abs() <= 1e-12 * m.abs());
}

#[test]
fn gap_falls_to_tol_with_weak_duality_throughout() {
    // published: Ho & Lin (JMLR 2012) — each coordinate step minimises the dual exactly,
    // so the dual never gets worse; weak duality P ≥ D holds at every iterate; the gap
    // reaches any tolerance.
    let (x, y) = ccpp(600);
    let z = rff(x.view(), 100, 7);
    for loss in [Loss::L1, Loss::L2] {
        let set = DcdSettings {
            c: 10.0,
            epsilon: 2.0,
            loss,
            tol: 1e-7,
            max_epochs: 1000,
            sweeps_per_block: 50,
            ..DcdSettings::default()
        };
        let fitted = fit(z.view(), y.view(), &set, 600).unwrap();
        let h = &fitted.report.history;
        assert!(
            fitted.report.converged && h.last().unwrap().gap <= 1e-7,
            "{loss:?}: {:?}",
            h.last()
        );
        assert!(h.len() > 2, "{loss:?} converged too fast to test anything");
        for (k, o) in h.iter().enumerate() {
            assert!(
                o.primal >= o.dual - 1e-12 * o.primal.abs(),
                "{loss:?} epoch {k}: {o:?}"
            );
            if k > 0 {
                assert!(
                    o.dual >= h[k - 1].dual - 1e-12 * o.primal.abs(),
                    "{loss:?} epoch {k}"
                );
            }
        }
        assert!(
            h[0].gap > 1e-4,
            "{loss:?}: the first epoch should not already be optimal"
        );
    }
}

#[test]
fn incremental_dual_terms_match_a_recomputation() {
    // published: Ho & Lin (JMLR 2012) dual D(β) = −(½‖Σβ_i z_i‖² − yᵀβ + ε‖β‖₁ + (λ/2)‖β‖²),
    // recomputed from β after driving the state block by block.
    let (x, y) = ccpp(500);
    let z = rff(x.view(), 40, 9);
    let ys = (&y - y.mean().unwrap()) / sd(y.view());
    for loss in [Loss::L1, Loss::L2] {
        let set = DcdSettings {
            c: 2.0,
            epsilon: 0.05,
            loss,
            ..DcdSettings::default()
        };
        let mut state = DcdState::new(40, 500);
        let mut rng = ChaCha8Rng::seed_from_u64(1);
        let mut ws = BlockWorkspace::new();
        let rows: Vec<usize> = (0..500).collect();
        for b in [3, 0, 4, 1, 2, 3] {
            let r = b * 100..(b + 1) * 100;
            let st = solve_block(
                &mut state,
                z.slice(s![r.clone(), ..]),
                ys.slice(s![r.clone()]),
                &rows[r],
                &set,
                &mut rng,
                &mut ws,
            );
            assert!(st.updates > 0);
        }
        let beta = Array1::from(state.beta.clone());
        let mut w = z.t().dot(&beta);
        let bias = beta.sum();
        assert!((&w - &state.w.slice(s![..40]))
            .iter()
            .all(|e| e.abs() < 1e-10));
        assert!((bias - state.w[40]).abs() < 1e-10);
        w.push(Axis(0), ndarray::aview0(&bias)).unwrap();
        let lambda = if loss == Loss::L1 { 0.0 } else { 0.5 / set.c };
        let dual = -(0.5 * w.dot(&w) - ys.dot(&beta)
            + set.epsilon * beta.mapv(f64::abs).sum()
            + 0.5 * lambda * beta.dot(&beta));
        let got = state.dual_value(&set);
        assert!(
            (got - dual).abs() <= 1e-10 * dual.abs(),
            "{loss:?}: {got} vs {dual}"
        );
        if loss == Loss::L1 {
            assert!(state.beta.iter().all(|b| b.abs() <= set.c));
        }
        let mut acc = PrimalAccumulator::new();
        acc.add_block(&state, z.view(), ys.view(), &set);
        let o = acc.finish(&state, &set);
        assert!(o.primal >= o.dual);
    }
}

#[test]
fn scaling_the_target_maps_predictions_exactly() {
    // published (derivation in DcdSettings::in_standard_units): the user-unit objective
    // for target a·y + c is a² times the standardized one when ε scales by a and C by a
    // (L1) or stays (L2), so the predictions map exactly.
    let (x, y) = ccpp(500);
    let z = rff(x.view(), 80, 13);
    let y2 = y.mapv(|v| 1000.0 * v + 7.0);
    for loss in [Loss::L1, Loss::L2] {
        let set = DcdSettings {
            c: 3.0,
            epsilon: 2.0,
            loss,
            tol: 1e-12,
            max_epochs: 3000,
            sweeps_per_block: 200,
            ..DcdSettings::default()
        };
        let set2 = DcdSettings {
            c: if loss == Loss::L1 {
                1000.0 * set.c
            } else {
                set.c
            },
            epsilon: 1000.0 * set.epsilon,
            ..set.clone()
        };
        let f1 = fit(z.view(), y.view(), &set, 500).unwrap();
        let f2 = fit(z.view(), y2.view(), &set2, 500).unwrap();
        assert!(f1.report.converged && f2.report.converged);
        let p1 = f1.predict(z.view()).mapv(|v| 1000.0 * v + 7.0);
        let p2 = f2.predict(z.view());
        for (a, b) in p1.iter().zip(p2.iter()) {
            assert!((a - b).abs() <= 1e-8 * b.abs(), "{loss:?}: {a} vs {b}");
        }
    }
    // the conversion itself.
    let l1 = DcdSettings {
        c: 4.0,
        epsilon: 0.6,
        loss: Loss::L1,
        ..DcdSettings::default()
    }
    .in_standard_units(2.0);
    assert_eq!((l1.c, l1.epsilon), (2.0, 0.3));
    let l2 = DcdSettings {
        c: 4.0,
        epsilon: 0.6,
        loss: Loss::L2,
        ..DcdSettings::default()
    }
    .in_standard_units(2.0);
    assert_eq!((l2.c, l2.epsilon), (4.0, 0.3));
}

#[test]
fn deterministic_and_independent_of_block_size() {
    // common practice: a fixed seed reproduces the fit bit for bit. The primal is
    // 1-strongly convex in (w, b), so P(w) − P* ≥ ½‖w − w*‖² and a certified gap bounds the
    // distance to the unique optimum: ‖w − w*‖ ≤ √(2·gap·P); block sizes and seeds change
    // only the path, and predictions differ by at most that distance times ‖(z, 1)‖.
    let (x, y) = ccpp(700);
    let z = rff(x.view(), 60, 17);
    let zmax = z
        .rows()
        .into_iter()
        .map(|r| (r.dot(&r) + 1.0).sqrt())
        .fold(0.0f64, f64::max);
    let radius = |f: &kernlake::solver::dcd::DcdFit| {
        let o = f.report.objective;
        (2.0 * o.gap * o.primal.abs()).sqrt()
    };
    for loss in [Loss::L1, Loss::L2] {
        let set = DcdSettings {
            c: if loss == Loss::L1 { 1.0 } else { 10.0 },
            epsilon: 2.0,
            loss,
            tol: 1e-6,
            max_epochs: 2000,
            sweeps_per_block: 50,
            ..DcdSettings::default()
        };
        let a = fit(z.view(), y.view(), &set, 350).unwrap();
        let b = fit(z.view(), y.view(), &set, 350).unwrap();
        assert_eq!(a, b);
        assert!(a.report.converged);
        let reference = a.predict(z.view());
        for (block, seed) in [(700, 0), (233, 5)] {
            let other = fit(
                z.view(),
                y.view(),
                &DcdSettings {
                    seed,
                    ..set.clone()
                },
                block,
            )
            .unwrap();
            assert!(other.report.converged);
            let diff = (&other.predict(z.view()) - &reference)
                .mapv(f64::abs)
                .fold(0.0f64, |m, &v| m.max(v));
            // standardized units × sd gives target units.
            let bound = (radius(&a) + radius(&other)) * zmax * sd(y.view());
            assert!(diff <= bound, "{loss:?} block {block}: {diff} > {bound}");
            assert!(
                diff > 0.0,
                "different paths should not agree to the last bit"
            );
        }
    }
}

#[test]
fn bad_input_gives_typed_errors() {
    // common practice: data problems are reported, not panicked on.
    let (x, y) = ccpp(50);
    let z = rff(x.view(), 10, 1);
    let ok = DcdSettings::default();
    for bad in [
        DcdSettings {
            c: 0.0,
            ..ok.clone()
        },
        DcdSettings {
            c: -1.0,
            ..ok.clone()
        },
        DcdSettings {
            c: f64::NAN,
            ..ok.clone()
        },
        DcdSettings {
            epsilon: -0.1,
            ..ok.clone()
        },
        DcdSettings {
            max_epochs: 0,
            ..ok.clone()
        },
    ] {
        assert!(matches!(
            fit(z.view(), y.view(), &bad, 10),
            Err(Error::InvalidParameter { .. })
        ));
    }
    assert!(matches!(
        fit(z.view(), y.view(), &ok, 0),
        Err(Error::InvalidParameter { .. })
    ));
    let mut zn = z.clone();
    zn[[7, 3]] = f64::NAN;
    assert!(matches!(
        fit(zn.view(), y.view(), &ok, 10),
        Err(Error::NonFinite { row: 7, column: 3 })
    ));
    let mut yn = y.clone();
    yn[4] = f64::INFINITY;
    assert!(matches!(
        fit(z.view(), yn.view(), &ok, 10),
        Err(Error::NonFiniteTarget { row: 4 })
    ));
    let empty = Array2::<f64>::zeros((0, 10));
    assert!(matches!(
        fit(empty.view(), Array1::zeros(0).view(), &ok, 10),
        Err(Error::NoRows(_))
    ));
    // a constant target is not an error: the constant model.
    let c = fit(z.view(), Array1::from_elem(50, 3.5).view(), &ok, 10).unwrap();
    assert!(c.predict(z.view()).iter().all(|p| *p == 3.5));
}

#[test]
#[should_panic(expected = "targets")]
fn shape_mismatch_panics() {
    let z = Array2::<f64>::zeros((5, 3));
    let _ = fit(
        z.view(),
        Array1::zeros(4).view(),
        &DcdSettings::default(),
        5,
    );
}
