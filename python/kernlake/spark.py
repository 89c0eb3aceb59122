"""kernlake on Apache Spark: score a DataFrame and fit a model over its partitions.

Spark schedules, moves bytes and retries; kernlake's library does every computation,
on the executors (a partition's rows, as Arrow batches through ``DataFrame.mapInArrow``)
and on the driver (merging the partitions' statistics, the Newton step, the stopping
rules). This module only orchestrates Spark. The model is the same ``.klm`` model the
command line reads and writes.

>>> from kernlake import spark as kspark                               # doctest: +SKIP
>>> model = kspark.fit(df, "supply_temp", gamma=0.5, dim=512)          # doctest: +SKIP
>>> scored = kspark.score(df, model)                                   # doctest: +SKIP

Every executor needs kernlake installed in the Python that Spark's workers run
(``PYSPARK_PYTHON``): in the image, or as a packed environment shipped with Spark's
archives setting (see the README).

Predictions from a fitted model are an aid for monitoring and planning. They are no
substitute for protective systems, alarms or interlocks; follow your site's procedures
and defer to qualified engineers for any decision about equipment.
"""

from __future__ import annotations

import functools
import hashlib
import itertools
import re
import sys
from typing import Any, Iterator, List, Optional, Sequence, Union

import pyarrow as pa

from . import Model, _errors, _native

__all__ = ["score", "fit", "last_fit_figures"]

# Objects a Python worker keeps between tasks (Spark reuses its Python workers): models
# and fit plans, keyed by the checksum of their bytes, each read once per worker.
_CACHE: dict = {}
_CACHE_MAX = 4

# A kernlake error raised on an executor travels to the driver inside Spark's own
# exception text; these marks let the driver raise the same class and sentence.
_MARK = re.compile(r"\[kernlake:(\w+)\] (.*?) \[/kernlake\]", re.S)

_PART_SCHEMA = pa.schema([("part", pa.int32()), ("data", pa.binary())])
_PART_DDL = "part int, data binary"

_LAST: dict = {}


def _checksum(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def _cached(key: str, make: Any) -> Any:
    obj = _CACHE.get(key)
    if obj is None:
        if len(_CACHE) >= _CACHE_MAX:
            _CACHE.clear()
        obj = make()
        _CACHE[key] = obj
    return obj


def _guarded(task: Any, batches: Iterator[Any]) -> Iterator[Any]:
    """Runs a task over a partition's batches; a kernlake error is re-raised with marks
    the driver can read back."""
    try:
        yield from task(batches)
    except _errors.Error as e:
        raise RuntimeError(f"[kernlake:{type(e).__name__}] {e} [/kernlake]") from None


def _reraise(e: BaseException) -> None:
    """Raises the kernlake error a failed job carried, if it carried one."""
    m = _MARK.search(str(e))
    if m is not None:
        cls = getattr(_errors, m.group(1), _errors.Error)
        raise cls(m.group(2)) from None


def _reader(batches: Iterator[Any], schema: pa.Schema) -> Any:
    """The partition's batches as a RecordBatchReader (the schema of its first batch,
    or the driver's for an empty partition)."""
    it = iter(batches)
    first = next(it, None)
    if first is None:
        return pa.RecordBatchReader.from_batches(schema, iter(()))
    return pa.RecordBatchReader.from_batches(first.schema, itertools.chain([first], it))


def _arrow_schema(df: Any) -> pa.Schema:
    """The Arrow schema of the batches Spark hands a Python worker for `df` (timestamps
    in the session's time zone, large text types when the session asks for them)."""
    from pyspark.sql.pandas.types import to_arrow_schema

    conf = df.sparkSession.conf
    large = conf.get("spark.sql.execution.arrow.useLargeVarTypes", "false") == "true"
    return to_arrow_schema(df.schema, timezone=conf.get("spark.sql.session.timeZone"),
                           prefers_large_types=large)


def _partition() -> int:
    from pyspark import TaskContext

    ctx = TaskContext.get()
    return ctx.partitionId() if ctx is not None else 0


def _one_row(data: bytes) -> Any:
    return pa.RecordBatch.from_arrays(
        [pa.array([_partition()], pa.int32()), pa.array([data], pa.binary())],
        schema=_PART_SCHEMA,
    )


def _collect_parts(frame: Any, task: Any) -> List[bytes]:
    """Runs `task` on every partition; its bytes in partition order."""
    try:
        rows = frame.mapInArrow(functools.partial(_guarded, task), _PART_DDL).collect()
    except Exception as e:  # Spark wraps the executor's error in its own classes
        _reraise(e)
        raise
    return [bytes(r["data"]) for r in sorted(rows, key=lambda r: r["part"])]


# --- scoring ---------------------------------------------------------------------------


def _score_task(key: str, blob: Any, options: dict, schema: pa.Schema,
                batches: Iterator[Any]) -> Iterator[Any]:
    model = _cached(key, lambda: Model.from_bytes(blob.value))
    yield from model.score_batches(_reader(batches, schema), threads=1, **options)


def score(
    df: Any,
    model: Model,
    *,
    keep: Optional[Sequence[str]] = None,
    coverage: bool = True,
    missing: str = "null",
    name: str = "prediction",
    band: Union[float, bool, None] = None,
) -> Any:
    """Score a Spark DataFrame; returns a DataFrame with exactly the columns
    ``kernlake score`` writes (kept columns, the prediction ``name``, with
    ``coverage`` the coverage columns, and the expected-value band's columns when the
    model has a band: ``band`` as for :meth:`kernlake.Model.score`, the model's default
    level when ``None``, none with ``False``). Options as for
    :meth:`kernlake.Model.score`; the deviation report is not made here (group the
    scored DataFrame in Spark).

    The model's bytes are broadcast once and read once per Python worker (cached by
    their checksum); the output schema is declared before any job runs, by the same
    code that scores, so a table the model cannot score fails here, on the driver.
    """
    from pyspark.sql.pandas.types import from_arrow_schema

    keep_list = list(keep) if keep is not None else None
    in_schema = _arrow_schema(df)
    level = model._band_level(band)
    stream = model._m.score_schema(in_schema.empty_table(), keep_list, bool(coverage),
                                   missing, name, level)
    out_schema = pa.RecordBatchReader.from_stream(stream).schema
    blob = model.to_bytes()
    bc = df.sparkSession.sparkContext.broadcast(blob)
    options = dict(keep=keep_list, coverage=bool(coverage), missing=missing, name=name,
                   band=False if level is None else level)
    task = functools.partial(_score_task, "model:" + _checksum(blob), bc, options, in_schema)
    return df.mapInArrow(functools.partial(_guarded, task), from_arrow_schema(out_schema))


# --- fitting ---------------------------------------------------------------------------


def _survey_task(args: tuple, schema: pa.Schema, batches: Iterator[Any]) -> Iterator[Any]:
    inputs, target, missing, sample, seed = args
    data = _native.spark_survey_part(_reader(batches, schema), inputs, target, missing,
                                     sample, seed)
    yield _one_row(data)


def _pass_task(key: str, plan: Any, pass_bc: Any, schema: pa.Schema,
               batches: Iterator[Any]) -> Iterator[Any]:
    worker = _cached(key, lambda: _native.SparkWorker(plan.value))
    yield _one_row(worker.pass_part(pass_bc.value, _reader(batches, schema)))


def fit(
    df: Any,
    target: str,
    *,
    features: Optional[Sequence[str]] = None,
    exclude: Optional[Sequence[str]] = None,
    missing: str = "skip",
    progress: bool = False,
    **settings: Any,
) -> Model:
    """Fit a model on a Spark DataFrame with the streaming Newton trainer, Spark running
    its passes. ``settings`` are those of :func:`kernlake.fit` (kernel, gamma, c,
    epsilon, map, dim, epochs, tol, seed, holdout, patience, hessian_rows, sample, …);
    the squared loss only (the linear loss is refused before any job).

    One job surveys the partitions (column statistics, missing counts, the seeded
    sample); the driver chooses the defaults and the feature map as the single-machine
    fit does; then one job per Newton iteration returns each partition's statistics
    (O(D + sample × inputs) bytes) and the driver steps, certifies with the duality gap
    and stops by the rules of ``kernlake fit``. Holdout membership and every sample are
    decided by a hash of the row's values and the seed, so the model does not depend on
    how Spark partitions the rows; the same partitioning gives the same model bytes.
    """
    settings = {k: v for k, v in settings.items() if v is not None}
    schema = _arrow_schema(df)
    inputs = _native.spark_fit_check(
        schema.empty_table(), target,
        list(features) if features is not None else None,
        list(exclude) if exclude is not None else None, missing, settings)
    defaults = _native.fit_defaults()
    sample = int(settings.get("sample", defaults["sample"]))
    seed = int(settings.get("seed", defaults["seed"]))
    frame = df.select(*[df[c] for c in inputs + [target]])
    frame_schema = _arrow_schema(frame)
    sc = df.sparkSession.sparkContext

    args = (inputs, target, missing, sample, seed)
    parts = _collect_parts(frame, functools.partial(_survey_task, args, frame_schema))
    figures = {"partitions": len(parts), "survey_bytes": sum(map(len, parts)),
               "pass_bytes": []}
    driver = _native.SparkDriver(parts, missing, settings)
    plan = driver.plan_bytes()
    plan_bc = sc.broadcast(plan)
    key = "plan:" + _checksum(plan)
    figures["plan_bytes"] = len(plan)
    try:
        while True:
            pass_bc = sc.broadcast(driver.open_pass())
            task = functools.partial(_pass_task, key, plan_bc, pass_bc, frame_schema)
            parts = _collect_parts(frame, task)
            figures["pass_bytes"].append(sum(map(len, parts)))
            done = driver.close_pass(parts)
            pass_bc.unpersist()
            if progress:
                print(f"kernlake.spark: pass {driver.passes()} done", file=sys.stderr)
            if done:
                break
        model = Model._wrap(driver.finish())
    finally:
        plan_bc.unpersist()
    figures["passes"] = len(figures["pass_bytes"])
    _LAST.clear()
    _LAST.update(figures)
    return model


def last_fit_figures() -> dict:
    """Figures of the last :func:`fit` in this process: partitions, passes, bytes sent
    to the driver by the survey and by each pass, size of the broadcast plan."""
    return dict(_LAST)
