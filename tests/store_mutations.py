"""Hostile stores for the read commands: two small finished stores (a numeric and a class
target, each swept twice, explained, with a tree and a linear model built), copies of them
with one column of one table changed to a value its type allows but no sweep writes (or a
row deleted or repeated), and every read command run on a copy through CliRunner with its
outcome judged: an answer (exit 0) or one `Error:` paragraph (exit 2), never a traceback,
exit 1, a hang or a terminal control character."""

from __future__ import annotations

import shutil
import signal
import unicodedata
from dataclasses import dataclass
from pathlib import Path

import duckdb
from click.testing import CliRunner

from runner.cli import main
from runner.demo import make_greenhouse
from runner.demo_grades import make_grades
from runner.store.schema import TABLES

LONG = "w" * 10_240
CONTROL = "a\x1b[2J\x1b]0;t\x07\r\x08\x00z"
MUTATIONS = {
    "VARCHAR": {"null": None, "empty": "", "long": LONG, "control": CONTROL},
    "JSON": {"null": None, "broken": "{not json", "list": "[1, 2]", "text": '"x"',
             "nested": '{"a": {"b": [null]}}'},
    "INTEGER": {"null": None, "negative": -1, "zero": 0, "huge": 2**31 - 1},
    "BIGINT": {"null": None, "negative": -1, "zero": 0, "huge": 2**62},
    "DOUBLE": {"null": None, "nan": float("nan"), "inf": float("inf"), "-inf": float("-inf"),
               "negative": -1.0},
    "TIMESTAMP": {"null": None, "far": "9999-12-31 23:59:59", "old": "0001-01-01 00:00:00"},
    "BOOLEAN": {"null": None},
    "BLOB": {"null": None, "empty": b"", "bytes": b"\x00\xff" * 64},
    "DOUBLE[]": {"null": None, "empty": [], "nan": [float("nan"), float("inf")]},
    "VARCHAR[]": {"null": None, "empty": [], "control": [CONTROL]},
}
"""Per column type, the hostile values a copy gets (every row of the column)."""

ROW_MUTATIONS = ("delete", "duplicate")
"""Per table: its first row deleted; its first row repeated (where no key forbids it)."""


@dataclass(frozen=True)
class Case:
    table: str
    column: str | None  # None: a row mutation
    mutation: str

    @property
    def name(self) -> str:
        return f"{self.table}.{self.column or '*'}:{self.mutation}"


def build_base(folder: Path, task: str) -> Path:
    """A finished store of `task` (regression or classification) in `folder`: two sweeps of
    one spec (so diff pairs them), the explain step on its picks, a label, a failed fit and
    a tree and a linear model built. Returns the store file."""
    folder.mkdir(parents=True, exist_ok=True)
    if task == "regression":
        df, target, linear = make_greenhouse(120, seed=3), "yield_kg_m2", "ridge"
        data = "  categorical: [cultivar, glazing, irrigation]\n  drop: [bay_row]\n"
        models = ("  ridge: {family: linear, grid: {penalty: l2, alpha: [0.1, 10.0]}}\n"
                  "  tree: {family: pruned_tree, grid: {ccp_fraction: [0.005, 0.05], "
                  "min_samples_leaf: [5]}}\n"
                  "  forest: {family: forest, grid: {n_estimators: [4, 8], "
                  "max_features: [0.5]}}\n")
    else:
        df, target, linear, data = make_grades(120, seed=2), "grade", "logit", ""
        models = ("  logit: {family: linear, grid: {penalty: l2, alpha: [0.01, 1.0]}}\n"
                  "  tree: {family: pruned_tree, grid: {ccp_fraction: [0.01, 0.05]}}\n")
    df["batch_no"] = range(len(df))  # an id-like column: the leakage checks' findings
    df.to_csv(folder / "d.csv", index=False)
    (folder / "spec.yaml").write_text(
        f"name: {task}\ndata:\n  path: d.csv\n  target: {target}\n{data}"
        "test: {fraction: 0.25, seed: 1}\nfolds: {k: 2, repeats: 1, seed: 2}\n"
        "store: s.duckdb\nexplain: {cells: picked, permutation: {repeats: 2, seed: 0}}\n"
        f"models:\n{models}")
    store = folder / "s.duckdb"
    for args in (["run", folder / "spec.yaml", "--jobs", "1", "-q"],
                 ["run", folder / "spec.yaml", "--jobs", "1", "-q", "--fresh"],
                 ["label", "team=north", "--note", "second look", "--store", store],
                 ["build", "--model", "tree", "--out", folder / "tree.skops"],
                 ["build", "--model", linear, "--out", folder / "linear.skops"]):
        if args[0] == "build":
            args += ["--store", store, "--data", folder / "d.csv"]
        out = CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)
        assert out.exit_code == 0, (args, out.output)
    with duckdb.connect(str(store)) as con:  # one failed fit, as a sweep records it
        con.execute("insert into failures select sweep_id, cell_id, 0, 1, 'ValueError', "
                    "'the fit did not converge' from cells order by sweep_id desc, position "
                    "limit 1")
    return store


def _residuals(record: dict, *values) -> dict:
    """The record with its first residuals replaced by `values`."""
    return {**record, "scores": [*values, *record["scores"][len(values):]]}


INTERVALS = {
    "a NULL residual": (lambda r: _residuals(r, None), None),
    "NaN and infinite residuals": (lambda r: _residuals(r, float("nan"), float("inf"),
                                                        float("-inf")), None),
    "a residual beyond float range": (lambda r: _residuals(r, 10**400), None),
    "not an object": (lambda r: r["scores"], "interval record that is a list, not an object"),
    "no residuals": (lambda r: {**r, "scores": None}, "lists no residuals"),
    "no residual at all": (lambda r: {**r, "n": 0, "scores": []},
                           "holds no held-out residual that is a finite number (0 listed)"),
    "every residual NULL": (lambda r: {**r, "scores": [None] * r["n"]},
                            "holds no held-out residual that is a finite number (30 listed)"),
    "a residual as text": (lambda r: _residuals(r, "0.5"), "holds '0.5' where an absolute"),
    "a negative residual": (lambda r: _residuals(r, -1.0), "holds '-1.0' where an absolute"),
    "a count not a number": (lambda r: {**r, "n": "30"}, "counts n = 30 residuals but"),
    "a count that disagrees": (lambda r: {**r, "n": 10**12}, "counts n = 1000000000000"),
    "a count true": (lambda r: {**r, "n": True}, "counts n = True residuals"),
    "more residuals than a card keeps": (lambda r: {**r, "n": 100_001,
                                                    "scores": [1.0] * 100_001},
                                         "lists 100,001 residuals, more than the 100,000"),
    "ranks not one per residual": (lambda r: {**r, "ranks": [1, 2]},
                                   "has 'ranks' that are not one per residual"),
    "ranks beyond the count": (lambda r: {**r, "ranks": list(range(1, r["n"])) + [10**6]},
                               "ranks are not increasing whole numbers"),
    "a huge count of thinned residuals": (lambda r: {**r, "n": 10**400,
                                                     "ranks": list(range(1, r["n"] + 1))},
                                          "not a whole number from 30"),
}
"""Per name, a change to a built model's held-out residuals (its card's interval record,
as the store's models row keeps it) and what `predict --interval` must do: None, answer
with a note that it skipped the residuals that are not finite; else the refusal's words."""


def mutate_interval(base: Path, into: Path, change) -> None:
    """Copy `base` to `into` with `change` applied to every built model's interval record."""
    import json

    shutil.copyfile(base, into)
    with duckdb.connect(str(into)) as con:
        for model_id, text in con.execute("select model_id, card from models").fetchall():
            card = json.loads(text)
            if card.get("interval"):
                card["interval"] = change(card["interval"])
                con.execute("update models set card = ? where model_id = ?",
                            [json.dumps(card), model_id])


def columns(store: Path) -> list[tuple[str, str, str]]:
    """(table, column, type) of every stored table's columns, the meta table included."""
    with duckdb.connect(str(store), read_only=True) as con:
        return [tuple(r) for r in con.execute(
            "select c.table_name, c.column_name, c.data_type from information_schema.columns c "
            "join information_schema.tables t using (table_catalog, table_schema, table_name) "
            "where t.table_type = 'BASE TABLE' and c.table_schema = 'main' "
            "order by c.table_name, c.ordinal_position").fetchall()]


def cases(store: Path) -> list[Case]:
    """Every (table, column, mutation) of the store's schema, and every row mutation."""
    found = [Case(t, c, m) for t, c, kind in columns(store) for m in MUTATIONS[kind]]
    return found + [Case(t, None, m) for t in ("foldwise_meta", *TABLES) for m in ROW_MUTATIONS]


def mutate(base: Path, into: Path, case: Case, kinds: dict | None = None) -> bool:
    """Copy `base` to `into` with `case` applied through DuckDB directly; False where the
    table's keys forbid it (a duplicate row of a keyed table, a key made equal). `kinds`
    maps (table, column) to its type (`columns`), read from `base` when not given."""
    shutil.copyfile(base, into)
    table, column = f'"{case.table}"', f'"{case.column}"'
    with duckdb.connect(str(into)) as con:
        if case.mutation == "delete":
            con.execute(f"delete from {table} where rowid = (select min(rowid) from {table})")
            return True
        if case.mutation == "duplicate":
            try:
                con.execute(f"insert into {table} select * from {table} limit 1")
            except duckdb.ConstraintException:
                return False
            return True
        kinds = kinds or {(t, c): k for t, c, k in columns(base)}
        kind = kinds[(case.table, case.column)]
        value = MUTATIONS[kind][case.mutation]
        if kind == "JSON" and case.mutation == "broken":  # JSON checks what it is given:
            con.execute(f"alter table {table} alter {column} type varchar")  # a plain column
            kind = "VARCHAR"                                    # (another program's) does not
        cast = f"::{kind}" if value is not None else ""
        for where in ("", f" where rowid = (select min(rowid) from {table})"):
            try:
                con.execute(f"update {table} set {column} = ?{cast}{where}", [value])
                return True
            except duckdb.ConstraintException:
                continue
    return False


def commands(folder: Path, store: Path, out: Path) -> dict[str, list[str]]:
    """Every read command of a base store's sweeps and built models, by a short name."""
    with duckdb.connect(str(store), read_only=True) as con:
        models = [m for (m,) in con.execute(
            "select distinct model from cells order by model").fetchall()]
        built = [m for (m,) in con.execute(
            "select model_id from models order by model").fetchall()]
    s = ["--store", str(store)]
    found = {"sweeps": ["sweeps", *s], "summary": ["summary", *s], "pick": ["pick", *s],
             "compare": ["compare", *s], "diff": ["diff", *s],
             "history": ["history", "--model", models[0], *s],
             "report": ["report", "--out", str(out / "r.html"), *s],
             "export": ["export", str(out / "export"), *s],
             "coefficients": ["coefficients", *s], "models": ["models", *s]}
    for m in models:
        found[f"path {m}"] = ["path", "--model", m, *s]
    for kind in ("complexity", "models", "importance", "predictions", "tree", "calibration",
                 "roc", "history"):
        found[f"plot {kind}"] = ["plot", kind, "--out-dir", str(out / "plots"), "--image",
                                 "png", *s]
    for i, model_id in enumerate(built):
        found[f"coefficients model {i}"] = ["coefficients", "--model-id", model_id, *s]
        found[f"card {i}"] = ["card", model_id, *s]
        found[f"fetch {i}"] = ["fetch", model_id, "--out", str(out / f"m{i}.skops"), *s]
        found[f"predict {i}"] = ["predict", model_id, str(folder / "d.csv"), "--out",
                                 str(out / f"p{i}.csv"), "-q", *s]
    return found


class _Hang(Exception):
    pass


def _alarm(signum, frame):
    raise _Hang()


def judge(argv: list[str], *, seconds: int = 30) -> str | None:
    """Run one command; None when it answered (exit 0) or refused in one `Error:`
    paragraph (exit 2), else what went wrong."""
    before = signal.signal(signal.SIGALRM, _alarm)
    signal.alarm(seconds)
    try:
        out = CliRunner().invoke(main, argv)
    except _Hang:
        return f"no answer within {seconds} s"
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, before)
    if isinstance(out.exception, _Hang):
        return f"no answer within {seconds} s"
    if out.exception is not None and not isinstance(out.exception, SystemExit):
        return f"{type(out.exception).__name__}: {str(out.exception)[:300]}"
    text = out.output
    if out.exit_code not in (0, 2):
        return f"exit {out.exit_code}: {text[-400:]}"
    if out.exit_code == 2 and not (text.startswith("Error: ") and text.count("\n") == 1):
        return f"exit 2 without one Error: paragraph: {text[-400:]!r}"
    control = {c for c in text if unicodedata.category(c) == "Cc" and c != "\n"}
    if control:
        return f"control characters {sorted(control)!r} in the output"
    return None


def reads(argv: list[str]) -> dict[str, set[str] | None]:
    """What one command reads on a base store: per table, the columns its queries name, or
    None for every column (a `*` query). The meta table, which every command reads, is left
    out; `export` copies every table, so it reads everything."""
    import re

    from runner.store import Store

    seen: list[str] = []
    query, rows = Store.query, Store.rows
    Store.query = lambda self, sql, params=None: seen.append(sql) or query(self, sql, params)
    Store.rows = lambda self, sql, params=None: seen.append(sql) or rows(self, sql, params)
    try:
        assert judge(argv) is None, argv
    finally:
        Store.query, Store.rows = query, rows
    if argv[0] == "export":
        return dict.fromkeys(TABLES)
    found: dict[str, set[str] | None] = {}
    for sql in seen:
        words = set(re.findall(r"\w+", sql.lower()))
        every = "*" in sql.replace("count(*)", "")
        for table in words & set(TABLES):
            if every or found.get(table, set()) is None:
                found[table] = None
            else:
                found.setdefault(table, set()).update(words)
    return found


def touches(case: Case, read: dict[str, set[str] | None]) -> bool:
    """Whether a command with these reads meets the case's change."""
    if case.table == "foldwise_meta":
        return True
    if case.table not in read:
        return False
    columns = read[case.table]
    return case.column is None or columns is None or case.column.lower() in columns


HEAVY = ("report", "plot ")
"""Commands that draw figures: each takes a second or more, so the matrix samples them."""


def matrix(bases: dict) -> list[tuple[str, Case, str]]:
    """The sampled runs of the store matrix, (task, case, command name): every table's
    every column and row mutation once, on the base stores in turn, with one hostile value
    of its type (in turn) and one of the quick commands that read it (in turn). Figures
    (a second or more each) are drawn once per table that only figures read, and each
    figure command once on another table. `bases` maps a task to (store, {command name:
    what it reads})."""
    keys = sorted({(c.table, c.column) for store, _ in bases.values() for c in cases(store)},
                  key=lambda k: (k[0], k[1] or ""))
    tasks = sorted(bases)
    runs, drawn = [], set()
    for i, (table, column) in enumerate(keys):
        task = tasks[i % len(tasks)]
        store, read = bases[task]
        found = [c for c in cases(store) if (c.table, c.column) == (table, column)]
        case = found[(i // len(tasks)) % len(found)]
        quick = [k for k in read if not k.startswith(HEAVY) and touches(case, read[k])]
        runs.append((task, case, quick[i % len(quick)] if quick else "export"))
        if table == "foldwise_meta":
            continue
        figures_only = not any(touches(Case(table, None, "delete"), read[k])
                               for k in read if not k.startswith(HEAVY))
        for name in (k for k in read if k.startswith(HEAVY) and touches(case, read[k])):
            seen = (name, table) if figures_only else name
            if seen not in drawn and (name != "report" or figures_only):
                drawn.add(seen)
                runs.append((task, case, name))
    return runs
