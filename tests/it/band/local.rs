//! Local weighting (the locally weighted score of Lei et al., JASA 2018, §5.2): on a
//! heteroscedastic test function the band must be narrower where the noise is small,
//! and still cover in each half of the input range.
//!
//! The function is the mean of the heteroscedastic example of Goldberg, Williams &
//! Bishop, "Regression with input-dependent noise: a Gaussian process treatment",
//! NIPS 10 (1997), y = 2 sin(2πx) on x ∈ [0, 1], whose noise grows linearly with x
//! (published; from memory). Here the noise standard deviation is proportional to the
//! input, 0.5·x, as the check asks (our constant).

use kernlake::fit::Fitter;
use kernlake::score::predict_with_band;
use ndarray::{Array1, Array2};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;
use rand_distr::{Distribution, Normal};

fn goldberg(n: usize, seed: u64) -> (Array2<f64>, Array1<f64>) {
    let mut rng = ChaCha8Rng::seed_from_u64(seed);
    let normal = Normal::new(0.0, 1.0).unwrap();
    let x: Vec<f64> = (0..n).map(|_| rng.random::<f64>()).collect();
    let y: Vec<f64> = x
        .iter()
        .map(|&v| 2.0 * (2.0 * std::f64::consts::PI * v).sin() + 0.5 * v * normal.sample(&mut rng))
        .collect();
    (Array2::from_shape_vec((n, 1), x).unwrap(), Array1::from(y))
}

#[test]
fn band_is_narrower_where_noise_is_small_and_covers_each_half() {
    let level = 0.9;
    let splits = 20u64;
    let mut cover = [Vec::new(), Vec::new()];
    let mut width = [0.0f64, 0.0];
    let mut slack = 0.0;
    for seed in 0..splits {
        let (x, y) = goldberg(4_000, 500 + seed);
        let (xt, yt) = goldberg(1_000, 900 + seed);
        let model = Fitter::new()
            .with_dim(64)
            .with_seed(seed)
            // epsilon 0: with a tube the fit may wander by ±ε where the noise is smaller
            // than ε, and the residual there is the wander, not the noise.
            .with_epsilon(0.0)
            .with_holdout(0.4)
            .fit(x.view(), y.view())
            .unwrap();
        slack += 1.0 / (model.band.as_ref().unwrap().calibration_rows as f64 + 1.0);
        let (_, lo, hi) = predict_with_band(&model, xt.view(), level).unwrap();
        for h in 0..2 {
            let rows: Vec<usize> = (0..yt.len())
                .filter(|&i| (xt[[i, 0]] >= 0.5) == (h == 1))
                .collect();
            let inside = rows
                .iter()
                .filter(|&&i| yt[i] >= lo[i] && yt[i] <= hi[i])
                .count();
            cover[h].push(inside as f64 / rows.len() as f64);
            width[h] += rows.iter().map(|&i| hi[i] - lo[i]).sum::<f64>() / rows.len() as f64;
        }
    }
    let slack = slack / splits as f64;
    // Noise sd averages 0.125 on [0, 0.5) and 0.375 on [0.5, 1]: a third. A constant
    // band would have a ratio of 1.
    let ratio = width[0] / width[1];
    eprintln!("mean band width, low-noise half / high-noise half: {ratio:.3}");
    assert!(
        ratio < 0.6,
        "band width ratio {ratio:.3}: local weighting did not narrow it"
    );
    let mut failures = Vec::new();
    for (h, c) in cover.iter().enumerate() {
        let m = c.iter().sum::<f64>() / c.len() as f64;
        let se = (c.iter().map(|v| (v - m).powi(2)).sum::<f64>()
            / (c.len() - 1) as f64
            / c.len() as f64)
            .sqrt();
        let (lo, hi) = (level - 3.0 * se, level + slack + 3.0 * se);
        eprintln!("half {h}: coverage {m:.4} (s.e. {se:.4}), allowed [{lo:.4}, {hi:.4}]");
        if !(m >= lo && m <= hi) {
            failures.push(format!(
                "half {h}: coverage {m:.4} outside [{lo:.4}, {hi:.4}]"
            ));
        }
    }
    assert!(failures.is_empty(), "{failures:?}");
}
