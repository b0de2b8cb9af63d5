"""What the explain step reads from a fitted pipeline: importances per original column, a
tree's shape and nodes. Each family's estimator module offers the readers that fit it
(`own_importance`, and for one tree `tree_shape` / `tree_node_rows`)."""

from __future__ import annotations

import numpy as np

__all__ = ["output_sources", "column_sources", "coefficient_importance", "impurity_importance", "tree_shape",
           "tree_node_rows"]


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


def column_sources(prep) -> list[str] | None:
    """`output_sources` of a fitted tree preprocessor, whose every output is one input
    column mapped value by value (a cast, a category's code): shuffling an input column's
    rows shuffles its output column's rows the same way. None for any other step."""
    from sklearn.compose import ColumnTransformer
    from sklearn.preprocessing import FunctionTransformer, OrdinalEncoder

    from ._base import as_tree_input

    if not isinstance(prep, ColumnTransformer) or not hasattr(prep, "transformers_"):
        return None
    for name, part, columns in prep.transformers_:
        if part == "drop" or len(columns) == 0:
            continue
        if not (isinstance(part, OrdinalEncoder) or (isinstance(part, FunctionTransformer)
                                                     and part.func is as_tree_input)):
            return None
    return output_sources(prep)


def _by_source(values, sources: list[str], features: list[str]) -> dict[str, float]:
    out = {f: 0.0 for f in features}
    for v, s in zip(np.asarray(values, dtype=float), sources):
        out[s] += float(v)
    return out


def coefficient_importance(pipeline, X_fit, features: list[str]) -> dict[str, float]:
    """Per original column, the SD over the fitting rows of its part of the linear prediction
    (for classes: of the log-odds; with three or more classes the mean of that SD over the
    classes' linear scores)."""
    prep, model = pipeline.named_steps["prep"], pipeline.named_steps["model"]
    coefs = np.atleast_2d(np.asarray(model.coef_, dtype=float))
    sources = output_sources(prep)
    Xt = np.asarray(prep.transform(X_fit), dtype=float)
    numeric = set()
    for name, _, columns in prep.transformers_:
        if name == "num":
            numeric.update(columns)
    out = {f: 0.0 for f in features}
    for col in features:
        idx = [i for i, s in enumerate(sources) if s == col]
        if not idx:
            continue
        if col in numeric:  # one standardised column: SD of w*z is |w|
            out[col] = float(np.mean(np.abs(coefs[:, idx[0]])))
        else:
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
