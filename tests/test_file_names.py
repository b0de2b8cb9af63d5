"""File names built from stored text stay inside the chosen folder: model labels and sweep
ids planted in a store (as a merged or team store could hold them) never become paths
outside it, never a reserved or hidden name, and two labels never share a file."""

from __future__ import annotations

import hashlib
import os
import re
import unicodedata
from pathlib import Path

import pytest
from click.testing import CliRunner
from hypothesis import given, settings
from hypothesis import strategies as st

from runner.cli import main
from runner.errors import OutputError, QueryError
from runner.read.filenames import (MAX_BYTES, WINDOWS_RESERVED, check_replaceable, inside,
                                   make_folder, safe_component, safe_names, write_whole)
from runner.read.report import report_path

from .store_builder import write_sweep

SAFE = re.compile(r"^[^\W][\w.-]*$")  # starts with a letter, digit or '_'; word chars, '-', '.'


def _digest(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8", "surrogatepass")).hexdigest()[:12]


def _check_safe(name: str) -> None:
    """What every component must be, whatever the text it came from."""
    assert SAFE.match(name), name
    assert name not in (".", "..") and ".." not in name and not name.endswith(".")
    assert "/" not in name and "\\" not in name and "\0" not in name
    assert not any(unicodedata.category(ch).startswith(("C", "Z")) for ch in name), name
    assert name.split(".", 1)[0].casefold() not in WINDOWS_RESERVED
    assert 0 < len(name.encode("utf-8")) <= MAX_BYTES
    assert Path(name).name == name and len(Path(name).parts) == 1


# (text, expected component); None: changed, so cleaned text + '-' + 12 hex digits of SHA-256
UNCHANGED = ["ridge", "forest-0.5", "tree_min_leaf", "20260101-000000-aaaa", "Árbol",
             "森林", "model2", "a.b"]
CHANGED = [
    ("../../escaped", "_.__._escaped"),
    ("../../../../tmp/x", "_.__.__.__._tmp_x"),
    ("/etc/passwd", "_etc_passwd"),
    ("C:\\Windows\\win.ini", "C__Windows_win.ini"),
    ("a\0b", "a_b"),
    ("\x1b[31mred\x1b[0m", "__31mred__0m"),
    ("line\nbreak\ttab", "line_break_tab"),
    ("right\u202eleft", "right_left"),  # a bidi override would reverse the shown name
    ("with space", "with_space"),
    ("..", "__"),
    (".", "_"),
    (".hidden", "_hidden"),
    ("-rf", "_rf"),
    ("trail.", "trail_"),
    ("", "_"),
    ("CON", "_CON"),
    ("nul", "_nul"),
    ("aux.png", "_aux.png"),
    ("com1", "_com1"),
    ("LPT9.tar.gz", "_LPT9.tar.gz"),
    ("Arbo\u0301l", "Arból"),  # decomposed accent: composed (NFC) first, so it changed
    ("tree🌲", "tree_"),
    ("a:b*c?d|e<f>g\"h", "a_b_c_d_e_f_g_h"),
]


@pytest.mark.parametrize("text", UNCHANGED)
def test_safe_text_is_kept_as_is(text):
    assert safe_component(text) == text
    _check_safe(text)


@pytest.mark.parametrize("text, cleaned", CHANGED)
def test_unsafe_text_is_cleaned_and_marked_by_its_hash(text, cleaned):
    name = safe_component(text)
    assert name == f"{cleaned}-{_digest(text)}"
    _check_safe(name)


def test_long_text_is_cut_to_the_byte_bound_with_its_hash():
    for text in ("x" * 300, "ü" * 300, "森" * 300, "a/" * 400):
        name = safe_component(text)
        _check_safe(name)
        assert name.endswith(f"-{_digest(text)}") and len(name.encode()) <= MAX_BYTES
    # the bound counts bytes, and a character is never cut in half
    assert safe_component("森" * 300).encode().decode() == safe_component("森" * 300)
    # two long texts that agree on their first 300 characters still differ
    assert safe_component("x" * 300 + "a") != safe_component("x" * 300 + "b")


def test_texts_that_clean_alike_get_different_names():
    texts = ["a/b", "a\\b", "a b", "a\0b", "a:b", "a_b"]
    names = safe_names(texts)
    assert len({n.casefold() for n in names.values()}) == len(texts)
    assert names["a_b"] == "a_b"  # the safe one keeps its name


def test_names_differ_ignoring_case_and_crafted_look_alikes():
    crafted = safe_component("a b")  # a label made to equal another label's cleaned name
    names = safe_names(["Tree", "tree", "TREE", "a b", crafted, f"{crafted}-2"])
    assert names["Tree"] == "Tree"
    assert names["tree"] == f"tree-{_digest('tree')}"
    assert len({n.casefold() for n in names.values()}) == 6
    for name in names.values():
        _check_safe(name)


@settings(max_examples=300, deadline=None)
@given(st.text(max_size=400))
def test_any_text_gives_a_safe_component(text):
    _check_safe(safe_component(text))


@settings(max_examples=200, deadline=None)
@given(st.lists(st.text(max_size=120), min_size=2, max_size=8, unique=True))
def test_distinct_texts_never_share_a_name(texts):
    names = safe_names(texts)
    assert len({n.casefold() for n in names.values()}) == len(texts)
    for name in names.values():
        _check_safe(name)


def test_inside_refuses_paths_and_links_that_leave_the_folder(tmp_path):
    folder = tmp_path / "plots"
    folder.mkdir()
    assert inside(folder, "ok.png") == folder / "ok.png"
    for bad in ("../x.png", "/etc/x", "a/b.png", "..", "", "a\0b"):
        with pytest.raises(QueryError, match="one plain name"):
            inside(folder, bad)
    (folder / "planted.png").symlink_to(tmp_path / "outside.png")
    with pytest.raises(QueryError, match="outside"):
        inside(folder, "planted.png")
    assert not (tmp_path / "outside.png").exists()


# -- end to end: labels and sweep ids planted in a store -----------------------------------
HOSTILE = ["../../escaped", "../../../../../../../../tmp/foldwise-escaped", "/tmp/absolute",
           "a\0b", "x" * 300, "CON", "nul.png", "Árbol", "a/b", "a\\b", "a b", ".hidden",
           "-rf", "Tree", "tree"]


def _files(root: Path) -> set[Path]:
    return {p for p in root.rglob("*") if p.is_file() or p.is_symlink()}


def _planted(path: Path, sweep_id: str = "20260101-000000-aaaa", labels=tuple(HOSTILE)):
    cells = [[1.0, 2.0, 3.0, 4.0], [2.0, 3.0, 4.0, 5.0]]
    return write_sweep(path, {label: cells for label in labels}, k=2, repeats=2,
                       sweep_id=sweep_id)


def test_plot_writes_every_hostile_label_inside_the_folder(tmp_path, monkeypatch):
    work = tmp_path / "a" / "b" / "c"
    work.mkdir(parents=True)
    store = _planted(tmp_path / "store.duckdb")
    before = _files(tmp_path)
    monkeypatch.chdir(work)
    out = CliRunner().invoke(main, ["plot", "complexity", "--store", str(store.path),
                                    "--out-dir", "plots", "--image", "png"])
    assert out.exit_code == 0, out.output
    written = _files(tmp_path) - before
    folder = (work / "plots").resolve()
    assert len(written) == len(HOSTILE)  # one file per label: none overwrote another
    assert all(p.resolve().parent == folder for p in written), sorted(written)
    assert not Path("/tmp/foldwise-escaped.png").exists() and not Path("/tmp/absolute.png").exists()
    printed = out.stdout.split()
    assert sorted(Path(p).name for p in printed) == sorted(p.name for p in written)
    for p in written:
        _check_safe(p.name.removeprefix("20260101-000000-aaaa-complexity-").removesuffix(".png"))
    assert "20260101-000000-aaaa-complexity-Tree.png" in {p.name for p in written}


def test_one_model_gets_the_same_file_name_alone_or_with_all(tmp_path):
    store = _planted(tmp_path / "store.duckdb", labels=("Tree", "tree", "a b", "../tree"))
    every = CliRunner().invoke(main, ["plot", "complexity", "--store", str(store.path),
                                      "--out-dir", str(tmp_path / "all"), "--image", "svg"])
    alone = CliRunner().invoke(main, ["plot", "complexity", "--store", str(store.path),
                                      "--model", "tree", "--out-dir", str(tmp_path / "one"),
                                      "--image", "svg"])
    assert every.exit_code == 0 and alone.exit_code == 0, (every.output, alone.output)
    (one,) = alone.stdout.split()
    assert Path(one).name in {Path(p).name for p in every.stdout.split()}
    assert Path(one).name == f"20260101-000000-aaaa-complexity-tree-{_digest('tree')}.svg"


def test_hostile_sweep_id_stays_inside_plot_and_report_folders(tmp_path, monkeypatch):
    sweep_id = "../../../evil-sweep"
    store = _planted(tmp_path / "store.duckdb", sweep_id=sweep_id, labels=("../a", "b"))
    work = tmp_path / "w" / "x" / "y"
    work.mkdir(parents=True)
    monkeypatch.chdir(work)
    before = _files(tmp_path)
    plotted = CliRunner().invoke(main, ["plot", "models", "--store", str(store.path),
                                        "--out-dir", "plots", "--image", "png"])
    assert plotted.exit_code == 0, plotted.output
    reported = CliRunner().invoke(main, ["report", "--store", str(store.path)])
    assert reported.exit_code == 0, reported.output
    written = _files(tmp_path) - before
    stem = safe_component(sweep_id)
    assert stem == f"_.__.__._evil-sweep-{_digest(sweep_id)}"
    assert {p.relative_to(work).as_posix() for p in written} == {
        f"plots/{stem}-models.png", f"results/report-{stem}.html"}


def test_plot_refuses_a_link_planted_where_its_file_goes(tmp_path):
    store = _planted(tmp_path / "store.duckdb")
    folder = tmp_path / "plots"
    folder.mkdir()
    target = tmp_path / "precious.txt"
    target.write_text("keep me")
    (folder / "20260101-000000-aaaa-models.png").symlink_to(target)
    out = CliRunner().invoke(main, ["plot", "models", "--store", str(store.path),
                                    "--out-dir", str(folder), "--image", "png"])
    assert out.exit_code == 2 and "outside" in out.output and "Traceback" not in out.output
    assert target.read_text() == "keep me"


def test_report_path_is_inside_its_folder(tmp_path):
    assert report_path("20260101-000000-aaaa", tmp_path) == (
        tmp_path / "report-20260101-000000-aaaa.html")
    hostile = report_path("/etc/cron.d/x", tmp_path)
    assert hostile.parent == tmp_path and hostile.name.startswith("report-_etc_cron.d_x-")
    assert os.sep not in hostile.name


def test_written_files_are_all_new_or_all_as_they_were(tmp_path):
    # A set of files is staged whole before any is moved into place: one that cannot be
    # staged leaves the others as they were and no temporary file; a folder part that is a
    # file and a file without the writer's mark are refused in words.
    (tmp_path / "a.png").write_bytes(b"old a")
    with pytest.raises(FileNotFoundError):
        write_whole([(tmp_path / "a.png", b"new a"), (tmp_path / "gone" / "b.png", b"b")],
                    ".figure-")
    assert (tmp_path / "a.png").read_bytes() == b"old a"
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.png"]
    assert write_whole([(tmp_path / "a.png", b"new a")], ".figure-") == [tmp_path / "a.png"]
    assert (tmp_path / "a.png").read_bytes() == b"new a"
    with pytest.raises(OutputError, match=r"a part of its folder is a file \(.*a\.png\)"):
        make_folder(tmp_path / "a.png" / "sub", "image x", "Name another folder.")
    with pytest.raises(OutputError, match="is not a foldwise image, so it is not replaced"):
        check_replaceable(tmp_path / "a.png", b"foldwise figure", "image", "Remove it.")
    assert sorted(p.name for p in tmp_path.iterdir()) == ["a.png"]


def test_an_svg_drawn_from_hostile_labels_is_well_formed_and_free_of_control_characters(tmp_path):
    import xml.etree.ElementTree as ET

    labels = ("a\0b", "bell\x07", "esc\x1b[2Jcleared", "Tree")
    store = _planted(tmp_path / "store.duckdb", labels=labels)
    out = CliRunner().invoke(main, ["plot", "complexity", "--store", str(store.path),
                                    "--out-dir", str(tmp_path / "svg"), "--image", "svg"])
    assert out.exit_code == 0, out.output
    written = sorted((tmp_path / "svg").glob("*.svg"))
    assert len(written) == len(labels)
    for path in written:
        text = path.read_text(encoding="utf-8")
        ET.fromstring(text)  # XML 1.0 allows no control character but tab and line breaks
        assert not any(ord(c) < 32 and c not in "\t\n\r" for c in text), path.name
