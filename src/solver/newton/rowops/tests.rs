//! Every build of the row kernels against exact sums, and the four-row form against
//! four single rows.
use super::*;
use crate::cpu::Level;

/// Every build this CPU runs, once each.
fn paths() -> Vec<Cpu> {
    let mut p: Vec<Cpu> = [Level::Generic, Level::Avx2, Level::Avx2Fma, Level::Avx512]
        .into_iter()
        .map(|l| Cpu::detect().capped(l))
        .collect();
    p.dedup();
    p
}

/// Every path against plain sums in exact-enough arithmetic: integer-valued inputs
/// small enough that every product and partial sum is exact in f64, so each path must
/// give the exact value whatever its order or rounding (common practice).
#[test]
fn every_path_gives_exact_sums_on_integer_data() {
    for n in [1usize, 7, 16, 33, 1025] {
        let z: Vec<f64> = (0..n).map(|j| ((j * 7 + 3) % 11) as f64 - 5.0).collect();
        for m in [1usize, 2, 3, 8, 10] {
            let cols: Vec<f64> = (0..m * n)
                .map(|j| ((j * 5 + 1) % 13) as f64 - 6.0)
                .collect();
            let want: Vec<f64> = (0..m)
                .map(|k| (0..n).map(|j| z[j] * cols[k * n + j]).sum())
                .collect();
            let b: Vec<f64> = (0..m).map(|k| k as f64 - 1.0).collect();
            let mut want_g = cols.clone();
            for k in 0..m {
                for j in 0..n {
                    want_g[k * n + j] += b[k] * z[j];
                }
            }
            let z32: Vec<f32> = z.iter().map(|&v| v as f32).collect();
            let cols32: Vec<f32> = cols.iter().map(|&v| v as f32).collect();
            for path in paths() {
                // Integers below 2^24 are exact in f32 too.
                let mut out32 = vec![0.0; m];
                dots_f32(path, &z32, &cols32, &mut out32);
                assert_eq!(out32, want, "dots_f32 n {n} m {m} {path:?}");
                let mut out = vec![0.0; m];
                dots(path, &z, &cols, &mut out);
                assert_eq!(out, want, "dots n {n} m {m} {path:?}");
                let mut g = cols.clone();
                add_scaled(path, &z, &b, &mut g);
                assert_eq!(g, want_g, "add_scaled n {n} m {m} {path:?}");
            }
        }
    }
}

/// Four rows at once against four single-row calls, bit for bit, on data whose
/// rounding matters (the same operations in the same order must give the same bits).
#[test]
fn four_rows_at_once_equal_four_single_rows() {
    for m in [1usize, 2, 3] {
        let n = 37;
        let rows: Vec<Vec<f64>> = (0..4)
            .map(|r| {
                (0..n)
                    .map(|j| ((r * 31 + j) as f64 * 0.7381).sin() / 3.0)
                    .collect()
            })
            .collect();
        let b: Vec<f64> = (0..4 * m).map(|q| (q as f64 * 1.37).cos() * 5.1).collect();
        let g0: Vec<f64> = (0..m * n).map(|q| (q as f64 * 0.11).tan()).collect();
        for path in paths() {
            let mut one = g0.clone();
            for r in 0..4 {
                add_scaled(path, &rows[r], &b[r * m..(r + 1) * m], &mut one);
            }
            let mut four = g0.clone();
            let z: [&[f64]; 4] = std::array::from_fn(|r| &rows[r][..]);
            add_scaled4(path, z, &b, &mut four);
            assert_eq!(one, four, "m {m} {path:?}");
        }
    }
}
