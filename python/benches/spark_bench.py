"""Benchmark of kernlake on Apache Spark against the command line (not a test).

On the same machine, in one run, with the same demo files (the invented cold-store
scenario, ``kernlake demo --data-only``):

1. Scoring: ``kernlake.spark.score`` on a ``local[N]`` session, the scored rows written
   as Parquet by Spark, rows/s, against ``kernlake score`` on the same files.
2. Fitting to a gap of 1e-3 (squared loss, Newton solver, same options and seed):
   ``kernlake.spark.fit`` passes and wall time against ``kernlake fit``, and the bytes
   the partitions send to the driver per pass (and for the survey).

Spark's own overhead (JVM, Python workers, Arrow conversion, scheduling) is part of what
is measured: on one small machine it is expected to dominate; report it as it is.

    cargo build --release --bin kernlake
    VIRTUAL_ENV=$PWD/.venv .venv/bin/maturin develop --release -m python/Cargo.toml
    .venv/bin/python python/benches/spark_bench.py --cli target/release/kernlake

Options: --rows (demo rows, 10,000,000), --dim (512), --cores (2: local[N] and the
CLI's threads), --epochs (30).
"""

from __future__ import annotations

import argparse
import os
import pathlib
import shutil
import subprocess
import sys
import tempfile
import time


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__,
                                 formatter_class=argparse.RawDescriptionHelpFormatter)
    ap.add_argument("--cli", default="target/release/kernlake")
    ap.add_argument("--rows", type=int, default=10_000_000)
    ap.add_argument("--dim", type=int, default=512)
    ap.add_argument("--cores", type=int, default=2)
    ap.add_argument("--epochs", type=int, default=30)
    a = ap.parse_args()

    os.environ["PYSPARK_PYTHON"] = sys.executable
    os.environ["PYSPARK_DRIVER_PYTHON"] = sys.executable
    from pyspark.sql import SparkSession

    import kernlake
    from kernlake import spark as kspark

    with tempfile.TemporaryDirectory() as tmp:
        tmp = pathlib.Path(tmp)
        subprocess.run([a.cli, "--quiet", "demo", "--data-only", "--rows", str(a.rows),
                        "--dir", str(tmp / "demo")], check=True)
        lake = tmp / "demo" / "data"
        target = "compressor_kw"
        settings = dict(dim=a.dim, seed=1, epochs=a.epochs, tol=1e-3, threads=a.cores)
        flags = ["-D", str(a.dim), "--seed", "1", "--epochs", str(a.epochs), "--tol", "1e-3",
                 "--threads", str(a.cores)]

        out = tmp / "cli.klm"
        t0 = time.perf_counter()
        subprocess.run([a.cli, "--quiet", "fit", str(lake), "--target", target, "--out",
                        str(out), *flags], check=True)
        t_cli_fit = time.perf_counter() - t0
        cli_model = kernlake.Model.load(out)

        session = (SparkSession.builder.master(f"local[{a.cores}]")
                   .config("spark.ui.showConsoleProgress", "false")
                   .config("spark.driver.memory", "2g").getOrCreate())
        session.sparkContext.setLogLevel("ERROR")
        df = session.read.parquet(str(lake))
        df = df.select(*cli_model.inputs, target)
        t0 = time.perf_counter()
        model = kspark.fit(df, target, **settings)
        t_spark_fit = time.perf_counter() - t0
        fig = kspark.last_fit_figures()
        r_cli, r_spark = cli_model.report, model.report
        per_pass = fig["pass_bytes"]
        print(f"fit   {a.rows:,} demo rows D={a.dim}, {a.cores} cores, gap 1e-3:")
        print(f"  CLI    {t_cli_fit:8.2f} s, {r_cli['epochs']} passes, stop {r_cli['stop']}, "
              f"gap {r_cli['objective']['gap']:.2e}")
        print(f"  Spark  {t_spark_fit:8.2f} s, {fig['passes']} passes + survey, stop "
              f"{r_spark['stop']}, gap {r_spark['objective']['gap']:.2e}, "
              f"{fig['partitions']} partitions; wall ratio {t_spark_fit / t_cli_fit:.2f}")
        print(f"  bytes to the driver: survey {fig['survey_bytes']:,}; per pass "
              f"min {min(per_pass):,} max {max(per_pass):,}; plan broadcast "
              f"{fig['plan_bytes']:,}")

        scored_cli = tmp / "scored-cli"
        t0 = time.perf_counter()
        subprocess.run([a.cli, "--quiet", "score", str(out), str(lake), "--out",
                        str(scored_cli), "--threads", str(a.cores)], check=True)
        t_cli_score = time.perf_counter() - t0
        scored_spark = tmp / "scored-spark"
        full = session.read.parquet(str(lake))
        t0 = time.perf_counter()
        kspark.score(full, cli_model).write.parquet(str(scored_spark))
        t_spark_score = time.perf_counter() - t0
        print(f"score {a.rows:,} demo rows (read Parquet, score, write Parquet):")
        print(f"  CLI    {a.rows / t_cli_score:12,.0f} rows/s ({t_cli_score:.2f} s)")
        print(f"  Spark  {a.rows / t_spark_score:12,.0f} rows/s ({t_spark_score:.2f} s); "
              f"ratio Spark/CLI {t_cli_score / t_spark_score:.3f}")
        session.stop()
        shutil.rmtree(scored_spark, ignore_errors=True)


if __name__ == "__main__":
    sys.exit(main())
