"""The features as the README's family table documents them, rebuilt with scikit-learn alone:
numeric columns first and categorical columns after, each in file order; a category's
levels in text order for text columns and in numeric order for numeric columns listed in
`categorical`; trees and forests code a level as its position among the fitting rows'
levels. And {path: N} combined with another parameter: one set of alphas per model."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.tree import DecisionTreeRegressor

from runner.families import load_family
from runner.write.budget import plan_size
from runner.write.data import load_frame
from runner.write.prepare import prepare

from .helpers import diabetes_frame, spec_from


@pytest.fixture
def coded(tmp_path):
    # Diabetes (Efron et al. 2004) with blood pressure `bp`, a number, listed as a category,
    # and `sex` as text: 'one'/'two'. As text, bp's levels would sort "100.0" < "62.0".
    df = diabetes_frame()
    df["sex"] = df["sex"].map({1.0: "one", 2.0: "two"})
    df.to_csv(tmp_path / "diabetes.csv", index=False)
    spec = spec_from(tmp_path, "t: {family: pruned_tree, grid: {min_samples_leaf: [5]}}",
                     extra="")
    text = spec.text.replace("target: progression", "target: progression\n  categorical: [bp]")
    (tmp_path / "spec.yaml").write_text(text)
    from runner.write.spec import load_spec

    return df, load_spec(tmp_path / "spec.yaml")


def test_numeric_categories_keep_numeric_order(coded):
    df, spec = coded
    frame = load_frame(spec)
    assert frame.categorical == ["sex", "bp"]  # in file order
    assert frame.numeric == ["age", "bmi", "s1", "s2", "s3", "s4", "s5", "s6"]
    est = load_family("pruned_tree").make_estimator({"min_samples_leaf": 5}, seed=0,
                                                   y_fit=frame.y, numeric=frame.numeric,
                                                   categorical=frame.categorical)
    est.fit(frame.X, frame.y)
    levels = dict(zip(["sex", "bp"], est.named_steps["prep"].named_transformers_["cat"]
                      .categories_))
    assert list(levels["bp"]) == sorted(df["bp"].unique())  # 62.0 < ... < 133.0
    assert list(levels["sex"]) == ["one", "two"]


def test_readme_coding_rebuilds_the_tree_exactly(coded):
    # The README's recipe with scikit-learn alone: X = numbers in file order, then each
    # category's levels coded 0, 1, ... in their order (text as text, numbers as numbers).
    df, spec = coded
    frame = load_frame(spec)
    y = df["progression"].to_numpy(float)
    numbers = ["age", "bmi", "s1", "s2", "s3", "s4", "s5", "s6"]
    codes = [df[c].map({v: i for i, v in enumerate(sorted(df[c].unique()))}).to_numpy(float)
             for c in ("sex", "bp")]
    X = np.column_stack([df[numbers].to_numpy(float), *codes])
    reference = DecisionTreeRegressor(min_samples_leaf=5, random_state=3).fit(X, y)
    ours = load_family("pruned_tree").make_estimator(
        {"min_samples_leaf": 5, "ccp_alpha": 0.0}, seed=3, y_fit=frame.y,
        numeric=frame.numeric, categorical=frame.categorical).fit(frame.X, frame.y)
    np.testing.assert_array_equal(ours.predict(frame.X), reference.predict(X))


def test_path_grid_with_another_parameter_has_one_set_of_alphas(tmp_path, diabetes_csv):
    # ccp_alpha {path: 30} x min_samples_leaf [5, 10, 20]: each leaf size gets the same 30
    # alphas, so the cells are exactly check's bound of 3 x 30.
    spec = spec_from(tmp_path, "t: {family: pruned_tree, grid: {ccp_alpha: {path: 30}, "
                               "min_samples_leaf: [5, 10, 20]}}")
    cells = prepare(spec).cells
    (model,) = plan_size(spec).models
    alphas = pd.DataFrame([c.params for c in cells]).groupby("min_samples_leaf")["ccp_alpha"]
    sets = {leaf: tuple(sorted(v)) for leaf, v in alphas}
    assert len(cells) == model.cells == 90 and len(set(sets.values())) == 1
    ranks = sorted(cells, key=lambda c: c.complexity_rank)
    # simplest first: at one alpha the larger leaf comes first
    first = [c.params["min_samples_leaf"] for c in ranks[:3]]
    assert first == [20, 10, 5]
