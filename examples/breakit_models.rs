//! Damaged copies of a model file for `scripts/breakit`: random byte flips, truncations,
//! and hand edits that keep the checksum right but make the model meaningless.
//!
//! Usage: `breakit_models MODEL OUT_DIR COUNT SEED` writes `COUNT` flipped or truncated
//! copies (`flip-*.klm`, `cut-*.klm`) and one file per semantic edit (`sem-*.klm`).

use std::path::{Path, PathBuf};

use kernlake::data::splitmix64;
use kernlake::modelfile::ModelFile;
use ndarray::Array2;

fn edit(file: &ModelFile, name: &str, f: impl Fn(&mut Array2<f64>)) -> ModelFile {
    let mut out = file.clone();
    if let Some((_, a)) = out.arrays.iter_mut().find(|(n, _)| n == name) {
        f(a);
    }
    out
}

fn main() -> Result<(), Box<dyn std::error::Error>> {
    let args: Vec<String> = std::env::args().collect();
    if args.len() != 5 {
        return Err("usage: breakit_models MODEL OUT_DIR COUNT SEED".into());
    }
    let model = PathBuf::from(&args[1]);
    let out = PathBuf::from(&args[2]);
    let count: u64 = args[3].parse()?;
    let seed: u64 = args[4].parse()?;
    std::fs::create_dir_all(&out)?;
    let bytes = std::fs::read(&model)?;
    let len = bytes.len() as u64;
    for k in 0..count {
        let r = |i: u64| splitmix64(seed, k * 16 + i);
        if k % 2 == 0 {
            // 1 to 4 bytes, each XORed with a random non-zero byte
            let mut b = bytes.clone();
            for i in 0..1 + r(0) % 4 {
                let at = (r(1 + i) % len) as usize;
                b[at] ^= (1 + r(8 + i) % 255) as u8;
            }
            std::fs::write(out.join(format!("flip-{k:04}.klm")), b)?;
        } else {
            let keep = (r(0) % len) as usize;
            std::fs::write(out.join(format!("cut-{k:04}.klm")), &bytes[..keep])?;
        }
    }
    let good = ModelFile::load(&model)?;
    let mut dup = good.clone();
    dup.meta["columns"]["features"][1] = dup.meta["columns"]["features"][0].clone();
    let mut gamma = good.clone();
    gamma.meta["kernel"]["gamma"] = serde_json::json!(-1.0);
    let semantic: Vec<(&str, ModelFile)> = vec![
        (
            "nan-weight",
            edit(&good, "weights", |a| a[[0, 0]] = f64::NAN),
        ),
        (
            "zero-scale",
            edit(&good, "scaler.scale", |a| a[[0, 0]] = 0.0),
        ),
        (
            "inf-scale",
            edit(&good, "scaler.scale", |a| a[[0, 1]] = f64::INFINITY),
        ),
        (
            "nan-mean",
            edit(&good, "scaler.mean", |a| a[[0, 0]] = f64::NAN),
        ),
        (
            "nan-intercept",
            edit(&good, "intercept", |a| a[[0, 0]] = f64::NAN),
        ),
        ("duplicate-names", dup),
        ("gamma-minus-one", gamma),
        (
            "nan-threshold",
            edit(&good, "coverage.threshold", |a| a[[0, 0]] = f64::NAN),
        ),
        (
            "zero-landmarks",
            edit(&good, "coverage.landmarks", |a| {
                *a = Array2::zeros((0, a.ncols()))
            }),
        ),
        (
            "nan-frequency",
            edit(&good, "map.frequencies", |a| a[[0, 0]] = f64::NAN),
        ),
    ];
    for (name, f) in semantic {
        let path: &Path = &out.join(format!("sem-{name}.klm"));
        std::fs::write(path, f.to_bytes()?)?;
    }
    Ok(())
}
