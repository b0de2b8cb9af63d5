"""A mistyped name gets the same answer from every command that takes one: one paragraph
naming the option and the value given, the names there are, the closest one, exit code 2,
no traceback, and nothing written (the store's bytes and time stamp as they were, no file
made). Run over the demo store the build tests share (conftest's `demo_built`)."""

from __future__ import annotations

from pathlib import Path

import pytest
from click.testing import CliRunner

from runner.cli import main


def _typo(text: str) -> str:
    """The text with its last character changed: a slip of one key."""
    return text[:-1] + ("0" if text[-1] != "0" else "1")


# (arguments, the option as the refusal names it, the wrong value, the name meant, whether
# click refuses it while reading the options, with its usage lines above the paragraph);
# SWEEP, CELL, MODEL_ID and DATA stand for the demo's sweep id, the tree's picked cell, the
# newest built model's id and the demo data file; OUT (OUT_SKOPS: a model file) for a path
# in the test's empty folder.
CASES = [
    (["summary", "--sweep", "~SWEEP"], "--sweep", "~SWEEP", "SWEEP", False),
    (["pick", "--model", "tre"], "--model", "tre", "tree", False),
    (["pick", "--rule", "one-se"], "--rule", "one-se", "one_se", True),
    (["path", "--model", "fores"], "--model", "fores", "forest", False),
    (["path", "--model", "tree", "--metric", "rsme"], "--metric", "rsme", "rmse", False),
    (["compare", "--metric", "mea"], "--metric", "mea", "mae", False),
    (["compare", "--rule", "bset"], "--rule", "bset", "best", True),
    (["compare", "--se", "corected"], "--se", "corected", "corrected", True),
    (["plot", "complexity", "--model", "rige", "--out-dir", "OUT"], "--model", "rige", "ridge",
     False),
    (["plot", "tree", "--model", "tre", "--out-dir", "OUT"], "--model", "tre", "tree", False),
    (["plot", "history", "--model", "tre", "--out-dir", "OUT"], "--model", "tre", "tree",
     False),
    (["plot", "history", "--name", "demo-bilt", "--out-dir", "OUT"], "--name", "demo-bilt",
     "demo-built", False),
    (["plot", "importance", "--method", "impurty", "--out-dir", "OUT"], "--method",
     "impurty", "impurity", True),
    (["plot", "complexty", "--out-dir", "OUT"], "KIND", "complexty", "complexity", True),
    (["history", "--model", "tre"], "--model", "tre", "tree", False),
    (["history", "--family", "pruned-tree"], "--family", "pruned-tree", "pruned_tree", False),
    (["history", "--model", "tree", "--name", "demo-bilt"], "--name", "demo-bilt",
     "demo-built", False),
    (["history", "--model", "tree", "--metric", "rsme"], "--metric", "rsme", "rmse", False),
    (["build", "--model", "tre", "--out", "OUT_SKOPS"], "--model", "tre", "tree", False),
    (["build", "--model", "tree", "--rule", "onese"], "--rule", "onese", "one_se", True),
    (["build", "--cell", "~CELL", "--out", "OUT_SKOPS"], "--cell", "~CELL", "CELL", False),
    (["predict", "~MODEL_ID", "DATA", "--out", "OUT"], "MODEL", "~MODEL_ID", "MODEL_ID", False),
    (["predict", "MODEL_ID", "DATA", "--out", "OUT", "--unseen", "alow"], "--unseen", "alow",
     "allow", True),
    (["card", "~MODEL_ID"], "MODEL", "~MODEL_ID", "MODEL_ID", False),
    (["fetch", "~MODEL_ID", "--out", "OUT"], "MODEL_ID", "~MODEL_ID", "MODEL_ID", False),
    (["coefficients", "--model-id", "~MODEL_ID"], "--model-id", "~MODEL_ID", "MODEL_ID",
     False),
    (["models", "--sweep", "~SWEEP"], "--sweep", "~SWEEP", "SWEEP", False),
    (["label", "--sweep", "~SWEEP", "purpose=x"], "--sweep", "~SWEEP", "SWEEP", False),
    (["diff", "~SWEEP"], "SWEEP_A", "~SWEEP", "SWEEP", False),
    (["remove", "~SWEEP", "--yes"], "SWEEP", "~SWEEP", "SWEEP", False),
    (["sweeps", "--name", "demo-bilt"], "--name", "demo-bilt", "demo-built", False),
    (["sweeps", "--status", "finshed"], "--status", "finshed", "finished", True),
    (["export", "OUT", "--sweep", "~SWEEP"], "--sweep", "~SWEEP", "SWEEP", False),
    (["export", "OUT", "--name", "demo-bilt"], "--name", "demo-bilt", "demo-built", False),
    (["merge", "STORE", "--name", "demo-bilt", "--store", "OUT"], "--name", "demo-bilt",
     "demo-built", False),
    (["report", "--sweep", "~SWEEP", "--out", "OUT"], "--sweep", "~SWEEP", "SWEEP", False),
]


@pytest.mark.parametrize("args, option, wrong, meant, by_click", CASES,
                         ids=[" ".join(c[0][:3]) for c in CASES])
def test_a_mistyped_name_is_refused_alike_by_every_command(demo_built, tmp_path, args, option,
                                                          wrong, meant, by_click):
    folder, store, sweep_id, built = demo_built
    newest = store.query("select model_id from models order by created_at desc, model_id desc "
                         "limit 1").model_id.iloc[0]
    names = {"SWEEP": sweep_id, "MODEL_ID": newest,
             "CELL": built["tree"].card["cell"]["cell_id"],
             "DATA": str(folder / "greenhouse.csv"), "OUT": str(tmp_path / "out"),
             "OUT_SKOPS": str(tmp_path / "out.skops"),
             "STORE": str(store.path)}
    fill = lambda text: _typo(names[text[1:]]) if text.startswith("~") and text[1:] in names \
        else names.get(text, text)
    wrong, meant = fill(wrong), fill(meant)
    store_file = Path(store.path)
    before = (store_file.read_bytes(), store_file.stat().st_mtime_ns)
    given = [fill(a) for a in args]
    if "--store" not in given:
        given += ["--store", str(store_file)]
    out = CliRunner().invoke(main, given, catch_exceptions=False)
    assert out.exit_code == 2, out.output
    assert "Traceback" not in out.output
    lines = out.output.splitlines()
    if not by_click:  # the paragraph alone
        assert len(lines) == 1, out.output
    paragraph = lines[-1]
    assert paragraph.startswith("Error: "), out.output
    assert (f"'{option}'" in paragraph if by_click else
            paragraph.startswith(f"Error: {option} '{wrong}' is ")), paragraph
    assert f"'{wrong}'" in paragraph and (" is not one of " if by_click else "; its ") \
        in paragraph, paragraph
    assert paragraph.endswith(f"Did you mean '{meant}'?") or \
        f"Did you mean '{meant}'? `foldwise" in paragraph, paragraph
    assert (store_file.read_bytes(), store_file.stat().st_mtime_ns) == before
    assert list(tmp_path.iterdir()) == []


def test_many_names_are_shown_as_the_first_few_and_a_count(demo_built):
    _, store, sweep_id, built = demo_built
    cells = store.query("select cell_id from cells where sweep_id = ? order by position",
                        [sweep_id]).cell_id.tolist()
    assert len(cells) == 22  # 5 ridge alphas, 16 pruning fractions, 1 forest (DEMO_SPEC)
    wrong = _typo(built["tree"].card["cell"]["cell_id"])
    out = CliRunner().invoke(main, ["build", "--cell", wrong, "--store", str(store.path)])
    assert out.exit_code == 2, out.output
    assert out.output == (
        f"Error: --cell '{wrong}' is no cell id (nor the start of one) of sweep {sweep_id}; "
        f"its cells: {', '.join(cells[:8])}, ... (22 in all). Did you mean "
        f"'{built['tree'].card['cell']['cell_id']}'? `foldwise path --model LABEL --format "
        "csv` lists a model's cell ids.\n")


def test_a_mistyped_label_is_refused_by_the_filters_and_named_by_a_drop(demo_built, tmp_path):
    """A label key or key=value no sweep carries is a mistyped filter (refused as above);
    remove says so in a note and removes nothing (exit 0), and a key `label --drop` does not
    find is a note beside the changes made (exit 0)."""
    import shutil

    _, store, sweep_id, _ = demo_built
    copy = tmp_path / "labelled.duckdb"
    shutil.copy(store.path, copy)
    run = lambda *a: CliRunner().invoke(main, [*a, "--store", str(copy)])
    assert run("label", "--sweep", sweep_id, "purpose=baseline").exit_code == 0
    before = (copy.read_bytes(), copy.stat().st_mtime_ns)
    for args, paragraph in (
            (["sweeps", "--label", "purpse"],
             f"Error: --label 'purpse' is a label key of no sweep in store {copy}; its label "
             "keys: purpose. Did you mean 'purpose'?\n"),
            (["export", str(tmp_path / "out"), "--label", "purpose=baselin"],
             f"Error: --label 'purpose=baselin' is a label of no sweep in store {copy}; its "
             "labels of key purpose: purpose=baseline. Did you mean 'purpose=baseline'?\n")):
        out = run(*args)
        assert out.exit_code == 2 and out.output == paragraph, out.output
        assert (copy.read_bytes(), copy.stat().st_mtime_ns) == before
    # remove's filters are a script's (README: `remove --label purpose=scratch --older-than
    # 30d --yes`), which may name what an earlier run took away: said, but no error
    out = run("remove", "--label", "purpose=baselin", "--yes")
    assert out.exit_code == 0, out.output
    assert out.stderr == (f"note: --label 'purpose=baselin' is a label of no sweep in store "
                          f"{copy}; its labels of key purpose: purpose=baseline. Did you mean "
                          "'purpose=baseline'?\n")
    assert out.stdout == "no sweep matches label purpose=baselin; nothing removed.\n"
    assert (copy.read_bytes(), copy.stat().st_mtime_ns) == before
    dropped = run("label", "--sweep", sweep_id, "--drop", "purpse", "owner=ana")
    assert dropped.exit_code == 0, dropped.output
    assert (f"note: sweep {sweep_id} had no label 'purpse'; nothing to drop. Did you mean "
            "'purpose'?") in dropped.stderr
    assert "purpose" in run("sweeps", "--label", "owner=ana").output
