"""foldwise: tune and compare regression models by repeated cross-validation, keeping every
fold score in DuckDB. The public API is re-exported here; nothing imported at this level
pulls in scikit-learn, DuckDB or pandas, so `foldwise --help` starts fast."""

__version__ = "0.1.0"

from .errors import DataError, FoldwiseError, QueryError, SpecError, StoreError  # noqa: E402

__all__ = ["__version__", "FoldwiseError", "SpecError", "DataError", "StoreError", "QueryError",
           "Spec", "load_spec", "parse_spec", "spec_json_schema", "Store", "run_sweep",
           "check_spec", "summary", "pick_table", "compare_table", "complexity_table",
           "importance_table", "stability_table", "figure", "write_report", "merge_store",
           "export_store"]


# name -> (module, attribute), imported on first use so `import runner` stays light. Names
# differ from the submodules' (runner.picks is a module) so an import never shadows them.
_LAZY = {
    "Spec": ("spec", "Spec"), "load_spec": ("spec", "load_spec"),
    "parse_spec": ("spec", "parse_spec"), "spec_json_schema": ("spec", "spec_json_schema"),
    "Store": ("store", "Store"),
    "run_sweep": ("engine", "run_sweep"), "check_spec": ("engine", "check_spec"),
    "summary": ("queries", "summary"), "pick_table": ("queries", "picks"),
    "compare_table": ("queries", "compare"), "complexity_table": ("queries", "complexity_table"),
    "importance_table": ("queries", "importance_table"),
    "stability_table": ("queries", "stability_table"),
    "figure": ("plots", "make_figure"), "write_report": ("report", "write_report"),
    "merge_store": ("transfer", "merge_store"), "export_store": ("transfer", "export_store"),
}


def __getattr__(name: str):
    """Import a public function from its module the first time it is asked for."""
    if name not in _LAZY:
        raise AttributeError(f"module 'runner' has no attribute {name!r}")
    import importlib

    module, attr = _LAZY[name]
    value = getattr(importlib.import_module(f".{module}", __name__), attr)
    globals()[name] = value
    return value
