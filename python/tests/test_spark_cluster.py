"""kernlake.spark with executors in separate processes: Spark's `local-cluster` mode,
which runs from the pip package (two worker JVMs, each with its own Python workers), so
the plan, the pass bytes and the model really travel between processes. Data: CCPP,
Tüfekci (2014), tests/data."""

from __future__ import annotations

import os
import sys

import numpy as np
import pytest

import kernlake

if os.environ.get("CI") == "true":
    import pyspark  # noqa: F401  (CI installs it with scripts/setup: its absence fails)
pytest.importorskip("pyspark", reason="pyspark is installed by scripts/setup")
from kernlake import spark as kspark  # noqa: E402

INPUTS = ["AT", "V", "AP", "RH"]


@pytest.fixture(scope="module")
def cluster():
    os.environ["PYSPARK_PYTHON"] = sys.executable
    os.environ["PYSPARK_DRIVER_PYTHON"] = sys.executable
    from pyspark.sql import SparkSession

    session = (
        SparkSession.builder.master("local-cluster[2,1,1024]")
        .appName("kernlake-cluster-test")
        .config("spark.ui.enabled", "false")
        .config("spark.ui.showConsoleProgress", "false")
        .getOrCreate()
    )
    session.sparkContext.setLogLevel("ERROR")
    yield session
    session.stop()


def test_fit_and_score_across_executor_processes(cluster, ccpp_table, ccpp_arrays):
    # Reference: the project's single-machine library fit with the same fixed settings,
    # no holdout and an exact Hessian (as in test_spark.py); scoring against the same
    # model scoring in this process, bit for bit (common practice: one engine).
    x, y = ccpp_arrays
    opts = dict(gamma=0.5, c=4.0, epsilon=0.5, dim=128, seed=7, holdout=0.0,
                hessian_rows=50_000, tol=1e-9, epochs=60)
    local = kernlake.fit(x, y, features=INPUTS, **opts)
    df = cluster.createDataFrame(ccpp_table).repartition(4).localCheckpoint()
    model = kspark.fit(df, "PE", **opts)
    diff = np.abs(model.predict(x) - local.predict(x)).max()
    assert diff <= 1e-6 * y.std(), diff
    got = kspark.score(df, model, keep=INPUTS + ["PE"]).toArrow()
    want = model.score(got.select(INPUTS + ["PE"]), keep=INPUTS + ["PE"])
    assert got.column_names == want.column_names
    for name in ["prediction", "coverage"]:
        a = got.column(name).to_numpy(zero_copy_only=False)
        b = want.column(name).to_numpy(zero_copy_only=False)
        assert np.array_equal(a.view(np.int64), b.view(np.int64)), name
    assert got.column("covered").to_pylist() == want.column("covered").to_pylist()
