"""foldwise: tune and compare regression models by repeated cross-validation, keeping every
fold score in DuckDB. The public API is re-exported here; nothing imported at this level
pulls in scikit-learn."""

__version__ = "0.1.0"

from .errors import DataError, FoldwiseError, QueryError, SpecError, StoreError  # noqa: E402
from .spec import Spec, load_spec, parse_spec, spec_json_schema  # noqa: E402
from .store import Store  # noqa: E402

__all__ = ["__version__", "FoldwiseError", "SpecError", "DataError", "StoreError", "QueryError",
           "Spec", "load_spec", "parse_spec", "spec_json_schema", "Store", "run_sweep",
           "check_spec", "summary"]


def run_sweep(*args, **kwargs):
    """Run a sweep (see `runner.engine.run_sweep`)."""
    from .engine import run_sweep as _run

    return _run(*args, **kwargs)


def check_spec(*args, **kwargs):
    """Plan a sweep without fitting (see `runner.engine.check_spec`)."""
    from .engine import check_spec as _check

    return _check(*args, **kwargs)


def summary(*args, **kwargs):
    """Summary by model (see `runner.queries.summary`)."""
    from .queries import summary as _summary

    return _summary(*args, **kwargs)
