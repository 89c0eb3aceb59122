//! Data sources: discovery, partitions, column choice, block reading, missing values and
//! bad input, on Parquet and CSV fixtures written from the CCPP dataset.

use std::fs::{self, File};
use std::path::{Path, PathBuf};
use std::sync::Arc;

use arrow_array::types::Int32Type;
use arrow_array::{
    ArrayRef, BooleanArray, DictionaryArray, Float32Array, Float64Array, Int16Array, Int32Array,
    Int64Array, Int8Array, RecordBatch, StringArray, UInt16Array, UInt32Array, UInt64Array,
    UInt8Array,
};
use arrow_schema::DataType;
use kernlake::data::{
    choose_columns, discover, discover_lenient, resolve_columns, Block, ColumnSelection,
    CsvOptions, Format, MissingPolicy, ResolvedColumns, TableReader,
};
use kernlake::Error;
use parquet::arrow::ArrowWriter;

const NAMES: [&str; 5] = ["AT", "V", "AP", "RH", "PE"];

use crate::common::{ccpp_path, ccpp_rows as ccpp};

fn write_batch(path: &Path, batch: &RecordBatch) {
    fs::create_dir_all(path.parent().unwrap()).unwrap();
    let mut w = ArrowWriter::try_new(File::create(path).unwrap(), batch.schema(), None).unwrap();
    w.write(batch).unwrap();
    w.close().unwrap();
}

fn ccpp_batch(rows: &[[f64; 5]]) -> RecordBatch {
    RecordBatch::try_from_iter(NAMES.iter().enumerate().map(|(j, n)| {
        let col: ArrayRef = Arc::new(Float64Array::from(
            rows.iter().map(|r| r[j]).collect::<Vec<_>>(),
        ));
        (*n, col)
    }))
    .unwrap()
}

fn write_csv(path: &Path, rows: &[[f64; 5]]) {
    fs::create_dir_all(path.parent().unwrap()).unwrap();
    let mut s = String::from("AT,V,AP,RH,PE\n");
    for r in rows {
        let cells: Vec<String> = r.iter().map(|v| format!("{v}")).collect();
        s.push_str(&cells.join(","));
        s.push('\n');
    }
    fs::write(path, s).unwrap();
}

/// Ten files in `region=a|b/month=NN/` folders (sorted path order = data order); the
/// files with index in `csv` are written as CSV.
fn write_lake(root: &Path, data: &[[f64; 5]], parts: usize, csv: &[usize]) -> Vec<PathBuf> {
    let per = data.len().div_ceil(parts);
    let mut paths = Vec::new();
    for (k, chunk) in data.chunks(per).enumerate() {
        let region = if k < parts / 2 { "a" } else { "b" };
        let dir = root.join(format!("region={region}/month={k:02}"));
        let path = if csv.contains(&k) {
            let p = dir.join("part-0.csv");
            write_csv(&p, chunk);
            p
        } else {
            let p = dir.join("part-0.parquet");
            write_batch(&p, &ccpp_batch(chunk));
            p
        };
        paths.push(path);
    }
    paths
}

fn s(p: &Path) -> String {
    p.to_string_lossy().into_owned()
}

fn target_pe() -> ColumnSelection {
    ColumnSelection {
        target: Some("PE".into()),
        ..Default::default()
    }
}

fn read_all(reader: &TableReader) -> Vec<Block> {
    reader.blocks().unwrap().map(|b| b.unwrap()).collect()
}

/// Rows of all blocks: (row id, features..., target).
fn flatten(blocks: &[Block]) -> Vec<(u64, Vec<f64>)> {
    let mut out = Vec::new();
    for b in blocks {
        for (r, &id) in b.row_ids.iter().enumerate() {
            let mut v: Vec<f64> = b.x.row(r).to_vec();
            if let Some(y) = &b.y {
                v.push(y[r]);
            }
            out.push((id, v));
        }
    }
    out
}

#[test]
fn discovery_walks_folders_expands_globs_and_sorts() {
    let data = ccpp();
    let dir = tempfile::tempdir().unwrap();
    let root = dir.path().join("lake");
    let paths = write_lake(&root, &data, 10, &[]);
    // entries that must be skipped: hidden, underscore, non-data names
    fs::write(root.join("region=a/.part-9.parquet"), b"partial").unwrap();
    fs::write(root.join("region=a/_SUCCESS"), b"").unwrap();
    fs::write(root.join("notes.txt"), b"x").unwrap();
    write_batch(
        &root.join("_temporary/part-x.parquet"),
        &ccpp_batch(&data[..3]),
    );

    let files = discover(&[s(&root)]).unwrap();
    let got: Vec<PathBuf> = files.iter().map(|f| f.path.clone()).collect();
    assert_eq!(
        got, paths,
        "recursive walk, sorted by path, hidden entries skipped"
    );
    assert!(files.iter().all(|f| f.format == Format::Parquet));
    // dataset: Tüfekci 2014 — 9,568 rows in total, from the Parquet footers
    assert_eq!(files.iter().map(|f| f.rows.unwrap()).sum::<u64>(), 9_568);
    assert_eq!(
        files[0].partitions,
        vec![
            ("region".to_string(), "a".to_string()),
            ("month".to_string(), "00".to_string())
        ]
    );
    assert_eq!(files[9].partition("region"), Some("b"));

    // globs, duplicates removed, order independent of the order of inputs
    let glob = format!("{}/region=b/*/*.parquet", s(&root));
    let only_b = discover(std::slice::from_ref(&glob)).unwrap();
    assert_eq!(only_b.len(), 5);
    assert!(only_b.iter().all(|f| f.partition("region") == Some("b")));
    let both = discover(&[glob, s(&root), s(&paths[0])]).unwrap();
    assert_eq!(both, files);
    // a glob matching folders walks them
    let folders = discover(&[format!("{}/region=*", s(&root))]).unwrap();
    assert_eq!(folders, files);
}

#[test]
fn discovery_errors_name_the_input() {
    let dir = tempfile::tempdir().unwrap();
    let missing = dir.path().join("nowhere");
    let e = discover(&[s(&missing)]).unwrap_err().to_string();
    assert!(e.contains("nowhere") && e.contains("does not exist"), "{e}");

    let empty = dir.path().join("empty");
    fs::create_dir_all(empty.join("sub")).unwrap();
    fs::write(empty.join("sub/readme.txt"), b"x").unwrap();
    let e = discover(&[s(&empty)]).unwrap_err().to_string();
    assert!(e.contains("empty") && e.contains("no data files"), "{e}");

    let pattern = format!("{}/*.parquet", s(dir.path()));
    let e = discover(std::slice::from_ref(&pattern))
        .unwrap_err()
        .to_string();
    assert!(
        e.contains(&pattern) && e.contains("matches no data file"),
        "{e}"
    );

    // corrupt Parquet: the error names the file
    let bad = dir.path().join("bad/corrupt.parquet");
    fs::create_dir_all(bad.parent().unwrap()).unwrap();
    fs::write(&bad, b"PAR1 this is not a parquet file at all PAR1").unwrap();
    let e = discover(&[s(&bad)]).unwrap_err();
    assert!(
        matches!(&e, Error::File { path, .. } if *path == bad),
        "{e}"
    );
    assert!(e.to_string().contains("corrupt.parquet"));
}

#[test]
fn blocks_reproduce_the_dataset_from_parquet_and_csv() {
    let data = ccpp();
    let dir = tempfile::tempdir().unwrap();
    write_lake(dir.path(), &data, 10, &[2, 7]);
    let files = discover(&[s(dir.path())]).unwrap();
    assert_eq!(files[2].format, Format::Csv);
    assert_eq!(files[2].rows, None);
    let cols = resolve_columns(&files, &target_pe(), &CsvOptions::default()).unwrap();
    // default features: all numeric columns but the target; partitions not included
    assert_eq!(
        cols,
        ResolvedColumns {
            features: vec!["AT".into(), "V".into(), "AP".into(), "RH".into()],
            target: Some("PE".into())
        }
    );
    let reader = TableReader::new(files, cols.clone()).with_batch_rows(1_000);
    let rows = flatten(&read_all(&reader));
    // dataset: Tüfekci 2014 — every value, in order, with row ids 0..9568
    assert_eq!(rows.len(), data.len());
    for (i, (id, v)) in rows.iter().enumerate() {
        assert_eq!(*id, i as u64);
        assert_eq!(v.as_slice(), &data[i][..], "row {i}");
    }
    assert_eq!(reader.total_rows().unwrap(), 9_568);

    // the original CSV file read directly gives the same rows
    let csv_files = discover(&[ccpp_path()]).unwrap();
    let csv_reader = TableReader::new(csv_files, cols);
    assert_eq!(flatten(&read_all(&csv_reader)), rows);
}

#[test]
fn row_ids_do_not_depend_on_batch_size_or_file_subset() {
    let data = ccpp();
    let dir = tempfile::tempdir().unwrap();
    write_lake(dir.path(), &data, 10, &[5, 6]);
    let files = discover(&[s(dir.path())]).unwrap();
    let cols = resolve_columns(&files, &target_pe(), &CsvOptions::default()).unwrap();
    let full = flatten(&read_all(
        &TableReader::new(files.clone(), cols.clone()).with_batch_rows(65_536),
    ));
    for batch in [1, 77, 1_000, 4_096] {
        let reader = TableReader::new(files.clone(), cols.clone()).with_batch_rows(batch);
        let blocks = read_all(&reader);
        // blocks numbered 0, 1, 2, … and first_row consistent with rows
        let mut next = 0u64;
        for (i, b) in blocks.iter().enumerate() {
            assert_eq!(b.seq, i as u64);
            assert_eq!(b.first_row, next);
            assert!(b.rows <= batch);
            next += b.rows as u64;
        }
        assert_eq!(flatten(&blocks), full, "batch size {batch}");
    }
    // a subset after CSV files keeps global ids (CSV rows counted on demand)
    let subset = TableReader::new(files.clone(), cols.clone())
        .with_batch_rows(500)
        .with_files_subset(vec![7, 3]);
    let got = flatten(&read_all(&subset));
    let offsets = subset.row_offsets().unwrap();
    let want: Vec<_> = full
        .iter()
        .filter(|(id, _)| {
            (offsets[3]..offsets[4]).contains(id) || (offsets[7]..offsets[8]).contains(id)
        })
        .cloned()
        .collect();
    assert!(!want.is_empty());
    assert_eq!(got, want);
    // one file at a time, as parallel consumers read
    let reader = TableReader::new(files, cols);
    let one = flatten(
        &reader
            .file_blocks(6)
            .unwrap()
            .map(|b| b.unwrap())
            .collect::<Vec<_>>(),
    );
    assert_eq!(one[0].0, offsets[6]);
    assert_eq!(one.len() as u64, offsets[7] - offsets[6]);
}

#[test]
fn partition_columns_are_read_only_when_named() {
    let data = ccpp();
    let dir = tempfile::tempdir().unwrap();
    write_lake(dir.path(), &data, 10, &[4]);
    let files = discover(&[s(dir.path())]).unwrap();
    let sel = ColumnSelection {
        target: Some("PE".into()),
        features: Some(vec!["month".into(), "AT".into()]),
        exclude: vec![],
    };
    let cols = resolve_columns(&files, &sel, &CsvOptions::default()).unwrap();
    let reader = TableReader::new(files.clone(), cols).with_batch_rows(2_000);
    for b in read_all(&reader) {
        let month: f64 = files[b.file_index]
            .partition("month")
            .unwrap()
            .parse()
            .unwrap();
        assert_eq!(month, b.file_index as f64);
        assert!(b.x.column(0).iter().all(|&m| m == month));
        for (r, &id) in b.row_ids.iter().enumerate() {
            assert_eq!(b.x[[r, 1]], data[id as usize][0]);
        }
    }
    // features from partition folders only (no column decoded from the files)
    let cols = ResolvedColumns {
        features: vec!["month".into()],
        target: None,
    };
    let blocks = read_all(&TableReader::new(files.clone(), cols).with_batch_rows(3_000));
    assert_eq!(blocks.iter().map(|b| b.kept()).sum::<usize>(), data.len());
    for b in &blocks {
        assert!(b.x.iter().all(|&m| m == b.file_index as f64));
    }
    // a partition whose values are not numbers cannot be a feature
    let sel = ColumnSelection {
        features: Some(vec!["region".into()]),
        ..Default::default()
    };
    let e = resolve_columns(&files, &sel, &CsvOptions::default()).unwrap_err();
    assert!(
        matches!(&e, Error::Column { column, .. } if column == "region"),
        "{e}"
    );
    // excluded columns leave the defaults
    let sel = ColumnSelection {
        target: Some("PE".into()),
        features: None,
        exclude: vec!["V".into()],
    };
    let cols = resolve_columns(&files, &sel, &CsvOptions::default()).unwrap();
    assert_eq!(cols.features, vec!["AT", "AP", "RH"]);
}

#[test]
fn integer_and_float_types_of_all_widths_read_as_f64() {
    let dir = tempfile::tempdir().unwrap();
    let base = Float64Array::from(vec![1.5, -2.0, 0.25]);
    let f16 = arrow_cast::cast(&base, &DataType::Float16).unwrap();
    let dec = arrow_cast::cast(&base, &DataType::Decimal128(10, 2)).unwrap();
    let cols: Vec<(&str, ArrayRef)> = vec![
        ("i8", Arc::new(Int8Array::from(vec![-128, 0, 127]))),
        ("i16", Arc::new(Int16Array::from(vec![-32768, 1, 32767]))),
        (
            "i32",
            Arc::new(Int32Array::from(vec![i32::MIN, 2, i32::MAX])),
        ),
        (
            "i64",
            Arc::new(Int64Array::from(vec![-(1i64 << 53), 3, 1 << 53])),
        ),
        ("u8", Arc::new(UInt8Array::from(vec![0, 1, 255]))),
        ("u16", Arc::new(UInt16Array::from(vec![0, 1, 65535]))),
        ("u32", Arc::new(UInt32Array::from(vec![0, 1, u32::MAX]))),
        ("u64", Arc::new(UInt64Array::from(vec![0, 1, 1u64 << 53]))),
        ("f16", f16),
        (
            "f32",
            Arc::new(Float32Array::from(vec![0.1f32, -3.5, 1e30])),
        ),
        ("f64", Arc::new(base.clone())),
        ("dec", dec),
        (
            "flag",
            Arc::new(BooleanArray::from(vec![true, false, true])),
        ),
        (
            "dict",
            Arc::new(
                DictionaryArray::<Int32Type>::try_new(
                    Int32Array::from(vec![1, 0, 1]),
                    Arc::new(Float64Array::from(vec![4.5, -1.0])),
                )
                .unwrap(),
            ),
        ),
        ("name", Arc::new(StringArray::from(vec!["a", "b", "c"]))),
    ];
    let path = dir.path().join("types.parquet");
    write_batch(&path, &RecordBatch::try_from_iter(cols).unwrap());
    let files = discover(&[s(&path)]).unwrap();
    let cols =
        resolve_columns(&files, &ColumnSelection::default(), &CsvOptions::default()).unwrap();
    // the text column is left out of the defaults
    assert_eq!(cols.features.len(), 14);
    assert!(!cols.features.contains(&"name".to_string()));
    let blocks = read_all(&TableReader::new(files, cols));
    let x = &blocks[0].x;
    // common practice: these integers and binary fractions are exact in f64;
    // booleans read as 1 and 0
    let want = [
        [
            -128.0,
            -32768.0,
            i32::MIN as f64,
            -(2f64.powi(53)),
            0.0,
            0.0,
            0.0,
            0.0,
        ],
        [0.0, 1.0, 2.0, 3.0, 1.0, 1.0, 1.0, 1.0],
        [
            127.0,
            32767.0,
            i32::MAX as f64,
            2f64.powi(53),
            255.0,
            65535.0,
            u32::MAX as f64,
            2f64.powi(53),
        ],
    ];
    let rest = [
        [1.5, 0.1f32 as f64, 1.5, 1.5, 1.0, -1.0],
        [-2.0, -3.5, -2.0, -2.0, 0.0, 4.5],
        [0.25, 1e30f32 as f64, 0.25, 0.25, 1.0, -1.0],
    ];
    for r in 0..3 {
        let got: Vec<f64> = x.row(r).to_vec();
        assert_eq!(&got[..8], &want[r][..], "row {r}");
        assert_eq!(&got[8..], &rest[r][..], "row {r}");
    }
}

/// Two Parquet files; the second holds nulls, NaN and ±inf.
fn missing_fixture(dir: &Path) -> Vec<String> {
    let clean = RecordBatch::try_from_iter(vec![
        (
            "a",
            Arc::new(Float64Array::from(vec![1.0, 2.0])) as ArrayRef,
        ),
        (
            "b",
            Arc::new(Float64Array::from(vec![1.0, 2.0])) as ArrayRef,
        ),
        (
            "y",
            Arc::new(Float64Array::from(vec![1.0, 2.0])) as ArrayRef,
        ),
    ])
    .unwrap();
    let nan = f64::NAN;
    let inf = f64::INFINITY;
    let dirty = RecordBatch::try_from_iter(vec![
        (
            "a",
            Arc::new(Float64Array::from(vec![
                Some(1.0),
                None,
                Some(3.0),
                Some(nan),
                Some(5.0),
                Some(6.0),
                None,
                Some(8.0),
            ])) as ArrayRef,
        ),
        (
            "b",
            Arc::new(Float64Array::from(vec![
                Some(1.0),
                Some(2.0),
                Some(inf),
                Some(4.0),
                Some(-inf),
                Some(6.0),
                Some(nan),
                Some(8.0),
            ])) as ArrayRef,
        ),
        (
            "y",
            Arc::new(Float64Array::from(vec![
                Some(1.0),
                Some(2.0),
                Some(3.0),
                Some(4.0),
                Some(5.0),
                None,
                Some(7.0),
                Some(8.0),
            ])) as ArrayRef,
        ),
    ])
    .unwrap();
    write_batch(&dir.join("p0.parquet"), &clean);
    write_batch(&dir.join("p1.parquet"), &dirty);
    fs::write(
        dir.join("p2.csv"),
        "a,b,y\n1,1,1\n,2,2\nNaN,3,3\n4,-inf,4\n5,5,\n6,6,6\n",
    )
    .unwrap();
    vec![s(dir)]
}

#[test]
fn missing_values_are_skipped_and_counted_or_fail_with_their_place() {
    let dir = tempfile::tempdir().unwrap();
    let files = discover(&missing_fixture(dir.path())).unwrap();
    let sel = ColumnSelection {
        target: Some("y".into()),
        ..Default::default()
    };
    let cols = resolve_columns(&files, &sel, &CsvOptions::default()).unwrap();
    let reader = TableReader::new(files.clone(), cols.clone()).with_batch_rows(3);
    let blocks = read_all(&reader);
    let ids: Vec<u64> = blocks.iter().flat_map(|b| b.row_ids.clone()).collect();
    // rows: p0 → 0,1; p1 → 2..10 (kept: 2, 9); p2 → 10..16 (kept: 10, 15)
    assert_eq!(ids, vec![0, 1, 2, 9, 10, 15]);
    let mut skipped = vec![0u64; 3];
    for b in &blocks {
        for (s, k) in skipped.iter_mut().zip(&b.skipped) {
            *s += k;
        }
    }
    // per column a, b, y: p1 has a: null,NaN,null; b: inf,-inf,NaN; y: null;
    // p2 has a: empty,NaN; b: -inf; y: empty
    assert_eq!(skipped, vec![5, 4, 2]);
    assert_eq!(blocks.iter().map(|b| b.rows).sum::<usize>(), 16);

    // fail: the first offending value, 1-based row within its file
    let reader = TableReader::new(files.clone(), cols.clone()).with_missing(MissingPolicy::Fail);
    let e = reader
        .blocks()
        .unwrap()
        .find_map(|b| b.err())
        .expect("the fail policy stops at the first missing value");
    match e {
        Error::Cell {
            path, row, column, ..
        } => {
            assert!(path.ends_with("p1.parquet"));
            assert_eq!((row, column.as_str()), (2, "a"));
        }
        other => panic!("unexpected error {other}"),
    }
    let reader = TableReader::new(files.clone(), cols)
        .with_missing(MissingPolicy::Fail)
        .with_files_subset(vec![2]);
    let e = reader.blocks().unwrap().find_map(|b| b.err()).unwrap();
    let msg = e.to_string();
    assert!(
        msg.contains("p2.csv") && msg.contains("row 2") && msg.contains("'a'"),
        "{msg}"
    );
}

#[test]
fn bad_columns_and_schemas_are_named() {
    let data = ccpp();
    let dir = tempfile::tempdir().unwrap();
    let p0 = dir.path().join("f0.parquet");
    let p1 = dir.path().join("f1.parquet");
    write_batch(&p0, &ccpp_batch(&data[..10]));
    let other = RecordBatch::try_from_iter(vec![
        ("AT", Arc::new(Float64Array::from(vec![1.0])) as ArrayRef),
        ("V", Arc::new(StringArray::from(vec!["x"])) as ArrayRef),
        ("PE", Arc::new(Float64Array::from(vec![1.0])) as ArrayRef),
    ])
    .unwrap();
    write_batch(&p1, &other);
    let opts = CsvOptions::default();

    // missing target
    let files = discover(&[s(&p0)]).unwrap();
    let sel = ColumnSelection {
        target: Some("power".into()),
        ..Default::default()
    };
    let e = resolve_columns(&files, &sel, &opts).unwrap_err();
    assert!(
        matches!(&e, Error::Column { path, column, .. } if *path == p0 && column == "power"),
        "{e}"
    );

    // schemas disagree: V is numeric in f0, text in f1 — both files named
    let files = discover(&[s(&p0), s(&p1)]).unwrap();
    let sel = ColumnSelection {
        target: Some("PE".into()),
        features: Some(vec!["AT".into(), "V".into()]),
        exclude: vec![],
    };
    let e = resolve_columns(&files, &sel, &opts).unwrap_err();
    let msg = e.to_string();
    assert!(
        matches!(&e, Error::Column { column, .. } if column == "V"),
        "{e}"
    );
    assert!(
        msg.contains("f0.parquet") && msg.contains("f1.parquet"),
        "{msg}"
    );

    // AP is in f0 but not in f1: both files named
    let sel = ColumnSelection {
        target: Some("PE".into()),
        features: Some(vec!["AT".into(), "AP".into()]),
        exclude: vec![],
    };
    let msg = resolve_columns(&files, &sel, &opts)
        .unwrap_err()
        .to_string();
    assert!(msg.contains("f0.parquet") && msg.contains("f1.parquet") && msg.contains("AP"));

    // a text column named as feature in one file
    let files = discover(&[s(&p1)]).unwrap();
    let sel = ColumnSelection {
        features: Some(vec!["V".into()]),
        ..Default::default()
    };
    let e = resolve_columns(&files, &sel, &opts).unwrap_err();
    assert!(
        matches!(&e, Error::Column { path, column, message } if *path == p1 && column == "V" && message.contains("not numeric")),
        "{e}"
    );
    // the reader refuses it too (files it was not resolved on)
    let cols = ResolvedColumns {
        features: vec!["V".into()],
        target: None,
    };
    let e = TableReader::new(files, cols)
        .blocks()
        .unwrap()
        .next()
        .unwrap();
    assert!(matches!(e, Err(Error::Column { .. })));

    // the target listed as a feature
    let sel = ColumnSelection {
        target: Some("PE".into()),
        features: Some(vec!["PE".into()]),
        exclude: vec![],
    };
    let files = discover(&[s(&p0)]).unwrap();
    assert!(matches!(
        resolve_columns(&files, &sel, &opts),
        Err(Error::InvalidParameter { .. })
    ));
}

#[test]
fn empty_files_give_zero_rows() {
    let data = ccpp();
    let dir = tempfile::tempdir().unwrap();
    write_batch(&dir.path().join("a.parquet"), &ccpp_batch(&data[..5]));
    write_batch(&dir.path().join("b.parquet"), &ccpp_batch(&[]));
    fs::write(dir.path().join("c.csv"), "AT,V,AP,RH,PE\n").unwrap();
    fs::write(dir.path().join("d.csv"), "").unwrap();
    write_batch(&dir.path().join("e.parquet"), &ccpp_batch(&data[5..8]));
    let files = discover(&[s(dir.path())]).unwrap();
    assert_eq!(files.len(), 5);
    assert_eq!(files[1].rows, Some(0));
    let cols = resolve_columns(&files, &target_pe(), &CsvOptions::default()).unwrap();
    assert_eq!(cols.features.len(), 4);
    let reader = TableReader::new(files, cols);
    let rows = flatten(&read_all(&reader));
    let ids: Vec<u64> = rows.iter().map(|r| r.0).collect();
    assert_eq!(ids, (0..8).collect::<Vec<u64>>());
    for (id, v) in &rows {
        assert_eq!(v.as_slice(), &data[*id as usize][..]); // dataset: Tüfekci 2014
    }
    assert_eq!(reader.row_offsets().unwrap(), vec![0, 5, 5, 5, 5, 8]);
}

#[test]
fn csv_delimiter_and_integer_columns() {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("semi.csv");
    fs::write(
        &p,
        "id;x;flag;y\n1;2.5;true;10\n2;-1;false;20\n3;1e3;TRUE;30\n",
    )
    .unwrap();
    let files = discover(&[s(&p)]).unwrap();
    let opts = CsvOptions { delimiter: b';' };
    let sel = ColumnSelection {
        target: Some("y".into()),
        exclude: vec!["id".into()],
        ..Default::default()
    };
    let cols = resolve_columns(&files, &sel, &opts).unwrap();
    assert_eq!(cols.features, vec!["x", "flag"]);
    let blocks = read_all(&TableReader::new(files, cols).with_csv(opts));
    // common practice: decimal text parses to the nearest f64; booleans as 1/0
    assert_eq!(
        blocks[0].x.as_slice().unwrap(),
        &[2.5, 1.0, -1.0, 0.0, 1000.0, 1.0]
    );
    assert_eq!(
        blocks[0].y.as_ref().unwrap().to_vec(),
        vec![10.0, 20.0, 30.0]
    );
}

/// CCPP rows (dataset: Tüfekci 2014) as CSV text with `cell` put in place of V on the
/// data row `bad_row` (1-based).
fn ccpp_csv_with(rows: &[[f64; 5]], bad_row: usize, cell: &str) -> String {
    let mut s = String::from("AT,V,AP,RH,PE\n");
    for (i, r) in rows.iter().enumerate() {
        let mut cells: Vec<String> = r.iter().map(|v| format!("{v}")).collect();
        if i + 1 == bad_row {
            cells[1] = cell.to_string();
        }
        s.push_str(&cells.join(","));
        s.push('\n');
    }
    s
}

#[test]
fn one_text_cell_is_a_missing_value_not_a_lost_column() {
    // issue 20: V = "abc" in one of 2,000 rows used to drop V from the inputs
    let data = ccpp();
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("ccpp.csv");
    fs::write(&p, ccpp_csv_with(&data[..2000], 17, "abc")).unwrap();
    let files = discover(&[s(&p)]).unwrap();
    let choice = choose_columns(&files, &target_pe(), &CsvOptions::default()).unwrap();
    assert_eq!(choice.columns.features, vec!["AT", "V", "AP", "RH"]);
    assert!(choice.left_out.is_empty(), "{:?}", choice.left_out);

    // skip: the row is left out and counted against V; every other row is the dataset's
    let reader = TableReader::new(files.clone(), choice.columns.clone());
    let blocks = read_all(&reader);
    let rows = flatten(&blocks);
    assert_eq!(rows.len(), 1999);
    assert!(rows.iter().all(|(id, _)| *id != 16));
    let skipped: u64 = blocks.iter().map(|b| b.skipped[1]).sum();
    assert_eq!(skipped, 1);
    for (id, v) in &rows {
        assert_eq!(v.as_slice(), &data[*id as usize][..]);
    }

    // fail: the error names file, row and column
    let reader = TableReader::new(files, choice.columns).with_missing(MissingPolicy::Fail);
    let e = reader.blocks().unwrap().find_map(Result::err).unwrap();
    assert!(
        matches!(&e, Error::Cell { path, row: 17, column, message } if *path == p && column == "V" && message.contains("abc")),
        "{e}"
    );
}

#[test]
fn columns_left_out_of_the_default_inputs_are_named_with_why() {
    let dir = tempfile::tempdir().unwrap();
    let p = dir.path().join("t.csv");
    fs::write(
        &p,
        "site,AT,note,empty,PE\nA7,14.96,ok,,463.26\nB2,25.18,late,,444.37\nC1,5.11,ok,,488.56\n",
    )
    .unwrap();
    let files = discover(&[s(&p)]).unwrap();
    let choice = choose_columns(&files, &target_pe(), &CsvOptions::default()).unwrap();
    assert_eq!(choice.columns.features, vec!["AT"]);
    let named: Vec<(&str, &str)> = choice
        .left_out
        .iter()
        .map(|l| (l.column.as_str(), l.reason.as_str()))
        .collect();
    assert_eq!(named.len(), 3, "{named:?}");
    assert!(
        named[0].0 == "site" && named[0].1.contains("'A7' in row 1"),
        "{named:?}"
    );
    assert!(
        named[1].0 == "note" && named[1].1.contains("not numeric"),
        "{named:?}"
    );
    assert!(
        named[2].0 == "empty" && named[2].1.contains("empty"),
        "{named:?}"
    );
    let line = choice.left_out[0].to_string();
    assert!(line.contains("t.csv") && line.contains("'site'"), "{line}");
    // an excluded column is the user's choice: no note
    let sel = ColumnSelection {
        exclude: vec!["site".into()],
        ..target_pe()
    };
    let choice = choose_columns(&files, &sel, &CsvOptions::default()).unwrap();
    assert!(choice.left_out.iter().all(|l| l.column != "site"));
}

#[test]
fn unclear_column_failures_name_the_real_cause() {
    let dir = tempfile::tempdir().unwrap();
    let opts = CsvOptions::default();
    let msg = |p: &Path, sel: &ColumnSelection| {
        let files = discover(&[s(p)]).unwrap();
        resolve_columns(&files, sel, &opts).unwrap_err().to_string()
    };
    // a header without data rows: no rows, not "no numeric column"
    let p = dir.path().join("header.csv");
    fs::write(&p, "AT,V,AP,RH,PE\n").unwrap();
    let m = msg(&p, &target_pe());
    assert!(
        m.contains("header.csv") && m.contains("no data rows"),
        "{m}"
    );

    // separated by semicolons without a delimiter: the delimiter is suggested
    let p = dir.path().join("semi.csv");
    fs::write(&p, "AT;V;PE\n14.96;41.76;463.26\n25.18;62.96;444.37\n").unwrap();
    let m = msg(&p, &target_pe());
    assert!(
        m.contains("semi.csv") && m.contains("--delimiter ';'"),
        "{m}"
    );

    // a duplicated header name, no --features given: the file is blamed, not --features
    let p = dir.path().join("dup.csv");
    fs::write(&p, "AT,V,AT,PE\n1,2,3,4\n5,6,7,8\n").unwrap();
    let files = discover(&[s(&p)]).unwrap();
    let e = resolve_columns(&files, &target_pe(), &opts).unwrap_err();
    assert!(
        matches!(&e, Error::Column { path, column, message } if *path == p && column == "AT" && message.contains("more than once")),
        "{e}"
    );

    // a target that is null in every row of every file is named
    let p = dir.path().join("nulls.parquet");
    let batch = RecordBatch::try_from_iter(vec![
        (
            "AT",
            Arc::new(Float64Array::from(vec![1.0, 2.0, 3.0])) as ArrayRef,
        ),
        (
            "PE",
            Arc::new(Float64Array::from(vec![None::<f64>; 3])) as ArrayRef,
        ),
    ])
    .unwrap();
    write_batch(&p, &batch);
    let files = discover(&[s(&p)]).unwrap();
    let e = resolve_columns(&files, &target_pe(), &opts).unwrap_err();
    assert!(
        matches!(&e, Error::Column { column, message, .. } if column == "PE" && message.contains("null")),
        "{e}"
    );
}

#[test]
fn lenient_discovery_lists_an_unreadable_parquet_file() {
    let data = ccpp();
    let dir = tempfile::tempdir().unwrap();
    write_batch(&dir.path().join("a.parquet"), &ccpp_batch(&data[..5]));
    fs::write(dir.path().join("b.parquet"), b"not parquet at all").unwrap();
    let e = discover(&[s(dir.path())]).unwrap_err();
    assert!(e.to_string().contains("b.parquet"), "{e}");
    let files = discover_lenient(&[s(dir.path())]).unwrap();
    assert_eq!(files.len(), 2);
    assert_eq!((files[0].rows, files[1].rows), (Some(5), None));
}
