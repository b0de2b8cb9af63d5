"""The metric records: every record names a real scikit-learn function and scorer, and a
metric added by one record (mape) is scored exactly as scikit-learn's own function scores it
on the documented folds (reference: scikit-learn's `cross_validate` and
`mean_absolute_percentage_error`)."""

from __future__ import annotations

import json

import numpy as np
import pytest
from sklearn import metrics as skm
from sklearn.model_selection import cross_validate
from sklearn.pipeline import Pipeline
from sklearn.tree import DecisionTreeRegressor

from runner.cli import main
from runner.write.engine import run_sweep
from runner.metrics import METRICS
from runner.write.resampling import fold_seed
from runner.write.spec import load_spec
from runner.store import Store

from .helpers import diabetes_frame, documented_plan, write_spec


@pytest.mark.parametrize("name", sorted(n for n, m in METRICS.items() if m.task == "regression"))
def test_every_record_names_scikit_learns_function_and_scorer(name):
    metric = METRICS[name]
    function = getattr(skm, metric.function)
    scorer = skm.get_scorer(metric.scorer)
    y, p = np.array([1.0, 2.0, 4.0, 3.0]), np.array([1.5, 2.0, 3.0, 3.5])
    # the scorer is the function, negated when lower is better (scikit-learn's convention)
    assert scorer._score_func(y, p) == function(y, p) == metric.score(y, p)
    assert scorer._sign == (-1 if metric.better == "lower" else 1)
    assert metric.better in ("lower", "higher") and metric.label


@pytest.mark.parametrize("name", sorted(n for n, m in METRICS.items()
                                         if m.task == "classification"))
def test_class_records_agree_with_scikit_learns_functions(name):
    # Reference: sklearn.metrics' own function of each record, on three classes
    metric = METRICS[name]
    y = np.array(["a", "b", "c", "a", "b", "c", "c"])
    p = np.array([[.6, .2, .2], [.1, .8, .1], [.2, .2, .6], [.4, .4, .2], [.3, .3, .4],
                  [.1, .1, .8], [.5, .1, .4]])
    function = getattr(skm, metric.function)
    if metric.needs == "classes":
        expected = function(y, np.array(["a", "b", "c"])[p.argmax(axis=1)])
    elif name == "roc_auc":
        expected = function(y, p, multi_class="ovr", average="macro")
    else:
        expected = function(y, p)
    assert metric.score_classes(y, p, ["a", "b", "c"]) == pytest.approx(expected, abs=1e-15)
    scorer = metric.scorer_for(["a", "b", "c"])
    assert scorer._sign == (-1 if metric.better == "lower" else 1)


def test_balanced_accuracy_of_rows_lacking_a_class_is_quiet_and_scikit_learns():
    # A validation fold of time-ordered or grouped folds may hold no row of a class the
    # model still predicts. Balanced accuracy is then the mean recall over the classes the
    # rows hold (scikit-learn's balanced_accuracy_score; worked by hand here: recall of a
    # 2/3, of b 1/2), and the fold's score is no cause for a warning on the terminal.
    import warnings

    y = np.array(["a", "a", "a", "b", "b"])
    p = np.array([[.6, .2, .2], [.7, .2, .1], [.1, .1, .8], [.2, .7, .1], [.3, .3, .4]])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        got = METRICS["balanced_accuracy"].score_classes(y, p, ["a", "b", "c"])
    assert got == pytest.approx((2 / 3 + 1 / 2) / 2, abs=1e-15)


LACKING = {  # rows of a validation fold that lack a class the model was fitted on
    "three classes, no 'c'": (["a", "b", "c"], ["a", "b", "a", "b", "a", "a"],
                              [[.6, .2, .2], [.1, .8, .1], [.2, .2, .6], [.4, .4, .2],
                               [.3, .3, .4], [.5, .1, .4]]),
    "two classes, 'x' only": (["x", "y"], ["x", "x", "x", "x"],
                              [[.7, .3], [.4, .6], [.9, .1], [.5, .5]]),
}


@pytest.mark.parametrize("case", LACKING)
@pytest.mark.parametrize("name", sorted(n for n, m in METRICS.items()
                                         if m.task == "classification"))
def test_class_records_on_rows_lacking_a_class_agree_with_scikit_learn(name, case):
    # Reference: sklearn.metrics on the same rows and probabilities, told every class the
    # model knows (labels=): log loss and the Brier score are defined and score all columns;
    # ROC AUC is undefined (NaN: a one-vs-rest area needs rows of its class, and the binary
    # area rows of both); balanced accuracy is the mean recall over the classes the rows
    # hold; accuracy counts rows. foldwise stores NaN as NULL and says so when it reads.
    import warnings

    classes, y, p = LACKING[case]
    y, p = np.array(y, dtype=object), np.array(p)
    predicted = np.array(classes, dtype=object)[p.argmax(axis=1)]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # scikit-learn warns of the missing class
        expected = {
            "log_loss": lambda: skm.log_loss(y, p, labels=classes),
            "brier": lambda: skm.brier_score_loss(y, p, labels=classes, scale_by_half="auto"),
            "roc_auc": lambda: (skm.roc_auc_score(y, p[:, 1]) if len(classes) == 2 else
                                skm.roc_auc_score(y, p, multi_class="ovr", labels=classes)),
            "accuracy": lambda: skm.accuracy_score(y, predicted),
            "balanced_accuracy": lambda: skm.balanced_accuracy_score(y, predicted),
        }[name]()
    with warnings.catch_warnings():
        warnings.simplefilter("error")  # and foldwise scores such a fold quietly
        got = METRICS[name].score_classes(y, p, classes)
    if name == "roc_auc":
        assert np.isnan(expected) and np.isnan(got)
    else:
        assert np.isfinite(expected) and got == pytest.approx(expected, abs=1e-15)


def test_labels_are_unique():
    labels = [m.label for m in METRICS.values()]
    assert len(set(labels)) == len(labels)


def test_mape_fold_scores_equal_scikit_learn(tmp_path):
    df = diabetes_frame()
    df.to_csv(tmp_path / "diabetes.csv", index=False)
    path = write_spec(tmp_path, """
        tree: {family: pruned_tree, grid: {ccp_alpha: [0.0, 150.0], min_samples_leaf: [5]}}
        """)
    path.write_text(path.read_text().replace("metrics: [rmse, mae, r2]", "metrics: [mape, rmse]"))
    result = run_sweep(load_spec(path), jobs=1)
    stored = Store(result.store_path).query(
        "select c.params, f.\"repeat\", f.fold, f.value from fold_scores f "
        "join cells c using (sweep_id, cell_id) where f.metric = 'mape'")
    X, y = df.drop(columns="progression"), df["progression"].to_numpy(float)
    train_rows, _, folds = documented_plan(len(y), test_fraction=0.25, test_seed=3, k=3,
                                           repeats=2, seed=17)
    checked = 0
    for params in stored.params.unique():
        alpha = json.loads(params)["ccp_alpha"]
        for rep, f, fit, valid in folds:
            est = Pipeline([("model", DecisionTreeRegressor(
                ccp_alpha=alpha, min_samples_leaf=5, random_state=fold_seed(17, rep, f)))])
            ref = -cross_validate(est, X.iloc[train_rows], y[train_rows], cv=[(fit, valid)],
                                  scoring="neg_mean_absolute_percentage_error"
                                  )["test_score"][0]
            mine = stored[(stored.params == params) & (stored["repeat"] == rep)
                          & (stored.fold == f)].value.iloc[0]
            assert mine == pytest.approx(ref, rel=0, abs=1e-12)
            checked += 1
    assert checked == 2 * 6


def test_mape_refuses_a_target_with_zeros(tmp_path):
    from click.testing import CliRunner

    df = diabetes_frame()
    df.loc[[5, 9], "progression"] = 0.0
    df.to_csv(tmp_path / "diabetes.csv", index=False)
    path = write_spec(tmp_path, "ols: {family: linear}")
    path.write_text(path.read_text().replace("metrics: [rmse, mae, r2]", "metrics: [mape]"))
    out = CliRunner().invoke(main, ["check", str(path)])
    assert out.exit_code == 2
    assert "metric 'mape' cannot score target column 'progression'" in out.output
    assert "has 2 rows equal to 0" in out.output
    assert not (tmp_path / "store.duckdb").exists()
