"""The `linear` family: ordinary least squares, ridge, lasso or elastic net, after median
imputation and standardisation of numbers and one-hot encoding of categories, all fitted
on the fitting rows only.

A grid over `alpha` is scored without one fit per cell: ridge from one SVD of the centred
design per fold (the arithmetic of Ridge(solver="svd"), equal to ~1e-12), lasso and elastic
net from one warm-started coordinate-descent path per fold and l1_ratio, with Lasso's and
ElasticNet's default tol and max_iter (equal within that solver tolerance)."""

from __future__ import annotations

import numpy as np
from sklearn.linear_model import ElasticNet, Lasso, LinearRegression, Ridge
from sklearn.pipeline import Pipeline

from ._readers import coefficient_importance as own_importance
from ._base import CellFit, fit_grouped, linear_preprocessor, work_units
from .paths import elastic_net_path_coefs, ridge_path_coefs

__all__ = ["make_estimator", "fit_cells", "fit_units", "own_importance", "original_scale_coefficients",
           "model_size", "PATH_PARAMS"]

PATH_PARAMS = ("alpha",)
_CD_TOL, _CD_MAX_ITER = 1e-4, 1000  # Lasso's and ElasticNet's defaults


def _regressor(params: dict):
    penalty = params.get("penalty", "none")
    if penalty == "none":
        return LinearRegression()
    if penalty == "l2":
        return Ridge(alpha=params["alpha"], solver="svd")
    if penalty == "l1":
        return Lasso(alpha=params["alpha"], tol=_CD_TOL, max_iter=_CD_MAX_ITER)
    return ElasticNet(alpha=params["alpha"], l1_ratio=params["l1_ratio"], tol=_CD_TOL,
                      max_iter=_CD_MAX_ITER)


def make_estimator(params: dict, *, seed: int, y_fit=None, numeric, categorical) -> Pipeline:
    """The pipeline for one cell; `seed` is unused (these fits are deterministic)."""
    return Pipeline([("prep", linear_preprocessor(numeric, categorical)),
                     ("model", _regressor(params))])


def _penalised(params: dict) -> bool:
    return params.get("penalty", "none") != "none"


def _how(params: dict) -> str:
    return "ridge_svd" if params["penalty"] == "l2" else "enet_path"


def _alpha_path(group: list[dict], Xt_fit, y_fit, Xt_evals, *, seed: int) -> list[CellFit]:
    """Every alpha of the group (one penalty, one l1_ratio) from one decomposition or path."""
    alphas = np.array([params["alpha"] for params in group], dtype=np.float64)
    penalty = group[0]["penalty"]
    if penalty == "l2":
        coefs, intercepts = ridge_path_coefs(Xt_fit, y_fit, alphas)
    else:
        l1_ratio = 1.0 if penalty == "l1" else float(group[0]["l1_ratio"])
        coefs, intercepts = elastic_net_path_coefs(Xt_fit, y_fit, alphas, l1_ratio=l1_ratio,
                                                   tol=_CD_TOL, max_iter=_CD_MAX_ITER)
    fits = [CellFit() for _ in group]
    for X in Xt_evals:
        preds = np.asarray(X, dtype=np.float64) @ coefs.T + intercepts
        for fit, p in zip(fits, preds.T):
            fit.predictions.append(np.ascontiguousarray(p))
    return fits


def fit_cells(cells, X_fit, y_fit, X_evals, *, seed, numeric, categorical, paths=True):
    """Score every cell on the fitting rows: alpha grids from one SVD or path per penalty and
    l1_ratio, or (with `paths=False`, least squares, or a lone alpha) one fit per cell."""
    return fit_grouped(make_estimator, linear_preprocessor, _alpha_path, _how, PATH_PARAMS,
                       cells, X_fit, y_fit, X_evals, seed=seed, numeric=numeric,
                       categorical=categorical, paths=paths, eligible=_penalised)


def fit_units(cells, *, paths=True):
    """Pieces of work and rough costs: linear fits are cheap next to a tree."""
    return work_units(cells, PATH_PARAMS, paths=paths, eligible=_penalised,
                      cost_alone=lambda params: 0.02,
                      cost_group=lambda group: 0.03 + 0.002 * len(group))


def model_size(pipeline: Pipeline) -> int:
    """The fitted model's size as a person reads it: its non-zero coefficients (one-hot
    levels counted one by one; the intercept not counted)."""
    return int(np.count_nonzero(pipeline.named_steps["model"].coef_))


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
