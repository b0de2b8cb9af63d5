"""The data: read the CSV or Parquet file a spec names, type its columns and fingerprint it.

Everything a fit needs is checked here, before any store is touched: the target is present,
numeric, finite and not constant; listed columns exist; no feature is empty."""

from __future__ import annotations

import csv
import hashlib
import io
import os
import re
import stat
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from ..errors import DataError
from ..names import nearest

__all__ = ["Frame", "read_table", "load_frame", "file_sha256", "infer_task", "MAX_MAGNITUDE",
           "MAX_CLASSES", "missing_value_options"]

_READERS = {".csv": "csv", ".parquet": "parquet", ".pq": "parquet"}


MAX_MAGNITUDE = 1e100
"""Largest |value| a target or numeric feature may hold: squares of larger values, summed
over rows (variances, squared errors, the store's standard deviations), overflow float64."""
MAX_CLASSES = 100
"""Most classes a class target may hold (more looks like a number or an identifier)."""

_SEPARATORS = {";": "semicolons", "\t": "tabs", "|": "vertical bars"}
_GROUPED = re.compile(r"\s*[+-]?\d{1,3}(,\d{3})+(\.\d*)?\s*")
_PLAIN = re.compile(r"\s*[+-]?(\d+(\.\d*)?|\.\d+)\s*")
_DECIMAL_COMMA = re.compile(r"\s*[+-]?\d+,\d+\s*")


def _open_regular(path: Path, role: str, max_bytes: int | None):
    """Open a file for reading only if it is a regular file within the size limit.

    Opened without blocking and checked on the open descriptor, so a FIFO, a device such as
    /dev/zero, or a file swapped after a check is refused before a byte is read."""
    if not path.exists():
        raise DataError(f"{role} {path} does not exist. Check `data.path` in the spec; it is "
                        "resolved relative to the spec file's folder.")
    if path.is_dir():
        raise DataError(f"{role} {path} is a folder; give a CSV or Parquet file.")
    try:
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
    except OSError as exc:
        raise DataError(f"{role} {path} cannot be opened: {exc.strerror}.") from None
    info = os.fstat(fd)
    if not stat.S_ISREG(info.st_mode):
        os.close(fd)
        raise DataError(f"{role} {path} is not a regular file (it is a device, pipe or "
                        "socket); foldwise reads CSV or Parquet files only. Save the data to a "
                        "file and name that.")
    if max_bytes is not None and info.st_size > max_bytes:
        os.close(fd)
        raise DataError(f"{role} {path} has {info.st_size:,} bytes, more than the limit of "
                        f"{max_bytes:,} bytes (limits.data_mb = {max_bytes / 2**20:g} MiB). Raise "
                        "`limits.data_mb` in the spec, or run with --lift-limits, if the machine "
                        "has the memory.")
    if hasattr(os, "O_NONBLOCK"):
        os.set_blocking(fd, True)
    return os.fdopen(fd, "rb")


def file_sha256(path: Path, *, max_bytes: int | None = None) -> str:
    """SHA-256 of a file's bytes: the data fingerprint stored with every sweep."""
    with _open_regular(Path(path), "data file", max_bytes) as fh:
        return _sha256(fh)


def _sha256(fh) -> str:
    digest = hashlib.sha256()
    fh.seek(0)
    for chunk in iter(lambda: fh.read(1 << 20), b""):
        digest.update(chunk)
    fh.seek(0)
    return digest.hexdigest()


def _sha256_at(fd: int) -> str:
    """SHA-256 of an open file's bytes, read by offset: the file's position stays where
    another reader of the same open file has it, so a parser can read it meanwhile."""
    digest = hashlib.sha256()
    offset = 0
    while chunk := os.pread(fd, 1 << 20, offset):
        digest.update(chunk)
        offset += len(chunk)
    return digest.hexdigest()


def _csv_header(fh) -> list[str]:
    """The header's names as pandas reads them: a UTF-8 byte-order mark is not part of the
    first name."""
    text = io.TextIOWrapper(fh, encoding="utf-8-sig", newline="")
    try:
        return next(csv.reader(text), [])
    finally:
        text.detach()
        fh.seek(0)


def _check_header(header: list[str], role: str, path: Path) -> None:
    dupes = sorted({c for c in header if header.count(c) > 1})
    if dupes:
        raise DataError(f"{role} {path} has duplicate column names: {', '.join(dupes)}. "
                        "Give every column a unique name.")
    if len(header) == 1:
        found = [name for sep, name in _SEPARATORS.items() if sep in header[0]]
        if found:
            raise DataError(f"{role} {path} reads as one column named {header[0][:60]!r}: its "
                            f"fields look separated by {found[0]}, and foldwise reads "
                            "comma-separated files. Save it as CSV with commas between fields "
                            "(and '.' as the decimal mark).")


def data_kind(path: Path, role: str = "data file", hint: str = "Convert it or rename it if "
              "it is one of those.") -> str:
    """'csv' or 'parquet' by the file's extension, or a DataError: nothing else is read."""
    kind = _READERS.get(Path(path).suffix.lower())
    if kind is None:
        raise DataError(f"{role} {path} has extension '{Path(path).suffix}'; foldwise reads "
                        f".csv and .parquet files. {hint}")
    return kind


def missing_value_options(words: list[str] | None) -> dict:
    """pandas.read_csv's options for the words read as missing values: its default list
    (`words` None, as `data.missing_words` left out), else exactly `words` and the empty
    field."""
    if words is None:
        return {}
    return {"keep_default_na": False, "na_values": sorted({"", *words})}


def read_table(path: Path, *, role: str = "data file", max_bytes: int | None = None,
               words: list[str] | None = None) -> pd.DataFrame:
    """Read a CSV or Parquet file into a DataFrame, or raise a DataError saying what is wrong.
    `words`: the words a CSV file's fields read as missing (None: pandas' default list)."""
    return _read(Path(path), role, max_bytes, words)[0]


def _read(path: Path, role: str, max_bytes: int | None, words: list[str] | None = None
          ) -> tuple[pd.DataFrame, str]:
    """The table and the SHA-256 of the bytes it was read from (one open file for both)."""
    with _open_regular(path, role, max_bytes) as fh:
        kind = data_kind(path, role)
        if kind == "parquet" and words is not None:
            raise DataError(f"`data.missing_words` lists the words read as missing values in "
                            f"CSV files, but {role} {path} is Parquet, which stores missing "
                            "values as nulls and has no such words to read. Remove "
                            "`data.missing_words` from the spec, or give the data as CSV.")
        # hashed on a second core while the table is parsed, where reads by offset exist
        hashing = ThreadPoolExecutor(1, thread_name_prefix="foldwise-sha256") \
            if hasattr(os, "pread") else None
        hashed = hashing.submit(_sha256_at, fh.fileno()) if hashing is not None else None
        try:
            if kind == "csv":
                _check_header(_csv_header(fh), role, path)
                df = pd.read_csv(fh, encoding="utf-8", **missing_value_options(words))
            else:
                df = pd.read_parquet(fh)
        except DataError:
            raise
        except UnicodeDecodeError as exc:
            raise DataError(f"{role} {path} is not UTF-8 text ({exc.reason} at byte "
                            f"{exc.start}). Re-save it as UTF-8 CSV.") from None
        except pd.errors.EmptyDataError:
            raise DataError(f"{role} {path} is empty; it needs a header row and data "
                            "rows.") from None
        except Exception as exc:  # parser errors differ by engine; all mean "unreadable"
            first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
            raise DataError(f"{role} {path} cannot be read as {kind.upper()}: {first}. Check "
                            "that the file is complete and of the type its extension "
                            "says.") from None
        finally:
            if hashing is not None:  # done with the file before it is closed
                hashing.shutdown()
        sha = hashed.result() if hashed is not None else _sha256(fh)
    if df.columns.duplicated().any():
        dupes = sorted(set(df.columns[df.columns.duplicated()]))
        raise DataError(f"{role} {path} has duplicate column names: {', '.join(map(str, dupes))}. "
                        "Give every column a unique name.")
    if len(df) == 0:
        raise DataError(f"{role} {path} has a header but no rows.")
    df.columns = [str(c) for c in df.columns]
    return df, sha


@dataclass
class Frame:
    """A typed table: features, target, column roles and the file fingerprint."""

    X: pd.DataFrame
    y: np.ndarray
    numeric: list[str]
    categorical: list[str]
    target: str
    sha256: str
    source: Path
    test_mask: np.ndarray | None = None  # from a boolean test column, if any
    task: str = "regression"  # or "classification"
    classes: list = field(default_factory=list)  # the class labels, sorted (classification)
    plan_values: dict = field(default_factory=dict)  # plan column -> its values, every row
    others: pd.DataFrame | None = None  # the file's other columns (drop, plan, test), as read
    missing_words: dict = field(default_factory=dict)  # text feature -> {word read as missing: rows}

    @property
    def features(self) -> list[str]:
        return list(self.X.columns)


def problem_identity(frame: Frame, infinite: str, words: list[str] | None = None) -> dict:
    """What the models learn from the file: the target, the task, the feature columns in
    order with their roles, and how infinite values and missing words were read. Part of
    every cell id, so that another target or other features on the same file are other
    cells. The words only when the spec lists them: pandas' default keeps the ids of
    sweeps from before `data.missing_words`."""
    problem = {"target": frame.target, "task": frame.task, "numeric": list(frame.numeric),
               "categorical": list(frame.categorical), "features": frame.features,
               "infinite": infinite}
    if words is not None:
        problem["missing_words"] = list(words)
    return problem


def _need_columns(df: pd.DataFrame, names, what: str, path: Path) -> None:
    for name in names:
        if name not in df.columns:
            raise DataError(f"{what} '{name}' is not a column of {path}. Columns are: "
                            f"{', '.join(df.columns)}.{nearest(name, df.columns)}")


class _Rows:
    """Names a row of the loaded table as the file and line (CSV) or row (Parquet) it came
    from; rows past `n_main` come from the test file."""

    def __init__(self, path: Path, n_main: int, test_path: Path | None = None):
        self.path, self.n_main, self.test_path = path, n_main, test_path

    def __call__(self, i: int) -> str:
        path = self.path if i < self.n_main else self.test_path
        kind = "line" if path.suffix.lower() == ".csv" else "row"
        return f"{kind} {self.number(i)} of {path}"

    def number(self, i: int) -> str:
        """The line (CSV: after the header) or row number within its own file."""
        path, i = (self.path, i) if i < self.n_main else (self.test_path, i - self.n_main)
        return str(i + 2 if path.suffix.lower() == ".csv" else i + 1)


def _is_categorical(s: pd.Series) -> bool:
    return not pd.api.types.is_numeric_dtype(s) or pd.api.types.is_bool_dtype(s)


def _comma_numbers(s: pd.Series) -> tuple[str, str] | None:
    """('thousands' or 'decimal', an example) if a text column holds only numbers, some
    written with commas: as thousands separators ('1,234') or as the decimal mark ('0,94',
    '1234,5'); None otherwise."""
    values = s.dropna()
    head = values.iloc[:1000]
    if head.empty or not all(isinstance(v, str) for v in head):
        return None
    if not (head.str.fullmatch(_PLAIN) | head.str.fullmatch(_GROUPED)
            | head.str.fullmatch(_DECIMAL_COMMA)).all():
        return None  # words among the first values: not worth reading whole
    if not all(isinstance(v, str) for v in values):
        return None
    grouped = values.str.fullmatch(_GROUPED)
    decimal = values.str.fullmatch(_DECIMAL_COMMA) & ~grouped
    if not (values.str.fullmatch(_PLAIN) | grouped | decimal).all():
        return None
    if decimal.any():
        return "decimal", values[decimal].iloc[0].strip()
    return ("thousands", values[grouped].iloc[0].strip()) if grouped.any() else None


def _stray_text(s: pd.Series) -> tuple[list[str], int, int] | None:
    """(up to 3 of the values, how many rows, the first row's position) if a text column
    holds measured numbers (20 or more distinct) in at least 90 % of its filled rows and
    something else in the rest, such as a placeholder '?' for missing; None otherwise."""
    texts = s.dropna()
    head = texts.iloc[:1000]
    if head.empty or pd.to_numeric(head, errors="coerce").isna().mean() > 0.5:
        return None  # a column of words: not worth reading whole as numbers
    if not all(isinstance(v, str) for v in texts):
        return None
    numbers = pd.to_numeric(s, errors="coerce")
    other = s.notna() & numbers.isna()
    filled = int(s.notna().sum())
    if not other.any() or other.sum() > 0.1 * filled or numbers.nunique() < 20:
        return None
    shown = sorted({str(v) for v in s[other]})[:3]
    return shown, int(other.sum()), int(np.flatnonzero(other.to_numpy())[0])


def _as_category(what: str) -> str:
    """How to say the column is a category after all: a target by its task (it may not be
    listed in data.categorical), a feature by data.categorical."""
    if what.startswith("target"):
        return "set `task: classification` only if it really holds classes"
    return "list the column in `data.categorical` only if it really is a category"


def _separator_problem(what: str, s: pd.Series, path: Path, rows: _Rows | None = None
                       ) -> None:
    found = _comma_numbers(s)
    stray = _stray_text(s) if found is None else None
    if stray is not None:
        shown, n, first = stray
        at = (rows or _Rows(path, len(s)))(first)
        empty = ("drop those rows (a target must be filled)" if what.startswith("target")
                 else "leave those fields empty or list them in `data.missing_words` (with "
                 "any other word the file writes for missing, such as 'NA': the list "
                 "replaces pandas' own)")
        raise DataError(f"{what} of {path} holds numbers but for {n} value(s) that are not, "
                        f"such as {', '.join(repr(v) for v in shown)} (the first at {at}), so "
                        "the whole column would be read as text, a category. If they stand "
                        f"for missing values, {empty}; if they are mistakes, fix them; "
                        f"{_as_category(what)}.")
    if found is None:
        return
    kind, example = found
    if kind == "thousands":
        raise DataError(f"{what} of {path} holds numbers written with thousands separators "
                        f"(such as '{example}'), which would be read as text. Write them without "
                        f"separators ('{example.replace(',', '')}'); {_as_category(what)}.")
    raise DataError(f"{what} of {path} holds numbers written with a decimal comma (such as "
                    f"'{example}'), which would be read as text. Write them with '.' as the "
                    f"decimal mark ('{example.replace(',', '.')}'); {_as_category(what)}.")


def _check_magnitude(what: str, values: np.ndarray, rows: _Rows, *, inf_ok: bool) -> None:
    """Refuse infinite values (unless `inf_ok`) and values beyond ±MAX_MAGNITUDE."""
    with np.errstate(invalid="ignore"):
        infinite = np.isinf(values)
        huge = np.isfinite(values) & (np.abs(values) > MAX_MAGNITUDE)
    if infinite.any() and not inf_ok:
        i = int(np.flatnonzero(infinite)[0])
        raise DataError(f"{what} has {int(infinite.sum())} infinite value(s), the first "
                        f"({values[i]:g}) at {rows(i)}. Fix or remove those rows, or set "
                        "`data.infinite: missing` in the spec to treat infinite feature values "
                        "as missing.")
    if huge.any():
        i = int(np.flatnonzero(huge)[0])
        raise DataError(f"{what} has {int(huge.sum())} value(s) beyond ±{MAX_MAGNITUDE:g}, the "
                        f"first ({values[i]:g}) at {rows(i)}; squared errors and variances of "
                        "such values overflow. Rescale the column (e.g. other units or a "
                        "logarithm) or fix those rows.")


def type_features(df: pd.DataFrame, categorical: list[str], path: Path, *,
                  rows: _Rows | None = None, infinite: str = "refuse"
                  ) -> tuple[pd.DataFrame, list, list]:
    """Cast features to float64 (numeric) or object text (categorical), keeping NaN as missing.

    A numeric column listed in `categorical` stays numbers, so that its levels sort in
    numeric order (1 < 2 < 10), not as text ("1" < "10" < "2"). Numeric values must be
    finite (or, with infinite="missing", ±inf becomes missing) and within ±MAX_MAGNITUDE; a
    text column of numbers with thousands separators is refused."""
    rows = rows or _Rows(path, len(df))
    out = {}
    numeric, cats = [], []
    for name in df.columns:
        s = df[name]
        if s.isna().all():
            raise DataError(f"feature column '{name}' of {path} is entirely missing. Add it to "
                            "`data.drop` in the spec or fill it.")
        if name in categorical and not _is_categorical(s):
            values = s.to_numpy(dtype="float64", na_value=np.nan, copy=True)
            _check_magnitude(f"categorical column '{name}'", values, rows,
                             inf_ok=infinite == "missing")
            values[np.isinf(values)] = np.nan
            out[name] = pd.Series(values, index=df.index)
            cats.append(name)
        elif name in categorical or _is_categorical(s):
            if name not in categorical:
                _separator_problem(f"feature column '{name}'", s, path, rows)
            out[name] = s.astype(object).map(str).where(s.notna(), np.nan).astype(object)
            cats.append(name)
        else:
            values = s.to_numpy(dtype="float64", na_value=np.nan, copy=True)
            _check_magnitude(f"feature column '{name}'", values, rows,
                             inf_ok=infinite == "missing")
            values[np.isinf(values)] = np.nan
            if np.isnan(values).all():
                raise DataError(f"feature column '{name}' of {path} has only missing or "
                                "infinite values. Add it to `data.drop` in the spec or fill "
                                "it.")
            out[name] = pd.Series(values, index=df.index)
            numeric.append(name)
    return pd.DataFrame(out, index=df.index), numeric, cats


def infer_task(y: pd.Series, stated: str | None, target: str, path: Path,
               rows: _Rows | None = None) -> str:
    """The sweep's task: as the spec states it, else classification for a text, boolean or
    categorical target and regression for a numeric one."""
    numeric = pd.api.types.is_numeric_dtype(y) and not pd.api.types.is_bool_dtype(y)
    if stated == "regression" and not numeric:
        _separator_problem(f"target column '{target}'", y, path, rows)
        sample = ", ".join(repr(v) for v in y.dropna().astype(str).unique()[:3])
        raise DataError(f"target column '{target}' of {path} is not numeric (values such as "
                        f"{sample}), but the spec says `task: regression`. Choose a numeric "
                        "target, or set `task: classification` to predict its classes.")
    if stated is None and not numeric:
        _separator_problem(f"target column '{target}'", y, path, rows)
    return stated or ("regression" if numeric else "classification")


def _check_classes(y: pd.Series, target: str, path: Path, rows: _Rows,
                   words: dict[str, int] | None = None, listed: bool = False
                   ) -> tuple[np.ndarray, list]:
    """The class labels of every row (numbers stay numbers, so they sort as numbers) and
    the classes in scikit-learn's order (sorted). `words`: the words of the file that were
    read as missing values in the target, with their rows; `listed`: whether the spec's
    `data.missing_words` named them (else pandas' default list did)."""
    missing = y.isna().to_numpy()
    if missing.all():
        raise DataError(f"target column '{target}' of {path} is entirely missing.")
    if missing.any():
        first = [rows.number(i) for i in np.flatnonzero(missing)[:5]]
        said = ""
        if words:
            shown = ", ".join(f"'{w}' ({n:,} rows)" for w, n in list(words.items())[:4])
            said = (f" The file writes {shown} there, which `data.missing_words` lists as "
                    "missing; if that is a class, remove it from that list." if listed else
                    f" The file writes {shown} there, which pandas reads as a missing value "
                    "by default; if that is a class, list in `data.missing_words` only the "
                    "words that do mean missing (the list replaces pandas' own), or write "
                    "the class as another word (such as 'none_given').")
        raise DataError(f"target column '{target}' of {path} has {int(missing.sum())} missing "
                        f"values (first at file lines {', '.join(first)}). Drop those rows "
                        "before the sweep: a row without a class can be neither fitted nor "
                        f"scored.{said}")
    if pd.api.types.is_bool_dtype(y):
        values = y.to_numpy(dtype=bool)
    elif pd.api.types.is_numeric_dtype(y):
        values = y.to_numpy()
        if np.issubdtype(values.dtype, np.floating) and np.all(values == np.round(values)):
            values = values.astype(np.int64)
    else:
        values = y.astype(str).to_numpy(dtype=object)
    classes = list(np.unique(values))
    if len(classes) < 2:
        raise DataError(f"target column '{target}' of {path} holds one class only "
                        f"({classes[0]!r}); there is nothing to tell apart. Choose a target "
                        "with two or more classes.")
    if len(classes) > MAX_CLASSES:
        raise DataError(f"target column '{target}' of {path} holds {len(classes)} classes "
                        f"(more than {MAX_CLASSES}); a target with that many distinct values is "
                        "likely a number or an identifier. Set `task: regression` if it is a "
                        "number, or choose another target.")
    _check_spaced_classes(values, classes, target, path, rows)
    return values, classes


def _check_spaced_classes(values: np.ndarray, classes: list, target: str, path: Path,
                          rows: _Rows) -> None:
    """Two text classes that differ only in spaces around them ('stable' and 'stable ') are
    one class typed twice: as two, each would be learnt and scored apart."""
    texts = [c for c in classes if isinstance(c, str)]
    by_stripped: dict[str, list[str]] = {}
    for c in texts:
        by_stripped.setdefault(c.strip(), []).append(c)
    for group in by_stripped.values():
        if len(group) > 1:
            spaced = next(c for c in group if c != c.strip())  # at most one is bare
            i = int(np.flatnonzero(values == spaced)[0])
            n = int(np.count_nonzero(values == spaced))
            shown = " and ".join(repr(c) for c in group)
            raise DataError(f"target column '{target}' of {path} holds classes {shown}, which "
                            f"differ only in spaces around them ({n} row(s) of {spaced!r}, the "
                            f"first at {rows(i)}); they would be learnt and scored as "
                            "different classes. Remove the spaces in the data file.")


def _check_target(y: pd.Series, target: str, path: Path, rows: _Rows | None = None
                  ) -> np.ndarray:
    rows = rows or _Rows(path, len(y))
    values = y.to_numpy(dtype="float64")
    missing = np.isnan(values)
    if missing.all():
        raise DataError(f"target column '{target}' of {path} is entirely missing.")
    if missing.any():
        first = [rows.number(i) for i in np.flatnonzero(missing)[:5]]
        raise DataError(f"target column '{target}' of {path} has {int(missing.sum())} missing "
                        f"values (first at file lines {', '.join(first)}). Drop those "
                        "rows before the sweep: a row without a target can be neither fitted "
                        "nor scored.")
    if not np.isfinite(values).all():
        i = int(np.flatnonzero(~np.isfinite(values))[0])
        raise DataError(f"target column '{target}' of {path} contains infinite values (the "
                        f"first at {rows(i)}); remove or fix those rows.")
    _check_magnitude(f"target column '{target}'", values, rows, inf_ok=False)
    if np.ptp(values) == 0:
        raise DataError(f"target column '{target}' of {path} is constant ({values[0]:g}); "
                        "there is nothing to predict.")
    return values


def load_frame(spec, *, max_bytes: int | None = None) -> Frame:
    """Read the spec's data file (and test file, if any) into one typed Frame.

    With a separate test file, its rows are appended after the data file's rows and
    `test_mask` marks them, so the plan sees one table. Each file must be a regular file
    of at most `max_bytes` (None: any size)."""
    path = spec.resolve(spec.data.path)
    listed = spec.data.missing_words
    df, sha = _read(path, "data file", max_bytes, listed)
    n_main = len(df)
    rows = _Rows(path, n_main)
    test_mask = None
    target = spec.data.target
    if target not in df.columns:
        raise DataError(f"target '{target}' is not a column of {path}. Columns are: "
                        f"{', '.join(df.columns)}.{nearest(target, df.columns)}")
    _need_columns(df, spec.data.drop, "column in `data.drop`", path)
    _need_columns(df, spec.data.categorical, "column in `data.categorical`", path)
    if spec.data.target in spec.data.drop:
        raise DataError(f"target '{target}' is also listed in `data.drop`; remove it there.")
    if spec.test.file is not None:
        test_path = spec.resolve(spec.test.file)
        tdf, test_sha = _read(test_path, "test file", max_bytes, listed)
        missing = [c for c in df.columns if c not in tdf.columns]
        if missing:
            raise DataError(f"test file {test_path} lacks columns of the data file: "
                            f"{', '.join(missing)}. Both files need the same columns.")
        sha = hashlib.sha256((sha + test_sha).encode()).hexdigest()
        df = pd.concat([df, tdf[list(df.columns)]], ignore_index=True)
        test_mask = np.arange(len(df)) >= n_main
        rows = _Rows(path, n_main, test_path)
    dropped = list(spec.data.drop)
    if spec.test.column is not None:
        col = spec.test.column
        _need_columns(df, [col], "test column", path)
        marks = df[col]
        if pd.api.types.is_bool_dtype(marks):
            test_mask = marks.to_numpy(dtype=bool)
        elif set(pd.unique(marks.dropna())) <= {0, 1} and not marks.isna().any():
            test_mask = marks.to_numpy().astype(bool)
        else:
            raise DataError(f"test column '{col}' of {path} must be boolean (true/false or "
                            "1/0, no missing values).")
        dropped.append(col)
    plan_values = {}
    for role, column in spec.plan_columns.items():
        _need_columns(df, [column], f"column in `{role}`", path)
        plan_values[column] = _plan_values(df[column], role, column, path, rows)
    task = infer_task(df[target], spec.task, target, path, rows)
    if task == "classification":
        words = _missing_words(path, max_bytes, df.iloc[:n_main], [target]) \
            if df[target].isna().any() else {}
        y, classes = _check_classes(df[target], target, path, rows, words.get(target),
                                    listed is not None)
    else:
        y, classes = _check_target(df[target], target, path, rows), []
    dropped += [c for c in plan_values if c not in spec.data.categorical and c not in dropped]
    features = df.drop(columns=[target] + dropped)
    if features.shape[1] == 0:
        raise DataError(f"{path} has no feature columns left after removing the target, "
                        "`data.drop` and the columns the plan reads (folds.groups, "
                        "folds.order, test.groups).")
    X, numeric, cats = type_features(features, list(spec.data.categorical), path, rows=rows,
                                     infinite=spec.data.infinite)
    return Frame(X=X, y=y, numeric=numeric, categorical=cats, target=target, sha256=sha,
                 source=path, test_mask=test_mask, task=task, classes=classes,
                 plan_values=plan_values,
                 others=df[[c for c in dict.fromkeys(dropped) if c in df.columns]],
                 missing_words={} if listed is not None else
                 _missing_words(path, max_bytes, df.iloc[:n_main], cats))


def _missing_words(path: Path, max_bytes: int | None, df: pd.DataFrame,
                   columns: list[str]) -> dict[str, dict[str, int]]:
    """Per text column of a CSV file: the words pandas' reader took for missing values
    ('None', 'NA', 'null', ...) and on how many rows, read again with no such words. Among
    a column's other words they may be levels ('None' for no irrigation) the models never
    see. Empty fields are missing values and not counted. Of the features it is asked
    only under pandas' default list: the words a spec's `data.missing_words` lists are
    missing because the spec says so."""
    if data_kind(path) != "csv":
        return {}
    text = [c for c in columns if pd.api.types.is_string_dtype(df[c]) and df[c].isna().any()]
    if not text:
        return {}
    at = [list(df.columns).index(c) for c in text]
    with _open_regular(path, "data file", max_bytes) as fh:
        raw = pd.read_csv(fh, encoding="utf-8", usecols=at, dtype=str, keep_default_na=False,
                          na_values=[])
    if len(raw) != len(df):  # not the rows the first reading gave: say nothing rather than guess
        return {}
    found = {}
    for col in text:
        words = raw[col].to_numpy()[df[col].isna().to_numpy()]
        counts = pd.Series(words[words != ""]).value_counts()
        if len(counts):
            found[col] = {str(w): int(n) for w, n in counts.items()}
    return found


def _plan_values(s: pd.Series, role: str, column: str, path: Path, rows: _Rows) -> np.ndarray:
    """A plan column's values, every row: group names as read (text as text), or the time
    order as numbers or dates (ISO 8601 text). Missing values are refused: a row without a
    group or a time cannot be placed on either side of a split."""
    missing = s.isna().to_numpy()
    if missing.any():
        first = ", ".join(rows.number(i) for i in np.flatnonzero(missing)[:5])
        raise DataError(f"column '{column}' of {path}, named by `{role}`, has "
                        f"{int(missing.sum())} missing value(s) (first at file lines {first}); "
                        "every row needs one to be placed on one side of each split. Fill "
                        "them or remove those rows.")
    if role != "folds.order":
        return s.astype(str).to_numpy() if s.dtype == object else s.to_numpy()
    if pd.api.types.is_bool_dtype(s):
        raise DataError(f"column '{column}' of {path}, named by `folds.order`, is true/false; "
                        "the time order needs numbers (a day or period count) or dates.")
    if pd.api.types.is_numeric_dtype(s):
        values = s.to_numpy(dtype="float64")
        if not np.isfinite(values).all():
            i = int(np.flatnonzero(~np.isfinite(values))[0])
            raise DataError(f"column '{column}' of {path}, named by `folds.order`, has an "
                            f"infinite value at {rows(i)}; fix that row.")
        return values
    try:
        when = pd.to_datetime(s.astype(str), format="ISO8601")
        if when.dt.tz is not None:
            when = when.dt.tz_convert("UTC").dt.tz_localize(None)
    except (ValueError, TypeError, OverflowError):
        raise DataError(_order_text_problem(s.astype(str), column, path, rows)) from None
    return when.to_numpy(dtype="datetime64[ns]")


def _order_text_problem(texts: pd.Series, column: str, path: Path, rows: _Rows) -> str:
    """Why a folds.order column of text is not one run of dates: its first value that is no
    ISO 8601 date, else its first value whose time zone offset differs from the first's."""
    named = f"column '{column}' of {path}, named by `folds.order`,"
    bad = np.flatnonzero(pd.isna(pd.to_datetime(texts, format="ISO8601", utc=True,
                                                 errors="coerce")))
    if len(bad):
        i = int(bad[0])
        return (f"{named} holds {texts.iat[i]!r} at {rows(i)}, which is neither a number nor "
                f"an ISO 8601 date ({len(bad)} such row(s)); the time order needs numbers or "
                "dates written as YYYY-MM-DD (with a time if needed). Fix or remove those rows.")
    values = pd.unique(texts)
    first = pd.Timestamp(values[0]).utcoffset()
    other = next((v for v in values[1:] if pd.Timestamp(v).utcoffset() != first), None)
    if other is None:
        return (f"{named} holds text pandas cannot read as one run of ISO 8601 dates; the "
                "time order needs numbers or dates written as YYYY-MM-DD (with a time if "
                "needed).")
    i, j = 0, int(np.flatnonzero(texts.to_numpy() == other)[0])
    second = pd.Timestamp(other).utcoffset()
    cause = (" (local times across a daylight-saving change do this)"
             if first is not None and second is not None else "")
    return (f"{named} mixes time zone offsets: {texts.iat[i]!r} at {rows(i)} has "
            f"{_offset_words(first)}, {other!r} at {rows(j)} has {_offset_words(second)}"
            f"{cause}. Write every value with one offset, for example all in UTC (ending in "
            "Z), or every value without one.")


def _offset_words(offset) -> str:
    if offset is None:
        return "no offset"
    minutes = int(offset.total_seconds() // 60)
    sign = "-" if minutes < 0 else "+"
    return f"offset {sign}{abs(minutes) // 60:02d}:{abs(minutes) % 60:02d}"
