"""The results of reading a sweep: small frozen objects, each a table plus the facts that
say what the table is (which sweep, metric, direction, rule, kind of standard error, models
without a pick). Built only by `queries.py`; turned into display tables and sentences only
by `views.py`, for the CLI and the report alike."""

from __future__ import annotations

from dataclasses import dataclass, field

import pandas as pd

__all__ = ["SweepFacts", "Coverage", "Summary", "CellStats", "Picks", "ComplexityTable",
           "Comparison", "Importances", "Stability", "Findings"]


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
    scheme: str = "rows"  # how the folds cut the rows: rows, groups or time

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
    table: pd.DataFrame  # model, cells, complete, failed, unfinished, non_finite

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
    """The picked cell of each model: one row per model and rule."""

    facts: SweepFacts
    rules: tuple[str, ...]
    se: str
    table: pd.DataFrame
    coverage: Coverage
    varying: dict = field(default_factory=dict)  # model -> the params its grid varies

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


@dataclass(frozen=True)
class Stability:
    """One row per explained cell: how much its fitted model changes across folds."""

    facts: SweepFacts
    table: pd.DataFrame


@dataclass(frozen=True)
class Findings:
    """The findings of a sweep's leakage checks: kind, severity, column, value, message,
    allowed; errors first."""

    facts: SweepFacts
    table: pd.DataFrame
