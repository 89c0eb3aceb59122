//! The fit's quick gamma check (issue 14): when the exact machine on a sample at gamma ×4
//! is clearly better, `kernlake fit` says so and points to `kernlake tune`.

use kernlake::features::MapKind;
use kernlake::kernel::Kernel;
use kernlake::scale::Standardizer;
use kernlake::solver::dcd::Loss;
use kernlake::tune::{gamma_hint, Defaults, HINT_FACTOR, HINT_GAIN};

use super::accuracy::{airfoil, split, OnMap};
use crate::common;

#[test]
fn the_gamma_check_finds_the_narrower_kernel_on_airfoil() {
    // dataset: airfoil self-noise (Brooks, Pope & Marcolini, NASA RP-1218, 1989). The
    // check's claim is tested out of sample: on a seeded 80/20 split, the fit at the
    // suggested gamma (D = 4,096, the defaults' C and epsilon) must have the lower
    // held-out RMSE, as the check said on its own sample of the training rows.
    let (x, y) = airfoil();
    let (xtr, ytr, xte, yte) = split(&x, &y, 7);
    let mut xs = xtr.clone();
    Standardizer::fit(xtr.view()).apply(xs.view_mut());
    let (mean, sd) = (ytr.mean().unwrap(), ytr.std(0.0));
    let d = Defaults::from_sample(xs.view(), ytr.view(), mean, sd, ytr.len() as u64).unwrap();
    let c = d.c / sd; // the squared loss's unit-free C, as the fit holds it
    let hint = gamma_hint(
        xs.view(),
        ytr.view(),
        Kernel::gaussian(d.gamma).unwrap(),
        c,
        d.epsilon,
        Loss::L2,
        0,
    )
    .unwrap()
    .expect("airfoil: the exact machine at gamma ×4 is clearly better");
    assert_eq!(hint.gamma, d.gamma);
    assert_eq!(hint.better_gamma, HINT_FACTOR * d.gamma);
    assert!(
        hint.better_error < (1.0 - HINT_GAIN) * hint.error,
        "{hint:?}"
    );
    assert!(
        hint.message().contains("kernlake tune"),
        "{}",
        hint.message()
    );
    let held_out = |g: f64| {
        OnMap::new((&xtr, &ytr), &xte, g, (MapKind::Fourier, 4_096)).rmse(c, d.epsilon, &yte)
    };
    let (wide, narrow) = (held_out(hint.gamma), held_out(hint.better_gamma));
    eprintln!(
        "airfoil: check {:.4} → {:.4}; held-out {wide:.4} → {narrow:.4}",
        hint.error, hint.better_error
    );
    assert!(narrow < wide, "held-out: ×4 {narrow} not below ×1 {wide}");
}

#[test]
fn command_line_fit_prints_the_hint() {
    // dataset: airfoil self-noise (Brooks et al. 1989) as a two-part Parquet folder; the
    // plain fit keeps its defaults and its output names the better gamma and `tune`.
    let dir = tempfile::tempdir().unwrap();
    let (x, y) = airfoil();
    let names: Vec<String> = [
        "frequency",
        "angle",
        "chord",
        "velocity",
        "thickness",
        "spl",
    ]
    .iter()
    .map(|s| s.to_string())
    .collect();
    let lake = dir.path().join("lake");
    common::write_parts(&lake, &names, &x, &y, 2);
    let out = dir.path().join("m.klm");
    let o = std::process::Command::new(env!("CARGO_BIN_EXE_kernlake"))
        .args(["fit", lake.to_str().unwrap(), "--target", "spl"])
        .args(["--out", out.to_str().unwrap()])
        .output()
        .unwrap();
    let text = String::from_utf8_lossy(&o.stdout);
    assert!(
        o.status.success(),
        "{text}\n{}",
        String::from_utf8_lossy(&o.stderr)
    );
    let m = kernlake::model::Model::load(&out).unwrap();
    assert!(
        text.contains("`kernlake tune`")
            && text.contains(&format!("gamma = {:.4e}", HINT_FACTOR * m.kernel.gamma)),
        "{text}"
    );
}
