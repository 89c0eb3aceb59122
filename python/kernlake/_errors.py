"""Exceptions raised by kernlake: one base class, one subclass per kind of failure.

Each carries the library's one-sentence message, naming the file, column, row or
parameter concerned.
"""

from __future__ import annotations

__all__ = ["Error", "InputError", "ModelFileError", "NumericalError", "IOError"]


class Error(Exception):
    """Base class of every error kernlake raises."""


class InputError(Error, ValueError):
    """The input or a setting breaks a contract: a missing or non-numeric column, a
    missing value under the ``fail`` policy, an array of the wrong dtype or layout, an
    object that is not a table, a setting out of range."""


class ModelFileError(Error):
    """A model file (or model bytes) could not be read or written: damaged, truncated,
    not a kernlake model."""


class NumericalError(Error, ArithmeticError):
    """A numerical routine failed because of the data (for example every tuning
    candidate diverged)."""


class IOError(Error, OSError):  # noqa: A001 - the kind's name, also an OSError
    """The operating system refused to read or write a file or folder, or an object
    store (``s3://``) a bucket, prefix or object; the message names the path or URL."""
