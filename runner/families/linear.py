"""The `linear` family: ordinary least squares, ridge, lasso or elastic net for numbers, and
logistic regression with the same penalties for classes, after median imputation and
standardisation of numbers and one-hot encoding of categories, all fitted on the fitting
rows only.

A grid over `alpha` is scored without one fit per cell: ridge from one Gram matrix of the
centred design per fold and a small Cholesky solve per alpha (the arithmetic of
Ridge(solver="cholesky"), which `Ridge()` runs on dense rows, step for step: each alpha's
model is that fit's, so the explain step reads it instead of refitting), lasso and elastic
net from one warm-started coordinate-descent path per fold and l1_ratio, with Lasso's and
ElasticNet's default tol and max_iter (equal within that solver tolerance)."""

from __future__ import annotations

import functools

import numpy as np
from sklearn.linear_model import ElasticNet, Lasso, LinearRegression, Ridge
from sklearn.pipeline import Pipeline

from . import FAMILIES
from ._readers import coefficient_importance as own_importance
from ._base import (CellFit, count_warnings, fit_grouped, linear_preprocessor,
                    prediction_columns, work_units)
from .paths import elastic_net_path_coefs, ridge_model, ridge_path_coefs

__all__ = ["make_estimator", "fit_cells", "fit_units", "own_importance", "prediction_columns",
           "original_scale_coefficients", "coefficient_rows", "model_size", "INTERCEPT",
           "PATH_PARAMS"]

INTERCEPT = "(intercept)"
"""The `term` of the intercept's row in the coefficient tables."""

PATH_PARAMS = ("alpha",)
_CD_TOL, _CD_MAX_ITER = 1e-4, 1000  # Lasso's and ElasticNet's defaults
_NEWTON_MAX_ITER = 100


def _regressor(params: dict):
    penalty = params.get("penalty", "none")
    if penalty == "none":
        return LinearRegression()
    if penalty == "l2":
        return Ridge(alpha=params["alpha"], solver="cholesky")
    if penalty == "l1":
        return Lasso(alpha=params["alpha"], tol=_CD_TOL, max_iter=_CD_MAX_ITER)
    return ElasticNet(alpha=params["alpha"], l1_ratio=params["l1_ratio"], tol=_CD_TOL,
                      max_iter=_CD_MAX_ITER)


def _classifier(params: dict, *, n_fit: int, seed: int):
    """Logistic regression with the penalty of `params`. One `alpha` means the same strength
    on any number of rows: C = 1 / (alpha · n_fit), since scikit-learn's objective is
    C · Σ loss + penalty and ours (mean loss) + alpha · penalty. Built the way scikit-learn
    1.8 asks (l1_ratio and C, no `penalty`): none -> C = inf; l2 and none by Newton's method
    (newton-cholesky, tol 1e-8, so coefficients are exact to many digits); l1 and elastic
    net by saga (seeded, as it shuffles)."""
    from sklearn.linear_model import LogisticRegression

    penalty = params.get("penalty", "none")
    weight = params.get("class_weight", "none")
    common = dict(class_weight=None if weight == "none" else weight)
    if penalty == "none":
        return LogisticRegression(C=np.inf, solver="newton-cholesky", tol=1e-8,
                                  max_iter=_NEWTON_MAX_ITER, **common)
    C = 1.0 / (float(params["alpha"]) * n_fit)
    if penalty == "l2":
        return LogisticRegression(C=C, l1_ratio=0.0, solver="newton-cholesky", tol=1e-8,
                                  max_iter=_NEWTON_MAX_ITER, **common)
    l1_ratio = 1.0 if penalty == "l1" else float(params["l1_ratio"])
    return LogisticRegression(C=C, l1_ratio=l1_ratio, solver="saga", tol=_CD_TOL,
                              max_iter=_CD_MAX_ITER, random_state=seed, **common)


def make_estimator(params: dict, *, seed: int, y_fit=None, numeric, categorical,
                   task: str = "regression") -> Pipeline:
    """The pipeline for one cell; `seed` matters only to saga's shuffling (lasso and elastic
    net for classes); the other fits are deterministic."""
    model = (_classifier(params, n_fit=len(y_fit), seed=seed) if task == "classification"
             else _regressor(params))
    return Pipeline([("prep", linear_preprocessor(numeric, categorical)), ("model", model)])


def _penalised(params: dict) -> bool:
    return params.get("penalty", "none") != "none"


def _how(params: dict) -> str:
    return "ridge_gram" if params["penalty"] == "l2" else "enet_path"


def _alpha_path(group: list[dict], Xt_fit, y_fit, Xt_evals, *, seed: int,
                task: str = "regression", scratch: bool = False) -> list[CellFit]:
    """Every alpha of the group (one penalty, one l1_ratio) from one decomposition or path;
    a `scratch` Xt_fit is centred in place (the last group of a task reads it last)."""
    alphas = np.array([params["alpha"] for params in group], dtype=np.float64)
    penalty = group[0]["penalty"]
    if penalty == "l2":
        coefs, intercepts, solvers, warned = ridge_path_coefs(Xt_fit, y_fit, alphas,
                                                              scratch=scratch)
    else:
        l1_ratio = 1.0 if penalty == "l1" else float(group[0]["l1_ratio"])
        coefs, intercepts = elastic_net_path_coefs(Xt_fit, y_fit, alphas, l1_ratio=l1_ratio,
                                                   tol=_CD_TOL, max_iter=_CD_MAX_ITER,
                                                   scratch=scratch)
    fits = [CellFit() for _ in group]
    for X in Xt_evals:  # one product per alpha, as each alpha's own model predicts
        X = np.asarray(X, dtype=np.float64)
        for fit, coef, intercept in zip(fits, coefs, intercepts):
            fit.predictions.append(X @ coef + intercept)
    if penalty == "l2":  # the path did each alpha's own Ridge(solver="cholesky") fit: read it
        for fit, params, coef, intercept, solver, caught in zip(fits, group, coefs,
                                                                 intercepts, solvers, warned):
            fit.make_model = functools.partial(ridge_model, params["alpha"], coef, intercept,
                                               solver)
            fit.n_warnings = count_warnings(caught)
    return fits


_alpha_path.takes_scratch = True  # may centre the fitting rows in place (fit_grouped)


def fit_cells(cells, X_fit, y_fit, X_evals, *, seed, numeric, categorical, paths=True,
              task="regression", read=None):
    """Score every cell on the fitting rows: alpha grids from one Gram matrix or path per
    penalty and l1_ratio, or (with `paths=False`, least squares, a lone alpha, or classes:
    logistic regression has no exact one-fit route here) one fit per cell."""
    return fit_grouped(make_estimator, linear_preprocessor, _alpha_path, _how, PATH_PARAMS,
                       cells, X_fit, y_fit, X_evals, seed=seed, numeric=numeric,
                       categorical=categorical,
                       paths=paths and task in FAMILIES["linear"].path_tasks,
                       eligible=_penalised, task=task, read=read)


def fit_units(cells, *, paths=True):
    """Pieces of work and rough costs: linear fits are cheap next to a tree."""
    return work_units(cells, PATH_PARAMS, paths=paths, eligible=_penalised,
                      cost_alone=lambda params: 0.02,
                      cost_group=lambda group: 0.03 + 0.002 * len(group))


def model_size(pipeline: Pipeline) -> int:
    """The fitted model's size as a person reads it: its non-zero coefficients (one-hot
    levels counted one by one; the intercept not counted)."""
    return int(np.count_nonzero(pipeline.named_steps["model"].coef_))


def coefficient_rows(pipeline: Pipeline) -> list[dict]:
    """One row per term of the fitted linear model, signed, in the data's own units and on
    the scale the model was fitted on.

    A numeric column j was median-imputed and standardised with mean m_j and scale s_j, and
    the model holds w_j for it: `coefficient` = w_j / s_j (change in the target per unit of
    the column), `standardised` = w_j (per standard deviation), `mean`/`scale` = m_j, s_j.
    A category level's one-hot indicator is not scaled, so both numbers are its own
    coefficient. The intercept on the original scale is w_0 - sum_j w_j m_j / s_j
    (`standardised`: w_0, the prediction at every column's mean and every indicator 0).
    A column imputation dropped (missing in every fitting row) has no term. For classes the
    terms are those of the log-odds: `class_label` names the class whose score they make
    (with two classes, the second: the log-odds of it against the first)."""
    model = pipeline.named_steps["model"]
    coefs = np.atleast_2d(np.asarray(model.coef_, dtype=float))
    intercepts = np.atleast_1d(np.asarray(model.intercept_, dtype=float))
    classes = getattr(model, "classes_", None)
    if classes is None:
        labels = [None]
    else:
        labels = [str(classes[1])] if len(coefs) == 1 else [str(c) for c in classes]
    rows = []
    for label, w, w0 in zip(labels, coefs, intercepts):
        rows += [{**r, "class_label": label}
                 for r in _terms(pipeline.named_steps["prep"], w, float(w0))]
    return rows


def _terms(prep, coefs: np.ndarray, fitted_intercept: float) -> list[dict]:
    """The rows of one linear score (see coefficient_rows), intercept first."""
    intercept = fitted_intercept
    rows: list[dict] = []
    pos = 0
    for name, transformer, columns in prep.transformers_:
        if name == "num":
            scaler = transformer.named_steps["scale"]
            kept = transformer.named_steps["impute"].get_feature_names_out(columns)
            w = coefs[pos:pos + len(kept)]
            intercept -= float(np.sum(w * scaler.mean_ / scaler.scale_))
            for col, wj, m, sd in zip(kept, w, scaler.mean_, scaler.scale_):
                rows.append({"term": str(col), "feature": str(col), "level": None,
                             "coefficient": wj / sd, "standardised": wj, "mean": float(m),
                             "scale": float(sd)})
            pos += len(kept)
        elif name == "cat":
            kept = transformer.named_steps["impute"].get_feature_names_out(columns)
            onehot = transformer.named_steps["onehot"]
            for col, levels in zip(kept, onehot.categories_):
                for level in levels:
                    rows.append({"term": f"{col}={level}", "feature": str(col),
                                 "level": str(level), "coefficient": coefs[pos],
                                 "standardised": coefs[pos], "mean": None, "scale": None})
                    pos += 1
    rows.insert(0, {"term": INTERCEPT, "feature": None, "level": None,
                    "coefficient": float(intercept), "standardised": fitted_intercept,
                    "mean": None, "scale": None})
    return [{**r, "position": i, "coefficient": float(r["coefficient"]),
             "standardised": float(r["standardised"])} for i, r in enumerate(rows)]


def original_scale_coefficients(pipeline: Pipeline) -> tuple[dict[str, float], float]:
    """Coefficients per term in the data's own units (`coefficient_rows`), and the intercept
    (of the first class score, for classes)."""
    every = coefficient_rows(pipeline)
    rows = [r for r in every if r["class_label"] == every[0]["class_label"]]
    return ({r["term"]: r["coefficient"] for r in rows[1:]}, rows[0]["coefficient"])
