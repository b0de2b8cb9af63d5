"""The spec: what validates, what is refused and what the refusal says."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from runner.errors import SpecError
from runner.write.spec import LogRange, PathRange, load_spec, parse_spec, spec_json_schema

ROOT = Path(__file__).resolve().parents[1]

BASE = """name: t
data: {path: d.csv, target: y}
test: {fraction: 0.2}
"""


def _spec(extra: str):
    return parse_spec(BASE + extra)


def test_minimal_spec_defaults():
    spec = _spec("models:\n  m: {family: linear}\n")
    assert spec.metrics is None and spec.task is None  # both follow the target's column
    spec.settle_task("regression")
    assert spec.metrics == ["rmse", "mae", "r2"]
    other = _spec("models:\n  m: {family: linear}\n")
    other.settle_task("classification")
    assert other.metrics == ["log_loss", "brier", "roc_auc", "accuracy"]
    assert (spec.folds.k, spec.folds.repeats, spec.folds.seed) == (5, 1, 0)
    assert spec.pick == "one_se"
    assert spec.models["m"].grid == {}


def test_grid_forms_become_canonical():
    spec = _spec("""models:
  r: {family: linear, grid: {penalty: l2, alpha: {log: [0.01, 100], n: 5}}}
  t: {family: pruned_tree, grid: {ccp_alpha: {path: 8}, min_samples_leaf: [1, 5.0]}}
""")
    assert spec.models["r"].grid["penalty"] == ["l2"]
    assert isinstance(spec.models["r"].grid["alpha"], LogRange)
    assert isinstance(spec.models["t"].grid["ccp_alpha"], PathRange)
    assert spec.models["t"].grid["min_samples_leaf"] == [1, 5]
    assert all(type(v) is int for v in spec.models["t"].grid["min_samples_leaf"])


REFUSED = [
    # (models/extra YAML, words that must appear in the message)
    ("models:\n  m: {family: forrest}\n", ["models.m.family", "unknown family 'forrest'",
                                           "Did you mean 'forest'"]),
    ("models:\n  m: {family: pruned_tree, grid: {ccp_alpah: [0.1]}}\n",
     ["unknown hyperparameter 'ccp_alpah'", "Did you mean 'ccp_alpha'", "line 5"]),
    ("models:\n  m: {family: linear, grid: {alpha: []}}\n", ["grid.alpha is an empty list"]),
    ("models:\n  m: {family: linear, grid: {alpha: {log: [0, 1], n: 3}}}\n",
     ["log range bounds must both be > 0"]),
    ("models:\n  m: {family: linear, grid: {alpha: [abc]}}\n", ["alpha must be a number"]),
    ("models:\n  m: {family: linear, grid: {penalty: [l3]}}\n",
     ["penalty must be one of none, l2, l1, elasticnet"]),
    ("models:\n  m: {family: forest, grid: {max_features: [1.5]}}\n", ["(0, 1]"]),
    ("models:\n  m: {family: linear, grid: {alpha: {path: 5}}}\n", ["only for ccp_alpha"]),
    ("models:\n  m: {family: pruned_tree, grid: {ccp_alpha: [0.1], ccp_fraction: [0.1]}}\n",
     ["not both"]),
    ("metrics: [rmse, rsme]\nmodels:\n  m: {family: linear}\n",
     ["unknown metric 'rsme'", "valid metrics: rmse, mae, r2"]),
    ("folds: {k: 1}\nmodels:\n  m: {family: linear}\n", ["folds.k", "greater than or equal to 2"]),
    ("folds: {k: 5, repeats: 0}\nmodels:\n  m: {family: linear}\n", ["folds.repeats"]),
    ("folds: {k: five}\nmodels:\n  m: {family: linear}\n", ["folds.k", "integer"]),
    ("folds: {scheme: groups}\nmodels:\n  m: {family: linear}\n",
     ["folds", "scheme groups needs folds.groups"]),
    ("folds: {scheme: time}\nmodels:\n  m: {family: linear}\n",
     ["scheme time needs folds.order"]),
    ("folds: {scheme: rows, groups: site}\nmodels:\n  m: {family: linear}\n",
     ["groups belongs to scheme groups, but the scheme is rows"]),
    ("folds: {scheme: time, order: day, groups: site}\nmodels:\n  m: {family: linear}\n",
     ["not both"]),
    ("folds: {scheme: blocks}\nmodels:\n  m: {family: linear}\n",
     ["folds.scheme", "'rows', 'groups' or 'time'"]),
    ("folds: {order: day, repeats: 3}\nmodels:\n  m: {family: linear}\n",
     ["repeats must be 1 (got repeats=3)"]),
    ("folds: {groups: y}\nmodels:\n  m: {family: linear}\n",
     ["line 4, folds.groups: it names the target 'y'"]),
    ("folds:\n  k: 3\n  order: y\nmodels:\n  m: {family: linear}\n",
     ["line 6, folds.order: it names the target 'y'"]),
    ("checks: {allow: [id_colum]}\nmodels:\n  m: {family: linear}\n",
     ["checks.allow", "unknown check 'id_colum'", "Did you mean 'id_column'"]),
    ("models:\n  m: {family: linear, grid: {alpha: [0.1, 1]}}\n",
     ["line 5, models.m.grid.alpha: alpha counts only where penalty is l2, l1 or elasticnet",
      "its 2 values would give one cell", "(e.g. `penalty: l2`), or drop alpha"]),
    ("models:\n  m: {family: linear, grid: {penalty: [none], alpha: {log: [0.1, 10], n: 5}}}\n",
     ["its 5 values would give one cell"]),
    ("models:\n  m: {family: linear, grid: {penalty: [l1, l2], l1_ratio: [0.2, 0.8]}}\n",
     ["models.m.grid.l1_ratio: l1_ratio counts only where penalty is elasticnet"]),
    ("models:\n  m: {family: forest, grid: {bootstrap: [false], max_samples: [0.5, 0.8]}}\n",
     ["models.m.grid.max_samples: max_samples counts only where bootstrap is true"]),
    ("models: {}\n", ["models"]),
    ("modles:\n  m: {family: linear}\n", ["unknown field 'modles'", "Did you mean 'models'"]),
    ("metrics: rmse, mae\nmodels:\n  m: {family: linear}\n",
     ["metrics: expects a list, got the text 'rmse, mae'; write it in brackets: [rmse, mae]"]),
    ("pick: one-se\nmodels:\n  m: {family: linear}\n",
     ["pick: Input should be 'best' or 'one_se', got 'one-se'"]),
    ("folds: {groups: [site]}\nmodels:\n  m: {family: linear}\n",
     ["folds.groups: Input should be a valid string, got ['site']"]),
    ("checks: {allow: group_key}\nmodels:\n  m: {family: linear}\n",
     ["checks.allow: expects a list, got the text 'group_key'; write it in brackets: "
      "[group_key]"]),
    ("models:\n  m: {family: linear}\n  m: {family: forest}\n", ["duplicate key 'm'"]),
]


@pytest.mark.parametrize("extra,words", REFUSED)
def test_refused_specs_name_the_field(extra, words):
    with pytest.raises(SpecError) as info:
        _spec(extra)
    for w in words:
        assert w in str(info.value)
    assert "\n" not in str(info.value)


@pytest.mark.parametrize("text,words", [
    ("name: [unclosed\n", ["not valid YAML", "line"]),
    ("- just\n- a list\n", ["must be a YAML mapping"]),
    ("name: t\ntest: {fraction: 1.5}\n", ["test.fraction", "less than 1", "data"]),
    ("name: t\ndata: {path: d.csv, target: y}\ntest: {fraction: 0.2, column: c}\n"
     "models: {m: {family: linear}}\n", ["exactly one of fraction, file or column"]),
    ("name: t\ndata: {path: d.csv, target: y, task: classification}\nmodels: {m: {family: "
     "linear}}\n", ["line 2, data.task: unknown field 'task'",
                    "'task' is a field of the spec's top level: move it there"]),
    ("name: t\ndata: {path: d.csv, target: y}\ngroups: site\nmodels: {m: {family: linear}}\n",
     ["line 3, groups: unknown field 'groups'",
      "'groups' is a field of section 'test' or section 'folds': move it there"]),
    ("name: t\ndata: {path: d.csv, target: y}\ntest: {fraction: 0.2, groups: site}\n"
     "folds: {order: day}\nmodels: {m: {family: linear}}\n",
     ["line 3, test.groups: it does not go with time-ordered folds"]),
])
def test_refused_documents(text, words):
    with pytest.raises(SpecError) as info:
        parse_spec(text)
    for w in words:
        assert w in str(info.value)


def test_yaml_tags_are_not_code():
    with pytest.raises(SpecError, match="not valid YAML"):
        parse_spec("name: !!python/object/apply:os.system ['echo hi']\n")


def test_missing_spec_file(tmp_path):
    with pytest.raises(SpecError, match="does not exist"):
        load_spec(tmp_path / "nope.yaml")


def test_every_shipped_spec_validates():
    specs = sorted((ROOT / "specs").glob("*.yaml"))
    assert specs
    for path in specs:
        spec = load_spec(path)
        assert spec.resolve(spec.data.path).exists(), path


def test_json_schema_lists_fields_and_families():
    schema = spec_json_schema()
    assert set(schema["required"]) >= {"name", "data", "test", "models"}
    assert "ccp_fraction" in schema["description"]
    json.dumps(schema)


def test_json_schema_counts_fits_as_the_fits_limit_does():
    # budget.check_limits holds path groups' shared fits to limits.fits (--no-paths: every
    # cell's own), so the schema an editor shows must not say cells x (folds + 1) alone
    text = spec_json_schema()["$defs"]["Limits"]["properties"]["fits"]["description"]
    assert "one per path group and one per other cell" in text and "--no-paths" in text


def test_anchors_and_aliases_within_bounds_still_work():
    spec = parse_spec(BASE + "models:\n  a: {family: linear, grid: &g "
                      "{penalty: l2, alpha: [0.1, 1.0]}}\n  b: {family: linear, grid: *g}\n")
    assert spec.models["a"].grid == spec.models["b"].grid == {"penalty": ["l2"],
                                                              "alpha": [0.1, 1.0]}


def _nested(depth: int) -> str:
    return BASE + "description: " + "[" * depth + "]" * depth + "\nmodels: {m: {family: linear}}\n"


def test_nesting_depth_bound_is_exact():
    from runner.write.spec import MAX_DEPTH

    with pytest.raises(SpecError) as info:  # deep enough to be built, then wrong in type
        parse_spec(_nested(MAX_DEPTH - 1))
    assert "nested" not in str(info.value) and "description" in str(info.value)
    with pytest.raises(SpecError, match=f"nested more than {MAX_DEPTH} deep"):
        parse_spec(_nested(MAX_DEPTH))


def test_alias_expansion_is_counted_before_building():
    from runner.write.spec import MAX_NODES

    # An anchored list of 1 000 values referred to k times expands to about 1 000·k values.
    def doc(k):
        return (BASE + "description: null\nx-values: &v [" + ", ".join(["1"] * 999) + "]\n"
                "x-uses: [" + ", ".join(["*v"] * k) + "]\nmodels: {m: {family: linear}}\n")

    with pytest.raises(SpecError) as info:
        parse_spec(doc(50))  # about 51 000 values: built, then refused for the unknown field
    assert "unknown field 'x-values'" in str(info.value)
    with pytest.raises(SpecError, match=f"beyond {MAX_NODES:,} values once its aliases"):
        parse_spec(doc(MAX_NODES // 1000 + 1))


@pytest.mark.parametrize("field,value,ok", [
    ("folds: {seed: %d}\n", 2**32 - 1, True), ("folds: {seed: %d}\n", 2**32, False),
    ("test_seed", 2**32 - 1, True), ("test_seed", 2**40, False),
])
def test_seed_range(field, value, ok):
    if field == "test_seed":
        text = BASE.replace("{fraction: 0.2}", "{fraction: 0.2, seed: %d}" % value)
    else:
        text = BASE + field % value
    text += "models: {m: {family: linear}}\n"
    if ok:
        parse_spec(text)
    else:
        with pytest.raises(SpecError, match="less than or equal to 4294967295"):
            parse_spec(text)


def test_limits_have_documented_defaults():
    spec = _spec("models:\n  m: {family: linear}\n")
    limits = spec.limits
    assert (limits.cells, limits.folds, limits.fits, limits.data_mb, limits.plan_mb) == (
        10_000, 500, 250_000, 1024.0, 2048.0)
    assert "limits" in spec_json_schema()["properties"]


def test_spec_file_must_be_a_small_regular_file(tmp_path):
    import os

    fifo = tmp_path / "spec.yaml"
    os.mkfifo(fifo)
    with pytest.raises(SpecError, match="is not a regular file"):
        load_spec(fifo)
    big = tmp_path / "big.yaml"
    big.write_text(BASE + "models: {m: {family: linear}}\n" + "#" * (200 * 1024))
    with pytest.raises(SpecError, match="larger than 128 KiB"):
        load_spec(big)


@pytest.mark.parametrize("grid", [
    "{penalty: [none, l2], alpha: [0.1, 1]}",  # ridge cells use alpha
    "{penalty: elasticnet, l1_ratio: [0.2, 0.8]}",
    "{alpha: [1.0]}",  # one value: nothing was meant to be tuned
    "{penalty: [none]}",
])
def test_a_grid_parameter_some_cell_uses_is_accepted(grid):
    spec = _spec(f"models:\n  m: {{family: linear, grid: {grid}}}\n")
    assert spec.models["m"].family == "linear"


@pytest.mark.parametrize("words,expected", [
    (None, None), ("[]", []), ("['NA', 'None', '', NA]", ["", "NA", "None"]),
    ("[n/a, '-999', 'null']", ["-999", "n/a", "null"])])
def test_missing_words_are_text_as_written_once_each_in_one_order(words, expected):
    data = "{path: d.csv, target: y}" if words is None else \
        "{path: d.csv, target: y, missing_words: %s}" % words
    spec = parse_spec(BASE.replace("{path: d.csv, target: y}", data)
                      + "models:\n  m: {family: linear}\n")
    assert spec.data.missing_words == expected


@pytest.mark.parametrize("words,got", [("[NA, null]", "got None"), ("[-999]", "got -999"),
                                       ("[yes]", "got True")])
def test_missing_words_yaml_reads_as_other_values_are_refused(words, got):
    with pytest.raises(SpecError) as info:
        parse_spec(BASE.replace("{path: d.csv, target: y}",
                                "{path: d.csv, target: y, missing_words: %s}" % words)
                   + "models:\n  m: {family: linear}\n")
    assert f"line 2, data.missing_words: missing_words lists words as text, {got}: YAML " \
        "reads null, ~, true, false, yes, no and numbers as other values, so quote each " \
        "word as written in the file (e.g. ['null', '-999'])" in str(info.value)
