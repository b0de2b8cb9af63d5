"""Declared dependency floors against what the code uses: every package the code or the
tests import is declared, and each floor is at least the version that brought a feature
the code relies on. The lowest declared versions are also installed and tested for real by
`.ci/lowest` (a CI step); this test is the cheap guard that runs with every suite."""

from __future__ import annotations

import ast
import sys
from pathlib import Path

import pytest
from packaging.requirements import Requirement
from packaging.version import Version

tomllib = pytest.importorskip("tomllib")  # Python 3.11+

ROOT = Path(__file__).resolve().parents[1]

FEATURES = [  # (distribution, the version that brought it, file, text that uses it)
    # check_array(ensure_all_finite=...): renamed from force_all_finite in scikit-learn 1.6
    ("scikit-learn", "1.6", "runner/families/paths.py", "ensure_all_finite="),
    # sklearn.metrics.root_mean_squared_error: new in scikit-learn 1.4
    ("scikit-learn", "1.4", "runner/metrics.py", '"root_mean_squared_error"'),
    # LogisticRegression's l1_ratio alone sets the penalty ('penalty' deprecated): 1.8; on
    # 1.7 l1_ratio=1 beside the default penalty='l2' is ignored with a warning and an l2
    # model is fitted (measured on 1.7.2: no zero coefficient where 1.9 gives 25 of 30)
    ("scikit-learn", "1.8", "runner/families/linear.py",
     "LogisticRegression(C=C, l1_ratio=l1_ratio"),
    # brier_score_loss(labels=..., scale_by_half=...) for a matrix of class probabilities: 1.7
    ("scikit-learn", "1.7", "runner/metrics.py", 'labels=list(classes), scale_by_half="auto"'),
    # Parallel(return_as="generator_unordered"): new in joblib 1.4
    ("joblib", "1.4", "runner/write/executors.py", 'return_as="generator_unordered"'),
    # CliRunner results with .stderr apart from .stdout by default: click 8.2
    ("click", "8.2", "tests/test_picks.py", "run.stderr"),
    # DecisionTreeRegressor's missing-value routing (tree_.missing_go_to_left): 1.3
    ("scikit-learn", "1.3", "runner/families/_readers.py", "missing_go_to_left"),
    # the PostgreSQL extension package is built for exactly DuckDB 1.5.5
    ("duckdb", "1.5.5", "runner/store/locations.py", "duckdb_extension_postgres"),
]
"""Sources: each library's release notes (changelogs) for the version named."""

IMPORT_NAMES = {"sklearn": "scikit-learn", "yaml": "pyyaml", "PIL": "pillow",
                "duckdb_extension_postgres": "duckdb-extension-postgres"}
"""Import names that differ from their distribution's name."""


def _declared() -> dict[str, Requirement]:
    project = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]
    reqs = list(project["dependencies"])
    for name, extra in project["optional-dependencies"].items():
        if name != "bench":
            reqs += [r for r in extra if not r.startswith("foldwise")]
    return {Requirement(r).name.lower(): Requirement(r) for r in reqs}


def _floor(req: Requirement) -> Version:
    floors = [Version(s.version) for s in req.specifier if s.operator in (">=", "==")]
    assert floors, f"{req} declares no floor"
    return max(floors)


def _imports(folder: Path) -> set[str]:
    found = set()
    for path in folder.rglob("*.py"):
        for node in ast.walk(ast.parse(path.read_text(encoding="utf-8"))):
            if isinstance(node, ast.Import):
                found |= {a.name.split(".")[0] for a in node.names}
            elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
                found.add(node.module.split(".")[0])
    return found - set(sys.stdlib_module_names) - {"runner", "tests", "__future__"}


@pytest.mark.parametrize("folder", ["runner", "tests"])
def test_every_imported_package_is_declared(folder):
    declared = _declared()
    missing = sorted(IMPORT_NAMES.get(n, n) for n in _imports(ROOT / folder)
                     if IMPORT_NAMES.get(n, n).lower() not in declared
                     and n != "packaging")  # pytest needs it, so the tests always have it
    assert not missing, f"imported in {folder}/ but not declared in pyproject.toml: {missing}"


@pytest.mark.parametrize("package,version,path,text", FEATURES)
def test_floor_covers_what_the_code_uses(package, version, path, text):
    assert text in (ROOT / path).read_text(), f"{path} no longer uses {text}: update FEATURES"
    floor = _floor(_declared()[package])
    assert floor >= Version(version), (f"{path} uses {text} (new in {package} {version}) but "
                                       f"pyproject.toml allows {package} {floor}")


def test_the_python_floor_is_one_the_scikit_learn_floor_is_built_for():
    # scikit-learn 1.8 publishes no wheel for Python 3.10 (pip lists 1.7.2 as the newest
    # there), so a 3.10 install would get a scikit-learn below the floor
    project = tomllib.loads((ROOT / "pyproject.toml").read_text())["project"]
    python = Requirement(f"python{project['requires-python']}")
    assert _floor(python) >= Version("3.11") or _floor(_declared()["scikit-learn"]) < Version("1.8")


def test_the_extension_pin_and_the_duckdb_floor_agree():
    declared = _declared()
    assert _floor(declared["duckdb-extension-postgres"]) == _floor(declared["duckdb"])
