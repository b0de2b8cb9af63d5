"""The HTML report: one self-contained file built from the store, opened in a real browser
(Debian's chromium, headless) to check that it renders and says what the store holds."""

from __future__ import annotations

import os
import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pytest
from click.testing import CliRunner
from PIL import Image

from runner.cli import main
from runner.read.queries import picks
from runner.read.views import mean_se
from runner.read.report import render_report, write_report

CHROMIUM_FLAGS = ["--headless", "--no-sandbox", "--disable-gpu",
                  "--disable-background-networking", "--disable-component-update",
                  "--disable-sync", "--no-first-run"]


@pytest.fixture(scope="module")
def report_file(explained, tmp_path_factory):
    _, store, sid = explained
    return write_report(store, tmp_path_factory.mktemp("report") / "report.html", sid)


def test_report_is_self_contained(report_file):
    html = report_file.read_text(encoding="utf-8")
    assert "<script" not in html.lower() and "<link" not in html.lower()
    assert not re.search(r"""(src|href)\s*=\s*["'](https?:|//)""", html)
    assert html.count("<svg") >= 5   # models, complexity curves, importance, predictions, tree
    assert 50_000 < len(html.encode()) < 3_000_000


def test_report_rebuilds_identically_from_the_store(explained, report_file):
    _, store, sid = explained
    assert render_report(store, sid) == report_file.read_text(encoding="utf-8")


def test_report_puts_sweep_facts_before_the_cautions(report_file):
    # The cautions send the reader to the fingerprint "under Sweep facts, above".
    page = report_file.read_text(encoding="utf-8")
    assert page.index('id="facts"') < page.index("SHA-256") < page.index('id="cautions"')
    assert "Sweep facts, above" in page[page.index('id="cautions"'):]


def test_report_command(explained, tmp_path):
    _, store, sid = explained
    out = CliRunner().invoke(main, ["report", "--store", str(store.path), "--out",
                                    str(tmp_path / "r.html")])
    assert out.exit_code == 0, out.output
    assert out.output.startswith(str(tmp_path / "r.html")) and "KiB" in out.output


def _chromium() -> str:
    found = shutil.which("chromium")
    if found is None:
        if os.environ.get("CI"):
            pytest.fail("chromium is not installed, but CI must open the report in a browser; "
                        ".ci/run installs it with apt-get.")
        pytest.skip("chromium is not installed (apt-get install -y chromium)")
    return found


def test_without_chromium_the_browser_test_skips_unless_ci(monkeypatch, tmp_path):
    # What the README says happens without chromium: a skip, or a failure under CI.
    monkeypatch.setenv("PATH", str(tmp_path))
    monkeypatch.delenv("CI", raising=False)
    with pytest.raises(pytest.skip.Exception, match="chromium is not installed"):
        _chromium()
    monkeypatch.setenv("CI", "1")
    with pytest.raises(pytest.fail.Exception, match="CI must open the report"):
        _chromium()
    readme = " ".join((Path(__file__).parents[1] / "README.md").read_text().split())
    assert ("one test (`test_report_in_a_real_browser`) opens the HTML report in `chromium` "
            "and without it is skipped") in readme
    assert "unless the environment variable `CI` is set, when it fails instead" in readme


def test_report_in_a_real_browser(explained, report_file, tmp_path):
    chromium = _chromium()
    _, store, sid = explained
    url = report_file.resolve().as_uri()
    common = [chromium, *CHROMIUM_FLAGS, f"--user-data-dir={tmp_path / 'profile'}"]
    shot = tmp_path / "shot.png"
    subprocess.run([*common, f"--screenshot={shot}", "--window-size=1280,2000", url],
                   check=True, capture_output=True, timeout=120)
    with Image.open(shot) as im:
        assert im.size == (1280, 2000)
        pixels = np.asarray(im.convert("L"), dtype=float)
    assert pixels.var() > 200  # a rendered page, not a blank one
    dom = subprocess.run([*common, "--dump-dom", url], check=True, capture_output=True,
                         text=True, timeout=120).stdout
    text = re.sub(r"<[^>]+>", " ", dom)
    chosen = picks(store, sid).table
    for model in chosen["model"].unique():
        assert re.search(rf"\b{model}\b", text), model
    for r in chosen.itertuples(index=False):
        assert mean_se(r.mean, r.se) in text, (r.model, r.rule)
    assert "Decision" in text and "Cautions" in text


def test_report_of_a_sweep_without_explain_rows(tmp_path):
    # A store written row by row, with no explain rows (as after `explain: {cells: none}`):
    # the report still builds and says why figures are missing.
    from .store_builder import write_sweep

    store = write_sweep(tmp_path / "s.duckdb", {"a": [[1.0, 1.2, 0.9, 1.1], [1.3, 1.2, 1.4, 1.1]],
                                                "b": [[2.0, 2.1, 1.9, 2.2]]}, k=2, repeats=2)
    assert store.query("select count(*) from importances").iloc[0, 0] == 0
    html = render_report(store)
    assert "Figure not available" in html and "No importances are stored" in html
    assert "a (a linear model) has the best cross-validated RMSE" in html
    out = CliRunner().invoke(main, ["plot", "importance", "--store", str(store.path),
                                    "--out-dir", str(tmp_path / "p")])
    assert out.exit_code == 2
    assert ("it ran with `explain: {cells: none}` or before foldwise stored them. Run the "
            "spec again with `explain: {cells: picked}` (the default)") in " ".join(
                out.output.split())


def test_report_out_replaces_only_an_earlier_report(explained, report_file, tmp_path):
    # The store itself, a spec or any other file named as --out is refused (exit 2, the
    # file unchanged); an earlier report is replaced whole; a folder part that is a file
    # gives a message, not a traceback.
    _, store, sid = explained
    before = store.path.read_bytes()
    out = CliRunner().invoke(main, ["report", "--store", str(store.path), "--sweep", sid,
                                    "--out", str(store.path)])
    assert out.exit_code == 2 and "is not a foldwise report" in out.output
    assert "Traceback" not in out.output and store.path.read_bytes() == before
    spec = tmp_path / "spec.yaml"
    spec.write_text("name: mine\n")
    out = CliRunner().invoke(main, ["report", "--store", str(store.path), "--sweep", sid,
                                    "--out", str(spec)])
    assert out.exit_code == 2 and spec.read_text() == "name: mine\n"
    again = tmp_path / "again.html"
    shutil.copy(report_file, again)
    old = os.umask(0o022)
    try:
        write_report(store, again, sid)
    finally:
        os.umask(old)
    assert again.read_text() == render_report(store, sid)
    assert oct(again.stat().st_mode & 0o777) == oct(0o644)
    out = CliRunner().invoke(main, ["report", "--store", str(store.path), "--sweep", sid,
                                    "--out", str(spec / "r.html")])
    assert out.exit_code == 2 and "a part of its folder is a file" in out.output
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".report-")]
