"""`data.missing_words`: the words a sweep's CSV files read as missing values, carried by a
built model to the new rows `predict` reads. The reference throughout is the same file
read by pandas with exactly those words (pandas.read_csv(keep_default_na=False,
na_values=[...])) and fitted by scikit-learn as README's linear family describes."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

from runner.cli import main
from runner.model.build import build_model
from runner.model.keep import load_model
from runner.model.predict import predict_file
from runner.store import Store
from runner.write.data import load_frame
from runner.write.engine import run_sweep
from runner.write.leakage import run_checks
from runner.write.resampling import make_plan
from runner.write.spec import load_spec

from runner.errors import ModelError

from .helpers import write_spec

RIDGE = "lin: {family: linear, grid: {penalty: l2, alpha: [0.5]}}"
WORDS = "['n/a']"  # the one word this trial's files write for a missing number


def _trial(n: int, seed: int) -> pd.DataFrame:
    """An irrigation trial of our own: 'None' is a treatment (no irrigation, the lowest
    yield), a few treatments are not recorded (empty), a few water readings are 'n/a'."""
    rng = np.random.default_rng(seed)
    treatment = np.array(["None", "drip", "spray"])[np.arange(n) % 3]
    water = rng.uniform(10, 40, n).round(2)
    effect = np.select([treatment == "None", treatment == "drip"], [-4.0, 3.0], 1.0)
    df = pd.DataFrame({"water_l": water.astype(object), "treatment": treatment.astype(object),
                       "yield_kg": (20 + 0.3 * water + effect + rng.normal(0, 1, n)).round(3)})
    df.loc[df.index[5::17], "treatment"] = ""
    df.loc[df.index[7::19], "water_l"] = "n/a"
    return df


def _reference(path, words):
    """The file as pandas reads it with exactly `words` (and the empty field) missing."""
    return pd.read_csv(path, keep_default_na=False, na_values=[*words, ""])


def _linear_reference(fit: pd.DataFrame):
    """README's linear family: median + standardise numbers, mode + one-hot categories,
    Ridge(alpha=0.5, solver="cholesky") (scikit-learn on the same rows)."""
    from sklearn.compose import ColumnTransformer
    from sklearn.impute import SimpleImputer
    from sklearn.linear_model import Ridge
    from sklearn.pipeline import make_pipeline
    from sklearn.preprocessing import OneHotEncoder, StandardScaler

    prep = ColumnTransformer([
        ("num", make_pipeline(SimpleImputer(strategy="median"), StandardScaler()), ["water_l"]),
        ("cat", make_pipeline(SimpleImputer(strategy="most_frequent"),
                              OneHotEncoder(handle_unknown="ignore", sparse_output=False)),
         ["treatment"])])
    return make_pipeline(prep, Ridge(alpha=0.5, solver="cholesky")).fit(
        fit[["water_l", "treatment"]], fit["yield_kg"])


def _sweep(tmp_path, words: str | None, name: str):
    path = write_spec(tmp_path, RIDGE, data="trial.csv", name=f"{name}.yaml")
    text = path.read_text().replace("target: progression", "target: yield_kg" + (
        f"\n  missing_words: {words}" if words is not None else ""))
    path.write_text(text.replace("store: store.duckdb", f"store: {name}.duckdb"))
    result = run_sweep(load_spec(path), jobs=1)
    store = Store(result.store_path)
    test_rmse = store.query("select value from test_scores where sweep_id = ? and "
                            "metric = 'rmse'", [result.sweep_id]).value[0]
    built = build_model(store, model="lin", out=tmp_path / f"{name}.skops")
    return test_rmse, built


@pytest.fixture(scope="module")
def trial(tmp_path_factory):
    """The trial swept and built twice, with the words listed and with pandas' default."""
    folder = tmp_path_factory.mktemp("trial")
    _trial(150, 1).to_csv(folder / "trial.csv", index=False)
    new = _trial(30, 2).drop(columns="yield_kg")
    new.to_csv(folder / "new.csv", index=False)
    return folder, _sweep(folder, WORDS, "listed"), _sweep(folder, None, "default")


def _test_rmse_by_hand(df: pd.DataFrame) -> tuple[float, object]:
    """The sweep's documented test split (train_test_split, test_size 0.25, random_state 3:
    tests/helpers.SMALL_SPEC) and the test RMSE of the reference pipeline."""
    from sklearn.metrics import root_mean_squared_error
    from sklearn.model_selection import train_test_split

    train, test = train_test_split(np.arange(len(df)), test_size=0.25, random_state=3)
    fitted = _linear_reference(df.iloc[train])
    return root_mean_squared_error(df["yield_kg"].iloc[test],
                                   fitted.predict(df[["water_l", "treatment"]].iloc[test])), \
        fitted


def test_listed_words_keep_the_level_none_and_score_as_scikit_learn_on_that_reading(trial):
    folder, (listed_rmse, listed), _ = trial
    reference = _reference(folder / "trial.csv", ["n/a"])
    assert (reference["treatment"] == "None").sum() == 47  # 'None' is a level here
    expected, fitted = _test_rmse_by_hand(reference)
    assert listed_rmse == pytest.approx(expected, rel=1e-12)
    # the fitted one-hot encoder has a column for 'None', as the reference's has
    encoder = listed.card["features"][1]
    assert encoder["name"] == "treatment"
    assert encoder["categories"] == ["None", "drip", "spray"] == list(
        fitted.named_steps["columntransformer"].named_transformers_["cat"]
        .named_steps["onehotencoder"].categories_[0])
    assert listed.card["data"]["missing_words"] == ["n/a"]
    assert listed.card["card_version"] == 2


def test_the_default_reading_is_unchanged_and_scores_otherwise(trial):
    folder, (listed_rmse, _), (default_rmse, default) = trial
    reference = pd.read_csv(folder / "trial.csv")  # pandas' default words
    assert reference["treatment"].isna().sum() == 47 + 9
    expected, _ = _test_rmse_by_hand(reference)
    assert default_rmse == pytest.approx(expected, rel=1e-12)
    assert abs(default_rmse - listed_rmse) > 0.5  # the level 'None' carries the yield drop
    assert default.card["features"][1]["categories"] == ["drip", "spray"]
    assert default.card["data"]["missing_words"] is None and default.card["card_version"] == 1


def test_predict_reads_new_rows_with_the_models_words(trial, tmp_path):
    folder, (_, listed), (_, default) = trial
    fit_rows = _reference(folder / "trial.csv", ["n/a"])
    _, fitted = _test_rmse_by_hand(fit_rows)
    new = _reference(folder / "new.csv", ["n/a"])
    result = predict_file(load_model(listed.artefact), folder / "new.csv", tmp_path / "p.csv")
    got = pd.read_csv(tmp_path / "p.csv")
    np.testing.assert_allclose(got["predicted"],
                               fitted.predict(new[["water_l", "treatment"]]), rtol=1e-12)
    # 'None' is the level, not a missing value: only the empty fields and 'n/a' are missing
    assert result.missing == {"treatment": 2, "water_l": 2} and result.unseen == {}
    assert result.notes == []
    # the model swept with pandas' default words reads 'None' as missing, as its sweep did
    result = predict_file(load_model(default.artefact), folder / "new.csv", tmp_path / "d.csv")
    assert result.missing == {"treatment": 2 + 10, "water_l": 2} and result.notes == []


def test_a_card_from_before_the_option_reads_pandas_words_and_says_so(trial, tmp_path):
    folder, _, (_, default) = trial
    model = load_model(default.artefact)
    del model.card["data"]["missing_words"]  # as every card built before the option
    result = predict_file(model, folder / "new.csv", tmp_path / "p.csv")
    assert result.missing == {"treatment": 12, "water_l": 2}
    assert result.notes == [f"note: the card of {model.source} is from a foldwise before "
                            "`data.missing_words`, so the new rows are read with pandas' "
                            "default missing words ('NA', 'None', 'null', 'NaN', ...), as its "
                            "sweep read its data."]


def test_a_test_file_is_read_with_the_listed_words_and_the_finding_points_to_them(tmp_path):
    _trial(90, 3).to_csv(tmp_path / "trial.csv", index=False)
    _trial(30, 4).to_csv(tmp_path / "held.csv", index=False)
    path = write_spec(tmp_path, RIDGE, data="trial.csv")
    default = path.read_text().replace("target: progression", "target: yield_kg").replace(
        "fraction: 0.25\n  seed: 3", "file: held.csv")
    path.write_text(default)
    spec = load_spec(path)
    frame = load_frame(spec)
    found = [f for f in run_checks(spec, frame, make_plan(spec, frame))
             if f.kind == "missing_words"]
    assert [f.column for f in found] == ["treatment"]
    assert "set `data.missing_words` to the words that do mean missing in this file" \
        in found[0].message
    path.write_text(default.replace("target: yield_kg", f"target: yield_kg\n  missing_words: "
                                                         f"{WORDS}"))
    spec = load_spec(path)
    frame = load_frame(spec)
    held = _reference(tmp_path / "held.csv", ["n/a"])
    assert frame.X["treatment"][frame.test_mask].fillna("(missing)").tolist() == \
        held["treatment"].fillna("(missing)").tolist()
    assert (held["treatment"] == "None").sum() == 10
    # the spec says which words are missing, 'None' among them here: no finding, since
    # nothing was read as missing behind the user's back
    path.write_text(default.replace("target: yield_kg", "target: yield_kg\n  missing_words: "
                                                         "['n/a', 'None']"))
    spec = load_spec(path)
    frame = load_frame(spec)
    both = [_reference(tmp_path / name, ["n/a", "None"]) for name in ("trial.csv", "held.csv")]
    assert frame.X["treatment"].isna().sum() == sum(b["treatment"].isna().sum() for b in both) \
        == 29 + 5 + 10 + 2  # 'None' and the empty fields of either file
    assert not [f for f in run_checks(spec, frame, make_plan(spec, frame))
                if f.kind == "missing_words"]


def test_parquet_data_with_missing_words_is_refused_in_one_paragraph(tmp_path):
    _trial(60, 5).astype({"water_l": str}).to_parquet(tmp_path / "trial.parquet")
    path = write_spec(tmp_path, RIDGE, data="trial.parquet")
    path.write_text(path.read_text().replace("target: progression", "target: yield_kg\n"
                                             f"  missing_words: {WORDS}"))
    result = CliRunner().invoke(main, ["check", str(path)])
    assert result.exit_code == 2 and result.output.count("\n") == 1, result.output
    assert result.output == (f"Error: `data.missing_words` lists the words read as missing "
                             f"values in CSV files, but data file {tmp_path / 'trial.parquet'} "
                             "is Parquet, which stores missing values as nulls and has no "
                             "such words to read. Remove `data.missing_words` from the spec, "
                             "or give the data as CSV.\n")


def test_a_card_whose_missing_words_are_not_a_list_of_words_is_refused(trial, tmp_path):
    import json
    import shutil

    _, (_, listed), _ = trial
    shutil.copy(listed.artefact, tmp_path / "m.skops")
    card = json.loads(listed.card_file.read_text())
    card["data"]["missing_words"] = "NA"
    (tmp_path / "m.card.json").write_text(json.dumps(card))
    with pytest.raises(ModelError) as caught:
        load_model(tmp_path / "m.skops")
    assert str(caught.value) == (f"model card {tmp_path / 'm.card.json'} gives "
                                 "data.missing_words as 'NA', not a list of words; it is "
                                 "damaged. Nothing was loaded.")


def test_diff_says_the_same_file_was_read_with_other_words(tmp_path):
    _trial(90, 6).to_csv(tmp_path / "trial.csv", index=False)
    store = tmp_path / "store.duckdb"
    for name, words in (("a", None), ("b", WORDS)):
        path = write_spec(tmp_path, RIDGE, data="trial.csv", name=f"{name}.yaml")
        path.write_text(path.read_text().replace("target: progression", "target: yield_kg" + (
            f"\n  missing_words: {words}" if words else "")).replace(
            "store: store.duckdb", f"store: {store}"))
        assert CliRunner().invoke(main, ["run", "-q", str(path)]).exit_code == 0
    result = CliRunner().invoke(main, ["diff", "--store", str(store)])
    assert result.exit_code == 0, result.output
    lines = result.output.splitlines()
    at = next(i for i, line in enumerate(lines) if line.startswith("data: same"))
    assert lines[at + 1] == ("data read: missing words pandas' default list → ['n/a'] and "
                             "empty fields (data.missing_words), so the cells differ")
    assert "folds: paired on identical folds (0 shared cells)" in lines


@pytest.mark.parametrize("text, words", [
    ("data: {path: d.csv, target: y}\n", None),
    ("data: {path: d.csv, target: y, missing_words: [NA, '', NA]}\n", ["", "NA"]),
    ("data: {path: d.csv, target: y, missing_words: [null]}\n", ValueError),
    ("data: [unclosed\n", ValueError),
    ("a: &a [1, 1, 1, 1, 1, 1, 1, 1, 1, 1]\n" + "".join(
        f"{k}: &{k} [*{p}, *{p}, *{p}, *{p}, *{p}, *{p}, *{p}, *{p}, *{p}, *{p}]\n"
        for p, k in zip("abcde", "bcdef")) + "data: {path: d.csv, target: y}\n", ValueError)])
def test_a_stored_spec_texts_words_are_read_within_the_specs_limits(text, words):
    from runner.write.spec_yaml import stated_missing_words

    if words is ValueError:
        with pytest.raises(ValueError):
            stated_missing_words(text)
    else:
        assert stated_missing_words(text) == words
