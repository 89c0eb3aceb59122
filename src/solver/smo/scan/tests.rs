//! Unit tests of the lane-wise passes against the scalar scans of `reference.rs`.

use super::super::team::{with_crew, Crew};
use super::reference::{sequential, sequential_wss2};
use super::split::{extremes_split, wss2_split};
use super::*;
use rand::{Rng, SeedableRng};
use rand_chacha::ChaCha8Rng;

/// Lane-wise passes choose exactly the variables of the sequential scans, and update
/// the gradient exactly, on data full of ties (few distinct values, ε = 0 included,
/// lengths that end in a partial group of lanes), whole or split in two or three
/// parts over crews of one to three threads. Reference: the scalar scans of
/// `reference.rs` (common practice for a re-arranged computation).
#[test]
fn lanes_and_parts_choose_as_the_sequential_scan() {
    for threads in [1, 2, 3] {
        rayon::ThreadPoolBuilder::new()
            .num_threads(threads)
            .build()
            .unwrap()
            .install(|| with_crew(compare_with_sequential));
    }
}

fn compare_with_sequential(crew: &Crew) {
    let mut rng = ChaCha8Rng::seed_from_u64(5);
    let c = 2.0;
    for trial in 0..300 {
        let n = 1 + trial % 45;
        let parts = 1 + trial % 3;
        let eps = if trial % 3 == 0 { 0.0 } else { 0.25 };
        let pick = |rng: &mut ChaCha8Rng| [0.0, 0.5, c][rng.random_range(0..3)];
        let g: Vec<f64> = (0..n)
            .map(|_| rng.random_range(-3..=3) as f64 * 0.5)
            .collect();
        let ap: Vec<f64> = (0..n).map(|_| pick(&mut rng)).collect();
        let am: Vec<f64> = (0..n).map(|_| pick(&mut rng)).collect();
        let ki: Vec<f64> = (0..n)
            .map(|_| rng.random_range(0..4) as f64 * 0.25)
            .collect();
        let kj: Vec<f64> = (0..n)
            .map(|_| rng.random_range(0..4) as f64 * 0.25)
            .collect();
        let diag = vec![1.0; n];
        let s = View {
            ap: &ap,
            am: &am,
            c,
            eps,
        };
        let mut g1 = g.clone();
        let e = extremes_split(crew, parts, &mut g1, None, &s);
        let r = sequential(&g, &ap, &am, c, eps);
        assert_eq!(
            (e.m, e.i, e.big_m, e.j),
            (r.m, r.i, r.big_m, r.j),
            "trial {trial}"
        );
        let u = Update {
            ki: &ki,
            kj: &kj,
            di: 0.5,
            dj: -0.25,
        };
        let e = extremes_split(crew, parts, &mut g1, Some(u), &s);
        let g2: Vec<f64> = (0..n)
            .map(|p| g[p] + (0.5 * ki[p] + -0.25 * kj[p]))
            .collect();
        assert_eq!(g1, g2, "trial {trial}");
        let r = sequential(&g2, &ap, &am, c, eps);
        assert_eq!(
            (e.m, e.i, e.big_m, e.j),
            (r.m, r.i, r.big_m, r.j),
            "trial {trial}"
        );
        if r.i != NONE {
            let kii = 1.0;
            let w = Second {
                diag: &diag,
                ki: &ki,
                kii,
                m: r.m,
                tau: 1e-12,
            };
            let got = wss2_split(crew, parts, &g2, &w, &s);
            assert_eq!(
                got,
                sequential_wss2(&g2, &s, &diag, &ki, kii, r.m, 1e-12),
                "trial {trial}"
            );
        }
    }
}
