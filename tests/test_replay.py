"""A forest size group grown a batch of trees at a time still gives the explain step what
the whole forest would: the refit's reading (permutation importance on sampled test rows,
impurity importances, test predictions) answered by replay equals the same reader run on
scikit-learn's own forest of k trees, bit for bit; a reader that asks anything unrecorded
gets no reading (the explain step refits that cell itself)."""

from __future__ import annotations

import gc
import weakref

import numpy as np
import pandas as pd
import pytest
from sklearn.datasets import make_friedman1
from sklearn.pipeline import Pipeline

from runner.families import forest as forest_family
from runner.families._base import tree_preprocessor
from runner.write.readings import read_refit

SIZES = (4, 9, 13)


def _data(task: str):
    X, y = make_friedman1(n_samples=360, n_features=5, noise=1.0, random_state=0)
    X = pd.DataFrame(X, columns=[f"x{i}" for i in range(5)])
    X.iloc[::17, 2] = np.nan  # missing values travel through the replay too
    if task == "classification":
        y = np.array(["low", "mid", "high"])[np.digitize(y, np.quantile(y, [0.4, 0.8]))]
    return X[:240], y[:240], X[240:], y[240:]


def _reader(task, X_test, y_test, metric):
    classes = sorted(set(y_test)) if task == "classification" else ()

    def read(est, X_train):
        return read_refit("forest", est, X_train, X_test=X_test, y_test=y_test,
                          metric=metric, repeats=3,
                          perm_seed=11, perm_rows=70, task=task, classes=classes)
    return read


def assert_same_reading(got: dict, expected: dict) -> None:
    """Two readings hold the same tables with equal values, bit for bit."""
    assert got.keys() == expected.keys()
    for table, rows in expected.items():
        if isinstance(rows, pd.DataFrame):
            pd.testing.assert_frame_equal(got[table], rows, check_exact=True)
        else:
            assert got[table] == rows, table


@pytest.mark.parametrize("task, metric", [("regression", "rmse"),
                                          ("classification", "log_loss")])
def test_a_replayed_refit_reading_equals_the_reading_of_the_whole_forest(task, metric):
    # Source: scikit-learn's own RandomForestRegressor / RandomForestClassifier with
    # n_estimators=k fitted on the same rows and seed, read by the same reader
    # (scikit-learn's permutation_importance, feature_importances_, predict/predict_proba).
    X_fit, y_fit, X_test, y_test = _data(task)
    read = _reader(task, X_test, y_test, metric)
    cells = [{"n_estimators": k, "max_features": 0.6, "min_samples_leaf": 2} for k in SIZES]
    fits = forest_family.fit_cells(cells, X_fit, y_fit, [X_test], seed=5,
                                   numeric=list(X_fit.columns), categorical=[], task=task,
                                   read=read)
    for params, fit in zip(cells, fits):
        assert fit.error is None and fit.how == "forest_prefix"
        whole = forest_family.make_estimator(params, seed=5, numeric=list(X_fit.columns),
                                             categorical=[], task=task).fit(X_fit, y_fit)
        expected = read(whole, X_fit)
        assert_same_reading(fit.reading, expected)  # every number equal, not just close
        proba = whole.predict_proba(X_test) if task == "classification" else \
            whole.predict(X_test)
        assert np.array_equal(fit.predictions[0], proba) and len(fit.predictions) == 1


def test_a_reader_that_asks_for_unrecorded_rows_gets_no_reading():
    X_fit, y_fit, X_test, y_test = _data("regression")
    calls = []

    def changing(est, X_train):  # asks for other rows the second time
        calls.append(1)
        return {"p": list(est.predict(X_test.iloc[: 10 * len(calls)]))}

    cells = [{"n_estimators": k} for k in (3, 6)]
    fits = forest_family.fit_cells(cells, X_fit, y_fit, [X_test], seed=1,
                                   numeric=list(X_fit.columns), categorical=[],
                                   read=changing)
    assert all(fit.error is None and fit.reading is None for fit in fits)
    assert all(len(fit.predictions) == 1 for fit in fits)  # scores unaffected


def test_a_forest_size_group_frees_its_forest_when_the_task_ends(monkeypatch):
    """Once the cells are scored and read, nothing may keep the forest alive but the
    garbage collector (a worker would then hold every task's forest and be restarted by
    its pool for the memory); its trees went batch by batch while it grew."""
    made = []
    build = forest_family._forest

    def recorded(*args, **kwargs):
        model = build(*args, **kwargs)
        made.append(weakref.ref(model))
        return model

    monkeypatch.setattr(forest_family, "_forest", recorded)
    X_fit, y_fit, X_test, y_test = _data("regression")
    read = _reader("regression", X_test, y_test, "rmse")
    cells = [{"n_estimators": k, "max_features": 1.0} for k in (5, 10, 20)]
    gc.disable()
    try:
        fits = forest_family.fit_cells(cells, X_fit, y_fit, [X_test], seed=3,
                                       numeric=list(X_fit.columns), categorical=[],
                                       read=read)
        assert len(made) == 1 and all(fit.reading is not None for fit in fits)
        assert made[0]() is None  # freed by reference counting alone
    finally:
        gc.enable()


def test_stand_ins_answer_scikit_learn_as_a_fitted_model_would():
    """The recorded questions are the transformed rows, float32 as a forest reads them."""
    from runner.families._replay import answered, questions

    X_fit, y_fit, X_test, _ = _data("regression")
    prep = tree_preprocessor(list(X_fit.columns), []).fit(X_fit)
    asked = questions(lambda est, X: est.predict(X_test), prep, X_fit, y_fit, 5,
                      "regression")
    assert len(asked) == 1 and asked[0].dtype == np.float32
    assert np.array_equal(asked[0], prep.transform(X_test).astype(np.float32), equal_nan=True)
    model = answered(asked, [np.arange(len(X_test), dtype=float)], np.ones(5) / 5)
    pipe = Pipeline([("prep", prep), ("model", model)])
    assert np.array_equal(pipe.predict(X_test), np.arange(len(X_test)))
    with pytest.raises(LookupError):
        pipe.predict(X_test)  # asked once only


def _with_category(X):
    """The rows plus a categorical column (a level only the later rows have, and gaps), so
    the ordinal codes travel through the replay as well."""
    levels = np.array(["clay", "loam", "sand", "peat"])
    kind = pd.Series(levels[np.arange(len(X)) % 3], index=X.index, dtype=object)
    kind.iloc[200:] = levels[np.arange(len(X) - 200) % 4]  # 'peat': test rows only
    kind.iloc[::23] = None
    return X.assign(soil=kind)


@pytest.mark.parametrize("task, metric", [("regression", "rmse"),
                                          ("classification", "log_loss")])
def test_a_lone_forest_is_read_from_stacked_predictions(monkeypatch, task, metric):
    # Source: the same reader run on scikit-learn's own RandomForestRegressor /
    # RandomForestClassifier fitted on the same rows and seed (permutation_importance,
    # feature_importances_, predict/predict_proba): every number equal.
    X_fit, y_fit, X_test, y_test = _data(task)
    both = _with_category(pd.concat([X_fit, X_test]))
    X_fit, X_test = both[:240], both[240:]
    numeric, categorical = [f"x{i}" for i in range(5)], ["soil"]
    read = _reader(task, X_test, y_test, metric)
    params = {"n_estimators": 12, "max_features": 0.6, "min_samples_leaf": 2}
    whole = forest_family.make_estimator(params, seed=4, numeric=numeric,
                                         categorical=categorical, task=task).fit(X_fit, y_fit)
    expected = read(whole, X_fit)

    kind = type(whole.named_steps["model"])
    method = "predict_proba" if task == "classification" else "predict"
    calls = []
    original = getattr(kind, method)

    def counted(self, X):
        calls.append(len(X))
        return original(self, X)

    monkeypatch.setattr(kind, method, counted)
    (fit,) = forest_family.fit_cells([params], X_fit, y_fit, [X_test], seed=4,
                                     numeric=numeric, categorical=categorical, task=task,
                                     read=read)
    assert fit.error is None and fit.how == "plain"
    assert_same_reading(fit.reading, expected)
    # The scored rows, then every row the reader asked for in one stacked call: the test
    # rows for the predictions, and 3 shuffles x 6 columns of 70 drawn rows plus the
    # unshuffled test rows for the permutation importance.
    assert calls == [len(X_test), len(X_test) * 2 + 3 * 6 * 70]


def test_stacked_row_sets_are_cut_back_into_their_sets():
    from runner.families._replay import stacked

    sets = [np.full((n, 2), n, dtype=np.float32) for n in (3, 5, 20, 2, 4)]
    originals = [s.copy() for s in sets]
    blocks, cut = stacked(sets, rows=10)
    assert [len(b) for b in blocks] == [8, 20, 6]  # a set larger than a block stands alone
    # each set is now its view of its block: the same rows, held once
    assert all(np.array_equal(s, o) for s, o in zip(sets, originals))
    assert [np.shares_memory(s, blocks[b]) for s, b in zip(sets, [0, 0, 1, 2, 2])] == [True] * 5
    for predicted in ([b[:, 0] * 2.0 for b in blocks],  # one value per row, or
                      [np.repeat(b[:, :1], 3, axis=1) for b in blocks]):  # one per class
        got = cut(predicted)
        assert [len(g) for g in got] == [3, 5, 20, 2, 4]
        assert all(np.all(g == (2.0 if g.ndim == 1 else 1.0) * len(g)) for g in got)
    assert stacked([])[0] == [] and stacked([])[1]([]) == []
