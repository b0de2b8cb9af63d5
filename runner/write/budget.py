"""The size of a sweep, worked out by arithmetic from the spec before any data are read or
any array is built: cells, folds, fits, score rows and a rough store size, and the limits
(`limits:` in the spec, or `--lift-limits`) that refuse a plan too large to run."""

from __future__ import annotations

from dataclasses import dataclass
from typing import NamedTuple

from ..errors import DataError, SpecError
from ..metrics import TASK_DEFAULTS
from .grid import count_model

__all__ = ["PlanSize", "ModelSize", "plan_size", "check_limits", "check_plan_memory", "data_limit_bytes",
           "BYTES_PER_ROW"]

BYTES_PER_ROW = 120
"""Rough bytes a score row takes in a DuckDB store file, cells and sweep included: measured
on a 2 000-cell ridge sweep (126 000 fold- and test-score rows, a 15.2 MB file)."""

_LIFT = ("raise `limits.{field}` in the spec, or run with --lift-limits if the machine "
         "can take it")


class ModelSize(NamedTuple):
    """One model's share of a plan; `bound`: the cell count is an upper bound."""

    label: str
    family: str
    cells: int
    fits_per_fold: int
    bound: bool


@dataclass(frozen=True)
class PlanSize:
    """What a sweep will compute and store, before the explain step."""

    models: tuple[ModelSize, ...]
    folds: int
    metrics: int

    @property
    def cells(self) -> int:
        return sum(m.cells for m in self.models)

    @property
    def bound(self) -> bool:
        """True if a {path: N} grid makes the cell count an upper bound."""
        return any(m.bound for m in self.models)

    @property
    def fits(self) -> int:
        """Fits a sweep makes: per fold and for the refit, one per group of cells that
        differ only in a path parameter, one per other cell."""
        return sum(m.fits_per_fold for m in self.models) * (self.folds + 1)

    @property
    def fits_each(self) -> int:
        """Fits with --no-paths: every cell on every fold and the refit."""
        return self.cells * (self.folds + 1)

    @property
    def fold_rows(self) -> int:
        return self.cells * self.folds * self.metrics

    @property
    def test_rows(self) -> int:
        return self.cells * self.metrics

    @property
    def store_bytes(self) -> int:
        return (self.fold_rows + self.test_rows) * BYTES_PER_ROW

    def estimate(self) -> str:
        """One line: fits, rows and the rough store size."""
        up = "≤" if self.bound else ""
        each = (f" ({up}{self.fits_each:,} with --no-paths)" if self.fits_each != self.fits
                else "")
        return (f"{self.fits:,} fits{each}, {up}{self.fold_rows:,} fold-score rows, "
                f"{up}{self.test_rows:,} test-score rows, store about "
                f"{_size_text(self.store_bytes)} (explain step not counted)")


def _size_text(n: float) -> str:
    for unit in ("B", "KB", "MB", "GB", "TB"):
        if n < 1000 or unit == "TB":
            return f"{n:.0f} {unit}" if unit == "B" else f"{n:.1f} {unit}"
        n /= 1000
    return ""


def plan_size(spec, task: str | None = None) -> PlanSize:
    """Cells per model, folds and metrics of a spec, without expanding any grid; for
    `task` (default: the spec's, if it states one; else as for regression)."""
    models = []
    for label, m in spec.models.items():
        count = count_model(m, task or spec.task)
        models.append(ModelSize(label, m.family, count.cells, count.fits_per_fold,
                                count.bound))
    metrics = spec.metrics or max(TASK_DEFAULTS.values(), key=len)  # task not known yet
    return PlanSize(tuple(models), spec.folds.k * spec.folds.repeats, len(metrics))


def check_limits(spec, *, lifted: bool = False, paths: bool = True,
                 task: str | None = None) -> PlanSize:
    """The plan's size, or a SpecError if it passes a limit (unless `lifted`); `paths=False`
    (every cell fitted on its own) holds the fits of that way to the fits limit. Checked
    before the data are read, and again for their `task` once it is known."""
    size = plan_size(spec, task)
    if lifted:
        return size
    limits = spec.limits
    where = f"spec {spec.source}: " if spec.source else ""
    if size.folds > limits.folds:
        raise SpecError(
            f"{where}folds.k x folds.repeats = {spec.folds.k:,} x {spec.folds.repeats:,} = "
            f"{size.folds:,} validation folds, more than the limit of {limits.folds:,} "
            f"(limits.folds). Lower folds.repeats or folds.k, or "
            + _LIFT.format(field="folds") + ".")
    if size.cells > limits.cells:
        label, _, n, *_ = max(size.models, key=lambda m: m.cells)
        raise SpecError(
            f"{where}the grids make {size.cells:,} cells (models.{label} alone {n:,}), more than the "
            f"limit of {limits.cells:,} (limits.cells). Give fewer values or a smaller n in "
            "the ranges of models." + label + ".grid, or " + _LIFT.format(field="cells") + ".")
    fits = size.fits if paths else size.fits_each
    if fits > limits.fits:
        how = ("(one per fold and one refit for each group of cells a path fit scores at "
               "once, and for each other cell)" if paths else
               f"= {size.cells:,} cells x ({size.folds:,} folds + 1 refit), with --no-paths")
        raise SpecError(
            f"{where}the plan makes {fits:,} fits {how}, more than the limit of "
            f"{limits.fits:,} (limits.fits). Shrink the grids or folds.repeats, or "
            + _LIFT.format(field="fits") + ".")
    return size


def check_plan_memory(spec, n_train: int, *, lifted: bool = False) -> None:
    """Refuse a plan whose folds' row positions (8 bytes per training row per fold) would
    pass `limits.plan_mb`, before they are drawn."""
    folds = spec.folds.k * spec.folds.repeats
    need = 8 * n_train * folds
    limit = spec.limits.plan_mb * 2**20
    if not lifted and need > limit:
        raise DataError(
            f"{folds:,} folds of {n_train:,} training rows need {_size_text(need)} for their "
            f"row positions, more than limits.plan_mb = {spec.limits.plan_mb:g} MiB. Lower "
            "folds.repeats, or " + _LIFT.format(field="plan_mb") + ".")


def data_limit_bytes(spec, *, lifted: bool = False) -> int | None:
    """The most bytes a data or test file may have (None: no limit)."""
    return None if lifted else int(spec.limits.data_mb * 2**20)
