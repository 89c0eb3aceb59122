//! Exact kernel functions: facts of the trade and standard identities.

use kernlake::kernel::{Kernel, KernelKind};
use kernlake::Error;
use ndarray::{Array2, ArrayView2};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

const KINDS: [KernelKind; 5] = KernelKind::ALL;

fn random_rows(n: usize, d: usize, seed: u64) -> Array2<f64> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    Array2::from_shape_fn((n, d), |_| rng.random_range(-2.0..2.0))
}

#[test]
fn kernel_of_a_point_with_itself_is_one() {
    let x = random_rows(20, 5, 1);
    for kind in KINDS {
        let k = Kernel::new(kind, 0.7).unwrap();
        for r in x.rows() {
            let r = r.to_vec();
            // common practice: k(x, x) = 1 for every normalised shift-invariant kernel.
            assert_eq!(k.eval(&r, &r), 1.0, "{kind:?}");
        }
    }
}

#[test]
fn kernel_vanishes_far_apart_and_stays_in_unit_interval() {
    let x = random_rows(10, 4, 2);
    for kind in KINDS {
        let k = Kernel::new(kind, 0.5).unwrap();
        for r in x.rows() {
            let a = r.to_vec();
            let b: Vec<f64> = a.iter().map(|v| v + 100.0).collect();
            // common practice: k(x, y) → 0 as ‖x − y‖ grows (here ‖x − y‖₂ = 200).
            assert!(k.eval(&a, &b) < 1e-6, "{kind:?}: {}", k.eval(&a, &b));
        }
        for (i, a) in x.rows().into_iter().enumerate() {
            for b in x.rows().into_iter().skip(i + 1) {
                let v = k.eval(&a.to_vec(), &b.to_vec());
                // common practice: 0 < k(x, y) < 1 for distinct points.
                assert!(v > 0.0 && v < 1.0, "{kind:?}: {v}");
            }
        }
    }
}

#[test]
fn matern_half_is_the_exponential_kernel() {
    let gamma = 0.3;
    let k = Kernel::new(KernelKind::Matern12, gamma).unwrap();
    let ell = 1.0 / (2.0 * gamma).sqrt();
    let x = random_rows(15, 3, 3);
    for a in x.rows() {
        for b in x.rows() {
            let r: f64 = a
                .iter()
                .zip(b)
                .map(|(p, q)| (p - q) * (p - q))
                .sum::<f64>()
                .sqrt();
            // published: Rasmussen & Williams (2006) eq. 4.15 — Matérn ν = 1/2 is exp(−r/ℓ).
            let want = (-r / ell).exp();
            assert!((k.eval(&a.to_vec(), &b.to_vec()) - want).abs() < 1e-15);
        }
    }
}

#[test]
fn matern_tends_to_gaussian_ordering() {
    // published: Rasmussen & Williams (2006) §4.2.1 — at equal length scale the Matérn
    // kernels increase with ν towards the Gaussian one for distances r with s = r/ℓ small
    // enough; here r = 0.5ℓ.
    let gamma = 0.5;
    let ell = 1.0;
    let a = [0.0, 0.0];
    let b = [0.5 * ell, 0.0];
    let v: Vec<f64> = [
        KernelKind::Matern12,
        KernelKind::Matern32,
        KernelKind::Matern52,
        KernelKind::Gaussian,
    ]
    .iter()
    .map(|&kind| Kernel::new(kind, gamma).unwrap().eval(&a, &b))
    .collect();
    assert!(v[0] < v[1] && v[1] < v[2] && v[2] < v[3], "{v:?}");
}

fn check_block(k: Kernel, a: ArrayView2<f64>, b: ArrayView2<f64>) {
    let blk = k.block(a, b);
    let mut seq = Array2::zeros((a.nrows(), b.nrows()));
    k.block_into_seq(a, b, seq.view_mut());
    for i in 0..a.nrows() {
        for j in 0..b.nrows() {
            let e = k.eval(&a.row(i).to_vec(), &b.row(j).to_vec());
            // common practice: a kernel block is the matrix of pairwise kernel values.
            // Gaussian blocks use ‖a‖² + ‖b‖² − 2ab: error ~ 1e-16 × squared norms.
            assert!((blk[[i, j]] - e).abs() < 1e-12, "{:?} {i} {j}", k.kind);
            assert_eq!(blk[[i, j]].to_bits(), seq[[i, j]].to_bits());
        }
    }
}

#[test]
fn block_equals_pairwise_eval() {
    // 600 rows: more than one parallel chunk of 256.
    let a = random_rows(600, 6, 4);
    let b = random_rows(40, 6, 5);
    for kind in KINDS {
        let k = Kernel::new(kind, 0.4).unwrap();
        check_block(k, a.view(), b.view());
        // Transposed (non-contiguous) views take the same path.
        let at = a.t().to_owned();
        check_block(k, at.t(), b.view());
    }
}

#[test]
fn matern_block_exact_on_the_diagonal() {
    let a = random_rows(50, 8, 6);
    for kind in [
        KernelKind::Matern12,
        KernelKind::Matern32,
        KernelKind::Matern52,
    ] {
        let k = Kernel::new(kind, 2.0).unwrap();
        let blk = k.block(a.view(), a.view());
        for i in 0..a.nrows() {
            // common practice: k(x, x) = 1 exactly, also inside a block.
            assert_eq!(blk[[i, i]], 1.0);
        }
    }
}

#[test]
fn bad_gamma_is_a_typed_error() {
    for g in [0.0, -1.0, f64::NAN, f64::INFINITY] {
        let e = Kernel::new(KernelKind::Gaussian, g).unwrap_err();
        assert!(matches!(e, Error::InvalidParameter { name: "gamma", .. }));
    }
    assert!(KernelKind::parse("polynomial").is_err());
    for kind in KINDS {
        assert_eq!(KernelKind::parse(kind.name()).unwrap(), kind);
    }
}

#[test]
#[should_panic(expected = "column counts differ")]
fn block_shape_mismatch_panics() {
    let k = Kernel::gaussian(1.0).unwrap();
    let a = random_rows(3, 2, 7);
    let b = random_rows(3, 3, 8);
    let _ = k.block(a.view(), b.view());
}
