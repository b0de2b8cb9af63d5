"""The `linear` family: ordinary least squares, ridge, lasso or elastic net, after median
imputation and standardisation of numbers and one-hot encoding of categories, all fitted
on the fitting rows only."""

from __future__ import annotations

import numpy as np
from sklearn.linear_model import ElasticNet, Lasso, LinearRegression, Ridge
from sklearn.pipeline import Pipeline

from ._base import fit_each, linear_preprocessor

__all__ = ["make_estimator", "fit_cells", "original_scale_coefficients"]


def _regressor(params: dict):
    penalty = params.get("penalty", "none")
    if penalty == "none":
        return LinearRegression()
    if penalty == "l2":
        return Ridge(alpha=params["alpha"], solver="svd")
    if penalty == "l1":
        return Lasso(alpha=params["alpha"])
    return ElasticNet(alpha=params["alpha"], l1_ratio=params["l1_ratio"])


def make_estimator(params: dict, *, seed: int, y_fit=None, numeric, categorical) -> Pipeline:
    """The pipeline for one cell; `seed` is unused (these fits are deterministic)."""
    return Pipeline([("prep", linear_preprocessor(numeric, categorical)),
                     ("model", _regressor(params))])


def fit_cells(cells, X_fit, y_fit, X_evals, *, seed, numeric, categorical):
    """Fit each cell on the fitting rows and predict every evaluation set."""
    return fit_each(make_estimator, cells, X_fit, y_fit, X_evals, seed=seed, numeric=numeric,
                    categorical=categorical)


def original_scale_coefficients(pipeline: Pipeline) -> tuple[dict[str, float], float]:
    """Coefficients per numeric column in the data's own units, and the intercept.

    Undoes the standardisation: b_j = w_j / scale_j and b_0 = w_0 - sum(w_j * mean_j / scale_j).
    One-hot columns keep their coefficient (they are not scaled)."""
    prep = pipeline.named_steps["prep"]
    model = pipeline.named_steps["model"]
    coefs = np.asarray(model.coef_, dtype=float).ravel()
    intercept = float(model.intercept_)
    out: dict[str, float] = {}
    pos = 0
    for name, transformer, columns in prep.transformers_:
        if name == "num":
            scaler = transformer.named_steps["scale"]
            kept = transformer.named_steps["impute"].get_feature_names_out(columns)
            w = coefs[pos:pos + len(kept)]
            b = w / scaler.scale_
            intercept -= float(np.sum(w * scaler.mean_ / scaler.scale_))
            out.update(dict(zip(kept, b)))
            pos += len(kept)
        elif name == "cat":
            names = transformer.get_feature_names_out(columns)
            out.update(dict(zip(names, coefs[pos:pos + len(names)])))
            pos += len(names)
    return out, intercept
