"""Building a model from a pick, keeping it safely and getting it back: a built model is the
sweep's refit (the same predictions, bit for bit, as the explain step's scikit-learn refit
stored in test_predictions), its card says where it came from, and changed bytes are never
loaded."""

from __future__ import annotations

import json
import shutil

import duckdb
import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

from runner.cli import main
from runner.errors import DataError, ModelError, OutputError
from runner.model.build import build_model
from runner.model.card import card_path_for
from runner.model.keep import load_model
from runner.model.predict import predict_file
from runner.store import Store

from .store_builder import write_sweep


def _test_rows_file(folder, store, sweep_id, cell_id, name):
    """The cell's test rows cut from the data file as the very lines the sweep read (so no
    number is reformatted), with the stored refit predictions in file order."""
    stored = store.query('select "row", predicted from test_predictions where sweep_id = ? '
                         'and cell_id = ? order by "row"', [sweep_id, cell_id])
    lines = (folder / "greenhouse.csv").read_text().splitlines(keepends=True)
    path = folder / name
    path.write_text(lines[0] + "".join(lines[r + 1] for r in stored["row"]))
    return path, stored["predicted"].to_numpy()


@pytest.mark.parametrize("label", ["tree", "ridge", "forest"])
def test_a_built_pick_predicts_the_stored_test_predictions_bit_for_bit(demo_built, label,
                                                                       tmp_path):
    # Reference: the explain step's refit of the same cell, a plain scikit-learn pipeline
    # fitted on the training rows with the refit seed; its predictions on the test rows are
    # stored in test_predictions. The built model, loaded from its file and from the store,
    # must give exactly those numbers.
    folder, store, sweep_id, built = demo_built
    model = built[label]
    assert model.card["rule"] == "one_se"
    data, expected = _test_rows_file(folder, store, sweep_id, model.card["cell"]["cell_id"],
                                     f"test_rows_{label}.csv")
    for source in (model.artefact, model.model_id):
        loaded = load_model(source, store)
        out = tmp_path / f"{label}-{len(str(source))}.csv"
        result = predict_file(loaded, data, out)
        got = pd.read_csv(out)["predicted"].to_numpy()
        assert result.rows == len(expected) == len(got)
        assert np.array_equal(got, expected), np.max(np.abs(got - expected))


def test_the_card_says_where_the_model_came_from(demo_built):
    folder, store, sweep_id, built = demo_built
    card = built["tree"].card
    sweep = store.query("select * from sweeps where sweep_id = ?", [sweep_id]).iloc[0]
    assert card["sweep"]["sweep_id"] == sweep_id
    assert card["sweep"]["spec_sha256"] == sweep["spec_sha256"]
    assert card["data"]["sha256"] == card["data"]["sweep_sha256"] == sweep["data_sha256"]
    assert card["rows"] == {**card["rows"], "used": "training", "n": int(sweep["n_train"]),
                            "n_training": int(sweep["n_train"]),
                            "n_test": int(sweep["n_test"])}
    assert card["cell"]["family"] == "pruned_tree" and card["cell"]["model"] == "tree"
    assert card["cell"]["estimator_params"]["min_samples_leaf"] == 5
    # The inputs: the data file's columns less target and dropped, categories as seen in
    # the training rows (the plan's rows rebuilt with scikit-learn's splitter, README recipe).
    from sklearn.model_selection import GroupShuffleSplit

    df = pd.read_csv(folder / "greenhouse.csv")
    split = GroupShuffleSplit(n_splits=1, test_size=0.2, random_state=11)
    test = next(split.split(np.arange(len(df)), groups=df["bay_id"]))[1]
    train = df.drop(index=test)
    names = [f["name"] for f in card["features"]]
    assert names == [c for c in df.columns if c not in ("yield_kg_m2", "bay_row", "bay_id")]
    cultivar = next(f for f in card["features"] if f["name"] == "cultivar")
    assert cultivar["categories"] == sorted(train["cultivar"].unique())
    leaf = next(f for f in card["features"] if f["name"] == "leaf_temp_c")
    assert leaf["missing"] == int(train["leaf_temp_c"].isna().sum()) > 0
    # Scores: the store's CV summary and test score of that cell, and the rebuilt test
    # score equal to the stored one.
    summary = store.query("select metric, mean, se from cell_summary where sweep_id = ? and "
                          "cell_id = ?", [sweep_id, card["cell"]["cell_id"]])
    for r in summary.itertuples():
        assert card["scores"]["cv"][r.metric]["mean"] == r.mean
        assert card["scores"]["cv"][r.metric]["se"] == r.se
        assert card["scores"]["test_rebuilt"][r.metric] == card["scores"]["test"][r.metric]
    import sklearn

    assert card["versions"]["scikit-learn"] == sklearn.__version__
    assert json.loads(card_path_for(built["tree"].artefact).read_text()) == card
    row = store.query("select card, artefact_sha256, rows_used from models where model_id = ?",
                      [card["model_id"]]).iloc[0]
    assert json.loads(row["card"]) == card and row["rows_used"] == "training"


def test_all_rows_fits_the_test_rows_too_and_says_so(demo_built, tmp_path):
    folder, store, sweep_id, _ = demo_built
    model = build_model(store, model="tree", rule="best", all_rows=True,
                        out=tmp_path / "all.skops")
    n = store.query("select n_train + n_test as n from sweeps where sweep_id = ?",
                    [sweep_id])["n"][0]
    assert model.card["rows"]["used"] == "all" and model.card["rows"]["n"] == n
    assert model.card["rule"] == "best"
    assert model.card["scores"]["test_describes_this_model"] is False
    assert "no held-out score" in model.card["scores"]["note"]


def test_build_refuses_data_whose_hash_differs_unless_accepted(demo_built, tmp_path):
    folder, store, sweep_id, _ = demo_built
    changed = tmp_path / "greenhouse.csv"
    text = (folder / "greenhouse.csv").read_text().splitlines(keepends=True)
    changed.write_text("".join(text[:-1]))  # the last row gone
    with pytest.raises(DataError) as err:
        build_model(store, model="ridge", data=changed, out=tmp_path / "r.skops")
    sweep_sha = store.query("select data_sha256 from sweeps")["data_sha256"][0]
    import hashlib

    new_sha = hashlib.sha256(changed.read_bytes()).hexdigest()
    assert sweep_sha in str(err.value) and new_sha in str(err.value)
    assert "--accept-data" in str(err.value) and not (tmp_path / "r.skops").exists()
    model = build_model(store, model="ridge", data=changed, accept_data=True,
                        out=tmp_path / "r.skops")
    assert model.card["data"]["accepted_other_data"] is True
    assert model.card["data"]["sha256"] == new_sha
    assert model.card["data"]["sweep_sha256"] == sweep_sha


def test_data_given_as_a_relative_path_is_read_from_the_current_folder(demo_built, tmp_path,
                                                                        monkeypatch):
    folder, store, sweep_id, _ = demo_built
    moved = tmp_path / "moved"
    moved.mkdir()
    (moved / "rows.csv").write_bytes((folder / "greenhouse.csv").read_bytes())
    monkeypatch.chdir(tmp_path)
    model = build_model(store, model="ridge", data="moved/rows.csv",
                        out=tmp_path / "moved.skops")
    assert model.card["data"]["sha256"] == store.query(
        "select data_sha256 from sweeps where sweep_id = ?", [sweep_id]).data_sha256[0]


def test_build_refuses_failed_and_unfinished_cells(tmp_path):
    path = tmp_path / "s.duckdb"
    write_sweep(path, {"ridge": [[1.0, 2.0, 3.0, 4.0], [1.5, 2.0, 3.0, 4.0],
                                 [1.2, 2.1, 3.0, 4.0]]}, k=2, repeats=2,
                failures=["ridge-1"], drop=[("ridge-2", 3)])
    store = Store(path)
    with pytest.raises(ModelError, match="some of its fits failed"):
        build_model(store, cell="ridge-1")
    with pytest.raises(ModelError, match="not every fold of it is scored"):
        build_model(store, cell="ridge-2")
    with pytest.raises(ModelError, match="either --cell or --rule"):
        build_model(store, cell="ridge-0", rule="best")
    assert store.query("select count(*) n from models")["n"][0] == 0


def test_a_changed_artefact_file_is_refused_before_skops_reads_it(demo_built, tmp_path,
                                                                  monkeypatch):
    _, store, _, built = demo_built
    artefact = tmp_path / "t.skops"
    shutil.copy(built["tree"].artefact, artefact)
    shutil.copy(built["tree"].card_file, card_path_for(artefact))
    data = bytearray(artefact.read_bytes())
    data[len(data) // 2] ^= 0x01
    artefact.write_bytes(bytes(data))
    import skops.io

    def never(*a, **k):
        raise AssertionError("skops was asked to load refused bytes")

    monkeypatch.setattr(skops.io, "loads", never)
    monkeypatch.setattr(skops.io, "load", never)
    out = CliRunner().invoke(main, ["predict", str(artefact), str(artefact), "--out",
                                    str(tmp_path / "p.csv"), "--store", str(store.path)])
    assert out.exit_code == 2, out.output
    assert out.output.startswith("Error: model file") and out.output.count("\n") == 1
    assert "SHA-256" in out.output and "nothing was loaded" in out.output
    assert not (tmp_path / "p.csv").exists()


def test_a_store_row_whose_bytes_do_not_match_its_sha_is_refused(demo_built, tmp_path,
                                                                 monkeypatch):
    _, store, _, built = demo_built
    copy = tmp_path / "copy.duckdb"
    shutil.copy(store.path, copy)
    model_id = built["ridge"].model_id
    with duckdb.connect(str(copy)) as con:
        blob = con.execute("select artefact from models where model_id = ?",
                           [model_id]).fetchone()[0]
        changed = bytearray(blob)
        changed[100] ^= 0xFF
        con.execute("update models set artefact = ? where model_id = ?",
                    [bytes(changed), model_id])
    import skops.io

    monkeypatch.setattr(skops.io, "loads", lambda *a, **k: pytest.fail("loaded"))
    with pytest.raises(ModelError, match="stored bytes were changed"):
        load_model(model_id, Store(copy))
    out = CliRunner().invoke(main, ["fetch", model_id, "--store", str(copy), "--out",
                                    str(tmp_path / "f.skops")])
    assert out.exit_code == 2 and "SHA-256" in out.output
    assert not list(tmp_path.glob("f*"))


def test_an_artefact_holding_types_no_foldwise_pipeline_holds_is_refused(demo_built,
                                                                         tmp_path):
    # A consistent file and card (the SHA-256 matches) whose pipeline holds a class outside
    # the linear family's: refused at the type gate, naming the class.
    import skops.io as sio
    from sklearn.neighbors import KNeighborsRegressor
    from sklearn.pipeline import Pipeline

    _, _, _, built = demo_built
    X, y = np.arange(20.0).reshape(10, 2), np.arange(10.0)
    other = Pipeline([("prep", "passthrough"), ("model", KNeighborsRegressor(2))]).fit(X, y)
    blob = sio.dumps(other)
    import hashlib

    card = dict(built["ridge"].card)
    card["artefact"] = {**card["artefact"], "sha256": hashlib.sha256(blob).hexdigest()}
    (tmp_path / "odd.skops").write_bytes(blob)
    card_path_for(tmp_path / "odd.skops").write_text(json.dumps(card))
    with pytest.raises(ModelError, match="KNeighborsRegressor") as err:
        load_model(tmp_path / "odd.skops")
    assert "never holds" in str(err.value)


def test_an_artefact_holding_a_bound_method_is_refused_before_anything_is_built(demo_built,
                                                                                tmp_path):
    # The tree pipeline's function step edited to call a bound method (skops' MethodNode;
    # here "<path>".format, where a crafted file could name ndarray.tofile and write any
    # file), card SHA-256 made to match: the method's owner type (str) is one a pipeline
    # may hold, so the gate must refuse the method itself, before skops builds anything.
    import hashlib
    import io
    import zipfile

    _, _, _, built = demo_built
    with zipfile.ZipFile(built["tree"].artefact) as zf:
        files = {name: zf.read(name) for name in zf.namelist()}
    schema = json.loads(files["schema.json"])
    stack, replaced = [schema], 0
    while stack:
        node = stack.pop()
        if isinstance(node, dict):
            for key, value in node.items():
                if isinstance(value, dict) and value.get("__loader__") == "FunctionNode":
                    node[key] = {"__class__": "str", "__module__": "builtins",
                                 "__loader__": "MethodNode", "__id__": 1,
                                 "content": {"func": "format", "obj": {
                                     "__class__": "str", "__module__": "builtins",
                                     "__loader__": "JsonNode", "is_json": True,
                                     "content": json.dumps(str(tmp_path / "written")),
                                     "__id__": 2}}}
                    replaced += 1
                else:
                    stack.append(value)
        elif isinstance(node, list):
            stack.extend(node)
    assert replaced >= 1
    files["schema.json"] = json.dumps(schema).encode()
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w") as zf:
        for name, content in files.items():
            zf.writestr(name, content)
    blob = buffer.getvalue()
    card = dict(built["tree"].card)
    card["artefact"] = {**card["artefact"], "sha256": hashlib.sha256(blob).hexdigest()}
    (tmp_path / "crafted.skops").write_bytes(blob)
    card_path_for(tmp_path / "crafted.skops").write_text(json.dumps(card))
    with pytest.raises(ModelError, match="never holds: .*a method of builtins.str"):
        load_model(tmp_path / "crafted.skops")
    assert not (tmp_path / "written").exists()


def test_loading_says_when_versions_differ(demo_built, tmp_path):
    folder, _, _, built = demo_built
    shutil.copy(built["tree"].artefact, tmp_path / "v.skops")
    card = json.loads(built["tree"].card_file.read_text())
    card["versions"]["scikit-learn"] = "0.0.1"
    card_path_for(tmp_path / "v.skops").write_text(json.dumps(card))
    loaded = load_model(tmp_path / "v.skops")
    assert len(loaded.notes) == 1
    assert "built with scikit-learn 0.0.1" in loaded.notes[0]
    rows = tmp_path / "rows.csv"
    pd.read_csv(folder / "greenhouse.csv").head(5).to_csv(rows, index=False)
    out = CliRunner().invoke(main, ["predict", str(tmp_path / "v.skops"), str(rows), "--out",
                                    str(tmp_path / "p.csv")])
    assert out.exit_code == 0, out.output
    assert out.output.count("built with scikit-learn 0.0.1") == 1, out.output  # said once


def test_models_help_says_it_lists_every_sweep():
    # `models` without --sweep lists the models of every sweep (built_models), so its
    # help must not promise the latest sweep's alone
    shown = " ".join(CliRunner().invoke(main, ["models", "--help"]).output.split())
    assert "[default: every sweep]" in shown and "latest" not in shown


def test_models_card_fetch_and_coefficients_commands(demo_built, tmp_path):
    _, store, sweep_id, built = demo_built
    run = lambda *a: CliRunner().invoke(main, [*a, "--store", str(store.path)])
    listed = run("models", "--format", "csv")
    assert listed.exit_code == 0
    ids = set(pd.read_csv(__import__("io").StringIO(listed.output))["model_id"])
    assert {m.model_id for m in built.values()} <= ids
    shown = run("card", built["tree"].model_id)
    assert shown.exit_code == 0 and built["tree"].card["cell"]["cell_id"] in shown.output
    raw = run("card", built["tree"].model_id[:-1], "--format", "json")
    assert json.loads(raw.output) == built["tree"].card
    fetched = run("fetch", built["forest"].model_id, "--out", str(tmp_path / "f.skops"))
    assert fetched.exit_code == 0, fetched.output
    assert (tmp_path / "f.skops").read_bytes() == built["forest"].artefact.read_bytes()
    again = run("fetch", built["forest"].model_id, "--out", str(tmp_path / "f.skops"))
    assert again.exit_code == 2 and "already exists" in again.output
    coefs = run("coefficients", "--model-id", built["ridge"].model_id, "--format", "csv")
    table = pd.read_csv(__import__("io").StringIO(coefs.output))
    assert table["term"].iloc[0] == "(intercept)" and "cultivar=aurelia" in set(table["term"])


def test_after_remove_takes_the_built_models_the_listing_does_not_say_none_yet(demo_built,
                                                                               tmp_path):
    _, store, sweep_id, _ = demo_built
    copy = tmp_path / "copy.duckdb"
    shutil.copy(store.path, copy)
    n_built = int(Store(copy).query("select count(*) as n from models").n.iloc[0])
    assert n_built >= 3
    run = lambda *a: CliRunner().invoke(main, [*a, "--store", str(copy)])
    before = run("models", "--sweep", sweep_id)
    assert before.exit_code == 0 and "no built model" not in before.output
    removed = run("remove", sweep_id, "--yes")
    assert removed.exit_code == 0, removed.output
    assert f"among them {n_built} built model(s) (the files `build` wrote stay" \
        in removed.output, removed.output
    listed = run("models")
    assert listed.exit_code == 0, listed.output
    words = " ".join(listed.output.split())
    assert "yet" not in words
    assert ("note: the store holds no built models: none was built, or `foldwise remove` "
            "took them with their sweeps") in words, words


def test_signed_coefficients_reproduce_the_stored_test_predictions(demo_built):
    # Identity check (arithmetic of the pipeline, no outside source): intercept plus each
    # coefficient times its column's value (median-imputed as the pipeline does; one-hot
    # indicators for the categories) gives the explain step's stored test predictions.
    folder, store, sweep_id, built = demo_built
    cell_id = built["ridge"].card["cell"]["cell_id"]
    from runner.read.explained import coefficient_table

    coefs = coefficient_table(store, sweep_id).table
    coefs = coefs[coefs["cell_id"] == cell_id]
    pipeline = load_model(built["ridge"].artefact).pipeline
    stored = store.query('select "row", predicted from test_predictions where sweep_id = ? '
                         'and cell_id = ? order by "row"', [sweep_id, cell_id])
    df = pd.read_csv(folder / "greenhouse.csv").iloc[stored["row"]]
    medians = pipeline.named_steps["prep"].named_transformers_["num"] \
        .named_steps["impute"].statistics_
    numeric = [f["name"] for f in built["ridge"].card["features"] if f["type"] == "numeric"]
    filled = df[numeric].fillna(dict(zip(numeric, medians)))
    total = np.full(len(df), coefs.loc[coefs["term"] == "(intercept)", "coefficient"].iloc[0])
    for r in coefs[coefs["feature"].notna()].itertuples():
        if r.level is None or r.level != r.level:
            total += r.coefficient * filled[r.feature].to_numpy()
        else:
            total += r.coefficient * (df[r.feature].astype(str) == r.level).to_numpy()
    np.testing.assert_allclose(total, stored["predicted"], rtol=1e-10)
    model_coefs = store.query("select term, coefficient from model_coefficients where "
                              "model_id = ? order by position", [built["ridge"].model_id])
    assert model_coefs["term"].tolist() == coefs["term"].tolist()
    np.testing.assert_array_equal(model_coefs["coefficient"], coefs["coefficient"])


@pytest.mark.parametrize("fmt", ["parquet", "csv"])
def test_export_and_merge_carry_built_models_whole(demo_built, tmp_path, fmt):
    from runner.store.transfer import export_store, merge_store

    _, store, _, built = demo_built
    export_store(store, tmp_path / "out", fmt)
    target = Store(tmp_path / "back.duckdb")
    result = merge_store(target, tmp_path / "out")
    assert {m.model_id for m in built.values()} <= set(result.new_models)
    q = "select * from models order by model_id"
    pd.testing.assert_frame_equal(target.query(q), store.query(q), check_exact=True)
    q = "select * from model_coefficients order by model_id, position"
    pd.testing.assert_frame_equal(target.query(q), store.query(q), check_exact=True)
    assert load_model(built["forest"].model_id, target).card == built["forest"].card


def test_a_model_built_after_a_merge_arrives_with_the_next_merge(demo_built, tmp_path):
    from runner.store.transfer import merge_store

    folder, store, _, _ = demo_built
    source = tmp_path / "source.duckdb"
    shutil.copy(store.path, source)
    target = Store(tmp_path / "target.duckdb")
    merge_store(target, source)
    # the copy's stored data path lies outside its folder: the data are named by the user
    later = build_model(Store(source), model="tree", rule="best", out=tmp_path / "l.skops",
                        data=folder / "greenhouse.csv")
    again = merge_store(target, source)
    assert again.new_sweeps == [] and again.new_models == [later.model_id]
    assert again.rows["models"] == 1
    assert load_model(later.model_id, target).card == later.card


def test_build_out_under_a_file_is_refused_in_words(demo_built, tmp_path):
    _, store, _, _ = demo_built
    (tmp_path / "plain.txt").write_text("x")
    with pytest.raises(OutputError, match="a part of its folder is a file"):
        build_model(store, model="ridge", out=tmp_path / "plain.txt" / "m.skops")
    assert (tmp_path / "plain.txt").read_text() == "x"


def test_a_bad_build_out_is_refused_before_anything_is_fitted(demo_built, tmp_path,
                                                              monkeypatch):
    # An --out under a file, already taken or not .skops is refused before the data are
    # read and the model fitted (a forest's fit came first and was thrown away); the
    # files there are unchanged and no temporary file is left; fetch is refused alike.
    import runner.write.prepare as prepare

    _, store, _, built = demo_built
    monkeypatch.setattr(prepare, "load_checked", lambda *a, **k: pytest.fail("data read"))
    (tmp_path / "plain.txt").write_text("x")
    (tmp_path / "taken.skops").write_bytes(b"someone's model")
    for out, words in [(tmp_path / "plain.txt" / "m.skops", "a part of its folder is a file"),
                       (tmp_path / "taken.skops", "already exists"),
                       (tmp_path / "m.pkl", "must end in .skops")]:
        with pytest.raises(OutputError, match=words):
            build_model(store, model="forest", out=out)
    assert (tmp_path / "plain.txt").read_text() == "x"
    assert (tmp_path / "taken.skops").read_bytes() == b"someone's model"
    fetched = CliRunner().invoke(main, ["fetch", built["tree"].model_id, "--store",
                                        str(store.path), "--out",
                                        str(tmp_path / "plain.txt" / "t.skops")])
    assert fetched.exit_code == 2 and "a part of its folder is a file" in fetched.output
    assert sorted(p.name for p in tmp_path.iterdir()) == ["plain.txt", "taken.skops"]


def test_a_stored_data_path_naming_no_data_file_is_refused_before_a_byte_is_read(
        demo_built, tmp_path, monkeypatch):
    # a store passed on by someone else names the file build reads: it must be a CSV or
    # Parquet file, or nothing of it is read (not even hashed, which would tell whether a
    # private file holds guessed bytes)
    folder, store, sweep_id, _ = demo_built
    shutil.copy(store.path, tmp_path / "copy.duckdb")
    secret = tmp_path / "id_key"
    secret.write_text("private\n")
    with duckdb.connect(str(tmp_path / "copy.duckdb")) as con:
        con.execute("update sweeps set data_path = ?", [str(secret)])
    import runner.write.data as data

    def read(*_):
        raise AssertionError("a byte of the stored path was read")

    monkeypatch.setattr(data, "_sha256", read)
    monkeypatch.setattr(data, "_sha256_at", read)
    with pytest.raises(DataError) as err:
        build_model(Store(tmp_path / "copy.duckdb"), model="ridge", out=tmp_path / "r.skops")
    text = str(err.value)
    assert str(secret) in text and "--data" in text and "store" in text, text
    assert not (tmp_path / "r.skops").exists()


@pytest.mark.parametrize("appears", ["artefact", "card"])
def test_a_file_that_appears_while_a_model_is_written_is_kept(demo_built, tmp_path,
                                                               monkeypatch, appears):
    # someone else's file lands at --out (or its card) after the check and before the move:
    # it is kept, no half of the new pair is left beside it, and the model stays in the store
    import runner.model.build as build

    folder, store, _, _ = demo_built
    shutil.copy(store.path, tmp_path / "copy.duckdb")
    copy = Store(tmp_path / "copy.duckdb")
    out = tmp_path / "out" / "m.skops"
    theirs = out if appears == "artefact" else card_path_for(out)
    staged_for_real = build.stage_files

    def stage_then_someone_writes(files, prefix):
        staged = staged_for_real(files, prefix)
        theirs.write_bytes(b"someone else's\n")
        return staged

    monkeypatch.setattr(build, "stage_files", stage_then_someone_writes)
    with pytest.raises(OutputError) as err:
        build_model(copy, model="ridge", out=out, data=folder / "greenhouse.csv")
    assert "it is kept" in str(err.value) and "foldwise fetch model-" in str(err.value)
    assert sorted(p.name for p in out.parent.iterdir()) == [theirs.name]
    assert theirs.read_bytes() == b"someone else's\n"
    assert len(copy.query("select model_id from models")) == len(
        store.query("select model_id from models")) + 1


@pytest.fixture
def hashed(monkeypatch):
    """Every path foldwise hashes as data, in order (the hashing itself unchanged)."""
    import runner.write.data as data

    seen, real = [], data.file_sha256
    monkeypatch.setattr(data, "file_sha256",
                        lambda path, **k: seen.append(str(path)) or real(path, **k))
    return seen


def _store_naming(demo_built, folder, data_path):
    """A copy of the demo store in `folder` whose sweep names `data_path` as its data."""
    _, store, sweep_id, _ = demo_built
    folder.mkdir(exist_ok=True)
    copy = folder / "copy.duckdb"
    shutil.copy(store.path, copy)
    with duckdb.connect(str(copy)) as con:
        con.execute("update sweeps set data_path = ? where sweep_id = ?",
                    [None if data_path is None else str(data_path), sweep_id])
    return copy


def test_a_stored_data_path_outside_the_allowed_folders_is_never_opened(demo_built, tmp_path,
                                                                       monkeypatch, hashed):
    # the store named a file and build hashed it (and printed its SHA-256 when it differed)
    # before any check; a path a store names is now read only inside the current folder,
    # the store's folder or the folder of --data, checked before it is opened
    import os

    folder = demo_built[0]
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    outside = elsewhere / "greenhouse.csv"
    outside.write_bytes((folder / "greenhouse.csv").read_bytes())  # the very rows
    here = tmp_path / "here"
    here.mkdir()
    monkeypatch.chdir(here)
    link = tmp_path / "linked"
    link.mkdir()
    (link / "data.csv").symlink_to(outside)  # inside the store's folder, pointing out
    for store_folder, named in [(tmp_path / "plain", outside), (link, link / "data.csv")]:
        copy = _store_naming(demo_built, store_folder, named)
        out = CliRunner().invoke(main, ["build", "--model", "ridge", "--store", str(copy),
                                        "--out", str(tmp_path / "m.skops")])
        assert out.exit_code == 2 and out.output.count("\n") == 1, out.output
        assert out.output.startswith(f"Error: the data file sweep {demo_built[2]} names in "
                                     f"store {copy}, {named}, lies outside the folders")
        assert "Give the sweep's data file with --data." in out.output
    assert hashed == [] and not list(tmp_path.glob("m*"))
    os.mkfifo(here / "rows.csv")  # inside the current folder, but a pipe
    copy = _store_naming(demo_built, tmp_path / "fifo", here / "rows.csv")
    with pytest.raises(DataError, match=r"rows.csv, is not a regular file \(a folder, device, "
                                        r"pipe or socket\)"):
        build_model(Store(copy), model="ridge", out=tmp_path / "m.skops")
    monkeypatch.chdir("/dev")  # a device inside the current folder
    copy = _store_naming(demo_built, tmp_path / "device", "/dev/zero")
    with pytest.raises(DataError, match="/dev/zero, is not a regular file"):
        build_model(Store(copy), model="ridge", out=tmp_path / "m.skops")
    copy = _store_naming(demo_built, tmp_path / "none", None)
    with pytest.raises(DataError, match=f"store holds no data path for sweep {demo_built[2]}"):
        build_model(Store(copy), model="ridge", out=tmp_path / "m.skops")
    assert hashed == [] and not list(tmp_path.glob("m*"))
    # the user's own --data is theirs to name: the same outside file builds
    model = build_model(Store(copy), model="ridge", data=outside, out=tmp_path / "m.skops")
    assert hashed == [str(outside)] and model.card["data"]["path"] == str(outside)
    # a stored path inside the store's folder is read, from wherever foldwise runs
    store_folder = tmp_path / "project" / "results"
    store_folder.mkdir(parents=True)
    inside = store_folder / "greenhouse.csv"
    inside.write_bytes((folder / "greenhouse.csv").read_bytes())
    copy = _store_naming(demo_built, store_folder, inside)
    monkeypatch.chdir(tmp_path / "elsewhere")
    model = build_model(Store(copy), model="ridge", out=tmp_path / "in.skops")
    assert hashed[1:] == [str(inside)] and model.card["data"]["path"] == str(inside)
    # a sweep stored without its data's SHA-256 cannot vouch for the rows (it said "was run
    # on data with SHA-256 None")
    with duckdb.connect(str(copy)) as con:
        con.execute("update sweeps set data_sha256 = NULL")
    with pytest.raises(DataError, match="store holds no SHA-256 for the data of sweep"):
        build_model(Store(copy), model="ridge", out=tmp_path / "n.skops")
    model = build_model(Store(copy), model="ridge", accept_data=True, out=tmp_path / "n.skops")
    assert "not the sweep's (unknown) (--accept-data)" in model.notes[-1]
