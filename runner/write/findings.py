"""What the leakage checks report: the kinds of finding (pure data, so a spec's
`checks.allow` validates without numpy or pandas) and one finding as a record. The checks
themselves are in `leakage.py`; findings are stored with each sweep (table `findings`),
printed by `check` and `run`, and listed in the report."""

from __future__ import annotations

from dataclasses import dataclass

__all__ = ["KINDS", "Kind", "Finding", "WARNING", "ERROR"]

WARNING, ERROR = "warning", "error"


@dataclass(frozen=True)
class Kind:
    """One kind of finding: its name, how sure a finding of it is, and what it means."""

    name: str
    severity: str  # WARNING: likely, look into it; ERROR: certain, refused unless allowed
    means: str


KINDS = {k.name: k for k in (
    Kind("id_column", WARNING, "a feature whose values are unique or nearly unique per row, "
         "like an identifier: it can only help a model memorise rows"),
    Kind("unseen_levels", WARNING, "a categorical feature whose levels are mostly unseen by "
         "the fitting rows of the folds (dates or ids as text), or that has levels only in "
         "the test rows; models treat unseen levels as missing"),
    Kind("duplicate_rows", WARNING, "feature rows repeated exactly on both sides of the test "
         "split, in data whose rows are otherwise mostly distinct"),
    Kind("target_proxy", WARNING, "a feature that predicts the target almost perfectly "
         "(|r| > 0.99, or one split with R² > 0.99): likely a copy or a consequence of it"),
    Kind("group_key", WARNING, "under row-wise folds, a column that looks like a group key "
         "(an id-like name, or text with hundreds of levels; ten values or more, several "
         "rows each) has rows on both sides of a fold: set folds.groups to it"),
    Kind("missing_words", WARNING, "a text feature in which words such as 'None' or 'NA' "
         "were read as missing values (pandas' default list) beside its other words: if they "
         "are levels, the models never see them; data.missing_words says which words mean "
         "missing"),
    Kind("split_overlap", ERROR, "a test file, column or test.groups that breaks the plan's "
         "promise: groups shared with the training rows (grouped plans), or test rows not after "
         "every training row (time-ordered plans)"),
)}
"""Every kind a leakage check can report, by name (the names `checks.allow` takes)."""


@dataclass(frozen=True)
class Finding:
    """One finding of one check: which column, the number that set it off, one sentence."""

    kind: str
    column: str | None
    value: float | None
    message: str
    allowed: bool = False  # listed in the spec's checks.allow

    @property
    def severity(self) -> str:
        return KINDS[self.kind].severity

    @property
    def refused(self) -> bool:
        """An error nobody allowed: the sweep must not run."""
        return self.severity == ERROR and not self.allowed

    def row(self) -> dict:
        """The finding as a row of the store's `findings` table (without the sweep id)."""
        return {"kind": self.kind, "severity": self.severity, "column_name": self.column,
                "value": self.value, "message": self.message, "allowed": self.allowed}
