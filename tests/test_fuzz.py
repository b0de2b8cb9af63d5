"""Specs are data, never code: random YAML documents and random text given to `check`
end in a clean refusal (exit 2, one `Error:` paragraph) or a valid plan, never a traceback."""

from __future__ import annotations

import yaml
from click.testing import CliRunner
from hypothesis import HealthCheck, given, settings, strategies as st

from runner.cli import main

KEYS = st.sampled_from(["name", "data", "test", "folds", "models", "metrics", "grid", "family",
                        "path", "target", "k", "repeats", "seed", "fraction", "alpha", "log",
                        "n", "pick", "store", "ridge", "linear", "forest", "x"])
SCALARS = st.one_of(st.none(), st.booleans(), st.integers(-5, 10**6),
                    st.floats(allow_nan=True, allow_infinity=True), st.text(max_size=12))
TREES = st.recursive(SCALARS, lambda inner: st.one_of(
    st.lists(inner, max_size=4), st.dictionaries(KEYS, inner, max_size=5)), max_leaves=20)


def _check(tmp_path, text: str):
    spec = tmp_path / "fuzz.yaml"
    spec.write_text(text, encoding="utf-8")
    result = CliRunner().invoke(main, ["check", str(spec)])
    assert result.exception is None or isinstance(result.exception, SystemExit), (
        text, repr(result.exception))
    assert result.exit_code in (0, 2), (text, result.output)
    if result.exit_code == 2:
        assert result.output.startswith("Error: ") and "Traceback" not in result.output


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(TREES)
def test_random_yaml_structures(tmp_path, tree):
    _check(tmp_path, yaml.safe_dump(tree))


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.text(max_size=200))
def test_random_text(tmp_path, text):
    _check(tmp_path, text)


@settings(max_examples=100, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.dictionaries(KEYS, TREES, max_size=6))
def test_random_models_blocks(tmp_path, models):
    doc = {"name": "f", "data": {"path": "d.csv", "target": "y"}, "test": {"fraction": 0.2},
           "models": models}
    _check(tmp_path, yaml.safe_dump(doc))


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.text(alphabet="[]{}&*ab:, \n-|>'\"!9", max_size=300))
def test_random_brackets_anchors_and_aliases(tmp_path, text):
    """Nesting, anchors, aliases and tags in any order: refused or validated, never a crash."""
    _check(tmp_path, text)


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(st.integers(1, 400), st.sampled_from(["flow list", "flow mapping", "block list"]))
def test_deep_nesting_never_recurses(tmp_path, depth, form):
    """Nesting of any depth, in any of YAML's forms, is refused or validated in one paragraph."""
    if form == "flow list":
        body = "name: " + "[" * depth + "x" + "]" * depth + "\n"
    elif form == "flow mapping":
        body = "name: " + "{a: " * depth + "x" + "}" * depth + "\n"
    else:
        body = "name:\n" + "".join("  " * (i + 1) + "-\n" for i in range(depth))
        body += "  " * (depth + 1) + "x\n"
    _check(tmp_path, body)
