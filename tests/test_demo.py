"""The shipped demo data are exactly what the generator writes (so anyone can rebuild them),
they hold the groups the demo spec folds by, and the row-folds twin of the demo spec differs
from it only in its fold plan."""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest

from runner.demo import SEASONS, make_greenhouse, write_greenhouse
from runner.write.spec import load_spec

ROOT = Path(__file__).resolve().parents[1]
SHIPPED = ROOT / "specs" / "data" / "greenhouse.csv"


def test_shipped_csv_is_the_generator_output(tmp_path):
    fresh = pd.read_csv(write_greenhouse(tmp_path / "g.csv"))
    pd.testing.assert_frame_equal(fresh, pd.read_csv(SHIPPED), check_exact=False, rtol=1e-12)


def test_generator_shape_and_missing_sensors():
    df = make_greenhouse(3000, seed=7)
    assert df.shape == (3000, 19)
    assert {"bay_id", "season", "cultivar", "glazing", "irrigation", "yield_kg_m2"} <= set(df.columns)
    share = df[["leaf_temp_c", "par_umol_m2_s"]].isna().mean()
    assert 0.08 < share.min() and share.max() < 0.15
    pd.testing.assert_frame_equal(df, make_greenhouse(3000, seed=7))


def test_every_bay_has_a_row_per_season_and_fixed_traits():
    df = make_greenhouse(3000, seed=7)
    per_bay = df.groupby("bay_id")
    assert per_bay.size().eq(SEASONS).all() and df["bay_id"].nunique() == 250
    assert per_bay["season"].nunique().eq(SEASONS).all()
    for fixed in ("glazing", "irrigation", "bay_area_m2", "bay_row"):
        assert per_bay[fixed].nunique().eq(1).all(), fixed
    # settings are the bay's own, adjusted a little each season: most of their spread is
    # between bays (intraclass share well above a half)
    within = per_bay["co2_ppm"].var().mean()
    assert within < 0.1 * df["co2_ppm"].var()


def test_row_folds_twin_differs_only_in_its_folds():
    demo = load_spec(ROOT / "specs" / "greenhouse.yaml")
    twin = load_spec(ROOT / "specs" / "greenhouse_row_folds.yaml")
    assert demo.folds.groups == "bay_id" and twin.folds.groups is None
    assert twin.test.groups == "bay_id" and demo.test.groups is None
    same = ("data", "metrics", "pick", "store", "models", "limits", "explain", "checks")
    for field in same:
        assert getattr(demo, field) == getattr(twin, field), field
    assert (demo.folds.k, demo.folds.repeats, demo.folds.seed) == \
        (twin.folds.k, twin.folds.repeats, twin.folds.seed)
    assert (demo.test.fraction, demo.test.seed) == (twin.test.fraction, twin.test.seed)


def test_the_generators_replace_only_an_earlier_demo_file(tmp_path, capsys):
    from runner.demo import _main as greenhouse_main
    from runner.demo_grades import _main as grades_main

    spec = tmp_path / "spec.yaml"
    spec.write_text("name: mine\n")
    for run in (greenhouse_main, grades_main):
        with pytest.raises(SystemExit) as stop:
            run([str(spec)])
        assert stop.value.code == 2
        err = capsys.readouterr().err
        assert err.startswith("Error: ") and err.count("\n") == 1, err
        assert f"{spec} exists and is not a foldwise demo data file" in err
        assert spec.read_text() == "name: mine\n"
    out = tmp_path / "g.csv"
    greenhouse_main([str(out), "--rows", "24"])
    greenhouse_main([str(out), "--rows", "36", "--seed", "3"])  # an earlier demo file: replaced
    assert len(pd.read_csv(out)) == 36
    with pytest.raises(SystemExit):
        grades_main([str(out)])  # another generator's columns: kept
    assert len(pd.read_csv(out)) == 36 and sorted(p.name for p in tmp_path.iterdir()) == [
        "g.csv", "spec.yaml"]


@pytest.mark.parametrize("args, words", [
    (["--rows", "-5"], "argument --rows: -5 is outside 1 ... 10,000,000"),
    (["--rows", "99999999999999"], "argument --rows: 99999999999999 is outside 1"),
    (["--seed", "-1"], "argument --seed: -1 is outside 0 ... 4,294,967,295"),
    (["--rows", "many"], "argument --rows: 'many' is not a whole number")])
def test_rows_and_seed_out_of_range_are_usage_errors(tmp_path, capsys, args, words):
    # they raised a traceback (numpy's seed), or tried to allocate 728 TiB
    from runner.demo import _main as greenhouse_main
    from runner.demo_grades import _main as grades_main

    for run in (greenhouse_main, grades_main):
        with pytest.raises(SystemExit) as stop:
            run([str(tmp_path / "d.csv"), *args])
        assert stop.value.code == 2
        err = capsys.readouterr().err
        assert words in err and "Traceback" not in err
        assert not (tmp_path / "d.csv").exists()
