"""foldwise: tune and compare models by repeated cross-validation, keeping every fold score
in DuckDB. The package has two sides — `write` (spec to stored scores) and `read` (stored
scores to results, views, figures and the report) — around the `store`, with the
`families` and `metrics` as plug-in records both ask. The public API is re-exported here;
nothing imported at this level pulls in scikit-learn, DuckDB or pandas, so
`foldwise --help` starts fast."""

__version__ = "0.1.0"

from .errors import (DataError, FoldwiseError, ModelError, QueryError, SpecError,  # noqa: E402
                     StoreError)

__all__ = ["__version__", "FoldwiseError", "SpecError", "DataError", "StoreError", "QueryError",
           "ModelError",
           "Spec", "load_spec", "parse_spec", "spec_json_schema", "Store", "run_sweep",
           "check_spec", "summary", "pick_table", "compare_table", "complexity_table",
           "importance_table", "stability_table", "findings_table", "figure", "write_report",
           "merge_store", "export_store", "build_model", "load_model", "predict_file",
           "fetch_model", "built_models", "coefficient_table", "sweeps", "set_labels",
           "Selection", "diff_sweeps", "model_history", "remove_sweeps"]


# name -> (module, attribute), imported on first use so `import runner` stays light. Names
# differ from the submodules' (runner.store is a package) so an import never shadows them.
_LAZY = {
    "Spec": ("write.spec", "Spec"), "load_spec": ("write.spec", "load_spec"),
    "parse_spec": ("write.spec", "parse_spec"),
    "spec_json_schema": ("write.spec", "spec_json_schema"),
    "Store": ("store", "Store"),
    "run_sweep": ("write.engine", "run_sweep"), "check_spec": ("write.engine", "check_spec"),
    "summary": ("read.queries", "summary"), "pick_table": ("read.queries", "picks"),
    "compare_table": ("read.queries", "compare"),
    "complexity_table": ("read.queries", "complexity_table"),
    "importance_table": ("read.explained", "importance_table"),
    "stability_table": ("read.explained", "stability_table"),
    "findings_table": ("read.queries", "findings"),
    "figure": ("read.figures", "make_figure"), "write_report": ("read.report", "write_report"),
    "merge_store": ("store.transfer", "merge_store"),
    "export_store": ("store.transfer", "export_store"),
    "build_model": ("model.build", "build_model"), "load_model": ("model.keep", "load_model"),
    "predict_file": ("model.predict", "predict_file"),
    "fetch_model": ("model.keep", "fetch_model"),
    "built_models": ("read.explained", "built_models"),
    "coefficient_table": ("read.explained", "coefficient_table"),
    "sweeps": ("read.queries", "sweeps"), "set_labels": ("store.labels", "set_labels"),
    "Selection": ("store.labels", "Selection"), "diff_sweeps": ("read.past", "diff_sweeps"),
    "model_history": ("read.past", "model_history"),
    "remove_sweeps": ("store.tidy", "remove_sweeps"),
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
