//! Coverage values against the brute-force maximum, and their determinism.

use super::*;
use rand::SeedableRng;
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, StandardNormal};

fn normal(seed: u64, n: usize, d: usize, scale: f64) -> Array2<f64> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    Array2::from_shape_fn((n, d), |_| {
        let v: f64 = StandardNormal.sample(&mut rng);
        scale * v
    })
}

/// The brute-force definition, max_j k(x, l_j) with the kernel's own `eval`.
fn brute(c: &Coverage, x: ArrayView2<f64>) -> Vec<f64> {
    x.axis_iter(Axis(0))
        .map(|r| {
            c.landmarks
                .axis_iter(Axis(0))
                .map(|l| c.kernel.eval(&r.to_vec(), &l.to_vec()))
                .fold(0.0, f64::max)
        })
        .collect()
}

#[test]
fn equals_the_brute_force_maximum_for_every_kernel() {
    // common practice: coverage is defined as the largest kernel value over the
    // landmarks; the fast path must give the same number up to f64 rounding.
    let landmarks = normal(1, 300, 7, 1.0);
    // Rows near landmarks (ties at tiny distances), typical rows and far rows.
    let mut x = normal(2, 700, 7, 1.0);
    for i in 0..100 {
        let l = landmarks.row(i).to_owned();
        x.row_mut(i).assign(&(&l + 1e-9 * i as f64));
    }
    x.slice_mut(s![600.., ..]).mapv_inplace(|v| v * 30.0);
    for kind in KernelKind::ALL {
        let c = Coverage {
            landmarks: landmarks.clone(),
            kernel: Kernel::new(kind, 0.2).unwrap(),
            threshold: 0.0,
        };
        let got = c.values(x.view());
        for (i, (g, b)) in got.iter().zip(brute(&c, x.view())).enumerate() {
            assert!((g - b).abs() <= 1e-12, "{kind:?} row {i}: {g} vs {b}");
        }
        // A landmark itself has coverage 1 (k(x, x) = 1: common practice).
        let own = c.values(landmarks.slice(s![..20, ..]));
        assert!(own.iter().all(|&v| v == 1.0), "{kind:?}: {own:?}");
    }
}

#[test]
fn same_bits_whatever_the_block_or_pool() {
    // Determinism contract: each value depends on its row only.
    let c = Coverage {
        landmarks: normal(3, 512, 20, 1.0),
        kernel: Kernel::gaussian(0.05).unwrap(),
        threshold: 0.0,
    };
    let x = normal(4, 1000, 20, 1.3);
    let all = c.values(x.view());
    let mut w = c.work();
    for lo in [0usize, 1, 255, 256, 513] {
        let mut part = Array1::zeros(x.nrows() - lo);
        c.values_seq(x.slice(s![lo.., ..]), part.view_mut(), &mut w);
        for (a, b) in part.iter().zip(all.slice(s![lo..])) {
            assert_eq!(a.to_bits(), b.to_bits(), "offset {lo}");
        }
    }
    let one = rayon::ThreadPoolBuilder::new()
        .num_threads(1)
        .build()
        .unwrap()
        .install(|| c.values(x.view()));
    assert_eq!(one, all);
}
