"""The results of reading a sweep: small frozen objects, each a table plus the facts that
say what the table is (which sweep, metric, direction, rule, kind of standard error, models
without a pick). Built only by `queries.py` and `explained.py`; turned into display tables
and sentences only by `views.py`, for the CLI and the report alike."""

from __future__ import annotations

import functools
from dataclasses import dataclass, field
from typing import TYPE_CHECKING

if TYPE_CHECKING:  # imported where a table is built: the sweep listing starts without it
    import pandas as pd

__all__ = ["SweepFacts", "Coverage", "Summary", "CellStats", "Picks", "ComplexityTable",
           "Comparison", "Importances", "Stability", "Coefficients", "SweepList", "SweepDiff",
           "ModelHistory", "Findings"]


def _no_rows() -> pd.DataFrame:
    import pandas as pd

    return pd.DataFrame()


@dataclass(frozen=True)
class SweepFacts:
    """What every reading of one sweep needs to know about it."""

    sweep_id: str
    name: str
    target: str
    metrics: tuple[str, ...]
    better: dict  # metric -> "lower" or "higher", as the store records it
    k: int
    repeats: int
    rule: str  # the spec's pick rule
    task: str = "regression"
    classes: tuple = ()  # class labels in the models' probability order (classification)
    scheme: str = "rows"  # how the folds cut the rows: rows, groups or time
    n_features: int | None = None  # the feature columns the models were given (None: unknown)

    @property
    def ordered(self) -> bool:
        """True if the folds follow time order, so they are not exchangeable draws."""
        return self.scheme == "time"

    @property
    def metric(self) -> str:
        """The first metric: it decides the picks."""
        return self.metrics[0]

    @property
    def n_folds(self) -> int:
        return self.k * self.repeats

    def better_of(self, metric: str | None = None) -> str:
        return self.better.get(metric or self.metric, "lower")


@dataclass(frozen=True)
class Coverage:
    """How far a sweep's cells got, per model: what limits its picks. A cell is complete
    (every fold scored, no failed fit, a finite mean), failed, unfinished or non-finite."""

    status: str  # 'running', 'finished', 'failed' or 'interrupted'
    table: pd.DataFrame  # model, cells, complete, failed, unfinished, undefined, non_finite

    @property
    def unpicked(self) -> tuple[str, ...]:
        """Models without a single complete cell, so without a pick."""
        return tuple(self.table.loc[self.table["complete"] == 0, "model"])


@dataclass(frozen=True)
class Summary:
    """One row per model: its picked cell under `rule`, CV mean ± SE and test score per
    metric (columns cv_<m>, se_<m>, test_<m>)."""

    facts: SweepFacts
    rule: str
    table: pd.DataFrame
    coverage: Coverage
    varying: dict = field(default_factory=dict)  # model -> the params its grid varies
    edges: pd.DataFrame = field(default_factory=_no_rows)  # picks on a grid's edge

    @property
    def unpicked(self) -> tuple[str, ...]:
        return self.coverage.unpicked


@dataclass(frozen=True)
class CellStats:
    """Every cell with mean, SE, n, leaves, test score, why it is excluded and the marks
    (within one SE, best, one-SE) of the picks on the sweep's first metric."""

    facts: SweepFacts
    metric: str  # whose scores are shown (the marks always follow the first metric)
    se: str
    table: pd.DataFrame
    thresholds: dict = field(default_factory=dict)  # model -> one-SE threshold

    @property
    def better(self) -> str:
        return self.facts.better_of(self.metric)


@dataclass(frozen=True)
class Picks:
    """The picked cell of each model: one row per model and rule; `edges` one row per
    picked cell and parameter whose value is the lowest or highest of its grid where the
    grid could go further (model, family, rule, param, side 'low'/'high', value)."""

    facts: SweepFacts
    rules: tuple[str, ...]
    se: str
    table: pd.DataFrame
    coverage: Coverage
    varying: dict = field(default_factory=dict)  # model -> the params its grid varies
    edges: pd.DataFrame = field(default_factory=_no_rows)

    @property
    def unpicked(self) -> tuple[str, ...]:
        return self.coverage.unpicked


@dataclass(frozen=True)
class ComplexityTable:
    """One model's cells in complexity order (rank 0 = simplest) with the picks marked."""

    facts: SweepFacts
    model: str
    family: str
    metric: str
    se: str
    table: pd.DataFrame
    threshold: float | None = None
    shown_params: tuple[str, ...] = ()
    fixed_params: dict = field(default_factory=dict)

    @property
    def better(self) -> str:
        return self.facts.better_of(self.metric)

    @property
    def varying_params(self) -> list[str]:
        """The shown params that take more than one value among the cells."""
        import json

        return [n for n in self.shown_params
                if self.table[n].map(lambda v: json.dumps(v)).nunique() > 1]


@dataclass(frozen=True)
class Comparison:
    """Every pair of models' picked cells compared fold by fold (a before b, spec order)."""

    facts: SweepFacts
    rule: str
    se: str
    metric: str
    table: pd.DataFrame
    coverage: Coverage

    @property
    def better(self) -> str:
        return self.facts.better_of(self.metric)

    @property
    def unpicked(self) -> tuple[str, ...]:
        return self.coverage.unpicked


@dataclass(frozen=True)
class Importances:
    """Every stored importance of a sweep's explained cells, ranked within cell and method."""

    facts: SweepFacts
    table: pd.DataFrame
    permutation_rows: int | None = None  # test rows each permutation drew, as stored
    undefined_cells: tuple = ()  # cells whose permutation importances are NULL (undefined)


@dataclass(frozen=True)
class Stability:
    """One row per explained cell: how much its fitted model changes across folds."""

    facts: SweepFacts
    table: pd.DataFrame


@dataclass(frozen=True)
class Coefficients:
    """Signed coefficients, one row per term: of a sweep's explained linear cells, or of one
    built model (`model_id`)."""

    sweep_id: str
    model_id: str | None
    table: pd.DataFrame


@dataclass(frozen=True)
class SweepList:
    """One row per sweep (newest first) with its size, status, labels (JSON text) and note;
    `selection` says in words which sweeps were asked for. The rows are plain Python values
    (`columns` names them); `table` is the same as a DataFrame, made when first asked for."""

    selection: str
    columns: tuple[str, ...]
    rows: tuple[tuple, ...]

    @functools.cached_property
    def table(self) -> pd.DataFrame:
        import pandas as pd

        frame = pd.DataFrame.from_records(list(self.rows), columns=list(self.columns))
        for i, col in enumerate(self.columns):  # whole numbers with gaps stay whole
            values = [row[i] for row in self.rows]
            present = [v for v in values if v is not None]
            if len(present) < len(values) and present and all(
                    isinstance(v, int) and not isinstance(v, bool) for v in present):
                frame[col] = pd.array(values, dtype="Int64")
        return frame

    def records(self) -> list[dict]:
        """One dict per sweep, column -> value."""
        return [dict(zip(self.columns, row)) for row in self.rows]


@dataclass(frozen=True)
class SweepDiff:
    """What changed from sweep `a` to sweep `b`: spec text, data, plan, versions, labels,
    then per model the cell each sweep picks under its own rule and how its scores moved.

    `a` and `b` are the sweeps' stored records (plus `labels`). `table` has one row per
    model (spec order of b, then models only a has): each side's cell, CV mean ± SE and
    test score, the change b − a, and — when `paired` — the corrected resampled t-test
    of the per-fold differences (folds, mean_diff, se, t, df, p_value, p_holm, wins)."""

    a: dict
    b: dict
    spec_diff: tuple[str, ...]  # unified diff lines of the spec text; () when the same
    data_same: bool | None  # None: a sweep recorded no data hash
    plan_same: bool | None  # None: not recorded for an older sweep, and no shared cell
    versions: dict  # package -> (a, b), changed ones only
    labels: dict  # key -> (a, b), changed ones only (None where absent)
    metric: str | None  # the metric compared (None: the sweeps pick by different metrics)
    better: str
    se: str
    paired: bool
    not_paired: str  # why the folds are not paired ('' when paired)
    shared_cells: int
    table: pd.DataFrame
    varying: dict = field(default_factory=dict)  # model -> params its grid varies (either)
    not_compared: str = ""  # why no picks are compared at all ('' when they are)
    read_words: tuple | None = None  # (a, b) data.missing_words, when the two differ (None
    # inside: pandas' default list); None when the same or a spec text cannot say


@dataclass(frozen=True)
class ModelHistory:
    """One model (or every model of a family) across the sweeps of one spec name, oldest
    first: per sweep and model the cell its rule picks, CV mean ± SE and test score, and
    whether the data or the spec changed since the sweep before."""

    name: str
    models: tuple[str, ...]
    metric: str
    better: str
    se: str
    rule: str | None  # None: each sweep's own rule
    table: pd.DataFrame
    n_sweeps: int | None = None  # sweeps of the spec, holding these models or not


@dataclass(frozen=True)
class Findings:
    """The findings of a sweep's leakage checks: kind, severity, column, value, message,
    allowed; errors first."""

    facts: SweepFacts
    table: pd.DataFrame
