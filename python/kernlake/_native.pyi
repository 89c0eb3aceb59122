"""Type stubs of kernlake's Rust extension (used through the `kernlake` package)."""

from typing import Any, Optional, Sequence, Tuple, Union

import numpy as np
import numpy.typing as npt

SAFETY: str
__version__: str

class ArrowStream:
    def __arrow_c_stream__(self, requested_schema: Optional[object] = None) -> object: ...

class BatchScorer:
    def next_stream(self) -> Optional[ArrowStream]: ...

class Model:
    @classmethod
    def load(cls, path: str) -> "Model": ...
    @classmethod
    def from_bytes(cls, data: bytes) -> "Model": ...
    def save(self, path: str) -> None: ...
    def to_bytes(self) -> bytes: ...
    def predict_array(self, x: npt.NDArray[np.float64], threads: int) -> npt.NDArray[np.float64]: ...
    def score_stream(
        self,
        table: Any,
        keep: Optional[Sequence[str]],
        coverage: bool,
        missing: str,
        name: str,
        batch_rows: int,
        threads: int,
        band: Optional[float] = None,
        time: Optional[str] = None,
        by: Optional[str] = None,
    ) -> ArrowStream: ...
    def score_report_stream(
        self,
        table: Any,
        keep: Optional[Sequence[str]],
        coverage: bool,
        missing: str,
        name: str,
        batch_rows: int,
        threads: int,
        band: float,
        time: Optional[str] = None,
        by: Optional[str] = None,
    ) -> tuple[ArrowStream, str]: ...
    def batch_scorer(
        self,
        reader: Any,
        keep: Optional[Sequence[str]],
        coverage: bool,
        missing: str,
        name: str,
        batch_rows: int,
        threads: int,
        band: Optional[float] = None,
    ) -> BatchScorer: ...
    def score_schema(
        self,
        table: object,
        keep: Optional[list[str]],
        coverage: bool,
        missing: str,
        name: str,
        band: Optional[float] = None,
    ) -> ArrowStream: ...
    @property
    def inputs(self) -> list[str]: ...
    @property
    def target(self) -> Optional[str]: ...
    @property
    def parameters(self) -> dict[str, Any]: ...
    @property
    def report(self) -> dict[str, Any]: ...
    def describe(self) -> str: ...

def fit_files(
    sources: Sequence[str],
    target: str,
    features: Optional[Sequence[str]],
    exclude: Optional[Sequence[str]],
    missing: str,
    delimiter: str,
    progress: bool,
    settings: dict[str, Any],
) -> Model: ...
def fit_arrays(
    x: npt.NDArray[np.float64],
    y: npt.NDArray[np.float64],
    names: Optional[Sequence[str]],
    progress: bool,
    settings: dict[str, Any],
) -> Model: ...
def fit_table(
    table: Any,
    target: str,
    features: Optional[Sequence[str]],
    exclude: Optional[Sequence[str]],
    missing: str,
    progress: bool,
    settings: dict[str, Any],
) -> Model: ...
def audit_files(
    sources: Sequence[str],
    target: Optional[str],
    model: Optional[Model],
    features: Optional[Sequence[str]],
    exclude: Optional[Sequence[str]],
    missing: str,
    delimiter: str,
    plot: bool,
    settings: dict[str, Any],
) -> Union[dict[str, Any], Tuple[dict[str, Any], str]]: ...
def tune_files(
    sources: Sequence[str],
    target: str,
    features: Optional[Sequence[str]],
    exclude: Optional[Sequence[str]],
    missing: str,
    delimiter: str,
    heatmap: bool,
    settings: dict[str, Any],
) -> Union[dict[str, Any], Tuple[dict[str, Any], str]]: ...
def fit_defaults() -> dict[str, Any]: ...
def spark_fit_check(
    schema_table: object,
    target: str,
    features: Optional[list[str]],
    exclude: Optional[list[str]],
    missing: str,
    settings: dict[str, Any],
) -> list[str]: ...
def spark_survey_part(
    reader: object, features: list[str], target: str, missing: str, sample: int, seed: int
) -> bytes: ...

class SparkWorker:
    def __init__(self, plan: bytes) -> None: ...
    def pass_part(self, pass_bytes: bytes, reader: object) -> bytes: ...

class SparkDriver:
    def __init__(self, parts: list[bytes], missing: str, settings: dict[str, Any]) -> None: ...
    def plan_bytes(self) -> bytes: ...
    def open_pass(self) -> bytes: ...
    def close_pass(self, parts: list[bytes]) -> bool: ...
    def passes(self) -> int: ...
    def finish(self) -> Model: ...
