"""Shared fixtures: the repository's data files and the command-line program, so the
Python package can be checked against the CLI (one engine, two front doors)."""

from __future__ import annotations

import os
import pathlib
import subprocess

import numpy as np
import pyarrow as pa
import pyarrow.csv as pacsv
import pyarrow.parquet as pq
import pytest

ROOT = pathlib.Path(__file__).resolve().parents[2]
DATA = ROOT / "tests" / "data"
# Dataset: Tüfekci (2014), Combined Cycle Power Plant, sheet 1 (see tests/data/README.md).
CCPP_CSV = DATA / "ccpp_folds5x2_sheet1.csv"


def cli_path() -> pathlib.Path:
    """The `kernlake` program: $KERNLAKE_BIN, else target/debug/kernlake (built by the
    Rust tests that scripts/test runs first)."""
    env = os.environ.get("KERNLAKE_BIN")
    return pathlib.Path(env) if env else ROOT / "target" / "debug" / "kernlake"


@pytest.fixture(scope="session")
def cli():
    path = cli_path()
    if not path.exists():
        pytest.fail(f"the kernlake program is not built at {path}: run `cargo build` first")

    def run(*args: str) -> subprocess.CompletedProcess:
        done = subprocess.run([str(path), "--quiet", *map(str, args)],
                              capture_output=True, text=True)
        if done.returncode != 0:
            raise AssertionError(f"kernlake {' '.join(map(str, args))} failed:\n{done.stderr}")
        return done

    return run


@pytest.fixture(scope="session")
def ccpp_table() -> pa.Table:
    """CCPP (Tüfekci 2014) as a pyarrow table: AT, V, AP, RH inputs, PE target."""
    return pacsv.read_csv(CCPP_CSV)


@pytest.fixture(scope="session")
def ccpp_arrays(ccpp_table):
    x = np.column_stack([ccpp_table.column(c).to_numpy() for c in ["AT", "V", "AP", "RH"]])
    y = ccpp_table.column("PE").to_numpy()
    return np.ascontiguousarray(x, dtype=np.float64), np.ascontiguousarray(y, dtype=np.float64)


@pytest.fixture(scope="session")
def ccpp_lake(tmp_path_factory, ccpp_table) -> pathlib.Path:
    """CCPP as a small lake: three Parquet files in key=value folders of a `part`
    column that is not in the files (the CLI reads partitions the same way)."""
    root = tmp_path_factory.mktemp("lake")
    n = ccpp_table.num_rows
    cuts = [0, n // 3, 2 * n // 3, n]
    for i in range(3):
        folder = root / f"part={i}"
        folder.mkdir()
        pq.write_table(ccpp_table.slice(cuts[i], cuts[i + 1] - cuts[i]), folder / "rows.parquet",
                       row_group_size=1000)
    return root


@pytest.fixture(scope="session")
def small_model(tmp_path_factory, ccpp_arrays):
    """A small model on CCPP rows (in memory), saved as a file."""
    import kernlake

    x, y = ccpp_arrays
    model = kernlake.fit(x[:2000], y[:2000], features=["AT", "V", "AP", "RH"], dim=256,
                         seed=3, gamma=1.0, holdout=0.0)
    path = tmp_path_factory.mktemp("model") / "small.klm"
    model.save(path)
    return model, path
