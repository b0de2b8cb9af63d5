"""Notes and labels on sweeps, and choosing sweeps by them.

A sweep carries one free-text note (`sweeps.note`) and any number of key=value labels (rows
of `sweep_labels`), given to `run` or changed later with `set_labels`. A `Selection` says
which sweeps a command means — ids, labels, spec name, status, age — as one SQL condition
that the listing, the removal, export and merge all use, so a filter means one thing
everywhere. Labels and notes come from people and from stores others wrote: they are
checked when written and never become a query's text, only its parameters."""

from __future__ import annotations

import re
from dataclasses import dataclass
from datetime import datetime, timedelta

from ..errors import StoreError
from ..names import not_found

__all__ = ["Selection", "parse_label", "parse_labels", "check_labels", "check_key", "check_note",
           "parse_age", "resolve_ids", "set_labels", "STATUSES", "MAX_NOTE", "MAX_VALUE"]

KEY = re.compile(r"[A-Za-z0-9][A-Za-z0-9_.\-]{0,63}")
MAX_VALUE = 200
MAX_NOTE = 2000
MAX_LABELS = 50
STATUSES = ("finished", "failed", "interrupted", "running")
_CONTROL = re.compile(r"[\x00-\x08\x0b-\x1f\x7f-\x9f]")
_AGE = re.compile(r"(\d{1,6})\s*([hdw])")
_AGE_UNITS = {"h": timedelta(hours=1), "d": timedelta(days=1), "w": timedelta(weeks=1)}


def _check_text(text: str, what: str, limit: int, *, lines: bool = False) -> str:
    if not isinstance(text, str):
        raise StoreError(f"{what} must be text, got {type(text).__name__}.")
    if _CONTROL.search(text) or (not lines and ("\n" in text or "\t" in text)):
        allowed = "line breaks and tabs are the only ones a note may hold" if lines else \
            "write it as plain text on one line"
        raise StoreError(f"{what} holds a control character (such as an escape, a carriage "
                         f"return or, in a label, a line break); {allowed}.")
    if len(text) > limit:
        raise StoreError(f"{what} is {len(text)} characters long; the limit is {limit}. "
                         "Shorten it (a note can point to a longer document).")
    return text


def parse_label(text: str) -> tuple[str, str]:
    """'key=value' -> (key, value); the key as `check_labels` wants it."""
    key, sep, value = str(text).partition("=")
    if not sep:
        raise StoreError(f"label {text!r} has no '='; write a label as KEY=VALUE, e.g. "
                         "purpose=baseline.")
    key, value = key.strip(), value.strip()
    check_labels({key: value})
    return key, value


def parse_labels(texts) -> dict[str, str]:
    """Several 'key=value' texts as a dict (a key given twice keeps its last value)."""
    return check_labels(dict(parse_label(t) for t in texts))


def check_labels(labels: dict) -> dict[str, str]:
    """Refuse a label whose key is not a short plain name or whose value is not one line of
    at most MAX_VALUE characters; return the labels as given."""
    if len(labels) > MAX_LABELS:
        raise StoreError(f"{len(labels)} labels given; a sweep takes at most {MAX_LABELS}.")
    for key, value in labels.items():
        if not isinstance(key, str) or not KEY.fullmatch(key):
            raise StoreError(f"label key {str(key)[:70]!r} is not a plain name: use 1-64 "
                             "letters, digits, '_', '.' or '-', starting with a letter or "
                             "digit (e.g. data=2026-11, purpose=baseline).")
        _check_text(value, f"the value of label {key}", MAX_VALUE)
        if not value:
            raise StoreError(f"label {key} has an empty value; give one ({key}=VALUE). "
                             f"To take a label off a sweep: foldwise label --drop {key}.")
    return dict(labels)


def check_key(key: str) -> str:
    """A label key as given, refused (as `check_labels` does) unless it is a plain name."""
    if not KEY.fullmatch(key):
        check_labels({key: "x"})
    return key


def check_note(note: str | None) -> str | None:
    """Refuse a note longer than MAX_NOTE characters or holding control characters other
    than line breaks and tabs."""
    return None if note is None else _check_text(note, "the note", MAX_NOTE, lines=True)


def parse_age(text: str) -> timedelta:
    """'12h', '30d' or '6w' as a timedelta."""
    found = _AGE.fullmatch(str(text).strip().lower())
    if not found:
        raise StoreError(f"age {text!r} is not understood; write a number and a unit: h "
                         "(hours), d (days) or w (weeks), e.g. --older-than 30d.")
    return int(found[1]) * _AGE_UNITS[found[2]]


def resolve_ids(known, given, *, where: str = "here",
                listed: str = "`foldwise sweeps` lists them") -> list[str]:
    """Each given id (or unique prefix of one) as the full id among `known`, the sweeps of
    `where` (said in a refusal, with where they are `listed`)."""
    known = list(known)
    out = []
    for prefix in given:
        hits = [s for s in known if s.startswith(str(prefix))] if prefix else []
        if len(hits) != 1:
            raise StoreError(not_found("--sweep", prefix, f"no sweep id (nor the start of "
                                       f"one) {where}", sorted(known, reverse=True),
                                       known_as="its sweeps, newest first",
                                       then=f"{listed}.")
                             if not hits else f"sweep id prefix '{prefix}' matches "
                             f"{len(hits)} sweeps; give more characters.")
        out.append(hits[0])
    return list(dict.fromkeys(out))


@dataclass(frozen=True)
class Selection:
    """Which sweeps a command means: every condition given must hold (none given: all).

    `labels` pairs a key with a value, or with None for any value; `before` keeps sweeps
    started before that time. Ids are full sweep ids (see `resolve_ids`)."""

    ids: tuple[str, ...] = ()
    labels: tuple[tuple[str, str | None], ...] = ()
    name: str | None = None
    status: str | None = None
    before: datetime | None = None

    def __post_init__(self):
        if self.status is not None and self.status not in STATUSES:
            raise StoreError(f"status must be one of {', '.join(STATUSES)}, got "
                             f"{self.status!r}.")

    @classmethod
    def of(cls, *, ids=(), labels=(), name=None, status=None, older_than=None) -> "Selection":
        """A selection from command-line forms: labels as 'key=value' or 'key', an age
        such as '30d'."""
        pairs = []
        for text in labels:
            key, sep, value = str(text).partition("=")
            key = check_key(key.strip())
            if sep and not value.strip():
                raise StoreError(f"label filter {text!r} has an empty value; give --label "
                                 f"{key} to match any value of it, or --label {key}=VALUE "
                                 "to match one.")
            pairs.append(parse_label(text) if sep else (key, None))
        before = datetime.now() - parse_age(older_than) if older_than else None
        return cls(tuple(ids), tuple(pairs), name, status, before)

    @property
    def empty(self) -> bool:
        return not (self.ids or self.labels or self.name or self.status or self.before)

    def describe(self) -> str:
        """The conditions in words, e.g. "label purpose=baseline, status interrupted"."""
        parts = [f"sweep {', '.join(self.ids)}"] if self.ids else []
        parts += [f"label {k}={v}" if v is not None else f"label {k}" for k, v in self.labels]
        if self.name:
            parts.append(f"spec name {self.name}")
        if self.status:
            parts.append(f"status {self.status}")
        if self.before:
            parts.append(f"started before {self.before:%Y-%m-%d %H:%M}")
        return ", ".join(parts) or "every sweep"

    def check_names(self, names, pairs, where: str) -> None:
        """Refuse a spec name, label key or key=value that no sweep of `where` carries
        (`names`: the spec names they do; `pairs`: their (key, value) labels), so a
        mistyped --name or --label is told apart from filters that matched nothing."""
        names = sorted({str(n) for n in names if n is not None})
        if self.name is not None and self.name not in names:
            raise StoreError(not_found("--name", self.name, f"the spec name of no sweep "
                                       f"{where}", names, known_as="its spec names"))
        pairs = {(str(k), str(v)) for k, v in pairs if k is not None and v is not None}
        keys = sorted({k for k, _ in pairs})
        for key, value in self.labels:
            if key not in keys:
                raise StoreError(not_found("--label", key, f"a label key of no sweep {where}",
                                           keys, known_as="its label keys"))
            if value is not None and (key, value) not in pairs:
                raise StoreError(not_found(
                    "--label", f"{key}={value}", f"a label of no sweep {where}",
                    sorted(f"{k}={v}" for k, v in pairs if k == key),
                    known_as=f"its labels of key {key}"))

    def where(self, sweeps: str = "s", labels_table: str = "sweep_labels", *,
              running_as_interrupted: bool = False) -> tuple[str, list]:
        """An SQL condition on the sweeps table aliased `sweeps` and its parameters (`?`).

        `running_as_interrupted` lets 'interrupted' match sweeps still marked running too,
        for a caller that then tells the dead ones from the living."""
        clauses, params = ["true"], []
        if self.ids:
            clauses.append(f"list_contains(?::varchar[], {sweeps}.sweep_id)")
            params.append(list(self.ids))
        for key, value in self.labels:
            clauses.append(f"exists (select 1 from {labels_table} l where l.sweep_id = "
                           f"{sweeps}.sweep_id and l.key = ?"
                           + (" and l.value = ?)" if value is not None else ")"))
            params += [key] if value is None else [key, value]
        if self.name:
            clauses.append(f"{sweeps}.name = ?")
            params.append(self.name)
        if self.status:
            wide = running_as_interrupted and self.status == "interrupted"
            clauses.append(f"{sweeps}.status in (?, ?)" if wide else f"{sweeps}.status = ?")
            params += ["interrupted", "running"] if wide else [self.status]
        if self.before:
            clauses.append(f"{sweeps}.started_at < ?")
            params.append(self.before)
        return " and ".join(clauses), params


def set_labels(store, sweep_id: str, labels: dict[str, str] | None = None, *,
               drop=(), note: str | None = None) -> None:
    """Set (add or change) labels of a sweep, drop others, and with `note` replace its note
    ('' clears it), all in one transaction. On a team store the role needs INSERT and
    DELETE on sweep_labels (and UPDATE on sweeps for a note); it is told before anything
    changes if it lacks them."""
    labels = check_labels(labels or {})
    drop = [check_key(str(k)) for k in drop]
    check_note(note)
    wanted = [("sweep_labels", "INSERT"), ("sweep_labels", "DELETE")]
    store.require_privileges(wanted + ([("sweeps", "UPDATE")] if note is not None else []),
                             doing="change a sweep's labels or note",
                             needs="`label` needs INSERT and DELETE on sweep_labels and "
                                   "UPDATE on sweeps", grant="foldwise_writer",
                             changed="changed")
    import pandas as pd

    rows = pd.DataFrame({"sweep_id": sweep_id, "key": list(labels), "value": list(labels.values())},
                        columns=["sweep_id", "key", "value"])

    if store.query("select count(*) as n from sweeps where sweep_id = ?", [sweep_id]).n[0] == 0:
        raise StoreError(f"no sweep '{sweep_id}' in store {store.path}; `foldwise sweeps` "
                         "lists them.")

    def work(con):
        gone = [*labels, *drop]
        if gone:
            con.execute("delete from sweep_labels where sweep_id = ? and "
                        "list_contains(?::varchar[], key)", [sweep_id, gone])
        if len(rows):
            con.register("_labels", rows)
            con.execute("insert into sweep_labels by name select * from _labels")
        if note is not None:
            con.execute("update sweeps set note = ? where sweep_id = ?", [note or None, sweep_id])

    store._transaction(work, what="changing labels")
