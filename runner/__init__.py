"""foldwise: tune and compare regression models by repeated cross-validation, keeping every
fold score in DuckDB. The public API is re-exported here; nothing imported at this level
pulls in scikit-learn."""

__version__ = "0.1.0"

from .errors import DataError, FoldwiseError, QueryError, SpecError, StoreError  # noqa: E402
from .spec import Spec, load_spec, parse_spec, spec_json_schema  # noqa: E402
from .store import Store  # noqa: E402

__all__ = ["__version__", "FoldwiseError", "SpecError", "DataError", "StoreError", "QueryError",
           "Spec", "load_spec", "parse_spec", "spec_json_schema", "Store", "run_sweep",
           "check_spec", "summary", "picks", "compare", "complexity_table", "importances",
           "stability", "figure", "write_report"]


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


def picks(*args, **kwargs):
    """Picked cell per model and rule (see `runner.picks.picks`)."""
    from .picks import picks as _picks

    return _picks(*args, **kwargs)


def compare(*args, **kwargs):
    """Paired comparison of the models' picked cells (see `runner.compare.compare`)."""
    from .compare import compare as _compare

    return _compare(*args, **kwargs)


def complexity_table(*args, **kwargs):
    """One model's cells in complexity order (see `runner.picks.complexity_table`)."""
    from .picks import complexity_table as _table

    return _table(*args, **kwargs)


def importances(*args, **kwargs):
    """Stored importances of a sweep's explained cells (see `runner.explain.importance_table`)."""
    from .explain import importance_table as _table

    return _table(*args, **kwargs)


def stability(*args, **kwargs):
    """Stability of the explained cells across folds (see `runner.stability.stability_summary`)."""
    from .stability import stability_summary as _summary

    return _summary(*args, **kwargs)


def figure(*args, **kwargs):
    """One figure of a sweep as a matplotlib Figure (see `runner.plots.make_figure`)."""
    from .plots import make_figure as _make

    return _make(*args, **kwargs)


def write_report(*args, **kwargs):
    """Write the self-contained HTML report (see `runner.report.write_report`)."""
    from .report import write_report as _write

    return _write(*args, **kwargs)
