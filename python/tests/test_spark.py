"""kernlake.spark on a real Apache Spark session (`local[2]`, one per module): the fit
over partitions against the single-machine library fit, determinism over partitionings,
scoring against the command line bit for bit, the model in the CLI, bad input refused on
the driver. Data: CCPP, Tüfekci (2014), tests/data."""

from __future__ import annotations

import os
import sys

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

import kernlake

if os.environ.get("CI") == "true":
    import pyspark  # noqa: F401  (CI installs it with scripts/setup: its absence fails)
pyspark = pytest.importorskip("pyspark", reason="pyspark is installed by scripts/setup")
from kernlake import spark as kspark  # noqa: E402

INPUTS = ["AT", "V", "AP", "RH"]
# Fixed settings (given, not chosen from the data), a small map for a short run.
FIXED = dict(gamma=0.5, c=4.0, epsilon=0.5, dim=128, seed=7)


@pytest.fixture(scope="module")
def spark():
    os.environ["PYSPARK_PYTHON"] = sys.executable
    os.environ["PYSPARK_DRIVER_PYTHON"] = sys.executable
    from pyspark.sql import SparkSession

    session = (
        SparkSession.builder.master("local[2]")
        .appName("kernlake-tests")
        .config("spark.ui.enabled", "false")
        .config("spark.ui.showConsoleProgress", "false")
        .config("spark.sql.shuffle.partitions", "2")
        .config("spark.sql.execution.arrow.pyspark.enabled", "true")
        # several Arrow batches per partition, so batch boundaries are exercised
        .config("spark.sql.execution.arrow.maxRecordsPerBatch", "1000")
        .getOrCreate()
    )
    session.sparkContext.setLogLevel("ERROR")
    yield session
    session.stop()


@pytest.fixture(scope="module")
def ccpp_df(spark, ccpp_table):
    return spark.createDataFrame(ccpp_table).localCheckpoint()


def _parts(df, n):
    """The same rows in `n` partitions, fixed (checkpointed) so every job sees the same
    split."""
    return df.repartition(n).localCheckpoint()


def _no_job(spark, action):
    """Runs `action` (which must raise a kernlake error) and checks no Spark job ran."""
    sc = spark.sparkContext
    group = f"check-{id(action)}"
    sc.setJobGroup(group, "bad input")
    try:
        with pytest.raises(kernlake.InputError) as info:
            action()
    finally:
        sc.setLocalProperty("spark.jobGroup.id", None)
    assert list(sc.statusTracker().getJobIdsForGroup(group)) == []
    return str(info.value)


def _predict(model, x):
    return model.predict(np.ascontiguousarray(x))


def test_fit_on_partitions_equals_the_single_machine_fit(ccpp_df, ccpp_arrays):
    # Reference: the project's own single-machine fit (itself checked against clarabel in
    # tests/it), same fixed gamma, C, epsilon, no holdout, and a Hessian sample larger than
    # the data, so both take exact Newton steps to the same optimum.
    x, y = ccpp_arrays
    opts = dict(FIXED, holdout=0.0, hessian_rows=50_000, tol=1e-9, epochs=60)
    local = kernlake.fit(x, y, features=INPUTS, **opts)
    model = kspark.fit(_parts(ccpp_df, 2), "PE", **opts)
    assert model.inputs == INPUTS
    report = model.report
    assert report["rows_trained"] == len(y)
    assert report["objective"]["gap"] <= 1e-9 or report["stop"] == "precision"
    diff = np.abs(_predict(model, x) - _predict(local, x)).max()
    assert diff <= 1e-6 * y.std(), diff


def test_partitionings_agree_and_repeat_bit_for_bit(ccpp_df, ccpp_arrays):
    # Common practice (determinism contract): the holdout and the sampled Hessian are
    # decided by hashes of each row's values, so 1, 3 and 8 partitions give the same model
    # up to the rounding of the merged sums; the same partitioning twice, the same bytes.
    x, _ = ccpp_arrays
    opts = dict(FIXED, holdout=0.1, hessian_rows=3000, tol=1e-4, epochs=40)
    preds = {}
    for n in (1, 3, 8):
        frame = _parts(ccpp_df, n)
        model = kspark.fit(frame, "PE", **opts)
        assert model.report["stop"] == "gap", model.report["stop"]
        assert kspark.last_fit_figures()["partitions"] == n
        preds[n] = _predict(model, x)
        if n == 3:
            again = kspark.fit(frame, "PE", **opts)
            assert again.to_bytes() == model.to_bytes()
    for n in (3, 8):
        rel = np.abs(preds[n] - preds[1]).max() / np.abs(preds[1]).max()
        assert rel <= 1e-9, (n, rel)


def test_spark_model_loads_in_the_cli_and_inspect_shows_its_report(cli, ccpp_df, tmp_path):
    model = kspark.fit(ccpp_df, "PE", **FIXED, tol=1e-3, epochs=20)
    path = tmp_path / "spark.klm"
    model.save(path)
    text = cli("inspect", path).stdout
    loaded = kernlake.Model.load(path)
    assert loaded.to_bytes() == model.to_bytes()
    assert text.strip() == loaded.describe().strip()
    assert "holdout" in text and str(model.report["rows_total"]) in text.replace(",", "")


def _bits(a) -> np.ndarray:
    return np.asarray(a, dtype=np.float64).view(np.int64)


def test_score_equals_the_cli_bit_for_bit(cli, spark, ccpp_table, small_model, tmp_path):
    # Common practice: one engine, two front doors; rows with a missing input get a
    # null prediction in both.
    model, path = small_model
    rows = ccpp_table.slice(0, 3000)
    at = rows.column("AT").to_pylist()
    at[5] = None
    rows = rows.set_column(0, "AT", pa.array(at, pa.float64()))
    (tmp_path / "in").mkdir()
    src = tmp_path / "in" / "rows.parquet"
    pq.write_table(rows, src)
    outdir = tmp_path / "scored"
    cli("score", path, src, "--out", outdir)
    (out_file,) = sorted(outdir.rglob("*.parquet"))
    expected = pq.read_table(out_file)
    df = spark.createDataFrame(rows).repartition(3).localCheckpoint()
    scored = kspark.score(df, model)
    got = scored.toArrow()
    assert got.column_names == expected.column_names
    # Spark does not keep row order across partitions: compare in the order of the kept
    # target column and the prediction.
    keys = [(c, "ascending") for c in ["PE", "prediction", "coverage"]]
    got, expected = got.sort_by(keys), expected.sort_by(keys)
    for name in expected.column_names:
        a, b = got.column(name), expected.column(name)
        assert a.null_count == b.null_count, name
        if pa.types.is_floating(b.type):
            mask = np.asarray(b.is_valid())
            assert np.array_equal(_bits(a.to_numpy(zero_copy_only=False))[mask],
                                  _bits(b.to_numpy(zero_copy_only=False))[mask]), name
        else:
            assert a.to_pylist() == b.to_pylist(), name


def test_bad_input_is_refused_on_the_driver_before_any_job(spark, ccpp_df, small_model):
    model, _ = small_model
    msg = _no_job(spark, lambda: kspark.fit(ccpp_df, "PE", features=["AT", "nope"]))
    assert "nope" in msg
    text_df = ccpp_df.withColumn("site", ccpp_df["AT"].cast("string"))
    msg = _no_job(spark, lambda: kspark.fit(text_df, "PE", features=["AT", "site"]))
    assert "site" in msg
    msg = _no_job(spark, lambda: kspark.fit(ccpp_df, "PE", loss="l1"))
    assert "loss" in msg
    msg = _no_job(spark, lambda: kspark.score(ccpp_df.drop("RH"), model))
    assert "RH" in msg


def test_empty_data_and_a_failing_partition_raise_kernlake_errors(spark, ccpp_df, ccpp_table):
    # The emptiness of a DataFrame is known only after a job: the survey's, before any
    # Newton pass.
    with pytest.raises(kernlake.InputError, match="no usable rows.*no rows"):
        kspark.fit(ccpp_df.limit(0), "PE", **FIXED)
    with pytest.raises(kernlake.InputError, match="no usable rows.*no rows"):
        kspark.fit(ccpp_df.filter("AT < -1000").repartition(2), "PE", **FIXED)
    at = ccpp_table.column("AT").to_pylist()
    at[4000] = None
    bad = spark.createDataFrame(ccpp_table.set_column(0, "AT", pa.array(at, pa.float64())))
    with pytest.raises(kernlake.InputError) as info:
        kspark.fit(bad.repartition(2), "PE", missing="fail", **FIXED)
    assert "'AT'" in str(info.value) or "AT" in str(info.value)
    assert "null" in str(info.value)


def test_score_keeps_timestamp_and_text_columns(spark, ccpp_table, small_model):
    # Common practice: kept columns pass through unchanged whatever their type (a
    # timestamp in the session's time zone, text); predictions as the model's own.
    import datetime

    model, _ = small_model
    rows = ccpp_table.slice(0, 500)
    start = datetime.datetime(2024, 1, 1, tzinfo=datetime.timezone.utc)
    stamps = [start + datetime.timedelta(minutes=i) for i in range(rows.num_rows)]
    rows = rows.append_column("stamp", pa.array(stamps, pa.timestamp("us", tz="UTC")))
    rows = rows.append_column("site", pa.array([f"s{i % 3}" for i in range(rows.num_rows)]))
    df = spark.createDataFrame(rows).coalesce(1)
    got = kspark.score(df, model, keep=["stamp", "site", "PE"]).toArrow()
    assert got.column_names[:3] == ["stamp", "site", "PE"]
    assert [v.timestamp() for v in got.column("stamp").to_pylist()] == \
        [v.timestamp() for v in stamps]
    assert got.column("site").to_pylist() == rows.column("site").to_pylist()
    want = model.score(rows.select(INPUTS), keep=[])
    assert np.array_equal(got.column("prediction").to_numpy().view(np.int64),
                          want.column("prediction").to_numpy().view(np.int64))
