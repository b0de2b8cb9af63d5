"""What the explain step reads from a fitted pipeline: importances per original column, a
tree's shape and nodes. Each family's estimator module offers the readers that fit it
(`own_importance`, and for one tree `tree_shape` / `tree_node_rows`)."""

from __future__ import annotations

import numpy as np
from sklearn.base import BaseEstimator, ClassifierMixin, RegressorMixin, is_classifier
from sklearn.compose import ColumnTransformer
from sklearn.impute import SimpleImputer
from sklearn.pipeline import Pipeline
from sklearn.preprocessing import (FunctionTransformer, OneHotEncoder, OrdinalEncoder,
                                   StandardScaler)

from ._base import as_tree_input

__all__ = ["output_sources", "shuffled_by_index", "coefficient_importance",
           "impurity_importance", "tree_shape", "tree_node_rows"]


def output_sources(prep) -> list[str]:
    """The original column behind each output column of a fitted preprocessing step."""
    sources: list[str] = []
    for name, transformer, columns in prep.transformers_:
        if name == "remainder" or transformer == "drop":
            continue
        if transformer == "passthrough":
            sources.extend(columns)
        elif hasattr(transformer, "named_steps") and "onehot" in transformer.named_steps:
            kept = transformer.named_steps["impute"].get_feature_names_out(columns)
            for col, levels in zip(kept, transformer.named_steps["onehot"].categories_):
                sources.extend([str(col)] * len(levels))
        else:
            sources.extend(str(c) for c in transformer.get_feature_names_out(columns))
    return sources


def shuffled_by_index(pipeline, X):
    """(stand-in, index rows) on which `permutation_importance` gives the numbers it gives
    on (pipeline, X), or None when the pipeline is not of that kind.

    Every step of our preprocessors maps one column value by value (imputing, scaling, a
    category's code or its one-hot levels), so the transformed rows of an input column
    shuffled are that column's transformed rows taken in the shuffled order. The rows are
    transformed once; the index rows hold, per input column, which row each of its values
    comes from (0 ... n-1 to begin with); the stand-in puts the model's input together
    from them, laid out as the preprocessor lays it out, and asks the model. Shuffling and
    drawing rows of the index rows is then the same as doing it to the rows themselves."""
    steps = getattr(pipeline, "named_steps", {})
    prep, model = steps.get("prep"), steps.get("model")
    if len(steps) != 2 or not isinstance(prep, ColumnTransformer) or \
            not hasattr(prep, "transformers_") or not all(
                _value_by_value(part) for _, part, columns in prep.transformers_
                if part != "drop" and len(columns)):
        return None
    rows = prep.transform(X)
    names = [str(c) for c in X.columns]
    sources = np.asarray(output_sources(prep), dtype=object)
    blocks = [np.flatnonzero(sources == name) for name in names]
    if not isinstance(rows, np.ndarray) or rows.ndim != 2 or \
            sum(len(b) for b in blocks) != rows.shape[1] or len(sources) != rows.shape[1]:
        return None
    kind = _ByIndexClassifier if is_classifier(model) else _ByIndexRegressor
    stand_in = kind()
    stand_in.model, stand_in.rows = model, rows
    stand_in.source = np.empty(rows.shape[1], dtype=np.intp)  # output column -> source
    for j, columns in enumerate(blocks):
        stand_in.source[columns] = j
    if hasattr(model, "classes_"):
        stand_in.classes_ = model.classes_
    small = len(X) < np.iinfo(np.int32).max
    index = np.repeat(np.arange(len(X), dtype=np.int32 if small else np.intp)[:, None],
                      len(names), axis=1)
    return stand_in, index


def _value_by_value(part) -> bool:
    """Whether a fitted preprocessing part maps each of its columns value by value into
    output columns of its own (the parts our families' preprocessors are made of)."""
    if isinstance(part, Pipeline):
        return all(_value_by_value(step) for _, step in part.steps)
    if isinstance(part, FunctionTransformer):
        return part.func is as_tree_input
    if isinstance(part, SimpleImputer):
        return not part.add_indicator
    if isinstance(part, OneHotEncoder):
        return not part.sparse_output
    return isinstance(part, (OrdinalEncoder, StandardScaler))


class _ByIndex(BaseEstimator):
    """A fitted model read through index rows (`shuffled_by_index`)."""

    def __init__(self):
        pass

    def fit(self, X, y=None):
        raise TypeError("reads a fitted model through index rows; it cannot be fitted")

    def __sklearn_is_fitted__(self) -> bool:
        return True

    def _rows(self, index) -> np.ndarray:
        """The model's input for these index rows: output column c of the transformed rows
        taken from the row its source column's index names, all columns in one gather."""
        # row-major as the model's own input: a linear model's sums depend on the layout
        return np.ascontiguousarray(self.rows[np.asarray(index)[:, self.source],
                                              np.arange(self.rows.shape[1])])

    def predict(self, index):
        return self.model.predict(self._rows(index))


class _ByIndexRegressor(RegressorMixin, _ByIndex):
    pass


class _ByIndexClassifier(ClassifierMixin, _ByIndex):
    def predict_proba(self, index):
        return self.model.predict_proba(self._rows(index))


def _by_source(values, sources: list[str], features: list[str]) -> dict[str, float]:
    out = {f: 0.0 for f in features}
    for v, s in zip(np.asarray(values, dtype=float), sources):
        out[s] += float(v)
    return out


def coefficient_importance(pipeline, X_fit, features: list[str]) -> dict[str, float]:
    """Per original column, the SD over the fitting rows of its part of the linear prediction
    (for classes: of the log-odds; with three or more classes the mean of that SD over the
    classes' linear scores). Only a category's indicators need the rows themselves: on
    numbers alone the fitting rows are not transformed at all."""
    prep, model = pipeline.named_steps["prep"], pipeline.named_steps["model"]
    coefs = np.atleast_2d(np.asarray(model.coef_, dtype=float))
    sources = output_sources(prep)
    numeric = set()
    for name, _, columns in prep.transformers_:
        if name == "num":
            numeric.update(columns)
    Xt = None
    out = {f: 0.0 for f in features}
    for col in features:
        idx = [i for i, s in enumerate(sources) if s == col]
        if not idx:
            continue
        if col in numeric:  # one standardised column: SD of w*z is |w|
            out[col] = float(np.mean(np.abs(coefs[:, idx[0]])))
        else:
            if Xt is None:
                Xt = np.asarray(prep.transform(X_fit), dtype=float)
            out[col] = float(np.mean([np.std(Xt[:, idx] @ row[idx]) for row in coefs]))
    return out


def impurity_importance(pipeline, X_fit, features: list[str]) -> dict[str, float]:
    """The fitted tree's or forest's impurity-based importances, per original column
    (`X_fit` is not needed; every family's reader takes the same arguments)."""
    model = pipeline.named_steps["model"]
    return _by_source(model.feature_importances_, output_sources(pipeline.named_steps["prep"]),
                      features)


def _categories(prep) -> dict[str, list]:
    """The ordinal codes' levels of each categorical column of a tree preprocessor."""
    out = {}
    for name, transformer, columns in prep.transformers_:
        if name == "cat":
            for col, levels in zip(columns, transformer.categories_):
                out[str(col)] = list(levels)
    return out


def _level(value) -> str:
    """A level as the data file wrote it: 3 for a numeric level 3.0, 2.5 for 2.5."""
    if isinstance(value, (float, np.floating)):
        return str(int(value)) if float(value).is_integer() else f"{float(value):g}"
    return str(value)


def _rule(feature: str, threshold: float, levels: list | None) -> str:
    """The condition that sends a row to the left child, in the data's own terms."""
    if levels is not None:
        left = [_level(v) for i, v in enumerate(levels) if i <= threshold]
        return f"{feature} in {{{', '.join(left)}}}"
    return f"{feature} ≤ {threshold:.4g}"


def tree_shape(pipeline) -> dict:
    """Leaves, depth, root split (column, threshold, rule) and the set of columns used."""
    prep, tree = pipeline.named_steps["prep"], pipeline.named_steps["model"]
    sources, levels = output_sources(prep), _categories(prep)
    t = tree.tree_
    used = sorted({sources[f] for f in t.feature if f >= 0})
    out = {"n_leaves": int(tree.get_n_leaves()), "depth": int(tree.get_depth()),
           "root_feature": None, "root_threshold": None, "root_rule": None,
           "features_used": used}
    if t.node_count > 1:
        name = sources[t.feature[0]]
        out.update(root_feature=name, root_threshold=float(t.threshold[0]),
                   root_rule=_rule(name, float(t.threshold[0]), levels.get(name)))
    return out


def _node_value(tree, node: int) -> dict:
    """A node's prediction: its mean (regression), or its most likely class and that
    class's share of the node's (weighted) rows (classification)."""
    value = tree.tree_.value[node][0]
    if not hasattr(tree, "classes_"):
        return {"value": float(value[0]), "label": None}
    shares = value / value.sum() if value.sum() > 0 else value
    best = int(np.argmax(shares))
    return {"value": float(shares[best]), "label": str(tree.classes_[best])}


def tree_node_rows(pipeline) -> list[dict]:
    """One row per node of the fitted tree: links, depth, split rule, mean and size."""
    prep, tree = pipeline.named_steps["prep"], pipeline.named_steps["model"]
    sources, levels = output_sources(prep), _categories(prep)
    t = tree.tree_
    parent = np.full(t.node_count, -1)
    depth = np.zeros(t.node_count, dtype=int)
    for node in range(t.node_count):  # children always follow their parent
        for child in (t.children_left[node], t.children_right[node]):
            if child >= 0:
                parent[child], depth[child] = node, depth[node] + 1
    rows = []
    for node in range(t.node_count):
        leaf = t.children_left[node] < 0
        name = None if leaf else sources[t.feature[node]]
        thr = None if leaf else float(t.threshold[node])
        rows.append({"node": node, "parent": int(parent[node]),
                     "left_child": int(t.children_left[node]),
                     "right_child": int(t.children_right[node]), "depth": int(depth[node]),
                     "feature": name, "threshold": thr,
                     "rule": None if leaf else _rule(name, thr, levels.get(name)),
                     "missing_left": None if leaf else bool(t.missing_go_to_left[node]),
                     **_node_value(tree, node),
                     "n_samples": int(t.n_node_samples[node]),
                     "impurity": float(t.impurity[node])})
    return rows
