//! The audit: exact kernel machine (SMO) against approximate ones, on open datasets.

use crate::common::{self, ccpp, write_parts};
use kernlake::audit::plot::render_svg;
use kernlake::audit::{audit, audit_with_progress, map_name, AuditOptions, AuditReport};
use kernlake::features::{FeatureMap, Landmarks, MapKind, NystromMap};
use kernlake::kernel::Kernel;
use kernlake::scale::Standardizer;
use kernlake::solver::dcd::{self, DcdSettings, Loss};
use kernlake::solver::smo::{self, SmoSettings};
use kernlake::Error;
use ndarray::{s, Array1, Array2, Axis};

/// CCPP rows `lo..hi` (dataset: Tüfekci 2014).
fn ccpp_rows(lo: usize, hi: usize) -> (Array2<f64>, Array1<f64>) {
    let (_, x, y) = ccpp();
    (
        x.slice(s![lo..hi, ..]).to_owned(),
        y.slice(s![lo..hi]).to_owned(),
    )
}

fn sd(y: &Array1<f64>) -> f64 {
    let m = y.mean().unwrap();
    (y.mapv(|v| (v - m).powi(2)).mean().unwrap()).sqrt()
}

/// Nyström with every fit row as a landmark reproduces the kernel matrix exactly
/// (published: Williams & Seeger, NIPS 2001), so a linear epsilon-SVR with the L1 loss on
/// those features (published: Ho & Lin, JMLR 2012, dual with λ = 0, U = C) solves the
/// same problem as exact SVR by SMO — except for the bias. DCD's bias is an appended
/// constant feature 1 and is penalised by ½b²; SMO's is free. We make the penalised bias
/// nearly free by rescaling: features z/s and C·s² give the kernel problem exactly, with
/// the bias penalty ½(b/s)² (divide the objective by s²). The bias's dual constraint
/// Σβ = 0 then becomes Σβ = b/s² (b in target sd, the target being centred): with
/// s = 30 and |b| well below one sd, the dual mass moved is below 1/900 ≈ 1.1e-3 and the
/// predictions move by about that times a kernel value ≤ 1, in practice far less. Both
/// solvers run to tight tolerances (SMO 1e-8 in target units; DCD 5,000 epochs, relative
/// gap of a few 1e-6), so what is left is the agreement of the two formulations: 1e-3 of
/// the target's sd.
#[test]
fn nystrom_on_every_row_with_l1_dcd_matches_smo() {
    let (x, y) = ccpp_rows(0, 400);
    let (n_fit, s_scale) = (300, 30.0);
    let scaler = Standardizer::fit(x.slice(s![..n_fit, ..]));
    let mut xs = x.clone();
    scaler.apply(xs.view_mut());
    let (xf, xc) = (xs.slice(s![..n_fit, ..]), xs.slice(s![n_fit.., ..]));
    let yf = y.slice(s![..n_fit]);
    let target_sd = sd(&yf.to_owned());
    let kernel = Kernel::gaussian(0.5).unwrap();
    let (c, eps) = (10.0, 0.5);

    let map = NystromMap::new(kernel, xf, n_fit, Landmarks::Uniform, 1e-12, 1).unwrap();
    assert_eq!(map.output_dim(), n_fit, "every row is a landmark");
    let z = map.transform(xf) / s_scale;
    let settings = DcdSettings {
        c: c * s_scale * s_scale,
        epsilon: eps,
        loss: Loss::L1,
        shrinking: true,
        sweeps_per_block: 50,
        tol: 1e-6,
        max_epochs: 5_000,
        seed: 3,
    };
    let approx = dcd::fit(z.view(), yf, &settings, n_fit).unwrap();
    let p_approx = approx.predict((map.transform(xc) / s_scale).view());

    let exact = smo::fit(
        xf,
        yf,
        kernel,
        &SmoSettings {
            c,
            epsilon: eps,
            tol: 1e-8,
            ..SmoSettings::default()
        },
    )
    .unwrap();
    assert!(exact.report.converged);
    let p_exact = exact.model.predict(xc);
    let diff = common::rmse(&p_approx, &p_exact) / target_sd;
    eprintln!(
        "rms difference / sd = {diff:.3e}; dcd epochs {} gap {:.2e}",
        approx.report.epochs, approx.report.objective.gap
    );
    // published: Williams & Seeger 2001 (exact reproduction) + Ho & Lin 2012; tolerance
    // reasoned above (bias nearly free at s = 30).
    assert!(
        diff <= 1e-3,
        "Nyström+DCD and SMO differ by {diff:.3e} target sd"
    );
}

/// The squared loss (issue 15's check): Nyström with every fit row as a landmark gives
/// the kernel matrix exactly (published: Williams & Seeger, NIPS 2001), so the primal
/// Newton fit of the squared-loss linear epsilon-SVR on those features solves the
/// exact squared-loss machine's problem (Ho & Lin, JMLR 2012, §2) but for the penalised
/// bias, made nearly free by the same rescaling as in the linear-loss test above
/// (features z/s, C·s²: the dual term ‖β‖²/(4C) is unchanged by it). Both run to tight
/// tolerances; they must agree within 1e-3 of the target's sd.
#[test]
fn nystrom_on_every_row_with_squared_loss_newton_matches_smo() {
    let (x, y) = ccpp_rows(0, 400);
    let (n_fit, s_scale) = (300, 30.0);
    let scaler = Standardizer::fit(x.slice(s![..n_fit, ..]));
    let mut xs = x.clone();
    scaler.apply(xs.view_mut());
    let (xf, xc) = (xs.slice(s![..n_fit, ..]), xs.slice(s![n_fit.., ..]));
    let yf = y.slice(s![..n_fit]);
    let target_sd = sd(&yf.to_owned());
    let kernel = Kernel::gaussian(0.5).unwrap();
    let (c, eps) = (0.5, 0.5);

    let map = NystromMap::new(kernel, xf, n_fit, Landmarks::Uniform, 1e-12, 1).unwrap();
    assert_eq!(map.output_dim(), n_fit, "every row is a landmark");
    let z = map.transform(xf) / s_scale;
    let settings = DcdSettings {
        c: c * s_scale * s_scale,
        epsilon: eps,
        loss: Loss::L2,
        tol: 1e-10,
        max_epochs: 200,
        ..DcdSettings::default()
    };
    let approx = kernlake::solver::newton::fit(z.view(), yf, &settings, n_fit).unwrap();
    let p_approx = approx.predict((map.transform(xc) / s_scale).view());

    let exact = smo::fit(
        xf,
        yf,
        kernel,
        &SmoSettings {
            c,
            loss: Loss::L2,
            epsilon: eps,
            tol: 1e-8,
            ..SmoSettings::default()
        },
    )
    .unwrap();
    assert!(exact.report.converged);
    let p_exact = exact.model.predict(xc);
    let diff = common::rmse(&p_approx, &p_exact) / target_sd;
    eprintln!(
        "rms difference / sd = {diff:.3e}; newton passes {} gap {:.2e}",
        approx.report.epochs, approx.report.objective.gap
    );
    // published: Williams & Seeger 2001 (exact reproduction) + Ho & Lin 2012; tolerance
    // from issue 15 (bias nearly free at s = 30).
    assert!(
        diff <= 1e-3,
        "Nyström+Newton and SMO differ by {diff:.3e} target sd"
    );
}

/// The audit's default loss is the fit's (squared), every machine of a small CCPP audit
/// (dataset: Tüfekci 2014) reaches its tolerance (Newton with every row in the Hessian
/// ends in finitely many passes: Mangasarian 2002, Keerthi & DeCoste 2005), the report
/// says so in text and JSON, and `--loss l1` keeps the classic machine.
#[test]
fn default_audit_uses_the_squared_loss_and_every_machine_converges() {
    let (x, y) = ccpp_rows(2_000, 2_600);
    let opts = AuditOptions {
        dims: vec![64, 256],
        seed: 3,
        ..AuditOptions::default()
    };
    assert_eq!(opts.loss, Loss::L2);
    let r = audit(x.view(), y.view(), &opts).unwrap();
    let text = kernlake::audit::render_audit(&r);
    eprint!("{text}");
    assert_eq!(r.loss, Loss::L2);
    assert!(
        r.exact.converged && r.exact.stopped.is_none(),
        "{:?}",
        r.exact
    );
    for row in &r.rows {
        assert!(row.converged && row.stopped.is_none(), "{row:?}");
        assert!(row.gap <= opts.linear_tol, "{row:?}");
    }
    assert!(text.contains("squared (l2)") && text.contains("every machine reached"));
    let v: serde_json::Value = serde_json::to_value(&r).unwrap();
    assert_eq!(v["loss"], "l2");
    assert!(v["rows"][0]["stopped"].is_null() && v["rows"][0]["dim"].is_u64());
    // common practice: with squared residuals beyond the tube the exact machine is a
    // better fit than predicting the mean on held-out rows
    assert!(r.exact.check.rmse < r.target_sd);

    // the linear loss, with a pass limit too small to reach the gap: the table says which
    // machines stopped and why
    let l1 = AuditOptions {
        loss: Loss::L1,
        linear_passes: 1,
        ..opts.clone()
    };
    let r = audit(x.view(), y.view(), &l1).unwrap();
    let text = kernlake::audit::render_audit(&r);
    assert_eq!(r.loss, Loss::L1);
    let stopped: Vec<_> = r.rows.iter().filter(|row| !row.converged).collect();
    assert!(!stopped.is_empty(), "{text}");
    for row in stopped {
        let why = row.stopped.as_deref().unwrap();
        assert!(why.contains("limit of 1 passes"), "{why}");
        assert!(text.contains(why), "{text}");
    }
    assert!(text.contains("did not reach their tolerance"), "{text}");
}

/// CCPP (dataset: Tüfekci 2014): exact Gaussian-kernel SVR on a 5,000-row fit part, and
/// approximate machines for D = 128, 256, 512 (with the L1 loss and C ≈ 30 target sd the
/// linear solver needs its full 100 epochs, so here the list stops at 512 and the maps at
/// Fourier and Nyström to keep the run time reasonable; the default list 256…4,096 runs
/// in `ccpp_default_d_list_agreement_improves_with_d` on a smaller fit part).
#[test]
fn ccpp_exact_accuracy_and_agreement_improves_with_d() {
    let (x, y) = ccpp_rows(0, 6_250);
    let opts = AuditOptions {
        maps: vec![MapKind::Fourier, MapKind::Nystrom],
        dims: vec![128, 256, 512],
        loss: Loss::L1,
        seed: 5,
        ..AuditOptions::default()
    };
    let r = audit(x.view(), y.view(), &opts).unwrap();
    eprint!("{}", kernlake::audit::render_audit(&r));
    assert_eq!((r.rows_fit, r.rows_check), (5_000, 1_250));
    // dataset: Tüfekci 2014 — exact Gaussian-kernel machines reach about 3.7–3.8 MW on
    // held-out rows (CHECKS.md, measured for kernel ridge; published best RMSE 3.787 in
    // the paper's 5×2 CV, from memory); 3.95 MW leaves room for the epsilon-SVR loss and
    // default (not tuned) gamma, C and epsilon.
    assert!(r.exact.converged);
    assert!(
        r.exact.check.rmse <= 3.95,
        "exact RMSE {} MW",
        r.exact.check.rmse
    );
    // Slack for "monotone within noise": each D is one seeded draw, so a doubling of D
    // (expected error factor 1/√2, published: Rahimi & Recht 2007) may be undone by the
    // draw's spread; allow a 15% rise. Below 0.01 sd the figures are set by the solvers'
    // stopping rules (SMO stops at a violation of 1e-3 sd, DCD at a finite duality gap,
    // and DCD's bias is penalised), not by D, so rises within 0.01 sd are also allowed.
    let floor = 0.01;
    for m in [MapKind::Fourier, MapKind::Nystrom] {
        let a: Vec<f64> = r
            .rows
            .iter()
            .filter(|row| row.map == m)
            .map(|row| row.agreement)
            .collect();
        for w in a.windows(2) {
            assert!(
                w[1] <= 1.15 * w[0] + floor,
                "{}: agreement rose from {} to {}",
                map_name(m),
                w[0],
                w[1]
            );
        }
        assert!(a[2] <= a[0] + floor, "{}: agreement {:?}", map_name(m), a);
        // published: Rahimi & Recht 2007, Drineas & Mahoney 2005: the kernel matrix error
        // itself falls with D (no solver involved)
        let k: Vec<f64> = r
            .rows
            .iter()
            .filter(|row| row.map == m)
            .map(|row| row.kernel_error)
            .collect();
        assert!(
            k[2] < k[1] && k[1] < k[0],
            "{}: kernel error {:?}",
            map_name(m),
            k
        );
    }
    // Fourier agreement is well above the floor at D = 128 (≈ 0.05–0.07 sd, measured
    // here), so there it must fall clearly over 4× more features (expected factor 1/2 for
    // the map's error, published: Rahimi & Recht 2007; accept 0.8 for the solver floor).
    let f: Vec<f64> = r
        .rows
        .iter()
        .filter(|row| row.map == MapKind::Fourier)
        .map(|row| row.agreement)
        .collect();
    assert!(f[2] <= 0.8 * f[0], "fourier agreement {f:?}");
}

/// CCPP (dataset: Tüfekci 2014, see tests/data/README.md) on the audit's default D list
/// (256, 512, 1,024, 2,048, 4,096), with a 2,000-row fit part and a 2,000-row check
/// part so that the whole list runs in seconds. Random Fourier features approximate the
/// kernel with an error falling like 1/√D (published: Rahimi & Recht, NIPS 2007, claim 1)
/// and orthogonal random features with no larger an error (published: Yu et al.,
/// NIPS 2016), so the machines fitted on them agree better with the exact
/// machine as D grows.
///
/// C is given, 50 MW (about 3 target sd), instead of the default rule's ≈ 30 sd: with
/// that C the linear solver converges within its default 100 epochs at every D, so its
/// stopping rule stays below the maps' error (measured here with the default C: no D
/// reached the duality gap in 100 epochs and the run took over 90 s).
#[test]
fn ccpp_default_d_list_agreement_improves_with_d() {
    let (x, y) = ccpp_rows(5_000, 9_000);
    let opts = AuditOptions {
        maps: vec![MapKind::Fourier, MapKind::Orthogonal],
        loss: Loss::L1,
        split: 0.5,
        c: Some(50.0),
        seed: 7,
        ..AuditOptions::default()
    };
    // the issue's default list (common practice: the audit's documented default)
    assert_eq!(opts.dims, vec![256, 512, 1_024, 2_048, 4_096]);
    let r = audit(x.view(), y.view(), &opts).unwrap();
    eprint!("{}", kernlake::audit::render_audit(&r));
    assert_eq!((r.rows_fit, r.rows_check), (2_000, 2_000));
    assert!(r.exact.converged);
    for m in [MapKind::Fourier, MapKind::Orthogonal] {
        let rows: Vec<_> = r.rows.iter().filter(|row| row.map == m).collect();
        assert_eq!(rows.len(), 5);
        assert!(rows.iter().all(|row| row.converged), "{}", map_name(m));
        let a: Vec<f64> = rows.iter().map(|row| row.agreement).collect();
        let k: Vec<f64> = rows.iter().map(|row| row.kernel_error).collect();
        eprintln!("{}: agreement {a:?} kernel error {k:?}", map_name(m));
        // published: Rahimi & Recht 2007 (and Yu et al. 2016) — the kernel error on the
        // 500 × 500 check block falls with every doubling of D (expected factor 1/√2;
        // averaged over 250,000 entries, one draw's spread is far smaller than that).
        for w in k.windows(2) {
            assert!(w[1] < w[0], "{}: kernel error {k:?}", map_name(m));
        }
        // published: Rahimi & Recht 2007 — agreement, RMS(approximate − exact) / sd.
        // Each D is one seeded draw, so one doubling (expected factor ≤ 1/√2 for the map's
        // part) may be undone by the draw's spread: allow a 10% rise per doubling
        // (measured here: at most +1%). Over a 4× step (expected factor 1/2 for the map's
        // part) it must fall, and over the whole 16× list by at least 30% (measured here:
        // about 50%; the remainder is the two solvers' stopping rules and DCD's penalised
        // bias, which do not shrink with D).
        for w in a.windows(2) {
            assert!(w[1] <= 1.1 * w[0], "{}: agreement {a:?}", map_name(m));
        }
        for w in a.windows(3) {
            assert!(w[2] < w[0], "{}: agreement {a:?}", map_name(m));
        }
        assert!(a[4] <= 0.7 * a[0], "{}: agreement {a:?}", map_name(m));
    }
}

fn small_report() -> AuditReport {
    // dataset: Tüfekci 2014 (CCPP), 500 rows
    let (x, y) = ccpp_rows(1_000, 1_500);
    let opts = AuditOptions {
        dims: vec![32, 64, 128],
        seed: 2,
        ..AuditOptions::default()
    };
    audit(x.view(), y.view(), &opts).unwrap()
}

/// Checks that every tag of `text` is closed in order (common practice: XML
/// well-formedness, reduced to tag nesting and unescaped '<' / '&' in text).
fn assert_well_formed(text: &str) {
    let mut stack: Vec<String> = Vec::new();
    let mut rest = text;
    while let Some(open) = rest.find('<') {
        let between = &rest[..open];
        assert!(
            !between.contains('&') && !between.contains('>'),
            "stray text: {between}"
        );
        let close = rest[open..].find('>').expect("unterminated tag") + open;
        let tag = &rest[open + 1..close];
        rest = &rest[close + 1..];
        if tag.starts_with('?') || tag.ends_with('/') {
            continue;
        }
        if let Some(name) = tag.strip_prefix('/') {
            assert_eq!(stack.pop().as_deref(), Some(name), "mismatched </{name}>");
        } else {
            stack.push(tag.split_whitespace().next().unwrap().to_string());
        }
    }
    assert!(stack.is_empty(), "unclosed tags: {stack:?}");
}

#[test]
fn svg_and_json_hold_every_map_and_row() {
    let r = small_report();
    // common practice: Gaussian kernel → fourier, orthogonal and nystrom all apply
    assert_eq!(r.rows.len(), 3 * 3);
    let svg = render_svg(&r);
    assert!(svg.starts_with("<?xml") && svg.trim_end().ends_with("</svg>"));
    assert_well_formed(&svg);
    for m in [MapKind::Fourier, MapKind::Orthogonal, MapKind::Nystrom] {
        let class = format!(r#"<polyline class="map-{}""#, map_name(m));
        // one line per map in each of the two panels (agreement, RMSE)
        assert_eq!(svg.matches(&class).count(), 2, "{class}");
        assert!(svg.contains(map_name(m)), "legend lacks {}", map_name(m));
    }
    assert_eq!(
        svg.matches(r#"class="exact""#).count(),
        1,
        "exact reference line"
    );
    assert_eq!(
        svg.matches(r#"class="tolerance""#).count(),
        1,
        "tolerance line"
    );
    assert!(svg.contains("log2") && svg.contains("RMSE"), "axis labels");

    let json = serde_json::to_string(&r).unwrap();
    let v: serde_json::Value = serde_json::from_str(&json).unwrap();
    let rows = v["rows"].as_array().unwrap();
    assert_eq!(rows.len(), r.rows.len());
    for (jr, rr) in rows.iter().zip(&r.rows) {
        assert_eq!(jr["dim"].as_u64().unwrap() as usize, rr.dim);
        assert_eq!(jr["agreement"].as_f64().unwrap(), rr.agreement);
        assert!(jr["check"]["rmse"].as_f64().unwrap().is_finite());
    }
    assert!(v["exact"]["check"]["rmse"].as_f64().unwrap() > 0.0);
    // the recommendation is the smallest D within tolerance (definition of the report)
    for rec in &r.recommended {
        let within: Vec<usize> = r
            .rows
            .iter()
            .filter(|row| row.map == rec.map && row.agreement <= r.agree)
            .map(|row| row.dim)
            .collect();
        assert_eq!(rec.dim, within.iter().copied().min());
    }
}

#[test]
fn same_seed_same_report_whatever_the_threads() {
    // common practice (project rule): bit-identical results across thread counts
    let (x, y) = ccpp_rows(2_000, 2_300);
    let run = |threads| {
        let opts = AuditOptions {
            maps: vec![MapKind::Orthogonal, MapKind::Nystrom],
            dims: vec![64],
            threads,
            seed: 9,
            ..AuditOptions::default()
        };
        let r = audit(x.view(), y.view(), &opts).unwrap();
        (
            r.exact.check,
            r.rows
                .iter()
                .map(|row| (row.check, row.agreement, row.kernel_error))
                .collect::<Vec<_>>(),
        )
    };
    assert_eq!(run(1), run(2));
}

#[test]
fn progress_counts_every_machine_once_and_rows_keep_their_order() {
    // common practice (the contract of a progress report): it starts at zero, rises by
    // one per machine, and ends at the total; the rows come in map-then-D order however
    // the machines were scheduled. Data: CCPP (Tüfekci 2014), 400 rows.
    let (x, y) = ccpp_rows(4_000, 4_400);
    let opts = AuditOptions {
        maps: vec![MapKind::Fourier, MapKind::Nystrom],
        dims: vec![64, 16, 32],
        threads: 2,
        ..AuditOptions::default()
    };
    let seen = std::sync::Mutex::new(Vec::new());
    let r = audit_with_progress(x.view(), y.view(), &opts, &|done, total| {
        seen.lock().unwrap().push((done, total));
    })
    .unwrap();
    let seen = seen.into_inner().unwrap();
    let total = 2 * 3 + 1;
    assert_eq!(seen.len(), total + 1, "{seen:?}");
    for (k, &(done, t)) in seen.iter().enumerate() {
        assert_eq!((done, t), (k, total), "{seen:?}");
    }
    let order: Vec<(MapKind, usize)> = r.rows.iter().map(|r| (r.map, r.dim)).collect();
    assert_eq!(
        order,
        [
            (MapKind::Fourier, 16),
            (MapKind::Fourier, 32),
            (MapKind::Fourier, 64),
            (MapKind::Nystrom, 16),
            (MapKind::Nystrom, 32),
            (MapKind::Nystrom, 64)
        ]
    );
    assert!(
        r.notes.iter().any(|n| n.contains("at a time")),
        "{:?}",
        r.notes
    );
}

#[test]
fn bad_input_gives_typed_errors_or_notes() {
    let (x, y) = ccpp_rows(3_000, 3_200);
    // a cache too small for two kernel rows: the exact solver refuses (common practice)
    let tiny = AuditOptions {
        cache_bytes: 100,
        dims: vec![16],
        ..AuditOptions::default()
    };
    match audit(x.view(), y.view(), &tiny) {
        Err(Error::InvalidParameter { name, .. }) => assert_eq!(name, "cache"),
        other => panic!("expected a cache error, got {other:?}"),
    }
    // orthogonal features with a Laplacian kernel do not exist (Yu et al., NIPS 2016)
    let lap = AuditOptions {
        kernel: kernlake::kernel::KernelKind::Laplacian,
        maps: vec![MapKind::Orthogonal],
        ..AuditOptions::default()
    };
    assert!(matches!(
        audit(x.view(), y.view(), &lap),
        Err(Error::InvalidParameter { .. })
    ));
    // one row cannot be split
    assert!(matches!(
        audit(x.slice(s![..1, ..]), y.slice(s![..1]), &tiny),
        Err(Error::NoRows(_))
    ));
    // non-finite input
    let mut bad = x.clone();
    bad[[7, 2]] = f64::NAN;
    assert!(matches!(
        audit(bad.view(), y.view(), &tiny),
        Err(Error::NonFinite { .. })
    ));

    // duplicated rows: every row twice; Nyström keeps distinct landmarks only
    let x2 = ndarray::concatenate(Axis(0), &[x.view(), x.view()]).unwrap();
    let y2 = ndarray::concatenate(Axis(0), &[y.view(), y.view()]).unwrap();
    let opts = AuditOptions {
        maps: vec![MapKind::Nystrom],
        dims: vec![400],
        ..AuditOptions::default()
    };
    let r = audit(x2.view(), y2.view(), &opts).unwrap();
    assert!(
        r.notes.iter().any(|n| n.contains("repeat")),
        "{:?}",
        r.notes
    );
    // common practice: at most 200 distinct rows exist, so at most 200 features
    assert!(r.rows[0].features <= 200, "features {}", r.rows[0].features);

    // constant target: every machine predicts the constant (common practice: SVR with
    // a constant target has all coefficients zero)
    let yc = Array1::from_elem(x.nrows(), 450.0);
    let opts = AuditOptions {
        dims: vec![32],
        ..AuditOptions::default()
    };
    let r = audit(x.view(), yc.view(), &opts).unwrap();
    assert!(
        r.notes.iter().any(|n| n.contains("constant")),
        "{:?}",
        r.notes
    );
    assert!(
        r.exact.check.rmse <= 1e-9 * 450.0,
        "exact rmse {}",
        r.exact.check.rmse
    );
    for row in &r.rows {
        assert!(
            row.check.rmse <= 1e-9 * 450.0 && row.agreement <= 1e-9 * 450.0,
            "{row:?}"
        );
    }
}

/// The real binary on a small Parquet folder (dataset: Tüfekci 2014, CCPP rows).
#[test]
fn cli_audit_on_parquet_and_model_audit() {
    use std::process::Command;
    let dir = tempfile::tempdir().unwrap();
    let lake = dir.path().join("lake");
    let (header, x, y) = ccpp();
    write_parts(
        &lake,
        &header,
        &x.slice(s![..600, ..]).to_owned(),
        &y.slice(s![..600]).to_owned(),
        3,
    );
    let bin = env!("CARGO_BIN_EXE_kernlake");
    let json = dir.path().join("a.json");
    let svg = dir.path().join("a.svg");
    let o = Command::new(bin)
        .args([
            "audit",
            lake.to_str().unwrap(),
            "--target",
            "PE",
            "--sample",
            "1000",
        ])
        .args(["-D", "32,64", "--maps", "fourier,nystrom", "--seed", "4"])
        .args([
            "--json",
            json.to_str().unwrap(),
            "--plot",
            svg.to_str().unwrap(),
        ])
        .output()
        .unwrap();
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(o.status.success(), "{err}");
    assert!(
        err.contains("600 usable row(s), fewer than the 1000"),
        "{err}"
    );
    let out = String::from_utf8_lossy(&o.stdout);
    assert!(
        out.contains("exact") && out.contains("nystrom") && out.contains("recommended"),
        "{out}"
    );
    let v: serde_json::Value = serde_json::from_slice(&std::fs::read(&json).unwrap()).unwrap();
    assert_eq!(v["rows"].as_array().unwrap().len(), 4);
    let notes = v["notes"].as_array().unwrap();
    assert!(
        notes
            .iter()
            .any(|n| n.as_str().unwrap().contains("fewer than")),
        "{notes:?}"
    );
    assert_eq!(
        v["rows_fit"].as_u64().unwrap() + v["rows_check"].as_u64().unwrap(),
        600
    );
    let text = std::fs::read_to_string(&svg).unwrap();
    assert_eq!(text.matches("<polyline").count(), 4);

    // a cache budget below two kernel rows: a clear error, non-zero exit
    let o = Command::new(bin)
        .args([
            "audit",
            lake.to_str().unwrap(),
            "--target",
            "PE",
            "--cache",
            "100B",
            "-D",
            "16",
            "--quiet",
        ])
        .output()
        .unwrap();
    assert!(!o.status.success());
    assert!(String::from_utf8_lossy(&o.stderr).contains("two kernel rows"));

    // audit a fitted model: the exact machine with the model's own parameters
    let model = dir.path().join("m.klm");
    let o = Command::new(bin)
        .args([
            "fit",
            lake.to_str().unwrap(),
            "--target",
            "PE",
            "--out",
            model.to_str().unwrap(),
        ])
        .args(["-D", "128", "--quiet", "--loss", "l1", "--epochs", "50"])
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let o = Command::new(bin)
        .args([
            "audit",
            "--model",
            model.to_str().unwrap(),
            lake.to_str().unwrap(),
            "--json",
            "-",
            "--quiet",
        ])
        .output()
        .unwrap();
    assert!(o.status.success(), "{}", String::from_utf8_lossy(&o.stderr));
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    let agreement = v["agreement"].as_f64().unwrap();
    // dataset: CCPP — a 128-feature model on 600 rows is a fair but not exact copy of the
    // exact machine; its predictions must at least be far closer to it than the target's
    // spread (agreement < 0.5 sd), and both machines beat predicting the mean (RMSE < sd).
    assert!(agreement > 0.0 && agreement < 0.5, "agreement {agreement}");
    let sd = v["target_sd"].as_f64().unwrap();
    assert!(v["model"]["rmse"].as_f64().unwrap() < sd);
    assert!(v["exact"]["check"]["rmse"].as_f64().unwrap() < sd);
}

/// Regression (issue 20): on a CCPP sample of 500 rows with seed 0 the exact solver
/// stopped with a panic (a cached kernel row filtered to an empty list after a second
/// shrink). The real binary on the CSV file (dataset: Tüfekci 2014) must finish and
/// report a converged exact machine (common practice: SMO reaches its tolerance).
#[test]
fn cli_audit_ccpp_sample_500_seed_0_finishes() {
    use std::process::Command;
    let o = Command::new(env!("CARGO_BIN_EXE_kernlake"))
        .args(["audit", &common::ccpp_path(), "--target", "PE"])
        .args(["--sample", "500", "-D", "64", "--maps", "fourier"])
        .args(["--seed", "0", "--json", "-", "--quiet"])
        .output()
        .unwrap();
    let err = String::from_utf8_lossy(&o.stderr);
    assert!(o.status.success(), "{err}");
    assert!(!err.contains("panicked"), "{err}");
    let v: serde_json::Value = serde_json::from_slice(&o.stdout).unwrap();
    assert_eq!(v["rows_fit"].as_u64().unwrap(), 400);
    assert!(v["exact"]["converged"].as_bool().unwrap(), "{v}");
}

/// Settings are refused before any data is read (project rule): a sample below the
/// minimum, the former spelling of -D/--dims, and --loss with --model, each with one
/// sentence naming the flag; the data path does not exist, so an error about it would
/// mean the data were touched first.
#[test]
fn cli_audit_refuses_bad_settings_before_reading() {
    use std::process::Command;
    let run = |args: &[&str]| {
        let o = Command::new(env!("CARGO_BIN_EXE_kernlake"))
            .args(["audit", "/nonexistent/lake", "--target", "PE", "--quiet"])
            .args(args)
            .output()
            .unwrap();
        assert!(!o.status.success());
        String::from_utf8_lossy(&o.stderr).into_owned()
    };
    let err = run(&["--sample", "5"]);
    assert!(err.contains("--sample") && err.contains("50"), "{err}");
    assert_eq!(err.trim().lines().count(), 1, "{err}");
    let err = run(&["--components", "64"]);
    assert!(
        err.contains("--components") && err.contains("--dims"),
        "{err}"
    );
    let err = run(&["--model", "/nonexistent/m.klm", "--loss", "l1"]);
    assert!(
        err.contains("--loss") && err.contains("model's own loss"),
        "{err}"
    );
}
