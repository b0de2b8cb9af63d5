"""The exception tree: every error a user can cause carries an exit code and a readable message."""

from __future__ import annotations


class FoldwiseError(Exception):
    """Base of all foldwise errors; `exit_code` is what the CLI exits with."""

    exit_code = 1


class SpecError(FoldwiseError, ValueError):
    """The spec file cannot be read or does not validate."""

    exit_code = 2


class DataError(FoldwiseError, ValueError):
    """The data file or its columns cannot serve the spec."""

    exit_code = 2


class StoreError(FoldwiseError, RuntimeError):
    """The store cannot be opened, read or written as asked."""

    exit_code = 2


class QueryError(FoldwiseError, ValueError):
    """A query against the store was refused or failed."""

    exit_code = 2


class ModelError(FoldwiseError, ValueError):
    """A built model cannot be made, found, trusted or loaded as asked."""

    exit_code = 2


class OutputError(FoldwiseError, ValueError):
    """A place to write a result (--out) that cannot or must not be written."""

    exit_code = 2
