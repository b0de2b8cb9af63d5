"""Predicting new rows with a built model: a CSV or Parquet file read in chunks, each chunk
checked against the model's card and typed exactly as the sweep typed its data, predicted,
and appended to the output — so memory stays flat however long the file is.

What is checked, and how each finding ends:
- the file: a regular CSV or Parquet file, UTF-8, comma-separated, unique column names,
  at least one row — else an error;
- columns: every input column the card lists must be there (else an error naming it);
  others are ignored and listed; `keep` columns (ids) are copied to the output as text;
- values: a numeric column must hold numbers (text is an error naming column and line),
  finite unless the sweep read infinite values as missing, within ±1e100; a column missing
  in every row is an error (the model would predict from nothing but its imputation);
- categories the model never saw: by default an error naming the column, the rows and
  examples (a new category usually means the inputs changed since the sweep); with
  `unseen="allow"` they are handled as the pipeline does (the family says how), counted
  and reported; missing values are counted and reported.

Any error leaves no output file: rows go to a temporary file beside the output that
replaces it only when every row is predicted."""

from __future__ import annotations

import numbers
import os
import stat
import tempfile
import time
import warnings
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import numpy as np
import pandas as pd

from ..errors import DataError, ModelError, OutputError
from ..read.filenames import check_folder, new_file_mode
from .card import read_residuals
from .keep import LoadedModel

__all__ = ["predict_file", "PredictionResult", "CHUNK_ROWS", "UNSEEN"]

CHUNK_ROWS = 100_000
"""Rows read, checked and predicted at a time."""
UNSEEN = ("refuse", "allow")
"""What to do with categories the model never saw: refuse the file, or predict them as the
pipeline does."""

_KINDS = {".csv": "csv", ".parquet": "parquet", ".pq": "parquet"}
_MAX_MAGNITUDE = 1e100  # as runner/write/data.py: squares of larger values overflow


@dataclass
class PredictionResult:
    """What `predict_file` wrote and what it met on the way."""

    out: Path
    rows: int
    chunks: int
    seconds: float
    columns: list[str]
    kept: list[str]
    ignored: list[str]
    unseen: dict[str, dict] = field(default_factory=dict)  # column -> rows, examples
    missing: dict[str, int] = field(default_factory=dict)  # column -> missing cells
    model_id: str = ""
    unseen_handling: str = ""
    notes: list[str] = field(default_factory=list)  # this run's; the model's own are model.notes
    interval: float | None = None
    halfwidth: float | None = None


# -- the input file --------------------------------------------------------------------------
def _open_input(path: Path):
    role = f"prediction input {path}"
    if not path.exists():
        raise DataError(f"{role} does not exist. Give the path of a CSV or Parquet file.")
    if path.is_dir():
        raise DataError(f"{role} is a folder; give a CSV or Parquet file.")
    kind = _KINDS.get(path.suffix.lower())
    if kind is None:
        raise DataError(f"{role} has extension '{path.suffix}'; foldwise predicts from .csv "
                        "and .parquet files. Convert it, or rename it if it is one of those.")
    try:
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
    except OSError as exc:
        raise DataError(f"{role} cannot be opened: {exc.strerror}. Check the file's "
                        "permissions.") from None
    if not stat.S_ISREG(os.fstat(fd).st_mode):
        os.close(fd)
        raise DataError(f"{role} is not a regular file (a device, pipe or socket); save the "
                        "rows to a file and name that.")
    if hasattr(os, "O_NONBLOCK"):
        os.set_blocking(fd, True)
    return os.fdopen(fd, "rb"), kind


def _csv_columns(fh, path: Path) -> list[str]:
    from ..write.data import _check_header, _csv_header

    try:
        header = _csv_header(fh)
    except UnicodeDecodeError as exc:
        raise DataError(f"prediction input {path} is not UTF-8 text ({exc.reason} at byte "
                        f"{exc.start}). Re-save it as UTF-8 CSV.") from None
    if not header or header == [""]:
        raise DataError(f"prediction input {path} is empty; it needs a header row naming "
                        "the model's input columns, and rows to predict.")
    _check_header(header, "prediction input", path)
    return header


def _csv_chunks(fh, path: Path, usecols: list[str], text: list[str], chunk_rows: int,
                words: list[str] | None = None):
    """(first line number, DataFrame) per chunk; text columns read as written, and the
    fields the sweep read as missing (`words`, as `data.missing_words`) missing."""
    from ..write.data import missing_value_options

    try:
        # every column is parsed (not only `usecols`), so a line with more fields than the
        # header - an unquoted comma shifting values - is refused as the sweep refuses it
        reader = pd.read_csv(fh, dtype={c: str for c in text}, chunksize=chunk_rows,
                             encoding="utf-8", **missing_value_options(words))
        line = 2
        for chunk in reader:
            yield line, chunk[usecols]
            line += len(chunk)
    except UnicodeDecodeError as exc:
        raise DataError(f"prediction input {path} is not UTF-8 text ({exc.reason}). "
                        "Re-save it as UTF-8 CSV.") from None
    except (pd.errors.ParserError, ValueError) as exc:
        first = (str(exc).splitlines() or [type(exc).__name__])[0]
        raise DataError(f"prediction input {path} cannot be read as CSV: {first}. Check "
                        "that every line has as many fields as the header.") from None


def _parquet_file(fh, path: Path):
    import pyarrow.parquet as pq

    try:
        pf = pq.ParquetFile(fh)
    except Exception as exc:  # pyarrow raises several kinds for a file that is not Parquet
        first = (str(exc).splitlines() or [type(exc).__name__])[0]
        raise DataError(f"prediction input {path} cannot be read as Parquet: {first}. Check "
                        "that the file is complete and of the type its extension says.") \
            from None
    names = [str(n) for n in pf.schema_arrow.names]
    dupes = sorted({n for n in names if names.count(n) > 1})
    if dupes:
        raise DataError(f"prediction input {path} has duplicate column names: "
                        f"{', '.join(dupes)}. Give every column a unique name.")
    return pf, names


def _parquet_chunks(pf, path: Path, usecols: list[str], chunk_rows: int):
    row = 1
    try:
        for batch in pf.iter_batches(batch_size=chunk_rows, columns=usecols):
            df = batch.to_pandas()
            yield row, df
            row += len(df)
    except DataError:
        raise
    except Exception as exc:
        first = (str(exc).splitlines() or [type(exc).__name__])[0]
        raise DataError(f"prediction input {path} cannot be read as Parquet past row {row}: "
                        f"{first}.") from None


# -- typing a chunk as the sweep typed its data ----------------------------------------------
class _Tally:
    """What the chunks met: missing cells, unseen categories, rows seen per column."""

    def __init__(self, features: list[dict]):
        self.missing = {f["name"]: 0 for f in features}
        self.unseen: dict[str, dict] = {}
        self.rows = 0


def _where(kind: str, first: int, i: int, path: Path) -> str:
    return f"{'line' if kind == 'csv' else 'row'} {first + i} of {path}"


def _numeric(s: pd.Series, name: str, kind: str, first: int, path: Path,
             infinite: str) -> np.ndarray:
    if pd.api.types.is_bool_dtype(s):
        raise DataError(f"column '{name}' of prediction input {path} holds true/false "
                        "values, but the model was built on numbers in it. Write the "
                        "numbers.")
    if not pd.api.types.is_numeric_dtype(s):
        parsed = pd.to_numeric(s.map(lambda v: v.strip() if isinstance(v, str) else v),
                               errors="coerce")
        bad = np.flatnonzero(parsed.isna().to_numpy() & s.notna().to_numpy())
        if len(bad):
            i = int(bad[0])
            raise DataError(f"column '{name}' of prediction input {path} must hold numbers, "
                            f"as in the data the model was built on, but holds "
                            f"{str(s.iloc[i])[:40]!r} at {_where(kind, first, i, path)}"
                            + (f" ({len(bad)} such values in this chunk)" if len(bad) > 1
                               else "")
                            + ". Fix those values (numbers without thousands separators, "
                            "blank for missing).")
        s = parsed
    values = s.to_numpy(dtype="float64", na_value=np.nan, copy=True)
    with np.errstate(invalid="ignore"):
        infinite_at = np.flatnonzero(np.isinf(values))
        huge_at = np.flatnonzero(np.isfinite(values) & (np.abs(values) > _MAX_MAGNITUDE))
    if len(infinite_at) and infinite != "missing":
        i = int(infinite_at[0])
        raise DataError(f"column '{name}' of prediction input {path} holds an infinite value "
                        f"at {_where(kind, first, i, path)}; the model was built on finite "
                        "values only. Fix or remove those rows.")
    if len(huge_at):
        i = int(huge_at[0])
        raise DataError(f"column '{name}' of prediction input {path} holds {values[i]:g} at "
                        f"{_where(kind, first, i, path)}, beyond ±{_MAX_MAGNITUDE:g}; fix "
                        "that value (wrong units?).")
    values[np.isinf(values)] = np.nan
    return values


def _level_lookup(levels: list[str]) -> dict[str, str]:
    """Other spellings of the seen categories that mean the same value: '1' for '1.0' (a
    column read as numbers in one file and as text in another), 'true' or 'TRUE' for a
    boolean column's 'True'. Any other difference stays a different category."""
    out: dict[str, str] = {}
    for level in levels:
        if level in ("True", "False"):
            out.setdefault(level.lower(), level)
        try:
            out.setdefault(repr(float(level)), level)
        except ValueError:
            pass
    return out


def _categorical(s: pd.Series, feature: dict, lookup: dict[str, str], tally: _Tally) -> pd.Series:
    text = s.astype(object).map(str).where(s.notna(), np.nan).astype(object)
    known = set(feature["categories"])
    present = text.notna()
    odd = present & ~text.isin(known)
    if odd.any():
        def respell(v: str):
            if v in lookup:
                return lookup[v]
            low = v.strip().lower()
            if low in ("true", "false") and low in lookup:
                return lookup[low]
            try:
                return lookup.get(repr(float(v)), v)
            except ValueError:
                return v

        text = text.where(~odd, text[odd].map(respell))
        unseen = present & ~text.isin(known)
        if unseen.any():
            entry = tally.unseen.setdefault(feature["name"], {"rows": 0, "examples": []})
            entry["rows"] += int(unseen.sum())
            for v in pd.unique(text[unseen]):
                if len(entry["examples"]) < 5 and v not in entry["examples"]:
                    entry["examples"].append(str(v))
    return text


def _numeric_level_columns(pipeline) -> set[str]:
    """The categorical columns whose fitted encoder holds numbers as levels (a numeric
    column listed in data.categorical): their values must reach it as numbers, since the
    text '2015.0' is not the level 2015.0 and would be taken for an unseen one."""
    prep = dict(pipeline.steps).get("prep")
    named = getattr(prep, "named_transformers_", {})
    encoder = named.get("cat") if hasattr(named, "get") else None
    if encoder is None:
        return set()
    columns = next((cols for name, _, cols in prep.transformers_ if name == "cat"), [])
    if hasattr(encoder, "steps"):
        encoder = encoder.steps[-1][1]
    return {str(col) for col, levels in zip(columns, getattr(encoder, "categories_", []))
            if _holds_numbers(np.asarray(levels))}


def _holds_numbers(levels: np.ndarray) -> bool:
    """Whether an encoder's levels are numbers: a numeric array, or an object array of
    numbers (the linear family's imputer hands the encoder one object array when number
    and text columns share the category block)."""
    if levels.dtype.kind in "fiub":
        return True
    return (levels.dtype.kind == "O" and len(levels) > 0
            and all(isinstance(v, numbers.Real) and not isinstance(v, (bool, np.bool_))
                    for v in levels))


def _features(df: pd.DataFrame, card: dict, lookups: dict, kind: str, first: int,
              path: Path, tally: _Tally, numeric_levels: set = frozenset()) -> pd.DataFrame:
    infinite = card.get("data", {}).get("infinite", "refuse")
    out = {}
    for f in card["features"]:
        s = df[f["name"]]
        if f["type"] == "numeric":
            out[f["name"]] = _numeric(s, f["name"], kind, first, path, infinite)
        else:
            out[f["name"]] = _categorical(s, f, lookups[f["name"]], tally)
            if f["name"] in numeric_levels:
                number = pd.to_numeric(out[f["name"]], errors="coerce")
                out[f["name"]] = number.where(number.notna(), out[f["name"]])
        tally.missing[f["name"]] += int(pd.isna(out[f["name"]]).sum())
    return pd.DataFrame(out, index=df.index)


# -- the output ------------------------------------------------------------------------------
class _Output:
    """Rows appended to a temporary file beside `out`, moved onto it only by `commit`."""

    def __init__(self, out: Path):
        self.out, self.kind = out, _KINDS[out.suffix.lower()]
        fd, tmp = tempfile.mkstemp(prefix=".predicting-", suffix=out.suffix, dir=out.parent)
        os.fchmod(fd, new_file_mode())
        os.close(fd)
        self.tmp = Path(tmp)
        self._writer = None
        self._fh = None

    def write(self, df: pd.DataFrame) -> None:
        if self.kind == "csv":
            if self._fh is None:
                self._fh = open(self.tmp, "w", newline="", encoding="utf-8")
                df.to_csv(self._fh, index=False)
            else:
                df.to_csv(self._fh, index=False, header=False)
            return
        import pyarrow as pa
        import pyarrow.parquet as pq

        table = pa.Table.from_pandas(df, preserve_index=False)
        if self._writer is None:
            # a column empty through the first chunk has no type yet: text, which any
            # later chunk's values can be cast to
            schema = pa.schema([f.with_type(pa.string()) if pa.types.is_null(f.type) else f
                                for f in table.schema])
            self._writer = pq.ParquetWriter(self.tmp, schema)
        self._writer.write_table(table.cast(self._writer.schema))

    def _close(self) -> None:
        if self._fh is not None:
            self._fh.close()
        if self._writer is not None:
            self._writer.close()

    def commit(self) -> None:
        self._close()
        os.replace(self.tmp, self.out)

    def discard(self) -> None:
        try:
            self._close()
        finally:
            self.tmp.unlink(missing_ok=True)


def _refuse_unseen(found: dict, path: Path, handling: str) -> None:
    col, seen = next(iter(found.items()))
    raise DataError(f"column '{col}' of prediction input {path} holds categories the model "
                    f"never saw ({', '.join(map(repr, seen['examples']))}; "
                    f"{seen['rows']:,} row(s) so far). Fix or map them to the model's "
                    "categories (`foldwise card MODEL` lists them), or pass --unseen allow "
                    f"to predict them anyway: each is then {handling}.")


def _check_out(out: Path, data: Path, overwrite: bool) -> None:
    if out.is_dir():
        raise OutputError(f"output {out} is a folder, not a file; name a file with --out, "
                          f"e.g. {out / 'predictions.csv'}.")
    if out.suffix.lower() not in _KINDS:
        raise OutputError(f"output {out} must end in .csv or .parquet.")
    check_folder(out.parent, f"output {out}", "Name a file in a folder with --out.")
    if out.exists() and out.resolve() == data.resolve():
        raise OutputError(f"output {out} is the input file itself; name another file.")
    if out.exists() and not overwrite:
        raise OutputError(f"output {out} already exists; name a new file, or pass "
                          "--overwrite to replace it.")
    if not out.parent.is_dir():
        raise OutputError(f"the folder of output {out} does not exist; create it first.")


def _columns_plan(card: dict, columns: list[str], keep: list[str], path: Path,
                  prediction: list[str]) -> tuple[list[str], list[str]]:
    """(columns to read, columns ignored), after checking the card's columns are there."""
    from ..names import nearest

    names = [f["name"] for f in card["features"]]
    for name in names:
        if name not in columns:
            raise DataError(f"prediction input {path} lacks column '{name}', which model "
                            f"{card.get('model_id', '')} needs ({len(names)} input columns: "
                            f"{', '.join(names[:12])}{', ...' if len(names) > 12 else ''})."
                            f"{nearest(name, columns)} Add the column, or rename it to the "
                            "name the model was built with.")
    for name in keep:
        if name not in columns:
            raise DataError(f"--keep column '{name}' is not a column of prediction input "
                            f"{path}.{nearest(name, columns)}")
        if name in prediction:
            raise DataError(f"--keep column '{name}' has the name of a prediction column; "
                            "rename it in the input.")
    wanted = set(names) | set(keep)
    return ([c for c in columns if c in wanted],
            [c for c in columns if c not in wanted])


def predict_file(model: LoadedModel, data: str | Path, out: str | Path, *,
                 keep: tuple[str, ...] | list[str] = (), chunk_rows: int = CHUNK_ROWS,
                 overwrite: bool = False, unseen: str = "refuse",
                 interval: float | None = None,
                 progress: Callable[[int, int], None] | None = None) -> PredictionResult:
    """Predict every row of `data` (CSV or Parquet) with `model` into `out` (.csv or
    .parquet): the `keep` columns as written, then the family's prediction columns.

    Reads `chunk_rows` rows at a time; `progress(done, total)` counts bytes of a CSV or
    rows of a Parquet file. Categories the model never saw are refused unless `unseen` is
    "allow". With `interval` (a level such as 0.9), `lower` and `upper` columns bound each
    prediction by split conformal on the sweep's test rows (`card.read_residuals`).
    On any error no output file is left behind."""
    start = time.perf_counter()
    data, out = Path(data), Path(out)
    if chunk_rows < 1:
        raise ModelError(f"chunk_rows must be >= 1, got {chunk_rows}.")
    if unseen not in UNSEEN:
        raise ModelError(f"unseen must be one of {', '.join(UNSEEN)}, got {unseen!r}.")
    keep = list(dict.fromkeys(keep))
    card, family = model.card, model.family
    features = card["features"]
    prediction = list(card.get("prediction_columns") or ["predicted"])
    halfwidth = None
    notes: list[str] = []
    if interval is not None and card.get("task") == "classification":
        raise ModelError(f"{model.source} predicts classes; prediction intervals are for "
                         "numbers. Its per-class probability columns say how sure it is.")
    if interval is not None:
        if not 0 < interval < 1:
            raise ModelError(f"the interval level must be between 0 and 1, got {interval}.")
        residuals = read_residuals(card.get("interval", "absent"), model.source)
        halfwidth = residuals.halfwidth(interval, model.source)
        notes.append(residuals.note(model.source))
        prediction += ["lower", "upper"]
    fh, kind = _open_input(data)
    with fh:
        if kind == "csv":
            columns = _csv_columns(fh, data)
            total = os.fstat(fh.fileno()).st_size
        else:
            pf, columns = _parquet_file(fh, data)
            total = pf.metadata.num_rows
        usecols, ignored = _columns_plan(card, columns, keep, data, prediction)
        _check_out(out, data, overwrite)
        text = [f["name"] for f in features if f["type"] == "categorical"] + keep
        read = card.get("data", {})
        chunks = (_csv_chunks(fh, data, usecols, text, chunk_rows,
                              read.get("missing_words")) if kind == "csv" else
                  _parquet_chunks(pf, data, usecols, chunk_rows))
        if kind == "csv" and "missing_words" not in read:
            notes.append(f"note: the card of {model.source} is from a foldwise before "
                         "`data.missing_words`, so the new rows are read with pandas' default "
                         "missing words ('NA', 'None', 'null', 'NaN', ...), as its sweep "
                         "read its data.")
        lookups = {f["name"]: _level_lookup(f["categories"]) for f in features
                   if f["type"] == "categorical"}
        numeric_levels = _numeric_level_columns(model.pipeline)
        tally = _Tally(features)
        writer = _Output(out)
        n_chunks = 0
        try:
            for first, df in chunks:
                if df.empty:
                    continue
                X = _features(df, card, lookups, kind, first, data, tally, numeric_levels)
                if tally.unseen and unseen == "refuse":
                    _refuse_unseen(tally.unseen, data, family.unseen_category)
                with warnings.catch_warnings():  # unseen categories are counted above
                    warnings.simplefilter("ignore")
                    predicted = family.prediction_columns(model.pipeline, X)
                part = pd.DataFrame({c: df[c].astype(object).where(df[c].notna(), None)
                                     for c in keep})
                for name, values in predicted.items():
                    part[name] = values
                if halfwidth is not None:
                    part["lower"] = part["predicted"] - halfwidth
                    part["upper"] = part["predicted"] + halfwidth
                writer.write(part)
                tally.rows += len(df)
                n_chunks += 1
                if progress:
                    progress(fh.tell() if kind == "csv" else tally.rows, total)
            if tally.rows == 0:
                raise DataError(f"prediction input {data} has a header but no rows; there is "
                                "nothing to predict.")
            empty = [name for name, n in tally.missing.items() if n == tally.rows]
            if empty:
                raise DataError(f"column '{empty[0]}' of prediction input {data} is missing "
                                f"in every one of its {tally.rows:,} rows"
                                + (f" (so are {', '.join(empty[1:4])})" if len(empty) > 1
                                   else "")
                                + "; the model would predict from its fill-in value alone. "
                                "Supply the column's values (an export that lost them?).")
            writer.commit()
        except BaseException:
            writer.discard()
            raise
    return PredictionResult(out, tally.rows, n_chunks, time.perf_counter() - start,
                            [*keep, *prediction], keep, ignored, tally.unseen,
                            {k: v for k, v in tally.missing.items() if v},
                            model.model_id, family.unseen_category,
                            [n for n in notes if n],
                            interval, halfwidth)
