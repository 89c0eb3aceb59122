"""Benchmark of the Python front door against the Rust library and the CLI (not a test).

1. Scoring: ``model.score(table)`` from Python on a 2-million-row in-memory pyarrow table,
   rows/s, against the Rust library scoring the same imported batches in-process
   (``_native._score_in_rust``: no Python between batches). Target: ratio >= 0.9.
2. Fitting: ``kernlake.fit`` on files from Python against ``kernlake fit`` on the same
   files, options and seed, wall time. Target: ratio <= 1.05.

Release figures need release builds of both:

    cargo build --release --bin kernlake
    VIRTUAL_ENV=$PWD/.venv .venv/bin/maturin develop --release -m python/Cargo.toml
    .venv/bin/python python/benches/bench.py --cli target/release/kernlake

Options: --rows (scoring rows, 2,000,000), --fit-rows (demo rows to fit, 1,000,000),
--dim (512), --repeats (3; the fastest run of each side is kept).
"""

from __future__ import annotations

import argparse
import pathlib
import subprocess
import sys
import tempfile
import time

import numpy as np
import pyarrow as pa

import kernlake
from kernlake import _native


def best_of(repeats, fn):
    times = []
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--cli", default="target/release/kernlake")
    ap.add_argument("--rows", type=int, default=2_000_000)
    ap.add_argument("--fit-rows", type=int, default=1_000_000)
    ap.add_argument("--dim", type=int, default=512)
    ap.add_argument("--repeats", type=int, default=3)
    a = ap.parse_args()

    with tempfile.TemporaryDirectory() as tmp:
        tmp = pathlib.Path(tmp)
        subprocess.run([a.cli, "--quiet", "demo", "--data-only", "--rows", str(a.fit_rows),
                        "--dir", str(tmp / "demo")], check=True)
        lake = tmp / "demo" / "data"
        files = sorted(str(p) for p in lake.rglob("*.parquet"))
        target = "compressor_kw"
        opts = ["-D", str(a.dim), "--seed", "1", "--epochs", "10"]
        out = tmp / "cli.klm"

        def cli_fit():
            subprocess.run([a.cli, "--quiet", "fit", str(lake), "--target", target, "--out", str(out),
                            *opts], check=True)

        def py_fit():
            return kernlake.fit(str(lake), target, dim=a.dim, seed=1, epochs=10)

        t_cli = best_of(a.repeats, cli_fit)
        t_py = best_of(a.repeats, py_fit)
        model = kernlake.Model.load(out)
        same = py_fit().to_bytes() == out.read_bytes()
        print(f"fit   {a.fit_rows:,} rows  D={a.dim}: CLI {t_cli:.2f} s, Python {t_py:.2f} s, "
              f"ratio {t_py / t_cli:.3f} (target <= 1.05); identical model bytes: {same}")

        rng = np.random.default_rng(5)
        table = pa.table({name: rng.normal(size=a.rows) for name in model.inputs})
        t_py = best_of(a.repeats, lambda: model.score(table))
        t_rust = min(_native._score_in_rust(model._m, table) for _ in range(a.repeats))
        print(f"score {a.rows:,} rows: Rust library {a.rows / t_rust:,.0f} rows/s, Python "
              f"{a.rows / t_py:,.0f} rows/s, ratio {t_rust / t_py:.3f} (target >= 0.9)")


if __name__ == "__main__":
    sys.exit(main())
