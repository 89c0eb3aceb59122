//! The model-file container: round trip, layout as seen by a plain Arrow reader, and
//! clean errors on damaged, foreign, truncated and newer files.

use crate::common;

use std::collections::HashMap;
use std::io::{Cursor, Write};
use std::path::Path;
use std::sync::Arc;

use arrow_array::{Array, Float64Array, ListArray, RecordBatch, StringArray, UInt64Array};
use arrow_schema::{DataType, Field, Schema};
use kernlake::modelfile::{ModelFile, FORMAT_VERSION};
use kernlake::testing::{is_temp_name, AtomicFile};
use kernlake::Error;
use ndarray::{array, Array2};

thread_local! {
    /// Set when a panic starts on this thread, even one caught inside the library.
    static PANICKED: std::cell::Cell<bool> = const { std::cell::Cell::new(false) };
}

/// Decodes `bytes` and reports whether any panic happened during decoding (the library
/// catches a reader panic as a last resort; a clean error must not need that).
fn decode_watching_panics(bytes: &[u8], origin: &Path) -> (kernlake::Result<ModelFile>, bool) {
    static HOOK: std::sync::Once = std::sync::Once::new();
    HOOK.call_once(|| {
        let previous = std::panic::take_hook();
        std::panic::set_hook(Box::new(move |info| {
            PANICKED.with(|p| p.set(true));
            previous(info);
        }));
    });
    PANICKED.with(|p| p.set(false));
    let result = ModelFile::from_bytes(bytes, origin);
    (result, PANICKED.with(|p| p.get()))
}

/// A small model with awkward values: signed zero, subnormal, extremes, an empty array.
fn sample_model() -> ModelFile {
    let weights = Array2::from_shape_fn((3, 4), |(i, j)| (i as f64 + 1.0) / (j as f64 + 3.0));
    ModelFile {
        meta: serde_json::json!({
            "contract": {"columns": ["outdoor_temp", "outdoor_rh"], "target": "compressor_kw"},
            "settings": {"c": 10.0, "epsilon": 0.05, "gamma": 0.125, "seed": 7},
            "report": {"rows": 12345, "duality_gap": 1.5e-6, "note": "ünïcødé ✓"}
        }),
        arrays: vec![
            ("weights".to_string(), weights),
            (
                "scaler".to_string(),
                array![[-0.0, 5e-324, f64::MAX], [f64::MIN_POSITIVE, -1.0e300, 0.1]],
            ),
            ("empty".to_string(), Array2::zeros((0, 3))),
            ("bias".to_string(), array![[0.75]]),
        ],
    }
}

/// Asserts two models are equal bit for bit (values compared by their bit patterns).
fn assert_bit_identical(a: &ModelFile, b: &ModelFile) {
    assert_eq!(a.meta, b.meta);
    assert_eq!(a.arrays.len(), b.arrays.len());
    for ((na, xa), (nb, xb)) in a.arrays.iter().zip(&b.arrays) {
        assert_eq!(na, nb);
        assert_eq!(xa.shape(), xb.shape(), "shape of {na}");
        let ba: Vec<u64> = xa.iter().map(|v| v.to_bits()).collect();
        let bb: Vec<u64> = xb.iter().map(|v| v.to_bits()).collect();
        assert_eq!(ba, bb, "values of {na}");
    }
}

/// The message of an `Error::ModelFile` for `path`, or a panic describing what came.
fn model_error_message(result: kernlake::Result<ModelFile>, path: &Path) -> String {
    match result {
        Err(Error::ModelFile { path: p, message }) => {
            assert_eq!(p, path, "the error names the file");
            message
        }
        other => panic!("expected Error::ModelFile, got {other:?}"),
    }
}

#[test]
fn save_and_load_round_trip_bit_identical() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("model.klm");
    let model = sample_model();
    model.save(&path).unwrap();
    let back = ModelFile::load(&path).unwrap();
    assert_bit_identical(&model, &back);
    assert_eq!(back.array("bias"), Some(&array![[0.75]]));
    assert_eq!(back.array("absent"), None);
    // Saving again over the old file gives the same bytes (deterministic encoding).
    let first = std::fs::read(&path).unwrap();
    model.save(&path).unwrap();
    assert_eq!(std::fs::read(&path).unwrap(), first);
}

#[test]
fn plain_arrow_reader_sees_documented_layout() {
    let model = sample_model();
    let bytes = model.to_bytes().unwrap();
    // reference library: arrow-ipc FileReader opens the file with no kernlake code.
    let mut reader = arrow_ipc::reader::FileReader::try_new(Cursor::new(bytes), None).unwrap();
    let schema = reader.schema();
    let names: Vec<&str> = schema.fields().iter().map(|f| f.name().as_str()).collect();
    assert_eq!(names, ["name", "rows", "cols", "values"]);
    assert_eq!(schema.field(0).data_type(), &DataType::Utf8);
    assert_eq!(schema.field(1).data_type(), &DataType::UInt64);
    assert_eq!(schema.field(2).data_type(), &DataType::UInt64);
    assert!(
        matches!(schema.field(3).data_type(), DataType::List(item) if item.data_type() == &DataType::Float64)
    );
    let md = schema.metadata();
    assert_eq!(md["kernlake.format"], FORMAT_VERSION.to_string());
    assert_eq!(FORMAT_VERSION, 1);
    let meta_json = &md["kernlake.meta"];
    let meta: serde_json::Value = serde_json::from_str(meta_json).unwrap();
    assert_eq!(meta, model.meta);

    assert_eq!(reader.num_batches(), 1);
    let batch = reader.next().unwrap().unwrap();
    assert_eq!(batch.num_rows(), model.arrays.len());
    let name = batch
        .column(0)
        .as_any()
        .downcast_ref::<StringArray>()
        .unwrap();
    let rows = batch
        .column(1)
        .as_any()
        .downcast_ref::<UInt64Array>()
        .unwrap();
    let cols = batch
        .column(2)
        .as_any()
        .downcast_ref::<UInt64Array>()
        .unwrap();
    let values = batch
        .column(3)
        .as_any()
        .downcast_ref::<ListArray>()
        .unwrap();
    // reference library: crc32fast over the documented byte sequence.
    let mut crc = crc32fast::Hasher::new();
    crc.update(meta_json.as_bytes());
    for (i, (expected_name, expected)) in model.arrays.iter().enumerate() {
        assert_eq!(name.value(i), expected_name);
        assert_eq!(rows.value(i), expected.nrows() as u64);
        assert_eq!(cols.value(i), expected.ncols() as u64);
        let list = values.value(i);
        let list = list.as_any().downcast_ref::<Float64Array>().unwrap();
        // Row-major: element (r, c) at r * cols + c.
        let row_major: Vec<u64> = expected.iter().map(|v| v.to_bits()).collect();
        let stored: Vec<u64> = list.values().iter().map(|v| v.to_bits()).collect();
        assert_eq!(stored, row_major, "{expected_name}");
        crc.update(&(expected_name.len() as u64).to_le_bytes());
        crc.update(expected_name.as_bytes());
        crc.update(&rows.value(i).to_le_bytes());
        crc.update(&cols.value(i).to_le_bytes());
        for v in list.values().iter() {
            crc.update(&v.to_le_bytes());
        }
    }
    assert_eq!(md["kernlake.checksum"], format!("{:08x}", crc.finalize()));
    // The weights really are row-major: row 1, column 2 is (1 + 1) / (2 + 3).
    let w = values.value(0);
    let w = w.as_any().downcast_ref::<Float64Array>().unwrap();
    assert_eq!(w.value(4 + 2), 2.0 / 5.0);
}

#[test]
fn every_truncation_is_a_clean_error() {
    let bytes = sample_model().to_bytes().unwrap();
    let origin = Path::new("cut.klm");
    for len in 0..bytes.len() {
        let (result, panicked) = decode_watching_panics(&bytes[..len], origin);
        assert!(!panicked, "length {len} made the decoder panic");
        let message = model_error_message(result, origin);
        // Issue 20: one short sentence, no decoder trace.
        assert!(
            message.len() <= 300 && !message.contains('\n'),
            "length {len}: {message}"
        );
        if len == 0 {
            assert!(message.contains("empty"), "{message}");
        } else if len >= 6 {
            // common practice: a file that lost its tail is reported as truncated.
            assert!(message.contains("truncated"), "length {len}: {message}");
        }
    }
}

#[test]
fn every_byte_flip_errors_cleanly_or_loads_the_same_model() {
    let model = sample_model();
    let bytes = model.to_bytes().unwrap();
    let origin = Path::new("flipped.klm");
    let mut refused = 0;
    let mut checksum_failures = 0;
    for i in 0..bytes.len() {
        for mask in [0x01u8, 0x80, 0xff] {
            let mut damaged = bytes.clone();
            damaged[i] ^= mask;
            let (result, panicked) = decode_watching_panics(&damaged, origin);
            assert!(!panicked, "byte {i} ^ {mask:#x} made the decoder panic");
            match result {
                Ok(loaded) => assert_bit_identical(&loaded, &model),
                Err(Error::ModelFile { path, message }) => {
                    assert_eq!(path, origin);
                    // Issue 20: one short sentence, no 600-character decoder trace.
                    assert!(
                        !message.is_empty() && message.len() <= 300 && !message.contains('\n'),
                        "byte {i} ^ {mask:#x}: {message}"
                    );
                    refused += 1;
                    checksum_failures += usize::from(message.contains("fails its checksum"));
                }
                Err(other) => panic!("byte {i} ^ {mask:#x}: unexpected error {other:?}"),
            }
        }
    }
    // Every value and meta byte is covered by the checksum, so many flips must be refused.
    assert!(
        checksum_failures > 0 && refused > bytes.len() / 2,
        "{refused} refused"
    );

    // A flip inside the stored values is a checksum failure, named as such.
    let needle = 0.75f64.to_le_bytes();
    let at = bytes
        .windows(8)
        .position(|w| w == needle)
        .expect("the bias value is stored verbatim");
    let mut damaged = bytes.clone();
    damaged[at] ^= 0x01;
    let message = model_error_message(ModelFile::from_bytes(&damaged, origin), origin);
    assert!(
        message.contains("fails its checksum: the file is corrupted"),
        "{message}"
    );
}

/// An Arrow IPC file with our columns and the given schema metadata.
fn arrow_file_with_metadata(metadata: HashMap<String, String>) -> Vec<u8> {
    let item = Arc::new(Field::new_list_field(DataType::Float64, false));
    let schema = Arc::new(Schema::new_with_metadata(
        vec![
            Field::new("name", DataType::Utf8, false),
            Field::new("rows", DataType::UInt64, false),
            Field::new("cols", DataType::UInt64, false),
            Field::new("values", DataType::List(item.clone()), false),
        ],
        metadata,
    ));
    let list = ListArray::try_new(
        item,
        arrow_buffer::OffsetBuffer::new(vec![0i32, 1].into()),
        Arc::new(Float64Array::from(vec![1.0])),
        None,
    )
    .unwrap();
    let batch = RecordBatch::try_new(
        schema.clone(),
        vec![
            Arc::new(StringArray::from(vec!["bias"])),
            Arc::new(UInt64Array::from(vec![1u64])),
            Arc::new(UInt64Array::from(vec![1u64])),
            Arc::new(list),
        ],
    )
    .unwrap();
    let mut writer = arrow_ipc::writer::FileWriter::try_new(Vec::new(), &schema).unwrap();
    writer.write(&batch).unwrap();
    writer.finish().unwrap();
    writer.into_inner().unwrap()
}

#[test]
fn newer_format_and_foreign_arrow_files_are_refused() {
    let origin = Path::new("other.klm");
    let newer = arrow_file_with_metadata(HashMap::from([
        ("kernlake.format".to_string(), "2".to_string()),
        ("kernlake.meta".to_string(), "{}".to_string()),
        ("kernlake.checksum".to_string(), "00000000".to_string()),
    ]));
    let message = model_error_message(ModelFile::from_bytes(&newer, origin), origin);
    assert_eq!(
        message,
        "was written by a newer kernlake (format 2); this build reads format 1 — upgrade kernlake"
    );

    let foreign = arrow_file_with_metadata(HashMap::new());
    let message = model_error_message(ModelFile::from_bytes(&foreign, origin), origin);
    assert!(message.contains("not a kernlake model"), "{message}");

    // Our layout and version but a wrong checksum.
    let forged = arrow_file_with_metadata(HashMap::from([
        ("kernlake.format".to_string(), "1".to_string()),
        ("kernlake.meta".to_string(), "{}".to_string()),
        ("kernlake.checksum".to_string(), "00000000".to_string()),
    ]));
    let message = model_error_message(ModelFile::from_bytes(&forged, origin), origin);
    assert!(message.contains("fails its checksum"), "{message}");
}

#[test]
fn empty_and_non_arrow_files_are_refused_naming_the_path() {
    let dir = tempfile::tempdir().unwrap();
    let empty = dir.path().join("empty.klm");
    std::fs::write(&empty, b"").unwrap();
    let message = model_error_message(ModelFile::load(&empty), &empty);
    assert!(message.contains("empty"), "{message}");

    let csv = dir.path().join("data.csv");
    std::fs::write(&csv, b"outdoor_temp,compressor_kw\n21.5,130.2\n").unwrap();
    let message = model_error_message(ModelFile::load(&csv), &csv);
    assert!(message.contains("not an Arrow"), "{message}");
    let shown = Error::ModelFile {
        path: csv.clone(),
        message,
    }
    .to_string();
    assert!(shown.contains("data.csv"), "{shown}");

    let absent = dir.path().join("absent.klm");
    assert!(matches!(ModelFile::load(&absent), Err(Error::Io { path, .. }) if path == absent));
}

#[test]
fn save_leaves_no_temporary_file_and_interrupted_writes_leave_nothing() {
    let dir = tempfile::tempdir().unwrap();
    let path = dir.path().join("model.klm");
    sample_model().save(&path).unwrap();
    let names: Vec<String> = std::fs::read_dir(dir.path())
        .unwrap()
        .map(|e| e.unwrap().file_name().into_string().unwrap())
        .collect();
    assert_eq!(names, ["model.klm"]);

    // An interrupted write (dropped before commit) of a new name leaves it absent…
    let fresh = dir.path().join("fresh.klm");
    {
        let mut out = AtomicFile::create(&fresh).unwrap();
        out.write_all(b"ARROW1 half a model").unwrap();
        let temp = out.temp_path().file_name().unwrap().to_str().unwrap();
        assert!(is_temp_name(temp), "{temp}");
    }
    assert!(!fresh.exists());
    // …and of an existing name leaves the old file untouched.
    let before = std::fs::read(&path).unwrap();
    {
        let mut out = AtomicFile::create(&path).unwrap();
        out.write_all(b"garbage").unwrap();
    }
    assert_eq!(std::fs::read(&path).unwrap(), before);
    assert_eq!(std::fs::read_dir(dir.path()).unwrap().count(), 1);
    ModelFile::load(&path).unwrap();

    // Saving into a folder that does not exist names the user's path and the missing
    // folder, never the temporary name.
    let nowhere = dir.path().join("no-such-folder").join("model.klm");
    let e = sample_model().save(&nowhere).unwrap_err();
    let msg = e.to_string();
    assert!(matches!(e, Error::Output { .. }), "{msg}");
    assert!(
        msg.starts_with(&nowhere.display().to_string())
            && msg.contains("no-such-folder does not exist")
            && !msg.contains(".part-"),
        "{msg}"
    );
    // A folder given as the model's path is named as such (not "File exists").
    let e = sample_model().save(dir.path()).unwrap_err().to_string();
    assert!(e.contains("is a folder") && !e.contains(".part-"), "{e}");
}

/// A model fitted on 300 rows of Friedman #1 (published: Friedman 1991), with coverage.
fn fitted() -> kernlake::model::Model {
    let (x, y, _) = common::friedman1(300, 3);
    kernlake::fit::Fitter::new()
        .with_dim(32)
        .with_gamma(0.1)
        .with_c(10.0)
        .with_epsilon(0.1)
        .with_seed(5)
        .fit(x.view(), y.view())
        .unwrap()
}

/// Hand edits that keep the checksum right (the file is re-encoded) but make the model
/// meaningless; each used to load and predict NaN or nonsense with exit 0 (issue 20).
#[test]
fn models_that_pass_the_checksum_but_mean_nothing_are_refused() {
    let model = fitted();
    let good = model.to_model_file().unwrap();
    let origin = Path::new("edited.klm");
    kernlake::model::Model::from_model_file(&good, origin).unwrap();
    let set = |f: &mut ModelFile, name: &str, edit: &dyn Fn(&mut Array2<f64>)| {
        let a = &mut f.arrays.iter_mut().find(|(n, _)| n == name).unwrap().1;
        edit(a);
    };
    type Edit<'a> = Box<dyn Fn(&mut ModelFile) + 'a>;
    let cases: Vec<(&str, Edit<'_>, &str)> = vec![
        (
            "NaN weight",
            Box::new(|f| set(f, "weights", &|a| a[[0, 3]] = f64::NAN)),
            "weight 4",
        ),
        (
            "zero scale",
            Box::new(|f| set(f, "scaler.scale", &|a| a[[0, 1]] = 0.0)),
            "scale",
        ),
        (
            "infinite scale",
            Box::new(|f| set(f, "scaler.scale", &|a| a[[0, 0]] = f64::INFINITY)),
            "scale",
        ),
        (
            "NaN mean",
            Box::new(|f| set(f, "scaler.mean", &|a| a[[0, 2]] = f64::NAN)),
            "mean",
        ),
        (
            "infinite intercept",
            Box::new(|f| set(f, "intercept", &|a| a[[0, 0]] = f64::INFINITY)),
            "intercept",
        ),
        (
            "duplicated names",
            Box::new(|f| {
                f.meta["columns"]["features"][1] = f.meta["columns"]["features"][0].clone()
            }),
            "twice",
        ),
        (
            "gamma -1",
            Box::new(|f| f.meta["kernel"]["gamma"] = serde_json::json!(-1.0)),
            "gamma",
        ),
        (
            "NaN threshold",
            Box::new(|f| set(f, "coverage.threshold", &|a| a[[0, 0]] = f64::NAN)),
            "threshold",
        ),
        (
            "zero landmarks",
            Box::new(|f| {
                set(f, "coverage.landmarks", &|a| {
                    *a = Array2::zeros((0, a.ncols()))
                })
            }),
            "landmarks",
        ),
        (
            "NaN frequency",
            Box::new(|f| set(f, "map.frequencies", &|a| a[[1, 1]] = f64::NAN)),
            "frequencies",
        ),
    ];
    for (what, edit, needle) in cases {
        let mut f = good.clone();
        edit(&mut f);
        // re-encode: the checksum is right, only the meaning is wrong
        let bytes = f.to_bytes().unwrap();
        let decoded = ModelFile::from_bytes(&bytes, origin).unwrap();
        let e = match kernlake::model::Model::from_model_file(&decoded, origin) {
            Ok(_) => panic!("{what}: a meaningless model loaded"),
            Err(e) => e.to_string(),
        };
        assert!(
            e.contains("edited.klm") && e.contains(needle),
            "{what}: {e}"
        );
        assert!(
            e.len() < 200 && !e.contains('\n'),
            "{what}: not one short sentence: {e}"
        );
    }
}

#[test]
fn output_folders_are_created_whole_or_refused_naming_the_file_in_the_way() {
    // common practice: create each missing folder, then sync its parent
    let dir = tempfile::tempdir().unwrap();
    let deep = dir.path().join("a").join("b").join("c");
    kernlake::testing::create_dir_durable(&deep).unwrap();
    assert!(deep.is_dir());
    kernlake::testing::create_dir_durable(&deep).unwrap();
    std::fs::write(dir.path().join("plain"), b"x").unwrap();
    let blocked = dir.path().join("plain").join("sub");
    let e = kernlake::testing::create_dir_durable(&blocked).unwrap_err();
    let msg = e.to_string();
    assert!(matches!(e, Error::Output { .. }), "{msg}");
    assert!(msg.contains("plain") && msg.contains("is a file"), "{msg}");
    // a stale temporary file of a dead process is removed by the next write of that
    // name (no process has an id above Linux's largest pid)
    let stale = deep.join(".m.klm.part-4194305-0123456789abcdef");
    std::fs::write(&stale, b"half").unwrap();
    sample_model().save(&deep.join("m.klm")).unwrap();
    assert!(!stale.exists());
}

#[test]
fn a_file_written_before_the_problem_was_named_so_still_loads() {
    // Compatibility: `fixtures/model_before_problem_rename.klm` was written by kernlake
    // 0.1.0 before the model's C, epsilon and loss were stored as `problem` (they were
    // under `solver`): `fit` on the first 399 rows of CCPP (dataset: Tüfekci 2014,
    // tests/data) with -D 8 and every other setting at its default.
    let path = std::path::Path::new(env!("CARGO_MANIFEST_DIR"))
        .join("tests/it/fixtures/model_before_problem_rename.klm");
    let model = kernlake::Model::load(&path).expect("an older model file loads");
    assert_eq!(model.weights.len(), 8);
    assert!(model.problem.c > 0.0 && model.problem.epsilon >= 0.0);
    assert_eq!(model.problem.loss, kernlake::Loss::L2);
    // Saved again, the file names the field `problem` and loads back to the same model.
    let dir = tempfile::tempdir().unwrap();
    let again = dir.path().join("again.klm");
    model.save(&again).unwrap();
    let back = kernlake::Model::load(&again).unwrap();
    assert_eq!(back.problem, model.problem);
    assert_eq!(back.weights, model.weights);
    let bytes = std::fs::read(&again).unwrap();
    let text = String::from_utf8_lossy(&bytes);
    assert!(text.contains("\"problem\"") && !text.contains("\"solver\""));
}
