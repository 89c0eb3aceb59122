//! Feature maps checked against published properties of random Fourier features,
//! orthogonal random features and the Nyström method, and the fast cosine against the
//! standard library.

use kernlake::features::fastcos::{self, CosPath};
use kernlake::features::{
    build_map, map_from_parts, FeatureMap, FourierMap, FourierVariant, Landmarks, MapKind,
    MapParts, MapSpec, NystromMap, OrthogonalMap,
};
use kernlake::kernel::{Kernel, KernelKind};
use kernlake::Error;
use ndarray::{array, s, Array2, ShapeBuilder};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::StandardNormal;

fn normal_rows(n: usize, d: usize, seed: u64) -> Array2<f64> {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    Array2::from_shape_fn((n, d), |_| rng.sample(StandardNormal))
}

/// z(x)·z(y) for a pair of rows.
fn estimate(map: &dyn FeatureMap, x: &[f64], y: &[f64]) -> f64 {
    let xy = Array2::from_shape_vec((2, x.len()), [x, y].concat()).unwrap();
    let z = map.transform(xy.view());
    z.row(0).dot(&z.row(1))
}

fn mean_var(v: &[f64]) -> (f64, f64) {
    let n = v.len() as f64;
    let m = v.iter().sum::<f64>() / n;
    let var = v.iter().map(|x| (x - m) * (x - m)).sum::<f64>() / (n - 1.0);
    (m, var)
}

fn fourier(kernel: Kernel, d: usize, dd: usize, variant: FourierVariant, seed: u64) -> FourierMap {
    FourierMap::new(kernel, d, dd, variant, seed).unwrap()
}

// ---------------------------------------------------------------- fast cosine

/// Every code path this CPU can run.
fn paths() -> Vec<CosPath> {
    [CosPath::Generic, CosPath::Avx2Fma, CosPath::Avx512]
        .into_iter()
        .filter(|p| fastcos::path_supported(*p))
        .collect()
}

#[test]
fn fast_cosine_matches_std_on_a_dense_grid() {
    // A dense grid on [-300, 300] (6,000,001 points) plus random points up to 1e6.
    let mut xs: Vec<f64> = (0..=6_000_000).map(|i| -300.0 + i as f64 * 1e-4).collect();
    let mut rng = ChaCha8Rng::seed_from_u64(11);
    xs.extend((0..200_000).map(|_| rng.random_range(-1.0e6..1.0e6)));
    let mut simd_bits: Vec<(CosPath, bool, Vec<u64>)> = Vec::new();
    for path in paths() {
        for sine in [false, true] {
            let mut ys = xs.clone();
            fastcos::eval_with(path, &mut ys, 1.0, sine);
            if path != CosPath::Generic {
                simd_bits.push((path, sine, bits_of(&ys)));
            }
            let mut worst = 0.0f64;
            for (x, y) in xs.iter().zip(&ys) {
                let want = if sine { x.sin() } else { x.cos() };
                worst = worst.max((y - want).abs());
            }
            println!("{path:?} sine={sine}: max abs error vs std {worst:.3e}");
            // reference library: Rust std f64::cos / f64::sin; documented bound 1e-15.
            assert!(worst <= 1e-15, "{path:?} sine={sine}: {worst:e}");
        }
    }
    // The SIMD paths run the same correctly rounded IEEE 754 operations (fused
    // multiply-add included) lane by lane, so they agree bit for bit (common practice:
    // IEEE 754-2008 rounding of each operation).
    for (pa, sa, a) in &simd_bits {
        for (pb, sb, b) in &simd_bits {
            if sa == sb && pa != pb {
                assert!(a == b, "{pa:?} and {pb:?} differ (sine={sa})");
            }
        }
    }
}

#[test]
fn fast_cosine_scales_and_handles_huge_and_non_finite_inputs() {
    let xs = [
        1e7,
        -3.5e12,
        f64::NAN,
        f64::INFINITY,
        0.25,
        1.0,
        2.0,
        3.0,
        4.0,
    ];
    for path in paths() {
        let mut ys = xs;
        fastcos::eval_with(path, &mut ys, 0.5, false);
        for (x, y) in xs.iter().zip(&ys) {
            let want = 0.5 * x.cos();
            // reference library: std cos (inputs beyond 1e6 in the group go to std).
            assert!(
                (y - want).abs() <= 1e-15 || (y.is_nan() && want.is_nan()),
                "{path:?}: cos({x}) = {y}, want {want}"
            );
        }
    }
    // Special values (common practice): cos 0 = 1 (within one rounding), sin 0 = 0.
    let mut z = [0.0];
    fastcos::cos_in_place(&mut z, 1.0);
    assert!((z[0] - 1.0).abs() <= f64::EPSILON, "{}", z[0]);
    let mut z = [0.0];
    fastcos::sin_in_place(&mut z, 1.0);
    assert_eq!(z[0], 0.0);
}

#[test]
fn shifted_fast_cosine_matches_std_of_the_sum() {
    // Products w.x and phases b in the ranges a feature map meets, plus a few beyond 1e6.
    let mut rng = ChaCha8Rng::seed_from_u64(12);
    let n = 400_003;
    let mut xs: Vec<f64> = (0..n).map(|_| rng.random_range(-60.0..60.0)).collect();
    let bs: Vec<f64> = (0..n)
        .map(|_| rng.random_range(0.0..std::f64::consts::TAU))
        .collect();
    xs[17] = 3.0e7;
    xs[n - 2] = -2.0e9;
    let scale = (2.0f64 / 1024.0).sqrt();
    for path in paths() {
        for sine in [false, true] {
            let mut ys = xs.clone();
            fastcos::eval_shifted_with(path, &mut ys, &bs, scale, sine);
            let mut worst = 0.0f64;
            for ((x, b), y) in xs.iter().zip(&bs).zip(&ys) {
                let want = if sine { (x + b).sin() } else { (x + b).cos() };
                worst = worst.max((y - scale * want).abs());
            }
            println!("{path:?} sine={sine} shifted: max abs error vs std {worst:.3e}");
            // reference library: Rust std f64::cos / f64::sin of the rounded sum;
            // documented bound 1e-15 (times the scale, which is at most 1).
            assert!(worst <= 1e-15 * scale, "{path:?} sine={sine}: {worst:e}");
            // The shift is the plain rounded sum: same bits as shifting first (common
            // practice).
            let mut zs: Vec<f64> = xs.iter().zip(&bs).map(|(x, b)| x + b).collect();
            fastcos::eval_with(path, &mut zs, scale, sine);
            assert_eq!(bits_of(&ys), bits_of(&zs), "{path:?} sine={sine}");
        }
    }
}

#[test]
fn cos_phase_map_is_the_published_feature() {
    // z(x) = sqrt(2/D) cos(w.x + b), evaluated here directly with std cos and a plain dot.
    let x = normal_rows(300, 7, 13);
    for (kernel, orthogonal) in [
        (Kernel::gaussian(0.3).unwrap(), false),
        (Kernel::gaussian(0.3).unwrap(), true),
        (Kernel::new(KernelKind::Laplacian, 0.5).unwrap(), false),
        (Kernel::new(KernelKind::Matern32, 0.5).unwrap(), false),
    ] {
        // 333 fits one output panel; 1,100 spans three, the last one partial.
        for dd in [333, 1100] {
            let map = if orthogonal {
                OrthogonalMap::orthogonal(kernel, 7, dd, FourierVariant::CosPhase, 5).unwrap()
            } else {
                fourier(kernel, 7, dd, FourierVariant::CosPhase, 5)
            };
            let z = map.transform(x.view());
            let (w, b) = (map.frequencies(), map.phases().unwrap());
            let scale = (2.0 / dd as f64).sqrt();
            for (row, zrow) in x.rows().into_iter().zip(z.rows()) {
                for j in 0..dd {
                    let (mut arg, mut size) = (b[j], b[j].abs());
                    for (xk, wk) in row.iter().zip(w.column(j)) {
                        arg += xk * wk;
                        size += (xk * wk).abs();
                    }
                    let want = scale * arg.cos();
                    // published: Rahimi & Recht (NIPS 2007), the feature's definition; the
                    // tolerance covers the rounding of the argument (a few units in the last
                    // place of the sum of |terms|) and of the cosine (1e-15).
                    let tol = scale * (1e-15 + 32.0 * f64::EPSILON * size);
                    assert!(
                        (zrow[j] - want).abs() <= tol,
                        "{:?}: {} vs {want}",
                        kernel.kind,
                        zrow[j]
                    );
                }
            }
        }
    }
}

#[test]
fn sin_cos_map_is_the_published_feature() {
    // z(x) = sqrt(2/D) [cos(w.x), sin(w.x)], evaluated directly with std cos, sin and a
    // plain dot; D = 1,100 (550 frequencies) spans several output panels.
    let x = normal_rows(200, 7, 14);
    let kernel = Kernel::gaussian(0.3).unwrap();
    let dd = 1100;
    let m = dd / 2;
    let map = fourier(kernel, 7, dd, FourierVariant::SinCos, 6);
    let z = map.transform(x.view());
    let w = map.frequencies();
    let scale = (2.0 / dd as f64).sqrt();
    for (row, zrow) in x.rows().into_iter().zip(z.rows()) {
        for j in 0..m {
            let (mut arg, mut size) = (0.0, 0.0);
            for (xk, wk) in row.iter().zip(w.column(j)) {
                arg += xk * wk;
                size += (xk * wk).abs();
            }
            // published: Sutherland & Schneider (UAI 2015), the paired feature; tolerance
            // as in the cos + phase check above.
            let tol = scale * (1e-15 + 32.0 * f64::EPSILON * size);
            assert!((zrow[j] - scale * arg.cos()).abs() <= tol, "cos {j}");
            assert!((zrow[m + j] - scale * arg.sin()).abs() <= tol, "sin {j}");
        }
    }
}

fn bits_of(v: &[f64]) -> Vec<u64> {
    v.iter().map(|x| x.to_bits()).collect()
}

#[test]
#[should_panic(expected = "shifts")]
fn shifted_cosine_length_mismatch_panics() {
    let mut xs = [0.0; 5];
    fastcos::cos_shifted_in_place(&mut xs, &[0.0; 4], 1.0);
}

// ---------------------------------------------------------------- random Fourier features

#[test]
fn rff_is_unbiased_and_variance_matches_published_formula() {
    let gamma = 0.5;
    let k = Kernel::gaussian(gamma).unwrap();
    let x = [0.3, -0.2, 0.5];
    // Δ chosen so that k(Δ) = exp(−γΔ²) = 0.5.
    let delta = (2f64.ln() / gamma).sqrt();
    let y = [x[0] + delta, x[1], x[2]];
    let kxy = k.eval(&x, &y);
    assert!((kxy - 0.5).abs() < 1e-12);
    let dd = 64;
    let seeds = 4000;
    for variant in [FourierVariant::SinCos, FourierVariant::CosPhase] {
        let est: Vec<f64> = (0..seeds)
            .map(|s| estimate(&fourier(k, 3, dd, variant, s), &x, &y))
            .collect();
        let (m, v) = mean_var(&est);
        let k4 = kxy.powi(4);
        // published: Sutherland & Schneider (UAI 2015), variance of one estimate with the
        // Gaussian kernel, k(2Δ) = k⁴: pairs [1 + k⁴ − 2k²]/D, cos + phase [1 + ½k⁴ − k²]/D.
        let want_var = match variant {
            FourierVariant::SinCos => (1.0 + k4 - 2.0 * kxy * kxy) / dd as f64,
            FourierVariant::CosPhase => (1.0 + 0.5 * k4 - kxy * kxy) / dd as f64,
        };
        println!("{variant:?}: mean {m:.5} (k = {kxy}), var {v:.3e} (formula {want_var:.3e})");
        // published: Rahimi & Recht (NIPS 2007) — E[z(x)·z(y)] = k(x, y); tolerance 4
        // standard errors of the mean over the seeds.
        assert!(
            (m - kxy).abs() < 4.0 * (want_var / seeds as f64).sqrt(),
            "{variant:?}: {m}"
        );
        // published: Sutherland & Schneider (UAI 2015); within 10% (sampling error of the
        // variance over 4000 seeds is about 2%).
        assert!(
            (v / want_var - 1.0).abs() < 0.10,
            "{variant:?}: {v} vs {want_var}"
        );
    }
}

/// Root-mean-square kernel error over all pairs of `x`, averaged over `seeds` maps.
fn rms_error(
    x: &Array2<f64>,
    k: Kernel,
    seeds: u64,
    make: impl Fn(u64) -> Box<dyn FeatureMap>,
) -> f64 {
    let exact = k.block(x.view(), x.view());
    let n = x.nrows();
    let mut sum = 0.0;
    let mut count = 0.0;
    for s in 0..seeds {
        let z = make(s).transform(x.view());
        let approx = z.dot(&z.t());
        for i in 0..n {
            for j in (i + 1)..n {
                let e = approx[[i, j]] - exact[[i, j]];
                sum += e * e;
                count += 1.0;
            }
        }
    }
    (sum / count).sqrt()
}

#[test]
fn rff_error_falls_as_one_over_root_d() {
    let k = Kernel::gaussian(0.1).unwrap();
    let x = normal_rows(12, 5, 21);
    let small = rms_error(&x, k, 40, |s| {
        Box::new(fourier(k, 5, 64, FourierVariant::SinCos, s))
    });
    let large = rms_error(&x, k, 40, |s| {
        Box::new(fourier(k, 5, 1024, FourierVariant::SinCos, s))
    });
    let ratio = small / large;
    println!("RMS kernel error D=64: {small:.4e}, D=1024: {large:.4e}, ratio {ratio:.2}");
    // published: Rahimi & Recht (NIPS 2007) — error ~ 1/√D, so 16× the features gives
    // about 4× less error; accepted band 3×–5.3×.
    assert!((3.0..5.3).contains(&ratio), "ratio {ratio}");
}

#[test]
fn laplacian_and_matern_rff_are_unbiased() {
    let x = [0.1, 0.4, -0.3, 0.2];
    let y = [0.6, -0.1, 0.2, 0.9];
    let seeds = 1500;
    for kind in [
        KernelKind::Laplacian,
        KernelKind::Matern12,
        KernelKind::Matern32,
        KernelKind::Matern52,
    ] {
        let k = Kernel::new(kind, 0.4).unwrap();
        let kxy = k.eval(&x, &y);
        for variant in [FourierVariant::SinCos, FourierVariant::CosPhase] {
            let est: Vec<f64> = (0..seeds)
                .map(|s| estimate(&fourier(k, 4, 64, variant, s), &x, &y))
                .collect();
            let (m, v) = mean_var(&est);
            let se = (v / seeds as f64).sqrt();
            println!("{kind:?} {variant:?}: mean {m:.5}, k {kxy:.5}, se {se:.2e}");
            // published: Rahimi & Recht (NIPS 2007) — unbiased for any shift-invariant
            // kernel sampled from its spectral density; tolerance 4 standard errors.
            assert!(
                (m - kxy).abs() < 4.0 * se,
                "{kind:?} {variant:?}: {m} vs {kxy}"
            );
        }
    }
}

#[test]
fn orthogonal_features_beat_plain_rff() {
    let d = 8;
    let k = Kernel::gaussian(1.0 / (2.0 * d as f64)).unwrap();
    let x = normal_rows(10, d, 31);
    for variant in [FourierVariant::SinCos, FourierVariant::CosPhase] {
        let dd = 64;
        let rff = rms_error(&x, k, 100, |s| Box::new(fourier(k, d, dd, variant, s)));
        let orf = rms_error(&x, k, 100, |s| {
            Box::new(OrthogonalMap::orthogonal(k, d, dd, variant, s).unwrap())
        });
        println!(
            "{variant:?}: RMS error RFF {rff:.4e}, ORF {orf:.4e}, MSE ratio {:.3}",
            (orf / rff).powi(2)
        );
        // published: Yu et al. (NIPS 2016), Theorem 1 and Fig. 2 — orthogonal random
        // features have lower kernel-approximation MSE than i.i.d. features at equal D.
        assert!(orf < rff, "{variant:?}: ORF {orf} vs RFF {rff}");
    }
}

#[test]
fn orthogonal_blocks_are_orthogonal() {
    let d = 6;
    let k = Kernel::gaussian(0.5).unwrap();
    let m = OrthogonalMap::orthogonal(k, d, 2 * d, FourierVariant::CosPhase, 3).unwrap();
    let w = m.frequencies();
    // published: Yu et al. (NIPS 2016) — frequencies within a block are orthogonal.
    for i in 0..d {
        for j in 0..d {
            if i != j {
                let c = w.column(i).dot(&w.column(j));
                assert!(c.abs() < 1e-10, "{i} {j}: {c}");
            }
        }
    }
    assert!(m.is_orthogonal());
}

// ---------------------------------------------------------------- Nyström

fn max_gram_error(map: &dyn FeatureMap, k: Kernel, x: &Array2<f64>) -> f64 {
    let z = map.transform(x.view());
    let approx = z.dot(&z.t());
    let mut worst = 0.0f64;
    for i in 0..x.nrows() {
        for j in 0..x.nrows() {
            let e = k.eval(&x.row(i).to_vec(), &x.row(j).to_vec());
            worst = worst.max((approx[[i, j]] - e).abs());
        }
    }
    worst
}

#[test]
fn nystrom_with_all_rows_reproduces_the_kernel_matrix() {
    let mut rng = ChaCha8Rng::seed_from_u64(41);
    let x = Array2::from_shape_fn((60, 4), |_| rng.random_range(-2.0..2.0));
    for kind in [
        KernelKind::Gaussian,
        KernelKind::Laplacian,
        KernelKind::Matern32,
    ] {
        let k = Kernel::new(kind, 1.0).unwrap();
        let map = NystromMap::new(k, x.view(), 60, Landmarks::Uniform, 1e-10, 0).unwrap();
        let err = max_gram_error(&map, k, &x);
        println!(
            "{kind:?}: output dim {}, max error {err:.2e}",
            map.output_dim()
        );
        // published: Williams & Seeger (NIPS 2001) — every row a landmark reproduces K.
        assert!(err < 1e-8, "{kind:?}: {err}");
    }
}

fn frob_rel_error(map: &dyn FeatureMap, k: Kernel, x: &Array2<f64>) -> f64 {
    let exact = k.block(x.view(), x.view());
    let z = map.transform(x.view());
    let diff = &z.dot(&z.t()) - &exact;
    (diff.iter().map(|v| v * v).sum::<f64>() / exact.iter().map(|v| v * v).sum::<f64>()).sqrt()
}

#[test]
fn nystrom_error_falls_with_more_landmarks_and_kmeans_helps() {
    let x = normal_rows(300, 3, 51);
    let k = Kernel::gaussian(0.5).unwrap();
    let avg = |m: usize, how: Landmarks| -> f64 {
        (0..4)
            .map(|s| {
                let map = NystromMap::new(k, x.view(), m, how, 1e-10, s).unwrap();
                frob_rel_error(&map, k, &x)
            })
            .sum::<f64>()
            / 4.0
    };
    let errs: Vec<f64> = [10, 30, 90]
        .iter()
        .map(|&m| avg(m, Landmarks::Uniform))
        .collect();
    println!("uniform landmarks 10/30/90: relative errors {errs:?}");
    // published: Drineas & Mahoney (JMLR 2005) — the error falls as landmarks grow.
    assert!(
        errs[1] < 0.8 * errs[0] && errs[2] < 0.8 * errs[1],
        "{errs:?}"
    );
    let km = avg(30, Landmarks::KMeans);
    println!("k-means landmarks 30: relative error {km:.3e}");
    // published: Zhang, Tsang & Kwok (ICML 2008) — k-means centres as landmarks give a
    // lower Nyström error than uniform sampling.
    assert!(km < errs[1], "k-means {km} vs uniform {}", errs[1]);
}

#[test]
fn nystrom_uses_distinct_rows_when_sample_is_small() {
    let base = normal_rows(8, 3, 61);
    let mut x = Array2::zeros((16, 3));
    x.slice_mut(s![..8, ..]).assign(&base);
    x.slice_mut(s![8.., ..]).assign(&base);
    let k = Kernel::gaussian(1.0).unwrap();
    let map = NystromMap::new(k, x.view(), 50, Landmarks::KMeans, 1e-10, 0).unwrap();
    assert_eq!(map.landmarks().nrows(), 8);
    assert!(map.output_dim() <= 8);
    // published: Williams & Seeger (NIPS 2001) — all distinct rows as landmarks
    // reproduce the kernel matrix, duplicates included.
    assert!(max_gram_error(&map, k, &x) < 1e-8);
}

// ---------------------------------------------------------------- determinism, saving

fn all_maps(pool: &rayon::ThreadPool) -> Vec<Box<dyn FeatureMap>> {
    let sample = normal_rows(400, 5, 71);
    let k = Kernel::gaussian(0.2).unwrap();
    let mk = |kind, variant, landmarks| MapSpec {
        kind,
        dim: 96,
        variant,
        landmarks,
        eig_threshold: 1e-10,
        seed: 9,
    };
    let specs = [
        mk(MapKind::Fourier, FourierVariant::SinCos, Landmarks::Uniform),
        mk(
            MapKind::Fourier,
            FourierVariant::CosPhase,
            Landmarks::Uniform,
        ),
        mk(
            MapKind::Orthogonal,
            FourierVariant::SinCos,
            Landmarks::Uniform,
        ),
        mk(
            MapKind::Orthogonal,
            FourierVariant::CosPhase,
            Landmarks::Uniform,
        ),
        mk(MapKind::Nystrom, FourierVariant::SinCos, Landmarks::Uniform),
        mk(MapKind::Nystrom, FourierVariant::SinCos, Landmarks::KMeans),
    ];
    let mut maps: Vec<Box<dyn FeatureMap>> = pool.install(|| {
        specs
            .iter()
            .map(|s| build_map(s, k, 5, Some(sample.view())).unwrap())
            .collect()
    });
    let lap = Kernel::new(KernelKind::Laplacian, 0.3).unwrap();
    maps.push(Box::new(fourier(lap, 5, 96, FourierVariant::SinCos, 4)));
    // Wide maps: the output is filled in several column panels.
    for variant in [FourierVariant::SinCos, FourierVariant::CosPhase] {
        maps.push(Box::new(fourier(k, 5, 1100, variant, 5)));
    }
    maps
}

fn bits(a: &Array2<f64>) -> Vec<u64> {
    a.iter().map(|v| v.to_bits()).collect()
}

#[test]
fn transforms_are_identical_across_threads_and_chunkings() {
    let one = rayon::ThreadPoolBuilder::new()
        .num_threads(1)
        .build()
        .unwrap();
    let two = rayon::ThreadPoolBuilder::new()
        .num_threads(2)
        .build()
        .unwrap();
    let x = normal_rows(1000, 5, 81);
    let maps1 = all_maps(&one);
    let maps2 = all_maps(&two);
    for (m1, m2) in maps1.iter().zip(&maps2) {
        // Building is deterministic too (k-means runs on the pool).
        assert_eq!(m1.to_parts(), m2.to_parts());
        let a = one.install(|| m1.transform(x.view()));
        let b = two.install(|| m1.transform(x.view()));
        assert_eq!(bits(&a), bits(&b), "{:?}", m1.to_parts().kind);
        // Different chunkings: three uneven pieces.
        let mut c = Array2::zeros(a.dim());
        for (lo, hi) in [(0, 137), (137, 700), (700, 1000)] {
            two.install(|| m1.transform_into(x.slice(s![lo..hi, ..]), c.slice_mut(s![lo..hi, ..])));
        }
        assert_eq!(bits(&a), bits(&c));
        // Column-major output and input: rows are not contiguous.
        let mut f = Array2::zeros(a.dim().f());
        let xf = {
            let mut t = Array2::zeros(x.dim().f());
            t.assign(&x);
            t
        };
        m1.transform_into(xf.view(), f.view_mut());
        assert_eq!(bits(&a), bits(&f.as_standard_layout().to_owned()));
    }
}

#[test]
fn parts_round_trip_bit_for_bit() {
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(2)
        .build()
        .unwrap();
    let x = normal_rows(300, 5, 91);
    for map in all_maps(&pool) {
        let parts = map.to_parts();
        // Through JSON text, as a model file would store the settings.
        let meta_text = serde_json::to_string(&parts.meta).unwrap();
        let saved = MapParts {
            kind: parts.kind.clone(),
            meta: serde_json::from_str(&meta_text).unwrap(),
            arrays: parts.arrays.clone(),
        };
        let back = map_from_parts(&saved).unwrap();
        assert_eq!(back.input_dim(), map.input_dim());
        assert_eq!(back.output_dim(), map.output_dim());
        assert_eq!(back.to_parts(), parts);
        assert_eq!(
            bits(&back.transform(x.view())),
            bits(&map.transform(x.view()))
        );
    }
}

#[test]
fn malformed_parts_are_typed_errors() {
    let k = Kernel::gaussian(0.5).unwrap();
    let rff = fourier(k, 3, 8, FourierVariant::CosPhase, 1).to_parts();
    let nys = NystromMap::new(
        k,
        normal_rows(20, 3, 2).view(),
        5,
        Landmarks::Uniform,
        1e-10,
        0,
    )
    .unwrap()
    .to_parts();
    let mut bad = Vec::new();
    let mut p = rff.clone();
    p.kind = "wavelet".into();
    bad.push(p);
    let mut p = rff.clone();
    p.arrays.retain(|(n, _)| n != "phases");
    bad.push(p);
    let mut p = rff.clone();
    p.arrays[0].1 = Array2::zeros((2, 8));
    bad.push(p);
    let mut p = rff.clone();
    p.arrays[0].1[[0, 0]] = f64::NAN;
    bad.push(p);
    let mut p = rff.clone();
    p.meta = serde_json::json!({"kernel": "gaussian"});
    bad.push(p);
    let mut p = rff.clone();
    p.meta["variant"] = "sin-cos".into();
    p.meta["output_dim"] = 7.into();
    bad.push(p);
    let mut p = rff.clone();
    p.meta["kernel"]["gamma_bits"] = (-1.0f64).to_bits().into();
    bad.push(p);
    let mut p = nys.clone();
    p.arrays.retain(|(n, _)| n != "projection");
    bad.push(p);
    let mut p = nys.clone();
    p.arrays[1].1 = Array2::zeros((4, 1));
    bad.push(p);
    let mut p = nys.clone();
    p.kind = "fourier".into();
    bad.push(p);
    for (i, p) in bad.iter().enumerate() {
        let e = map_from_parts(p).expect_err(&format!("case {i} should fail"));
        assert!(matches!(e, Error::InvalidParameter { .. }), "case {i}: {e}");
    }
}

// ---------------------------------------------------------------- bad input

#[test]
fn bad_settings_are_typed_errors() {
    let k = Kernel::gaussian(1.0).unwrap();
    let sample = normal_rows(10, 3, 3);
    let spec = |kind, components, variant| MapSpec {
        kind,
        dim: components,
        variant,
        ..MapSpec::default()
    };
    let invalid = |r: kernlake::Result<Box<dyn FeatureMap>>| {
        assert!(matches!(r.unwrap_err(), Error::InvalidParameter { .. }))
    };
    for kind in [MapKind::Fourier, MapKind::Orthogonal, MapKind::Nystrom] {
        invalid(build_map(
            &spec(kind, 0, FourierVariant::CosPhase),
            k,
            3,
            Some(sample.view()),
        ));
    }
    invalid(build_map(
        &spec(MapKind::Fourier, 7, FourierVariant::SinCos),
        k,
        3,
        None,
    ));
    invalid(build_map(
        &spec(MapKind::Orthogonal, 7, FourierVariant::SinCos),
        k,
        3,
        None,
    ));
    invalid(build_map(
        &spec(MapKind::Fourier, 8, FourierVariant::SinCos),
        k,
        0,
        None,
    ));
    for gamma in [0.0, -1.0, f64::NAN, f64::INFINITY] {
        let bad = Kernel {
            kind: KernelKind::Gaussian,
            gamma,
        };
        for kind in [MapKind::Fourier, MapKind::Orthogonal, MapKind::Nystrom] {
            invalid(build_map(
                &spec(kind, 8, FourierVariant::SinCos),
                bad,
                3,
                Some(sample.view()),
            ));
        }
    }
    let lap = Kernel::new(KernelKind::Laplacian, 1.0).unwrap();
    invalid(build_map(
        &spec(MapKind::Orthogonal, 8, FourierVariant::SinCos),
        lap,
        3,
        None,
    ));
    invalid(build_map(
        &spec(MapKind::Nystrom, 8, FourierVariant::SinCos),
        k,
        3,
        None,
    ));
    let mut nys = spec(MapKind::Nystrom, 8, FourierVariant::SinCos);
    let empty = Array2::<f64>::zeros((0, 3));
    assert!(matches!(
        build_map(&nys, k, 3, Some(empty.view())).unwrap_err(),
        Error::NoRows(_)
    ));
    let mut nan = sample.clone();
    nan[[4, 2]] = f64::NAN;
    assert!(matches!(
        build_map(&nys, k, 3, Some(nan.view())).unwrap_err(),
        Error::NonFinite { row: 4, column: 2 }
    ));
    nys.eig_threshold = 1.5;
    invalid(build_map(&nys, k, 3, Some(sample.view())));
}

#[test]
#[should_panic(expected = "input has 4 columns")]
fn transform_shape_mismatch_panics() {
    let k = Kernel::gaussian(1.0).unwrap();
    let map = fourier(k, 3, 8, FourierVariant::SinCos, 0);
    let _ = map.transform(Array2::zeros((2, 4)).view());
}

#[test]
fn spec_defaults_and_names() {
    let d = MapSpec::default();
    // The task's contract: Fourier, 1024, SinCos, Uniform, 1e-10, seed 0.
    assert_eq!(
        (
            d.kind,
            d.dim,
            d.variant,
            d.landmarks,
            d.eig_threshold,
            d.seed
        ),
        (
            MapKind::Fourier,
            1024,
            FourierVariant::SinCos,
            Landmarks::Uniform,
            1e-10,
            0
        )
    );
    assert_eq!(
        serde_json::to_string(&FourierVariant::CosPhase).unwrap(),
        "\"cos-phase\""
    );
    assert_eq!(
        serde_json::to_string(&Landmarks::KMeans).unwrap(),
        "\"k-means\""
    );
    assert_eq!(
        serde_json::to_string(&MapKind::Nystrom).unwrap(),
        "\"nystrom\""
    );
    // A tiny worked check (common practice): a one-frequency sin/cos map has
    // z(x)·z(x) = cos² + sin² = 1 = k(x, x).
    let map = fourier(
        Kernel::gaussian(1.0).unwrap(),
        2,
        2,
        FourierVariant::SinCos,
        5,
    );
    let z = map.transform(array![[0.3, -0.7]].view());
    assert!((z.row(0).dot(&z.row(0)) - 1.0).abs() < 1e-15);
}
