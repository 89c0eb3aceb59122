"""Bands and deviation reports through the Python package (split conformal prediction:
Lei, G'Sell, Rinaldo, Tibshirani & Wasserman, JASA 2018). Checks against the Rust
library's own files and the CLI, and on CCPP (dataset: Tüfekci 2014, tests/data)."""

import json
import os
import subprocess
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv
import pytest

import kernlake

ROOT = Path(__file__).resolve().parents[2]
CCPP = ROOT / "tests" / "data" / "ccpp_folds5x2_sheet1.csv"


@pytest.fixture(scope="module")
def ccpp():
    return pacsv.read_csv(CCPP)


@pytest.fixture(scope="module")
def model(ccpp):
    return kernlake.fit(ccpp.slice(0, 4000), target="PE", dim=64, seed=2, holdout=0.3)


def test_band_columns_and_coverage(model, ccpp):
    # Rows the fit never saw: coverage near the level (Lei et al. 2018, Theorem 2.1;
    # one split, so a loose binomial allowance of 4 s.e.).
    test = ccpp.slice(5000, 3000)
    out = model.score(test, band=0.9)
    for col in ("band_low", "band_high", "residual", "outside_band"):
        assert col in out.column_names
    lo = out.column("band_low").to_numpy()
    hi = out.column("band_high").to_numpy()
    y = test.column("PE").to_numpy()
    inside = np.mean((y >= lo) & (y <= hi))
    se = np.sqrt(0.9 * 0.1 / len(y))
    assert abs(inside - 0.9) < 4 * se + 0.01, inside
    outside = out.column("outside_band").to_numpy(zero_copy_only=False)
    assert np.array_equal(outside, ~((y >= lo) & (y <= hi)))


def test_report_matches_table(model, ccpp):
    test = ccpp.slice(5000, 2000)
    out, report = model.score_report(test, band=0.8, batch_rows=333)
    # Rows outside the training data's coverage are counted, not judged.
    flags = out.column("outside_band").to_numpy(zero_copy_only=False).astype(bool)
    covered = out.column("covered").to_numpy(zero_copy_only=False).astype(bool)
    assert report["overall"]["rows"] + report["overall"]["uncovered"] == 2000
    assert report["overall"]["uncovered"] == int(np.sum(~covered))
    assert report["overall"]["outside"] == int(np.sum(flags & covered))
    assert report["expected_outside"] == pytest.approx(0.2)
    # Same report whatever the slice size and threads (determinism contract).
    _, again = model.score_report(test, band=0.8, batch_rows=2000, threads=1)
    assert again == report


def test_errors(ccpp):
    plain = kernlake.fit(ccpp.slice(0, 500), target="PE", dim=16, holdout=0.0)
    with pytest.raises(kernlake.Error, match="stores no band"):
        plain.score(ccpp.slice(0, 10), band=0.9)
    banded = kernlake.fit(ccpp.slice(0, 500), target="PE", dim=16, holdout=0.3)
    with pytest.raises(kernlake.Error, match="strictly between 0 and 1"):
        banded.score(ccpp.slice(0, 10), band=1.5)


@pytest.mark.skipif(not os.environ.get("KERNLAKE_BIN"), reason="needs the CLI (KERNLAKE_BIN)")
def test_same_band_as_cli(model, ccpp, tmp_path):
    test = ccpp.slice(6000, 500)
    (tmp_path / "in").mkdir()
    pacsv.write_csv(test, tmp_path / "in" / "t.csv")
    model.save(str(tmp_path / "m.klm"))
    r = subprocess.run([os.environ["KERNLAKE_BIN"], "score", str(tmp_path / "m.klm"),
                    str(tmp_path / "in" / "t.csv"), "--out", str(tmp_path / "o"), "--band", "0.9",
                    "--report", str(tmp_path / "r.json")], capture_output=True, text=True)
    assert r.returncode == 0, r.stderr
    import pyarrow.parquet as pq
    cli = pq.read_table(tmp_path / "o" / "t.parquet")
    py = model.score(test, band=0.9)
    assert np.array_equal(cli.column("band_low").to_numpy(), py.column("band_low").to_numpy())
    rep = json.loads((tmp_path / "r.json").read_text())
    assert rep["overall"]["rows"] + rep["overall"]["uncovered"] == 500
