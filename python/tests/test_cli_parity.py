"""The Python package against the command line on the same files, options and seed:
identical model bytes and identical scored columns, bit for bit (common practice: one
engine, two front doors). Data: CCPP, Tüfekci (2014)."""

from __future__ import annotations

import numpy as np
import pyarrow as pa
import pyarrow.dataset as ds
import pyarrow.parquet as pq

import kernlake

OPTIONS = dict(dim=256, seed=11, epochs=20, gamma=0.8, holdout=0.05, threads=2)
FLAGS = ["-D", "256", "--seed", "11", "--epochs", "20", "--gamma", "0.8",
         "--holdout", "0.05", "--threads", "2"]


def test_fit_on_files_gives_the_cli_model_bytes(cli, ccpp_lake, tmp_path):
    out = tmp_path / "cli.klm"
    cli("fit", ccpp_lake, "--target", "PE", "--out", out, *FLAGS)
    model = kernlake.fit(str(ccpp_lake), target="PE", **OPTIONS)
    assert model.to_bytes() == out.read_bytes()
    assert model.inputs == kernlake.Model.load(out).inputs == ["AT", "V", "AP", "RH"]


def test_fit_with_a_partition_column_as_input_matches_the_cli(cli, ccpp_lake, tmp_path):
    out = tmp_path / "cli.klm"
    cli("fit", ccpp_lake, "--target", "PE", "--features", "AT,V,part", "--out", out,
        "-D", "64", "--seed", "3", "--epochs", "5", "--threads", "1")
    model = kernlake.fit([str(ccpp_lake / "part=*" / "*.parquet")], "PE",
                         features=["AT", "V", "part"], dim=64, seed=3, epochs=5, threads=1)
    assert model.inputs == ["AT", "V", "part"]
    assert model.to_bytes() == out.read_bytes()


def test_fit_on_a_csv_glob_with_the_linear_loss_matches_the_cli(cli, tmp_path):
    from conftest import CCPP_CSV

    out = tmp_path / "cli.klm"
    cli("fit", CCPP_CSV, "--target", "PE", "--out", out, "--loss", "l1", "--map",
        "nystrom", "-D", "128", "--seed", "5", "--epochs", "5", "--threads", "1")
    model = kernlake.fit(CCPP_CSV, "PE", loss="l1", map="nystrom", dim=128, seed=5,
                         epochs=5, threads=1)
    assert model.to_bytes() == out.read_bytes()


def _bits(a) -> np.ndarray:
    return np.asarray(a, dtype=np.float64).view(np.int64)


def test_score_equals_the_cli_output_file_column_for_column(cli, ccpp_lake, small_model, tmp_path):
    model, path = small_model
    src = ccpp_lake / "part=1" / "rows.parquet"
    outdir = tmp_path / "scored"
    cli("score", path, src, "--out", outdir)
    files = sorted(outdir.rglob("*.parquet"))
    assert len(files) == 1
    expected = pq.read_table(files[0])
    got = model.score(pq.read_table(src))
    assert got.column_names == expected.column_names
    for name in expected.column_names:
        e, g = expected.column(name).combine_chunks(), got.column(name).combine_chunks()
        assert e.type == g.type, name
        assert e.null_count == g.null_count, name
        if pa.types.is_floating(e.type):
            assert np.array_equal(_bits(e.to_numpy(zero_copy_only=False)),
                                  _bits(g.to_numpy(zero_copy_only=False))), name
        else:
            assert e.equals(g), name


def test_score_options_follow_the_cli(cli, ccpp_lake, small_model, tmp_path):
    model, path = small_model
    src = ccpp_lake / "part=2" / "rows.parquet"
    outdir = tmp_path / "scored"
    cli("score", path, src, "--out", outdir, "--keep", "PE", "--no-coverage", "--name", "pe_hat")
    expected = pq.read_table(sorted(outdir.rglob("*.parquet"))[0])
    got = model.score(pq.read_table(src), keep=["PE"], coverage=False, name="pe_hat")
    assert got.column_names == expected.column_names == ["PE", "pe_hat"]
    assert np.array_equal(_bits(got.column("pe_hat")), _bits(expected.column("pe_hat")))


def test_score_batches_equals_score(small_model, ccpp_table):
    model, _ = small_model
    reader = pa.RecordBatchReader.from_batches(ccpp_table.schema, ccpp_table.to_batches(max_chunksize=1000))
    parts = list(model.score_batches(reader))
    assert len(parts) == len(ccpp_table.to_batches(max_chunksize=1000))
    joined = pa.Table.from_batches(parts)
    whole = model.score(ccpp_table)
    assert joined.column_names == whole.column_names
    assert np.array_equal(_bits(joined.column("prediction")), _bits(whole.column("prediction")))
    assert np.array_equal(_bits(joined.column("coverage")), _bits(whole.column("coverage")))


def test_dataset_scanner_batches_score_like_files(small_model, ccpp_lake):
    model, _ = small_model
    scanner = ds.dataset(ccpp_lake / "part=0", format="parquet").scanner(columns=["AT", "V", "AP", "RH"])
    got = model.score(scanner.to_reader(), keep=[])
    x = np.column_stack([pq.read_table(ccpp_lake / "part=0" / "rows.parquet").column(c).to_numpy()
                         for c in ["AT", "V", "AP", "RH"]])
    assert np.array_equal(_bits(got.column("prediction")), _bits(model.predict(np.ascontiguousarray(x))))
