"""Grid expansion, complexity ranks and cell-id stability."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st

from runner.write.grid import cell_id, expand_model, range_values, spread_along_path
from runner.write.spec import LinearRange, LogRange, parse_spec

PLAN = {"test": {"fraction": 0.2, "seed": 0}, "k": 5, "repeats": 2, "seed": 1}


def _model(grid_yaml: str, family: str = "linear"):
    spec = parse_spec(f"name: t\ndata: {{path: d.csv, target: y}}\ntest: {{fraction: 0.2}}\n"
                      f"models:\n  m: {{family: {family}, grid: {grid_yaml}}}\n")
    return spec.models["m"]


def _cells(grid_yaml, family="linear", data="d" * 64, plan=PLAN, **kw):
    return expand_model("m", _model(grid_yaml, family), data_sha256=data, plan_identity=plan, **kw)


def test_log_and_linear_ranges():
    # numpy.geomspace / linspace are the reference spacing.
    assert range_values(LogRange(log=(0.01, 100), n=5), "float") == list(np.geomspace(0.01, 100, 5))
    assert range_values(LinearRange(linear=(0, 1), n=3), "float") == [0.0, 0.5, 1.0]
    assert range_values(LinearRange(linear=(1, 4), n=7), "int") == [1, 2, 3, 4]


def test_product_of_lists_and_defaults_filled():
    cells = _cells("{n_estimators: [50, 100], max_features: [0.5, 1.0]}", "forest")
    assert len(cells) == 4
    assert all(c.params["bootstrap"] is True and c.params["min_samples_leaf"] == 1 for c in cells)
    assert len({c.cell_id for c in cells}) == 4


def test_irrelevant_params_collapse():
    # alpha cannot matter without a penalty: least squares is one cell beside three ridge
    # cells (a grid where no cell has a penalty is refused: see test_spec).
    cells = _cells("{penalty: [none, l2], alpha: [0.1, 1, 10]}")
    assert sorted(c.params["penalty"] for c in cells) == ["l2", "l2", "l2", "none"]
    assert "l1_ratio" not in _cells("{penalty: l2, alpha: [1]}")[0].params


def test_complexity_rank_linear_and_tree():
    ranks = {(c.params["penalty"], c.params.get("alpha")): c.complexity_rank
             for c in _cells("{penalty: [none, l2], alpha: [0.1, 10]}")}
    assert ranks[("l2", 10)] == 0 and ranks[("l2", 0.1)] == 1 and ranks[("none", None)] == 2
    tree = _cells("{ccp_alpha: [0.0, 1.0, 5.0], min_samples_leaf: [1, 10]}", "pruned_tree")
    order = [(c.params["ccp_alpha"], c.params["min_samples_leaf"]) for c in tree]
    assert order == [(5.0, 10), (5.0, 1), (1.0, 10), (1.0, 1), (0.0, 10), (0.0, 1)]


@pytest.mark.parametrize("family,param,values,direction,order", [
    ("linear", "alpha", [1, 2], "lower", [1, 2]),          # reverses the default
    ("forest", "max_samples", [0.5, 0.9], "lower", [0.5, 0.9]),   # outside the default order
    ("forest", "max_samples", [0.5, 0.9], "higher", [0.9, 0.5]),
])
def test_simpler_override(family, param, values, direction, order):
    grid = f"{{{param}: {values}}}" if family != "linear" else f"{{penalty: l2, {param}: {values}}}"
    spec = parse_spec("name: t\ndata: {path: d.csv, target: y}\ntest: {fraction: 0.2}\n"
                      f"models:\n  m: {{family: {family}, grid: {grid},"
                      f" simpler: {{{param}: {direction}}}}}\n")
    cells = expand_model("m", spec.models["m"], data_sha256="x", plan_identity=PLAN)
    assert [c.params[param] for c in cells] == order


def test_path_values_spread_along_path():
    path = np.array([0.0, 0.0, 1.0, 2.0, 3.0, 4.0, 8.0])
    # distinct alphas [0, 1, 2, 3, 4, 8]; positions linspace(0, 5, 3) = 0, 2.5, 5 rounded
    # half to even by numpy -> 0, 2, 5
    assert spread_along_path(path, 3) == [0.0, 2.0, 8.0]
    assert spread_along_path(path, 10) == [0.0, 1.0, 2.0, 3.0, 4.0, 8.0]
    cells = _cells("{ccp_alpha: {path: 3}}", "pruned_tree",
                   resolve_path=lambda label, combo: path)
    assert sorted(c.params["ccp_alpha"] for c in cells) == [0.0, 2.0, 8.0]


def test_path_values_are_one_set_per_model():
    # Each leaf size grows its own tree, whose path differs; the paths are merged (the same
    # alpha computed on two trees, equal but for the last bits, counts once, as the larger,
    # which prunes both trees at it) and every leaf size gets the same N values.
    paths = {5: [0.0, 1.0, 2.0, 3.0, 1812.999687074599],
             10: [0.0, 2.0, 1812.9996870745981],
             20: [0.0, 1812.9996870745981]}
    cells = _cells("{ccp_alpha: {path: 3}, min_samples_leaf: [5, 10, 20]}", "pruned_tree",
                   resolve_path=lambda label, combo: paths[combo["min_samples_leaf"]])
    # distinct [0, 1, 2, 3, 1813.0]: positions 0, 2, 4 -> 0, 2, 1813.0
    by_leaf = {}
    for c in cells:
        by_leaf.setdefault(c.params["min_samples_leaf"], []).append(c.params["ccp_alpha"])
    assert {k: sorted(v) for k, v in by_leaf.items()} == {
        k: [0.0, 2.0, 1812.999687074599] for k in (5, 10, 20)}
    assert len(cells) == 9


def test_equal_alphas_rank_equal_so_the_next_parameter_decides():
    # Two alphas equal in meaning, apart in the last digit: the larger leaf size is the
    # simpler cell, whichever alpha carries the larger last digit.
    cells = _cells("{ccp_alpha: [1812.999687074599, 1812.9996870745981], "
                   "min_samples_leaf: [5, 10]}", "pruned_tree")
    order = [(c.params["min_samples_leaf"], c.params["ccp_alpha"]) for c in cells
             if c.params["ccp_alpha"] > 1000]
    assert [leaf for leaf, _ in order] == [10, 10, 5, 5]


def test_versions_that_change_scores_enter_the_cell_id():
    old = {"scikit-learn": "1.6.0", "numpy": "2.1.0", "scipy": "1.14.0", "pandas": "2.2.0"}
    new = dict(old, **{"scikit-learn": "1.7.0"})
    a = cell_id("linear", {"penalty": "none"}, "d", PLAN, model="ols", versions=old)
    b = cell_id("linear", {"penalty": "none"}, "d", PLAN, model="ols", versions=new)
    assert a != b and a == cell_id("linear", {"penalty": "none"}, "d", PLAN, model="ols",
                                   versions=dict(reversed(old.items())))


def test_ids_stable_and_sensitive():
    a = _cells("{penalty: l2, alpha: [0.5, 2.0]}")
    b = _cells("{alpha: [0.5, 2.0], penalty: [l2]}")
    assert [c.cell_id for c in a] == [c.cell_id for c in b]
    assert {c.cell_id for c in a}.isdisjoint(c.cell_id for c in _cells("{penalty: l2, alpha: [0.5, 2.0]}", data="e" * 64))
    other_plan = dict(PLAN, repeats=3)
    assert {c.cell_id for c in a}.isdisjoint(c.cell_id for c in _cells("{penalty: l2, alpha: [0.5, 2.0]}", plan=other_plan))


def test_two_models_sharing_a_grid_point_are_two_cells():
    a = cell_id("linear", {"penalty": "none"}, "d", PLAN, model="ols")
    b = cell_id("linear", {"penalty": "none"}, "d", PLAN, model="baseline")
    assert a != b


@settings(max_examples=60, deadline=None)
@given(st.floats(min_value=1e-6, max_value=1e6), st.floats(min_value=1e-6, max_value=1e6))
def test_id_changes_with_any_param_change(a, b):
    p1 = {"alpha": a, "penalty": "l2"}
    p2 = {"alpha": b, "penalty": "l2"}
    same = cell_id("linear", p1, "d", PLAN) == cell_id("linear", p2, "d", PLAN)
    assert same == (a == b)
    assert cell_id("linear", p1, "d", PLAN) == cell_id("linear", dict(reversed(p1.items())), "d", PLAN)


def test_the_worker_check_and_the_cell_id_share_one_list_of_packages():
    from runner.write.executors import package_versions
    from runner.write.grid import SCORE_PACKAGES, identity_versions, score_versions

    assert package_versions() == {"foldwise": package_versions()["foldwise"],
                                  **identity_versions()}
    assert identity_versions() == {**score_versions(), "evaluation": "4", "cells": "2"}
    assert set(score_versions()) == set(SCORE_PACKAGES) == {"scikit-learn", "numpy", "scipy",
                                                           "pandas"}
