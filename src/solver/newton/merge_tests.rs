//! The determinism contract of [`PassStats`] (common practice: a reduction computed in
//! parts and merged in order must equal the sequential one bit for bit where the
//! operations are the same), its byte form, and its refusals.

use ndarray::{Array1, Array2};
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

use super::{NewtonState, PassStats, Step};
use crate::features::{FeatureMap, FourierMap, FourierVariant};
use crate::kernel::{Kernel, KernelKind};

/// Block sizes: over and under the 1,024-row chunk, so blocks hold one or two chunks.
const BLOCKS: [usize; 4] = [1100, 300, 1500, 100];

fn data(inputs: usize) -> (Array2<f64>, Array1<f64>) {
    let n: usize = BLOCKS.iter().sum();
    let mut rng = ChaCha8Rng::seed_from_u64(17);
    let x = Array2::from_shape_fn((n, inputs), |_| rng.random_range(-2.0f64..2.0));
    let y = x
        .rows()
        .into_iter()
        .map(|r| (2.0 * r[0]).sin() + r.iter().sum::<f64>() * 0.3 + rng.random_range(-0.1..0.1))
        .collect();
    (x, y)
}

fn map(inputs: usize, dim: usize) -> FourierMap {
    let kernel = Kernel::new(KernelKind::Gaussian, 0.5).unwrap();
    FourierMap::new(kernel, inputs, dim, FourierVariant::CosPhase, 3).unwrap()
}

/// The rows of each block: (start, end).
fn spans() -> Vec<(usize, usize)> {
    let mut lo = 0;
    BLOCKS
        .iter()
        .map(|&b| {
            lo += b;
            (lo - b, lo)
        })
        .collect()
}

/// One pass over `x` block by block, as one accumulator and as per-block parts that go
/// through bytes and are merged in order into the driver's empty accumulator.
fn pass_both_ways(
    feed: &dyn Fn(&mut PassStats, usize, usize),
    fresh: &dyn Fn() -> PassStats,
) -> (PassStats, PassStats) {
    let mut streamed = fresh();
    for (lo, hi) in spans() {
        feed(&mut streamed, lo, hi);
    }
    let mut merged = fresh();
    let wire = fresh().to_bytes();
    for (lo, hi) in spans() {
        let mut part = PassStats::from_bytes(&wire).unwrap();
        feed(&mut part, lo, hi);
        merged
            .merge(PassStats::from_bytes(&part.to_bytes()).unwrap())
            .unwrap();
    }
    (streamed, merged)
}

#[test]
fn per_block_parts_merged_in_order_equal_one_accumulator_bit_for_bit() {
    let (inputs, dim) = (3, 48);
    let (x, y) = data(inputs);
    let z = map(inputs, dim).transform(x.view());
    let ids: Vec<usize> = (0..x.nrows()).collect();
    let pool = rayon::ThreadPoolBuilder::new()
        .num_threads(2)
        .build()
        .unwrap();
    let (mut state, mut twin) = (NewtonState::new(dim), NewtonState::new(dim));
    let mut sampled_passes = 0;
    for _ in 0..6 {
        // A quarter of the rows in the Hessian's sample: leverage sketch from pass two.
        let fresh = || state.accumulator(2.0, 0.1, 0.25, 99);
        let feed = |acc: &mut PassStats, lo: usize, hi: usize| {
            acc.add_mapped(
                Some(&pool),
                z.slice(ndarray::s![lo..hi, ..]),
                y.slice(ndarray::s![lo..hi]),
                &ids[lo..hi],
            )
        };
        let (streamed, merged) = pass_both_ways(&feed, &fresh);
        assert_eq!(streamed.to_bytes(), merged.to_bytes());
        assert_eq!(streamed.rows(), x.nrows() as u64);
        sampled_passes += usize::from(state.lever.is_some());
        let (a, b) = (state.step(streamed).unwrap(), twin.step(merged).unwrap());
        assert_eq!(a, b);
        let bits = |s: &NewtonState| s.w.iter().map(|v| v.to_bits()).collect::<Vec<_>>();
        assert_eq!(bits(&state), bits(&twin));
        if matches!(a, Step::Stalled { .. }) {
            break;
        }
    }
    assert!(
        sampled_passes > 0,
        "the leverage-weighted sample was exercised"
    );
}

#[test]
fn input_row_samples_merge_exactly_and_map_to_the_same_hessian() {
    let (inputs, dim) = (3, 40);
    let (x, y) = data(inputs);
    let fmap = map(inputs, dim);
    let ids: Vec<usize> = (0..x.nrows()).collect();
    let mut state = NewtonState::new(dim);
    for pass in 0..3 {
        let fresh = || {
            state
                .accumulator(2.0, 0.1, 0.25, 5)
                .with_input_sample(inputs)
        };
        let feed = |acc: &mut PassStats, lo: usize, hi: usize| {
            acc.add_inputs(
                None,
                x.slice(ndarray::s![lo..hi, ..]),
                &fmap,
                y.slice(ndarray::s![lo..hi]),
                &ids[lo..hi],
            )
        };
        let (mut streamed, mut merged) = pass_both_ways(&feed, &fresh);
        assert_eq!(streamed.to_bytes(), merged.to_bytes());
        let sampled = streamed.sampled_inputs().unwrap();
        assert!(sampled > 0, "pass {pass}: rows were sampled");
        // What travels: O(D·K + sample × (inputs + 1)) values, no Gram matrix.
        let bound = 8 * ((dim + 1) * (super::SKETCH + 8) + sampled * (inputs + 1) + 200);
        assert!(merged.to_bytes().len() <= bound, "pass {pass}");
        // The same pass with the sample mapped on the spot (Gram of mapped rows).
        let mut mapped = state.accumulator(2.0, 0.1, 0.25, 5);
        for (lo, hi) in spans() {
            mapped.add_inputs(
                None,
                x.slice(ndarray::s![lo..hi, ..]),
                &fmap,
                y.slice(ndarray::s![lo..hi]),
                &ids[lo..hi],
            );
        }
        streamed.map_sample(None, &fmap);
        merged.map_sample(None, &fmap);
        assert_eq!(streamed.to_bytes(), merged.to_bytes());
        let (super::stats::Sample::Gram(h1), super::stats::Sample::Gram(h2)) =
            (&streamed.sample, &mapped.sample)
        else {
            panic!("mapped samples are Gram matrices");
        };
        // The same rows and weights, summed in other groups: equal up to rounding.
        let scale = h2.iter().fold(0.0f64, |m, v| m.max(v.abs()));
        let worst = (h1 - h2).iter().fold(0.0f64, |m, v| m.max(v.abs()));
        assert!(worst <= 1e-12 * scale, "pass {pass}: {worst} vs {scale}");
        assert_eq!(streamed.sums, mapped.sums);
        state.step(streamed).unwrap();
    }
}

#[test]
fn bytes_round_trip_and_damage_is_refused() {
    let (inputs, dim) = (3, 16);
    let (x, y) = data(inputs);
    let z = map(inputs, dim).transform(x.view());
    let ids: Vec<usize> = (0..x.nrows()).collect();
    let mut state = NewtonState::new(dim);
    let mut acc = state.accumulator(1.0, 0.2, 1.0, 1);
    acc.add_mapped(None, z.view(), y.view(), &ids);
    state.step(acc).unwrap();
    let mut acc = state.accumulator(1.0, 0.2, 1.0, 1);
    acc.add_mapped(None, z.view(), y.view(), &ids);
    let bytes = acc.to_bytes();
    let back = PassStats::from_bytes(&bytes).unwrap();
    assert_eq!(back.to_bytes(), bytes);
    assert_eq!(back, acc);
    for at in [0, 9, bytes.len() / 2, bytes.len() - 1] {
        let mut bad = bytes.clone();
        bad[at] ^= 0x10;
        assert!(PassStats::from_bytes(&bad).is_err(), "flipped byte {at}");
    }
    assert!(PassStats::from_bytes(&bytes[..bytes.len() - 9]).is_err());
    assert!(PassStats::from_bytes(&[]).is_err());
    // Parts of another pass (other weights) or another sample form are refused.
    let mut other = state.clone();
    other.w[0] += 1.0;
    let mut total = state.accumulator(1.0, 0.2, 1.0, 1);
    assert!(total.merge(other.accumulator(1.0, 0.2, 1.0, 1)).is_err());
    let inputs_form = state
        .accumulator(1.0, 0.2, 1.0, 1)
        .with_input_sample(inputs);
    assert!(total.merge(inputs_form).is_err());
    assert!(total.merge(back).is_ok());
}
