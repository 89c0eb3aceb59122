"""The same rows through pyarrow, polars, pandas, DuckDB and numpy give bit-identical
predictions (common practice: the Arrow C data interface carries the same values), and
the in-memory fit on CCPP reaches the held-out RMSE of the Rust accuracy test."""

from __future__ import annotations

import duckdb
import numpy as np
import pandas as pd
import polars as pl
import pyarrow as pa

import kernlake

INPUTS = ["AT", "V", "AP", "RH"]


def _bits(a) -> np.ndarray:
    return np.asarray(a, dtype=np.float64).view(np.int64)


def test_every_table_kind_gives_the_numpy_predictions(small_model, ccpp_table, ccpp_arrays):
    model, _ = small_model
    x, _ = ccpp_arrays
    reference = model.predict(x)
    assert reference.shape == (x.shape[0],)
    pandas_df = ccpp_table.to_pandas()
    con = duckdb.connect()
    con.register("ccpp", pandas_df)
    # makers, not objects: a reader or a query result is consumed by one pass
    kinds = {
        "pyarrow.Table": lambda: ccpp_table,
        "pyarrow.RecordBatch": lambda: ccpp_table.combine_chunks().to_batches()[0],
        "pyarrow.RecordBatchReader": lambda: pa.RecordBatchReader.from_batches(
            ccpp_table.schema, ccpp_table.to_batches(max_chunksize=777)),
        "polars.DataFrame": lambda: pl.from_arrow(ccpp_table),
        "pandas.DataFrame": lambda: pandas_df,
        "duckdb relation": lambda: duckdb.from_arrow(ccpp_table),
        "duckdb query": lambda: con.sql('SELECT "AT", "V", "AP", "RH" FROM ccpp'),
    }
    for kind, make in kinds.items():
        got = model.predict(make())
        assert np.array_equal(_bits(got), _bits(reference)), kind
        scored = model.score(make(), keep=[])
        assert np.array_equal(_bits(scored.column("prediction")), _bits(reference)), kind


def test_fit_on_each_table_kind_gives_the_same_model(ccpp_table, ccpp_arrays):
    x, y = ccpp_arrays
    opts = dict(dim=128, seed=2, gamma=1.0, epochs=10, holdout=0.0)
    reference = kernlake.fit(x[:3000], y[:3000], features=INPUTS, **opts).to_bytes()
    head = ccpp_table.slice(0, 3000)
    from_pyarrow = kernlake.fit(head, "PE", **opts).to_bytes()
    for kind, table in {
        "polars": pl.from_arrow(head),
        "pandas": head.to_pandas(),
        "duckdb": duckdb.from_arrow(head),
    }.items():
        model = kernlake.fit(table, "PE", **opts)
        assert model.inputs == INPUTS, kind
        assert model.target == "PE", kind
        assert model.to_bytes() == from_pyarrow, kind
    a = kernlake.Model.from_bytes(from_pyarrow).predict(x[:500])
    b = kernlake.Model.from_bytes(reference).predict(x[:500])
    assert np.array_equal(_bits(a), _bits(b))


def test_ccpp_in_memory_fit_reaches_the_rust_tests_heldout_rmse(ccpp_arrays):
    # Dataset: Tüfekci (2014), CCPP. tests/accuracy.rs fits D = 2,000 random Fourier
    # features with gamma = 1, seed 1, gap tolerance 5e-3 on an 80/20 split and requires
    # RMSE <= 3.95 MW (published range for random features 3.77-3.80 MW, linear ~4.50 MW,
    # see CHECKS.md). Its split is a ChaCha8 shuffle with seed 2014 that numpy cannot
    # replay; here the held-out 20% is every fifth row, with the same options and bound.
    x, y = ccpp_arrays
    test = np.arange(x.shape[0]) % 5 == 4
    xtr, ytr = np.ascontiguousarray(x[~test]), np.ascontiguousarray(y[~test])
    xte, yte = np.ascontiguousarray(x[test]), y[test]
    model = kernlake.fit(xtr, ytr, dim=2000, gamma=1.0, seed=1, tol=5e-3, holdout=0.0)
    rmse = float(np.sqrt(np.mean((model.predict(xte) - yte) ** 2)))
    # reference: ordinary least squares on the same split (numpy)
    a = np.column_stack([xtr, np.ones(len(xtr))])
    coef, *_ = np.linalg.lstsq(a, ytr, rcond=None)
    lin = float(np.sqrt(np.mean((np.column_stack([xte, np.ones(len(xte))]) @ coef - yte) ** 2)))
    assert rmse <= 3.95, f"CCPP RMSE {rmse:.4f} MW above 3.95"
    assert rmse < lin, f"no better than linear ({lin:.4f})"
