//! Feature-map throughput (rows/s) next to the bare matrix product of the same shape,
//! d = 20, D = 1,024 and 4,096, on 1 and 2 threads; and the cosine alone (values/s) for
//! the standard library and every code path of the fast cosine this CPU runs (plain, with
//! a per-value shift as the cos + phase map uses it, and sine).
//!
//! The bare product comes in two row chunkings, both writing whole output rows:
//! `product` keeps the chunks of about 512 KiB of output (16 to 256 rows: 64 at
//! D = 1,024, 16 at D = 4,096) that the transforms used before they worked in column
//! panels; `product_map_rows` uses the row chunks the Fourier transforms use now (64 rows
//! from D = 256 up). At D = 4,096 the latter is the faster product (the product packs W
//! once per chunk), so it is the stricter reference for the ratio.

use std::time::Duration;

use criterion::{criterion_group, criterion_main, BenchmarkId, Criterion, Throughput};
use kernlake::features::fastcos::{self, CosPath};
use kernlake::features::{FeatureMap, FourierMap, FourierVariant};
use kernlake::kernel::Kernel;
use ndarray::{Array2, ArrayView2, ArrayViewMut2, Axis};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rayon::prelude::*;

const ROWS: usize = 16_384;
const D_IN: usize = 20;

/// The bare product `out = x W` in chunks of `rows` rows, in parallel.
fn chunked_product(
    x: ArrayView2<f64>,
    w: ArrayView2<f64>,
    mut out: ArrayViewMut2<f64>,
    rows: usize,
) {
    out.axis_chunks_iter_mut(Axis(0), rows)
        .into_par_iter()
        .zip(x.axis_chunks_iter(Axis(0), rows).into_par_iter())
        .for_each(|(mut o, xc)| ndarray::linalg::general_mat_mul(1.0, &xc, &w, 0.0, &mut o));
}

fn maps(c: &mut Criterion) {
    let mut rng = ChaCha8Rng::seed_from_u64(1);
    let x = Array2::from_shape_fn((ROWS, D_IN), |_| rng.random_range(-2.0..2.0));
    let k = Kernel::gaussian(1.0 / D_IN as f64).unwrap();
    let mut g = c.benchmark_group("feature_map");
    g.sample_size(10)
        .warm_up_time(Duration::from_millis(500))
        .measurement_time(Duration::from_secs(2))
        .throughput(Throughput::Elements(ROWS as u64));
    for dd in [1024usize, 4096] {
        let mut out = Array2::zeros((ROWS, dd));
        let pairs = FourierMap::new(k, D_IN, dd, FourierVariant::SinCos, 7).unwrap();
        let phase = FourierMap::new(k, D_IN, dd, FourierVariant::CosPhase, 7).unwrap();
        let w = phase.frequencies().to_owned();
        for threads in [1usize, 2] {
            let pool = rayon::ThreadPoolBuilder::new()
                .num_threads(threads)
                .build()
                .unwrap();
            let id = |name: &str| BenchmarkId::new(name, format!("D{dd}/t{threads}"));
            // Output blocks of about 512 KiB (the transforms' chunks before column panels).
            let rows_512k = (512 * 1024 / (8 * dd)).clamp(16, 256);
            // The Fourier transforms' row chunks now: 128 KiB / (8 × min(D, 256)).
            let rows_map = (128 * 1024 / (8 * dd.min(256))).clamp(16, 256);
            for (name, rows) in [("product", rows_512k), ("product_map_rows", rows_map)] {
                g.bench_function(id(name), |b| {
                    b.iter(|| {
                        pool.install(|| chunked_product(x.view(), w.view(), out.view_mut(), rows))
                    })
                });
            }
            g.bench_function(id("map_cos_phase"), |b| {
                b.iter(|| pool.install(|| phase.transform_into(x.view(), out.view_mut())))
            });
            g.bench_function(id("map_sin_cos"), |b| {
                b.iter(|| pool.install(|| pairs.transform_into(x.view(), out.view_mut())))
            });
        }
    }
    g.finish();
}

fn cosine(c: &mut Criterion) {
    let n = 1 << 16;
    let mut rng = ChaCha8Rng::seed_from_u64(2);
    let xs: Vec<f64> = (0..n).map(|_| rng.random_range(-50.0..50.0)).collect();
    let mut buf = xs.clone();
    let mut g = c.benchmark_group("cosine");
    g.sample_size(10)
        .warm_up_time(Duration::from_millis(300))
        .measurement_time(Duration::from_secs(1))
        .throughput(Throughput::Elements(n as u64));
    g.bench_function("std", |b| {
        b.iter(|| {
            buf.copy_from_slice(&xs);
            for v in buf.iter_mut() {
                *v = v.cos();
            }
        })
    });
    let paths: Vec<CosPath> = [CosPath::Generic, CosPath::Avx2Fma, CosPath::Avx512]
        .into_iter()
        .filter(|p| fastcos::path_supported(*p))
        .collect();
    let phases: Vec<f64> = (0..n)
        .map(|_| rng.random_range(0.0..std::f64::consts::TAU))
        .collect();
    for path in paths {
        g.bench_function(format!("fast_{path:?}"), |b| {
            b.iter(|| {
                buf.copy_from_slice(&xs);
                fastcos::eval_with(path, &mut buf, 1.0, false);
            })
        });
        for (name, sine) in [("cos", false), ("sin", true)] {
            g.bench_function(format!("fast_shifted_{name}_{path:?}"), |b| {
                b.iter(|| {
                    buf.copy_from_slice(&xs);
                    fastcos::eval_shifted_with(path, &mut buf, &phases, 0.5, sine);
                })
            });
        }
        g.bench_function(format!("fast_sin_{path:?}"), |b| {
            b.iter(|| {
                buf.copy_from_slice(&xs);
                fastcos::eval_with(path, &mut buf, 1.0, true);
            })
        });
    }
    g.finish();
}

criterion_group!(benches, maps, cosine);
criterion_main!(benches);
