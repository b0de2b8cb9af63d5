"""The leakage checks, run by `check` and `run` on the data and the plan before anything
is fitted: each looks for one way a cross-validated score can come out better than the
model will do on new data, and reports what it finds as a `Finding` (kinds and their
severity in `findings.py`). Warnings are listed; an error - a plan whose promise is
certainly broken - stops the sweep unless the spec's `checks.allow` names it.

The checks read numbers only (numpy and pandas), on these rows:
- id_column: every row of each feature.
- unseen_levels: the first repeat's folds, and the test split, of each categorical feature.
- duplicate_rows: the test rows against the training rows (row hashes of all features).
- target_proxy: the training rows; Pearson's r and the best single split (a depth-1
  regression tree; for a category, the best two-way partition of its levels ordered by
  mean target, which is optimal for squared error: Breiman et al. 1984, §9.4).
- group_key: under a row-wise scheme, the first repeat's folds, for every column of the file.
- split_overlap: a test file or column against the training rows, under groups or time."""

from __future__ import annotations

import hashlib
import json
import re
from dataclasses import replace

import numpy as np
import pandas as pd

from ..errors import DataError
from .findings import ERROR, Finding
from .resampling import SCHEMES, Plan

__all__ = ["run_checks", "checks_key", "best_split_r2", "id_like", "findings_frame",
           "refuse", "ordered", "FINDING_COLUMNS", "CHECKS_VERSION",
           "ID_SHARE", "MOSTLY", "PROXY", "GROUP_LEVELS", "MIN_GROUPS", "DISTINCT_ROWS"]

CHECKS_VERSION = "2"
"""Bumped whenever a check changes what it finds; enters `checks_key`."""
ID_SHARE = 0.9
"""Distinct values per row at or above which a feature looks like an identifier."""
MIN_ROWS = 20
"""Fewest rows on which a column's distinctness or fit to the target is judged."""
MOSTLY = 0.5
"""Share of a fold's validation rows with unseen levels above which they are 'mostly unseen'."""
PROXY = 0.99
"""|r|, or the R² of one split, above which a feature predicts the target suspiciously well."""
GROUP_LEVELS = 100
"""Levels of a text column from which, with several rows each, it looks like a group key."""
DISTINCT_ROWS = 0.5
"""The duplicate check runs when at least this share of rows is distinct: in data of a few
discrete columns, repeated rows are expected and say nothing about leakage."""

MIN_GROUPS = 10
"""Fewest values a column needs to look like a group key (fewer are categories, such as a
code for a colour or a sex)."""

_ID_WORDS = {"id", "ids", "key", "uuid", "guid", "code", "no", "nr", "serial"}


def id_like(name: str) -> bool:
    """True if a column name reads like an identifier: a word such as id, key or code in
    it (split at non-letters and at camelCase humps: plant_id, PlantID, plantId)."""
    words = re.split(r"[^0-9A-Za-z]+|(?<=[a-z])(?=[A-Z])", str(name))
    return any(w.lower() in _ID_WORDS for w in words)


def run_checks(spec, frame, plan: Plan, *, threads: int = 1) -> list[Finding]:
    """Every finding of every check on this data and plan, marked allowed where the spec's
    `checks.allow` names its kind. `threads` columns are weighed against the target at once
    (numpy sorts without holding the GIL); the findings do not depend on it."""
    found = [*_id_columns(frame), *_unseen_levels(spec, frame, plan), *_duplicates(frame, plan),
             *_target_proxies(frame, plan, threads), *_group_keys(spec, frame, plan),
             *_split_overlap(spec, frame, plan), *_missing_words(frame)]
    allow = set(spec.checks.allow)
    return [replace(f, allowed=f.kind in allow) for f in found]


def checks_key(spec, frame, identity: dict) -> str:
    """What the findings depend on, hashed: the data, the plan, the columns' roles and the
    accepted kinds. Two sweeps with one key have the same findings, so a rerun with nothing
    to fit reuses them instead of building the plan."""
    read = {"data": frame.sha256, "plan": identity, "target": spec.data.target,
            "drop": sorted(spec.data.drop), "categorical": sorted(spec.data.categorical),
            "infinite": spec.data.infinite, "allow": sorted(spec.checks.allow),
            "version": CHECKS_VERSION}
    if spec.data.missing_words is not None:  # left out, the key of earlier sweeps stands
        read["missing_words"] = spec.data.missing_words
    payload = json.dumps(read, sort_keys=True)
    return hashlib.sha256(payload.encode()).hexdigest()


FINDING_COLUMNS = ["kind", "severity", "column_name", "value", "message", "allowed"]


def findings_frame(findings: list[Finding]) -> pd.DataFrame:
    """Findings as rows of the store's `findings` table (without the sweep id), ordered."""
    return ordered(pd.DataFrame([f.row() for f in findings], columns=FINDING_COLUMNS))


def ordered(findings: pd.DataFrame) -> pd.DataFrame:
    """Findings in one order wherever they come from (as the read side's query orders
    them): errors first, then by kind and column."""
    key = pd.DataFrame({"e": findings["severity"] != ERROR, "k": findings["kind"],
                        "c": findings["column_name"].fillna("")})
    return findings.loc[key.sort_values(["e", "k", "c"], kind="stable").index].reset_index(
        drop=True)


def refuse(findings: pd.DataFrame, where: str) -> None:
    """Raise a DataError, one paragraph, if an error finding is not allowed by the spec."""
    bad = findings[(findings["severity"] == ERROR) & ~findings["allowed"].astype(bool)]
    if len(bad):
        said = " ".join(m if m.endswith(".") else m + "." for m in bad["message"])
        raise DataError(f"the leakage checks of {where} found what the plan cannot allow: "
                        f"{said} Nothing was fitted or written.")


# -- words read as missing ---------------------------------------------------------------------
def _missing_words(frame) -> list[Finding]:
    out = []
    for col, words in frame.missing_words.items():
        if col not in frame.features:
            continue
        rows = sum(words.values())
        shown = ", ".join(f"'{w}' ({n:,} rows)" for w, n in list(words.items())[:4])
        out.append(Finding("missing_words", col, float(rows), (
            f"text feature '{col}' holds {shown} that were read as missing values, beside "
            f"its {frame.X[col].nunique():,} other words (pandas' default list). If they "
            "mean 'none' or 'not applicable' as a level, set `data.missing_words` to the "
            "words that do mean missing in this file ([] for none but empty fields), or "
            "the models never see that level; if they are missing values, list them there "
            "too, leave those fields empty, or allow the kind in checks.allow.")))
    return out


# -- identifiers -------------------------------------------------------------------------------
def _id_columns(frame) -> list[Finding]:
    out = []
    for col in frame.features:
        s = frame.X[col].dropna()
        n = len(s)
        if n < MIN_ROWS:
            continue
        v = s.to_numpy(dtype=float) if col in frame.numeric else None
        if v is not None and not np.all(v == np.round(v)):
            continue  # measurements are distinct per row too; only whole-number ids count
        distinct = s.nunique()
        if distinct / n < ID_SHARE:
            continue
        if v is not None and not (v.max() - v.min() + 1 <= 1.5 * distinct or id_like(col)):
            continue  # whole numbers, but neither a serial run nor named like an id
        out.append(Finding("id_column", col, distinct / n, (
            f"feature '{col}' has {distinct:,} distinct values in {n:,} rows "
            f"({distinct / n:.0%}): it looks like an identifier, which can only help a model "
            "memorise rows. Add it to data.drop, or, if it names groups of rows, set "
            f"folds.groups: {col}.")))
    return out


# -- levels unseen across folds ------------------------------------------------------------------
def _unseen_share(codes: np.ndarray, fit: np.ndarray, valid: np.ndarray) -> float:
    """Share of the valid rows (missing values aside) whose level no fit row has."""
    seen = np.zeros(codes.max() + 2, dtype=bool)
    seen[codes[fit]] = True
    v = codes[valid]
    v = v[v >= 0]
    return float(np.mean(~seen[v])) if len(v) else 0.0


def _plan_column_advice(spec, col: str) -> str | None:
    """Why a plan column that is also a categorical feature is never seen by its fits: the
    scheme keeps each fold's groups (or later times) out of its fitting rows by design."""
    role = next((r for r in ("groups", "order") if getattr(spec.folds, r) == col), None)
    if role is None:
        return None
    what = "groups" if role == "groups" else "times"
    return (f"it is the folds.{role} column, so every fold validates on {what} its fitting "
            "rows never saw, by design, and as a feature it adds noise, not signal. Remove "
            "it from data.categorical: it still cuts the folds.")


def _unseen_levels(spec, frame, plan: Plan) -> list[Finding]:
    out = []
    first = [f for f in plan.folds if f.repeat == 0]
    for col in frame.categorical:
        codes, levels = pd.factorize(frame.X[col])
        train = codes[plan.train_rows]
        folds = float(np.mean([_unseen_share(train, f.fit, f.valid) for f in first]))
        test = _unseen_share(codes, plan.train_rows, plan.test_rows) if plan.n_test else 0.0
        if folds > MOSTLY:
            out.append(Finding("unseen_levels", col, folds, (
                f"categorical feature '{col}': on average {folds:.0%} of a fold's validation "
                f"rows carry a level its fitting rows never saw ({test:.0%} of the test rows): "
                + (_plan_column_advice(spec, col) or
                   "dates or identifiers written as text? Models treat unseen levels as "
                   "missing, so the column adds noise, not signal. Drop it, or turn it into "
                   "numbers (a date into a day count)."))))
        elif test > 0:
            train_levels = set(train[train >= 0])
            only = sorted({str(levels[c]) for c in codes[plan.test_rows]
                           if c >= 0 and c not in train_levels})
            shown = ", ".join(repr(v) for v in only[:5]) + (", ..." if len(only) > 5 else "")
            n_rows = int(round(test * np.count_nonzero(codes[plan.test_rows] >= 0)))
            out.append(Finding("unseen_levels", col, test, (
                f"categorical feature '{col}' has levels only in the test rows ({shown}: "
                f"{n_rows:,} row(s), {test:.1%} of them); no model can learn them, so they "
                "are treated as missing. Merge rare levels, move those rows into training, or "
                "change the test split.")))
    return out


# -- duplicated rows across the test split --------------------------------------------------------
def _duplicates(frame, plan: Plan) -> list[Finding]:
    hashes = pd.util.hash_pandas_object(frame.X, index=False).to_numpy()
    # pandas' hash tables: numpy's unique and isin sort, many times slower on 10^6 rows
    if plan.n_test == 0 or pd.unique(hashes).size < DISTINCT_ROWS * len(hashes):
        return []
    repeated = int(pd.Series(hashes[plan.test_rows]).isin(hashes[plan.train_rows]).sum())
    if not repeated:
        return []
    return [Finding("duplicate_rows", None, float(repeated), (
        f"{repeated:,} of {plan.n_test:,} test rows ({repeated / plan.n_test:.1%}) repeat a "
        "training row's features exactly: a model that memorises rows scores well on them "
        "without predicting anything new. Remove the duplicates, or, if they are repeated "
        "measurements of one thing, split by a column naming it (folds.groups, test.groups).")
    )]


# -- features that give the target away ------------------------------------------------------------
def best_split_r2(x: np.ndarray, y: np.ndarray, *, categorical: bool = False) -> float:
    """R² on (x, y) of the best single split: a depth-1 regression tree on a number, or for
    a category the best two-way partition of its levels in the order of their mean y."""
    yc = y - y.mean()
    total = float(np.sum(yc * yc))
    if total == 0 or len(y) < 2:
        return 0.0
    if categorical:
        codes, _ = pd.factorize(x, sort=False)
        counts = np.bincount(codes).astype(float)
        sums = np.bincount(codes, weights=yc)
        order = np.argsort(sums / counts, kind="stable")
        left_sum, left_n = np.cumsum(sums[order])[:-1], np.cumsum(counts[order])[:-1]
    else:
        order = np.argsort(x)  # the stable sort's order when no value repeats, twice as fast
        xs = x[order]
        distinct = xs[1:] > xs[:-1]  # a split can only fall between different values
        if not distinct.all():  # repeats: their rows in file order, so the sums are the same
            order = np.argsort(x, kind="stable")
            xs = x[order]
            distinct = xs[1:] > xs[:-1]
        left_sum = np.cumsum(yc[order])[:-1]
        left_n = np.arange(1, len(y), dtype=float)
        left_sum, left_n = left_sum[distinct], left_n[distinct]
    if len(left_sum) == 0:
        return 0.0
    between = left_sum ** 2 * (1.0 / left_n + 1.0 / (len(y) - left_n))
    return float(between.max() / total)


def _numeric_targets(frame, rows) -> list[np.ndarray]:
    """The target as numbers: itself, or for classes each class's 0/1 indicator (one for
    two classes), so that a feature that separates one class is caught."""
    y = frame.y[rows]
    if frame.task != "classification":
        return [y]
    classes = frame.classes[1:] if len(frame.classes) == 2 else frame.classes
    return [(y == c).astype(float) for c in classes]


def _proxy_strength(x: np.ndarray, numeric: bool, yy: np.ndarray) -> tuple[float, float]:
    """(|Pearson r|, best single split R²) of one feature's present values against yy."""
    if numeric:
        with np.errstate(all="ignore"):
            r = float(np.corrcoef(x, yy)[0, 1]) if np.ptp(x) > 0 and np.ptp(yy) > 0 else 0.0
        return abs(r), best_split_r2(x, yy)
    return 0.0, best_split_r2(x, yy, categorical=True)


def _column_strength(frame, plan: Plan, targets: list[np.ndarray], col
                     ) -> tuple[float, float] | None:
    """(|r|, one split R²) of one feature against the strongest of `targets` on the
    training rows, or None when it has too few values to judge."""
    numeric = col in frame.numeric
    if numeric:  # a float column's values as they are, then the training rows
        x = frame.X[col].to_numpy(dtype=float, na_value=np.nan)[plan.train_rows]
        present = ~np.isnan(x)
    else:
        s = frame.X[col].iloc[plan.train_rows]
        x, present = s.to_numpy(), s.notna().to_numpy()
    if present.sum() < MIN_ROWS:
        return None
    x = x if present.all() else x[present]
    return max((_proxy_strength(x, numeric, y if present.all() else y[present])
                for y in targets), key=lambda rs: max(rs))


def _target_proxies(frame, plan: Plan, threads: int = 1) -> list[Finding]:
    out = []
    targets = _numeric_targets(frame, plan.train_rows)
    features = list(frame.features)

    def strength(col):
        return _column_strength(frame, plan, targets, col)

    if threads > 1 and len(features) > 1:
        from concurrent.futures import ThreadPoolExecutor

        with ThreadPoolExecutor(min(threads, len(features))) as pool:
            strengths = list(pool.map(strength, features))
    else:
        strengths = [strength(col) for col in features]
    for col, got in zip(features, strengths):
        if got is None:
            continue
        r, split = got
        if abs(r) > PROXY or split > PROXY:
            how = (f"|r| = {abs(r):.4f}; " if col in frame.numeric else "") + \
                  f"one split R² = {split:.4f}"
            out.append(Finding("target_proxy", col, max(abs(r), split), (
                f"feature '{col}' predicts the target almost perfectly on the training rows "
                f"({how}): likely a copy of the target, or something known only after it. "
                "Check how it is measured, and drop it (data.drop) unless it is truly known "
                "when the model will be used.")))
    return out


# -- group keys under row-wise folds -------------------------------------------------------------
def _column(frame, name: str) -> pd.Series:
    return frame.X[name] if name in frame.X.columns else frame.others[name]


def _group_keys(spec, frame, plan: Plan) -> list[Finding]:
    if not SCHEMES[plan.scheme].row_wise:
        return []
    others = list(frame.others.columns) if frame.others is not None else []
    first = [f for f in plan.folds if f.repeat == 0]
    out = []
    for col in [*frame.features, *others]:
        if col == spec.test.column:
            continue
        s = _column(frame, col)
        text = col in frame.categorical or not pd.api.types.is_numeric_dtype(s)
        if not (id_like(col) or text):
            continue  # a measurement: counting its values would decide nothing
        n, n_values = int(s.notna().sum()), s.nunique()
        if n_values < max(MIN_GROUPS, spec.folds.k) or n < 2 * n_values:
            continue
        if not (id_like(col) or n_values >= GROUP_LEVELS):
            continue
        codes = pd.factorize(s)[0][plan.train_rows]
        split: set = set()
        for f in first:
            fit, valid = codes[f.fit], codes[f.valid]
            split |= set(np.intersect1d(fit[fit >= 0], valid[valid >= 0]).tolist())
        if not split:
            continue
        share = len(split) / max(1, len(np.unique(codes[codes >= 0])))
        follows = " (the test split then holds out whole groups too)" \
            if spec.test.fraction is not None and spec.test.groups is None else ""
        out.append(Finding("group_key", col, share, (
            f"column '{col}' looks like a group key ({n_values:,} values, {n / n_values:.1f} "
            f"rows each on average), and the row-wise folds put rows of {len(split):,} of its "
            f"values ({share:.0%}) on both sides of a fold: the scores then reward "
            f"recognising a {col} rather than predicting for a new one. If new values of "
            f"'{col}' are what the model will meet, set folds.groups: {col}{follows}; if its "
            "rows are truly independent, add group_key to checks.allow.")))
    return out


# -- a given test split against the plan's promise ---------------------------------------------------
def _split_overlap(spec, frame, plan: Plan) -> list[Finding]:
    other_groups = (spec.test.fraction is not None and spec.test.groups is not None
                    and spec.test.groups != spec.folds.groups)
    if plan.scheme not in ("groups", "time") or (
            spec.test.fraction is not None and not (plan.scheme == "groups" and other_groups)):
        return []
    form = (f"test.groups {spec.test.groups}" if other_groups else
            f"test.file {spec.test.file}" if spec.test.file else
            f"test.column {spec.test.column}")
    if plan.scheme == "groups":
        col = spec.folds.groups
        values = frame.plan_values[col]
        tested = np.unique(values[plan.test_rows])
        shared = np.intersect1d(tested, values[plan.train_rows])
        if not len(shared):
            return []
        fix = ("Leave test.groups unset (the test split then holds out whole groups of "
               "folds.groups)" if other_groups else
               "Use test.fraction (it holds out whole groups), move those rows to one side")
        return [Finding("split_overlap", col, float(len(shared)), (
            f"the test rows ({form}) share {len(shared):,} of their {len(tested):,} groups of "
            f"'{col}' with the training rows, so the test split does not score new groups as "
            f"the grouped folds do. {fix}, or add split_overlap to checks.allow to run "
            "anyway."))]
    col = spec.folds.order
    values = frame.plan_values[col]
    last = values[plan.train_rows].max()
    early = int(np.sum(values[plan.test_rows] <= last))
    if not early:
        return []
    return [Finding("split_overlap", col, float(early), (
        f"{early:,} of {plan.n_test:,} test rows ({form}) do not come after every training "
        f"row in '{col}' (the last training value is {_when(last)}), while time-ordered folds "
        "score only later rows. Use test.fraction (the last share in that order), or add "
        "split_overlap to checks.allow to run anyway."))]


def _when(value) -> str:
    if isinstance(value, np.datetime64):
        return str(pd.Timestamp(value))
    return f"{float(value):g}"
