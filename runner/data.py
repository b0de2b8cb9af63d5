"""The data: read the CSV or Parquet file a spec names, type its columns and fingerprint it.

Everything a fit needs is checked here, before any store is touched: the target is present,
numeric, finite and not constant; listed columns exist; no feature is empty."""

from __future__ import annotations

import csv
import hashlib
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import DataError
from .families import nearest

__all__ = ["Frame", "read_table", "load_frame", "file_sha256"]

_READERS = {".csv": "csv", ".parquet": "parquet", ".pq": "parquet"}


def file_sha256(path: Path) -> str:
    """SHA-256 of a file's bytes: the data fingerprint stored with every sweep."""
    digest = hashlib.sha256()
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 20), b""):
            digest.update(chunk)
    return digest.hexdigest()


def _csv_header(path: Path) -> list[str]:
    with open(path, newline="", encoding="utf-8") as fh:
        return next(csv.reader(fh), [])


def read_table(path: Path, *, role: str = "data file") -> pd.DataFrame:
    """Read a CSV or Parquet file into a DataFrame, or raise a DataError saying what is wrong."""
    if not path.exists():
        raise DataError(f"{role} {path} does not exist. Check `data.path` in the spec; it is "
                        "resolved relative to the spec file's folder.")
    if path.is_dir():
        raise DataError(f"{role} {path} is a folder; give a CSV or Parquet file.")
    kind = _READERS.get(path.suffix.lower())
    if kind is None:
        raise DataError(f"{role} {path} has extension '{path.suffix}'; foldwise reads .csv and "
                        ".parquet files. Convert it or rename it if it is one of those.")
    try:
        if kind == "csv":
            header = _csv_header(path)
            dupes = sorted({c for c in header if header.count(c) > 1})
            if dupes:
                raise DataError(f"{role} {path} has duplicate column names: {', '.join(dupes)}. "
                                "Give every column a unique name.")
            df = pd.read_csv(path, encoding="utf-8")
        else:
            df = pd.read_parquet(path)
    except DataError:
        raise
    except UnicodeDecodeError as exc:
        raise DataError(f"{role} {path} is not UTF-8 text ({exc.reason} at byte {exc.start}). "
                        "Re-save it as UTF-8 CSV.") from None
    except pd.errors.EmptyDataError:
        raise DataError(f"{role} {path} is empty; it needs a header row and data rows.") from None
    except Exception as exc:  # parser errors differ by engine; all mean "unreadable"
        first = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
        raise DataError(f"{role} {path} cannot be read as {kind.upper()}: {first}. Check that "
                        "the file is complete and of the type its extension says.") from None
    if df.columns.duplicated().any():
        dupes = sorted(set(df.columns[df.columns.duplicated()]))
        raise DataError(f"{role} {path} has duplicate column names: {', '.join(map(str, dupes))}. "
                        "Give every column a unique name.")
    if len(df) == 0:
        raise DataError(f"{role} {path} has a header but no rows.")
    df.columns = [str(c) for c in df.columns]
    return df


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
    n_file_rows: int = 0
    extra: dict = field(default_factory=dict)

    @property
    def features(self) -> list[str]:
        return list(self.X.columns)


def _need_columns(df: pd.DataFrame, names, what: str, path: Path) -> None:
    for name in names:
        if name not in df.columns:
            raise DataError(f"{what} '{name}' is not a column of {path}. Columns are: "
                            f"{', '.join(df.columns)}.{nearest(name, df.columns)}")


def _is_categorical(s: pd.Series) -> bool:
    return not pd.api.types.is_numeric_dtype(s) or pd.api.types.is_bool_dtype(s)


def type_features(df: pd.DataFrame, categorical: list[str], path: Path) -> tuple[pd.DataFrame, list, list]:
    """Cast features to float64 (numeric) or object text (categorical), keeping NaN as missing."""
    out = {}
    numeric, cats = [], []
    for name in df.columns:
        s = df[name]
        if s.isna().all():
            raise DataError(f"feature column '{name}' of {path} is entirely missing. Add it to "
                            "`data.drop` in the spec or fill it.")
        if name in categorical or _is_categorical(s):
            out[name] = s.astype(object).map(str).where(s.notna(), np.nan).astype(object)
            cats.append(name)
        else:
            out[name] = s.astype("float64")
            numeric.append(name)
    return pd.DataFrame(out, index=df.index), numeric, cats


def _check_target(y: pd.Series, target: str, path: Path) -> np.ndarray:
    if not pd.api.types.is_numeric_dtype(y) or pd.api.types.is_bool_dtype(y):
        sample = ", ".join(repr(v) for v in y.dropna().astype(str).unique()[:3])
        raise DataError(f"target column '{target}' of {path} is not numeric (values such as "
                        f"{sample}). foldwise fits regression models; choose a numeric target "
                        "or clean the column.")
    values = y.to_numpy(dtype="float64")
    missing = np.isnan(values)
    if missing.all():
        raise DataError(f"target column '{target}' of {path} is entirely missing.")
    if missing.any():
        rows = np.flatnonzero(missing)[:5] + 2
        raise DataError(f"target column '{target}' of {path} has {int(missing.sum())} missing "
                        f"values (first at file lines {', '.join(map(str, rows))}). Drop those "
                        "rows before the sweep: a row without a target can be neither fitted "
                        "nor scored.")
    if not np.isfinite(values).all():
        raise DataError(f"target column '{target}' of {path} contains infinite values; "
                        "remove or fix those rows.")
    if np.ptp(values) == 0:
        raise DataError(f"target column '{target}' of {path} is constant ({values[0]:g}); "
                        "there is nothing to predict.")
    return values


def load_frame(spec) -> Frame:
    """Read the spec's data file (and test file, if any) into one typed Frame.

    With a separate test file, its rows are appended after the data file's rows and
    `test_mask` marks them, so the plan sees one table."""
    path = spec.resolve(spec.data.path)
    df = read_table(path)
    sha = file_sha256(path)
    n_main = len(df)
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
        tdf = read_table(test_path, role="test file")
        missing = [c for c in df.columns if c not in tdf.columns]
        if missing:
            raise DataError(f"test file {test_path} lacks columns of the data file: "
                            f"{', '.join(missing)}. Both files need the same columns.")
        sha = hashlib.sha256((sha + file_sha256(test_path)).encode()).hexdigest()
        df = pd.concat([df, tdf[list(df.columns)]], ignore_index=True)
        test_mask = np.arange(len(df)) >= n_main
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
    y = _check_target(df[target], target, path)
    features = df.drop(columns=[target] + dropped)
    if features.shape[1] == 0:
        raise DataError(f"{path} has no feature columns left after removing the target and "
                        "`data.drop`.")
    X, numeric, cats = type_features(features, list(spec.data.categorical), path)
    return Frame(X=X, y=y, numeric=numeric, categorical=cats, target=target, sha256=sha,
                 source=path, test_mask=test_mask, n_file_rows=n_main)
