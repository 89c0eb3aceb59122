"""kernlake: non-linear epsilon-insensitive support vector regression on tables larger
than memory, through explicit kernel feature maps (random Fourier, orthogonal random and
Nystrom features), from Python.

Tables come in through the Arrow PyCapsule interface without a copy: a pyarrow Table,
RecordBatch or RecordBatchReader, a polars DataFrame, a DuckDB result, a pandas
DataFrame (through pyarrow). numpy float64 arrays feed the in-memory fit; paths, folders
and glob patterns of Parquet/CSV files feed the streaming fit, exactly as
``kernlake fit`` on the command line.

>>> import kernlake
>>> model = kernlake.fit("lake/", target="supply_temp", dim=512, seed=1)   # doctest: +SKIP
>>> scored = model.score(table)                                             # doctest: +SKIP

Predictions from a fitted model are an aid for monitoring and planning. They are no
substitute for protective systems, alarms or interlocks; follow your site's procedures
and defer to qualified engineers for any decision about equipment.
"""

from __future__ import annotations

import os
from typing import Any, Iterator, Optional, Sequence, Union

from . import _native
from ._errors import Error, InputError, IOError, ModelFileError, NumericalError
from ._native import SAFETY, __version__

__all__ = [
    "fit",
    "audit",
    "tune",
    "Model",
    "Error",
    "InputError",
    "ModelFileError",
    "NumericalError",
    "IOError",
    "SAFETY",
    "__version__",
]

PathLike = Union[str, "os.PathLike[str]"]


def _is_numpy(obj: Any) -> bool:
    try:
        import numpy
    except ImportError:  # pragma: no cover - numpy is a dependency
        return False
    return isinstance(obj, numpy.ndarray)


def _is_paths(obj: Any) -> bool:
    if isinstance(obj, (str, os.PathLike)):
        return True
    return isinstance(obj, (list, tuple)) and len(obj) > 0 and all(
        isinstance(p, (str, os.PathLike)) for p in obj
    )


def _paths(obj: Any) -> list:
    if isinstance(obj, (str, os.PathLike)):
        return [os.fspath(obj)]
    return [os.fspath(p) for p in obj]


def _arrow(obj: Any) -> Any:
    """An object the native code reads through the Arrow PyCapsule interface: the object
    itself when it speaks it, else its pyarrow form (pandas DataFrames of older pandas,
    DuckDB relations of older DuckDB); anything else is passed on and refused there."""
    if hasattr(obj, "__arrow_c_stream__") or hasattr(obj, "__arrow_c_array__"):
        return obj
    mod = type(obj).__module__ or ""
    if mod.startswith("pandas"):
        import pyarrow

        return pyarrow.Table.from_pandas(obj, preserve_index=False)
    if mod.startswith("duckdb") and hasattr(obj, "arrow"):
        return obj.arrow()
    return obj


def _table(stream: Any) -> Any:
    import pyarrow

    return pyarrow.RecordBatchReader.from_stream(stream).read_all()


def fit(
    source: Any,
    target: Any = None,
    *,
    features: Optional[Sequence[str]] = None,
    exclude: Optional[Sequence[str]] = None,
    kernel: str = "gaussian",
    gamma: Optional[float] = None,
    c: Optional[float] = None,
    epsilon: Optional[float] = None,
    map: str = "fourier",
    dim: int = 1024,
    phase: bool = False,
    kmeans: bool = False,
    loss: str = "l2",
    solver: str = "auto",
    hessian_rows: Optional[int] = None,
    epochs: int = 100,
    tol: float = 1e-3,
    sweeps: int = 3,
    seed: int = 0,
    threads: int = 0,
    memory: Union[int, str] = 1 << 30,
    holdout: float = 0.05,
    patience: int = 3,
    block_rows: int = 16384,
    sample: int = 10000,
    missing: str = "skip",
    delimiter: str = ",",
    progress: bool = False,
) -> "Model":
    """Fit a model; the defaults are those of ``kernlake fit``.

    ``source`` is one of:

    * a path, folder or glob pattern of Parquet/CSV files, or a list of them: the data
      are streamed block by block (memory stays near ``memory``), with the same file
      discovery, ``key=value`` partition folders and ``missing`` policy as
      ``kernlake fit``; ``target`` is the target column's name;
    * a 2-D numpy float64 array (C order) of input rows, with ``target`` a 1-D float64
      array of targets (``features`` optionally names the columns);
    * a table (pyarrow Table/RecordBatch/RecordBatchReader, polars or pandas DataFrame,
      DuckDB result, or any object with ``__arrow_c_stream__``) held in memory, with
      ``target`` the target column's name.

    Settings: ``kernel`` (gaussian, laplacian, matern12, matern32, matern52), ``gamma``
    (kernel width; default: median heuristic), ``c`` and ``epsilon`` (penalty and tube
    half-width in target units; default: Cherkassky & Ma 2004), ``map`` (fourier,
    orthogonal, nystrom), ``dim`` (the map's dimension D), ``phase`` (Fourier features
    as cos + random phase), ``kmeans`` (Nystrom landmarks as k-means centres), ``loss``
    ("l1" linear or "l2" squared beyond the tube), ``solver`` ("auto", "dual",
    "newton"), ``hessian_rows``, ``epochs``, ``tol`` (relative duality gap), ``sweeps``,
    ``seed``, ``threads`` (0 = all cores), ``memory`` (bytes or text such as "2GiB"),
    ``holdout`` (share held out for validation), ``patience``, ``block_rows``,
    ``sample`` (rows of the survey's sample). ``features``/``exclude`` choose the
    input columns (default: every numeric column but the target). ``missing`` is
    "skip" or "fail" for rows with a null, NaN or infinity. ``progress`` draws bars on
    standard error when it is a terminal.

    The GIL is released while the fit runs; Ctrl-C stops it at the next block or pass
    with ``KeyboardInterrupt``. Errors raise subclasses of :class:`kernlake.Error`.
    """
    settings = dict(
        kernel=kernel, gamma=gamma, c=c, epsilon=epsilon, map=map, dim=dim,
        phase=phase, kmeans=kmeans, loss=loss, solver=solver, hessian_rows=hessian_rows,
        epochs=epochs, tol=tol, sweeps=sweeps, seed=seed, threads=threads,
        memory=memory, holdout=holdout, patience=patience, block_rows=block_rows,
        sample=sample,
    )
    feats = list(features) if features is not None else None
    excl = list(exclude) if exclude is not None else None
    if _is_numpy(source):
        if target is None:
            raise InputError("give the targets as a 1-D float64 array: fit(X, y)")
        if excl:
            raise InputError("exclude applies to tables and files, not to numpy arrays")
        return Model._wrap(
            _native.fit_arrays(source, target, feats, bool(progress), settings)
        )
    if not isinstance(target, str):
        raise InputError("give the target column's name: fit(source, target='column')")
    if _is_paths(source):
        return Model._wrap(
            _native.fit_files(
                _paths(source), target, feats, excl, missing, delimiter,
                bool(progress), settings,
            )
        )
    return Model._wrap(
        _native.fit_table(
            _arrow(source), target, feats, excl, missing, bool(progress), settings
        )
    )


class Model:
    """A fitted model: an input contract (column names), a feature map and weights.

    Create one with :func:`kernlake.fit`, :meth:`Model.load` or
    :meth:`Model.from_bytes`. Models pickle as their model file's bytes.
    """

    __slots__ = ("_m",)

    def __init__(self) -> None:
        raise TypeError("use kernlake.fit, Model.load or Model.from_bytes")

    @classmethod
    def _wrap(cls, native: Any) -> "Model":
        obj = object.__new__(cls)
        obj._m = native
        return obj

    @classmethod
    def load(cls, path: PathLike) -> "Model":
        """Load a model file written by ``kernlake fit`` or :meth:`save`."""
        return cls._wrap(_native.Model.load(os.fspath(path)))

    @classmethod
    def from_bytes(cls, data: bytes) -> "Model":
        """Read a model from the bytes of a model file (see :meth:`to_bytes`)."""
        return cls._wrap(_native.Model.from_bytes(bytes(data)))

    def save(self, path: PathLike) -> None:
        """Write the model file atomically: a partial file never appears at ``path``."""
        self._m.save(os.fspath(path))

    def to_bytes(self) -> bytes:
        """The model file's bytes, for shipping the model to workers."""
        return self._m.to_bytes()

    def __reduce__(self) -> Any:
        return (Model.from_bytes, (self.to_bytes(),))

    def predict(self, X: Any, *, threads: int = 0) -> Any:
        """Predictions as a 1-D numpy float64 array.

        ``X`` is a 2-D numpy float64 array (C order) whose columns are the model's
        :attr:`inputs` in order, or a table (columns found by name; a row with a missing
        input gets NaN). The GIL is released while predicting.
        """
        if _is_numpy(X):
            return self._m.predict_array(X, threads)
        name = "prediction"
        scored = self.score(X, keep=[], coverage=False, missing="null", name=name,
                            threads=threads)
        return scored.column(name).to_numpy(zero_copy_only=False)

    def score(
        self,
        table: Any,
        *,
        keep: Optional[Sequence[str]] = None,
        coverage: bool = True,
        missing: str = "null",
        name: str = "prediction",
        batch_rows: int = 65536,
        threads: int = 0,
        band: Union[float, bool, None] = None,
    ) -> Any:
        """Score a table; returns a ``pyarrow.Table`` with exactly the columns
        ``kernlake score`` writes: the kept columns (default: every column that is not a
        model input), the prediction ``name``, and with ``coverage`` the ``coverage`` and
        ``covered`` columns.

        ``missing`` decides rows with a null, NaN or infinity in an input: "null" (keep
        the row, null prediction), "skip" (leave it out) or "fail" (raise, naming row
        and column). Kept columns are passed through without a copy.

        ``band`` (a level in (0, 1); the model must store a band) adds ``band_low`` and
        ``band_high``, and where the table holds the target also ``residual`` and
        ``outside_band``. As on the command line, ``None`` means 0.95 when the model
        stores a band and no band otherwise; ``False`` leaves the band out. The band
        holds new rows like the fit's holdout with at least that probability; it says
        nothing about a changed plant. See :meth:`score_report`.
        """
        keep_list = list(keep) if keep is not None else None
        stream = self._m.score_stream(_arrow(table), keep_list, bool(coverage), missing,
                                      name, batch_rows, threads, self._band_level(band))
        return _table(stream)

    def _band_level(self, band: Union[float, bool, None]) -> Optional[float]:
        """The band level to score at: the command line's default for ``None``."""
        if band is False:
            return None
        info = self._m.parameters.get("band")
        if band is None:
            return info["default_level"] if info else None
        if band is True:
            # Asked for a band: the library refuses a model without one.
            return info["default_level"] if info else 0.95
        return float(band)

    def score_report(
        self,
        table: Any,
        *,
        band: float = 0.95,
        time: Optional[str] = None,
        by: Optional[str] = None,
        keep: Optional[Sequence[str]] = None,
        coverage: bool = True,
        missing: str = "null",
        name: str = "prediction",
        batch_rows: int = 65536,
        threads: int = 0,
    ) -> tuple:
        """Score a table with a band and return ``(table, report)``: the table as
        :meth:`score` with ``band``, and the deviation report as a dict (the JSON of
        ``kernlake score --report``): rows, residual mean and RMSE, share outside the
        band against ``1 - band`` with a binomial p-value, per group of ``by``, and runs
        of consecutive rows outside the band in ``time`` order (row order without it).
        Flags are an aid to engineers, not a protective function.
        """
        import json

        keep_list = list(keep) if keep is not None else None
        stream, text = self._m.score_report_stream(_arrow(table), keep_list, bool(coverage),
                                                   missing, name, batch_rows, threads,
                                                   float(band), time, by)
        return _table(stream), json.loads(text)

    def score_batches(
        self,
        reader: Any,
        *,
        keep: Optional[Sequence[str]] = None,
        coverage: bool = True,
        missing: str = "null",
        name: str = "prediction",
        batch_rows: int = 65536,
        threads: int = 0,
        band: Union[float, bool, None] = None,
    ) -> Iterator[Any]:
        """Score batch by batch: yields one ``pyarrow.RecordBatch`` per input batch, read
        from ``reader`` (a RecordBatchReader or any table) only as they are asked for.
        Options as for :meth:`score`.
        """
        import pyarrow

        keep_list = list(keep) if keep is not None else None
        scorer = self._m.batch_scorer(_arrow(reader), keep_list, bool(coverage), missing,
                                      name, batch_rows, threads, self._band_level(band))
        while True:
            stream = scorer.next_stream()
            if stream is None:
                return
            batch_reader = pyarrow.RecordBatchReader.from_stream(stream)
            for batch in batch_reader:
                yield batch

    @property
    def inputs(self) -> list:
        """Input column names, in the model's order."""
        return self._m.inputs

    @property
    def target(self) -> Optional[str]:
        """The target column's name."""
        return self._m.target

    @property
    def parameters(self) -> dict:
        """Kernel, map, solver settings (C, epsilon, loss) and intercept, as plain values."""
        return self._m.parameters

    @property
    def report(self) -> dict:
        """The training report, as ``kernlake inspect --json`` shows it."""
        return self._m.report

    def describe(self) -> str:
        """The model as ``kernlake inspect`` prints it."""
        return self._m.describe()

    def __repr__(self) -> str:
        return repr(self._m)


def audit(
    source: Any,
    target: Optional[str] = None,
    *,
    model: Optional[Model] = None,
    features: Optional[Sequence[str]] = None,
    exclude: Optional[Sequence[str]] = None,
    kernel: str = "gaussian",
    gamma: Optional[float] = None,
    c: Optional[float] = None,
    epsilon: Optional[float] = None,
    maps: Optional[Sequence[str]] = None,
    dim: Sequence[int] = (256, 512, 1024, 2048, 4096),
    phase: bool = False,
    agree: float = 0.02,
    split: float = 0.8,
    cache: Union[int, str] = 1 << 30,
    sample: int = 10000,
    seed: int = 0,
    threads: int = 0,
    missing: str = "skip",
    delimiter: str = ",",
    plot: bool = False,
) -> Any:
    """Compare the exact kernel machine with approximate ones (or with ``model``) on a
    seeded sample of the files in ``source``, as ``kernlake audit`` does; the defaults
    are its own.

    Returns the record ``kernlake audit --json`` writes, as a dict; with ``plot=True``
    a pair ``(record, svg_text)`` with the plot of agreement and RMSE against D.
    """
    if not _is_paths(source):
        raise InputError("audit reads files: give a path, folder or glob pattern")
    settings = dict(
        kernel=kernel, gamma=gamma, c=c, epsilon=epsilon,
        maps=list(maps) if maps is not None else None, dim=list(dim), phase=phase,
        agree=agree, split=split, cache=cache, sample=sample, seed=seed, threads=threads,
    )
    native_model = model._m if model is not None else None
    return _native.audit_files(
        _paths(source), target, native_model,
        list(features) if features is not None else None,
        list(exclude) if exclude is not None else None,
        missing, delimiter, bool(plot), settings,
    )


def tune(
    source: Any,
    target: str,
    *,
    features: Optional[Sequence[str]] = None,
    exclude: Optional[Sequence[str]] = None,
    sample: int = 20000,
    folds: int = 3,
    holdout: Optional[float] = None,
    gamma_factors: Sequence[float] = (0.25, 0.5, 1.0, 2.0, 4.0),
    c_factors: Sequence[float] = (0.1, 0.316, 1.0, 3.16, 10.0),
    epsilon_factors: Sequence[float] = (0.25, 1.0, 4.0),
    exact_rows: int = 1000,
    max_fits: int = 150,
    refine_fits: Optional[int] = None,
    refine_rows: Optional[int] = None,
    refine_dim: Optional[int] = None,
    epochs: int = 50,
    sweeps: int = 10,
    tol: float = 1e-3,
    dim: int = 256,
    max_dim: int = 4096,
    dim_tol: float = 0.01,
    kernel: str = "gaussian",
    map: str = "fourier",
    keep_map: bool = False,
    phase: bool = False,
    kmeans: bool = False,
    loss: str = "l2",
    seed: int = 0,
    threads: int = 0,
    missing: str = "skip",
    delimiter: str = ",",
    heatmap: bool = False,
) -> Any:
    """Choose gamma, C, epsilon and D by validation on a random sample of the files in
    ``source``, as ``kernlake tune`` does; the defaults are its own.

    Returns the record ``kernlake tune --json`` writes, as a dict; with ``heatmap=True``
    a pair ``(record, svg_text)`` with the heat map of validation error over gamma x C.
    Fit with the chosen values: ``kernlake.fit(source, target, gamma=r["best"]["gamma"],
    c=r["best"]["c"], epsilon=r["best"]["epsilon"], map=r["chosen_map"],
    dim=r["chosen_dim"])``. A random ``map`` that does not reach the exact machine at
    ``max_dim`` gives way to Nyström features unless ``keep_map=True``.
    """
    if not _is_paths(source):
        raise InputError("tune reads files: give a path, folder or glob pattern")
    settings = dict(
        sample=sample, folds=folds, holdout=holdout, gamma_factors=list(gamma_factors),
        c_factors=list(c_factors), epsilon_factors=list(epsilon_factors),
        exact_rows=exact_rows, max_fits=max_fits, epochs=epochs, sweeps=sweeps,
        tol=tol, dim=dim, max_dim=max_dim, dim_tol=dim_tol, keep_map=keep_map,
        kernel=kernel, map=map, phase=phase, kmeans=kmeans, loss=loss, seed=seed, threads=threads,
    )
    # The second stage's budget, rows and map dimension: the library's defaults unless given.
    for key, value in (("refine_fits", refine_fits), ("refine_rows", refine_rows),
                       ("refine_dim", refine_dim)):
        if value is not None:
            settings[key] = value
    return _native.tune_files(
        _paths(source), target,
        list(features) if features is not None else None,
        list(exclude) if exclude is not None else None,
        missing, delimiter, bool(heatmap), settings,
    )
