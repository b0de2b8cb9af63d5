"""One view layer: the picks, compare, complexity and summary tables that the terminal prints
are the very tables the HTML report shows — same titles, same column labels, same numbers."""

from __future__ import annotations

import html
import re

import pytest
from click.testing import CliRunner

from runner.cli import main
from runner.read.queries import compare, complexity_table, picks, summary
from runner.read.report import render_report
from runner.read.views import compare_view, complexity_view, picks_view, summary_view


def _text(page: str) -> str:
    return " ".join(html.unescape(re.sub(r"<[^>]+>", " ", page)).split())


def _flat(output: str) -> str:
    return " ".join(re.sub(r"[│┃┏┓┗┛┡┩└┘━─┌┐╇╈┳┻┼├┤]", " ", output).split())


@pytest.fixture(scope="module")
def report_text(explained):
    _, store, sid = explained
    return _text(render_report(store, sid))


CASES = {
    "pick": (lambda store, sid: picks_view(picks(store, sid)), ["pick"]),
    "compare": (lambda store, sid: compare_view(compare(store, sid)), ["compare"]),
    "path-tree": (lambda store, sid: complexity_view(complexity_table(store, "tree", sid)),
                  ["path", "--model", "tree"]),
    "path-ridge": (lambda store, sid: complexity_view(complexity_table(store, "ridge", sid)),
                   ["path", "--model", "ridge"]),
    "summary": (lambda store, sid: summary_view(summary(store, sid)), ["summary"]),
}


@pytest.mark.parametrize("case", sorted(CASES))
def test_terminal_and_report_show_the_same_table(explained, report_text, case):
    _, store, sid = explained
    make, command = CASES[case]
    view = make(store, sid)
    out = CliRunner().invoke(main, [*command, "--store", str(store.path), "--sweep", sid])
    assert out.exit_code == 0, out.output
    terminal = _flat(out.stdout)
    assert len(view.table) >= 1 and len(view.table.columns) >= 4
    for where, text in (("terminal", terminal), ("report", report_text)):
        assert " ".join(view.title.split()) in text, (where, view.title)
        for head in view.table.columns:
            assert head in text, (where, head)
        for row in view.table.itertuples(index=False):
            for cell in row:
                if cell:
                    assert str(cell) in text, (where, cell)
        for sentence in view.sentences:
            assert sentence in text, (where, sentence)


def test_labels_are_spelt_one_way(explained, report_text):
    # The metric's label (R² for r2, RMSE for rmse) in every table header of both outputs.
    _, store, sid = explained
    view = compare_view(compare(store, sid, metric="r2"))
    assert "CV R² a − b (mean ± SE)" in view.table.columns
    assert "CV RMSE (mean ± SE)" in report_text and "CV rmse" not in report_text


def test_a_cell_hundreds_of_ses_from_the_best_reads_as_a_whole_number(tmp_path):
    # 1.0 above a best whose SE is 0.0041 is 245 SEs: two significant digits, '240 SE',
    # where '%.2g' alone would print '2.4e+02 SE'.
    from .store_builder import write_sweep

    store = write_sweep(tmp_path / "s.duckdb", {"m": [[2.0, 2.0, 2.0, 2.0],
                                                     [1.0, 1.01, 0.99, 1.0]]}, k=2, repeats=2)
    view = complexity_view(complexity_table(store, "m"))
    column = [c for c in view.table.columns if c.endswith("best")][0]
    assert view.table[column].tolist() == ["1.0000 = 240 SE", "0.0000 = 0 SE"]


def test_a_test_score_keeps_the_decimals_of_the_cv_mean_beside_it(tmp_path):
    # CV 0.8207 ± 0.0025 shows four places, so a test score of 0.80498 reads 0.8050, not
    # '0.805' (four significant digits with the trailing zero dropped), in every table.
    from .store_builder import write_sweep

    folds = [0.8207 + d for d in (-0.0044, 0.0044, -0.0044, 0.0044)]
    store = write_sweep(tmp_path / "s.duckdb", {"m": [folds]}, k=2, repeats=2,
                        metric="r2", better="higher", tests={"m": [0.80498]})
    shown = summary_view(summary(store)).table
    assert shown["CV R² (mean ± SE)"].tolist() == ["0.8207 ± 0.0025"]
    assert shown["test R²"].tolist() == ["0.8050"]
    assert picks_view(picks(store)).table.filter(like="test R²").iloc[0].tolist() \
        == ["0.8050", "0.8050"]
    assert complexity_view(complexity_table(store, "m")).table["test R²"].tolist() == ["0.8050"]


def test_a_test_difference_keeps_the_decimals_of_the_cv_difference_beside_it(tmp_path):
    # −1.2 beside −1.000 ± 0.058 reads −1.200, not "−1.2".
    from .store_builder import write_sweep

    store = write_sweep(tmp_path / "s.duckdb", {"a": [[1.0, 1.2, 0.9, 1.1]],
                                                "b": [[2.0, 2.1, 1.9, 2.2]]}, k=2, repeats=2,
                        tests={"a": [1.0], "b": [2.2]})
    shown = compare_view(compare(store)).table
    cv = shown["CV RMSE a − b (mean ± SE)"].iloc[0]
    places = len(cv.split(" ± ")[1].split(".")[1])
    assert shown["test RMSE a − b"].iloc[0] == f"{1.0 - 2.2:.{places}f}".replace("-", "−")
