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
