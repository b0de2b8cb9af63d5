"""What a user is told when a name they gave matches nothing: the option and the value as
given, the names there are (the first few and a count when there are many) and the closest
one. Every command says it in this one shape, whichever name it was."""

from __future__ import annotations

import difflib

__all__ = ["nearest", "listed", "not_found"]

SHOWN = 8
"""Names listed before the rest are only counted."""


def nearest(name: str, candidates) -> str:
    """A ' Did you mean ...?' hint naming the closest candidate, or ''."""
    close = difflib.get_close_matches(str(name), [str(c) for c in candidates], n=1,
                                      cutoff=0.5)
    return f" Did you mean '{close[0]}'?" if close else ""


def listed(names, *, first: int = SHOWN, total: int | None = None) -> str:
    """The names, or the first `first` of them and how many there are in all (`total`
    when `names` are only the first of them)."""
    names = [str(n) for n in names]
    total = len(names) if total is None else total
    if not names:
        return "none"
    if total <= first:
        return ", ".join(names)
    return f"{', '.join(names[:first])}, ... ({total} in all)"


def not_found(option: str, value, what: str, known, *, known_as: str, then: str = "",
              total: int | None = None) -> str:
    """One paragraph: `option` 'value' is `what`; `known_as`: the known names (`total` of
    them, if `known` holds only the first); the closest one; then `then` (a sentence on
    where to list them all, if any)."""
    known = [str(k) for k in known]
    return (f"{option} '{value}' is {what}; {known_as}: {listed(known, total=total)}."
            f"{nearest(str(value), known)}" + (f" {then}" if then else ""))
