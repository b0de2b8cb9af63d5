"""What the explain step stored and the models built from a sweep, read: importances,
test predictions, tree shapes, stability, coefficients, and the cells and models `build`
and `predict` look up. Split from `queries.py`, which keeps the sweep-level reads."""

from __future__ import annotations

import pandas as pd

from ..errors import ModelError, StoreError
from ..names import not_found
from .queries import CELL_SUMMARY, json_object, picks, sweep_facts
from .results import Coefficients, Importances, Stability
from ..store import Store

__all__ = ["importance_table", "prediction_table", "tree_node_table", "tree_fold_table",
           "stability_table", "cell_record", "cell_scores", "built_models", "model_record",
           "coefficient_table"]


# -- what the explain step stored ------------------------------------------------------------
def _pick_marks(store: Store, sweep_id: str) -> pd.DataFrame:
    p = picks(store, sweep_id).table
    if p.empty:
        return pd.DataFrame(columns=["cell_id", "picked"])
    return (p.groupby("cell_id", sort=False)["rule"].agg(lambda r: " ".join(sorted(r)))
            .rename("picked").reset_index())


def importance_table(store: Store, sweep_id: str | None = None, *,
                     method: str | None = None) -> Importances:
    """Every stored importance of a sweep, with model, picks and rank (1 = most important).
    One row per cell, method and feature (a store from another hand may repeat one: their
    mean is taken). A permutation importance on a metric undefined on the test split (ROC
    AUC when its rows lack a class) is stored NULL, and a value that is not a finite number
    is read as such: both are left out here, since they rank nothing. A spread that is not
    finite (or negative) is missing, and a feature without a name is 'unknown'."""
    facts = sweep_facts(store, sweep_id)
    df = store.query("""
        select c.model, c.family, i.cell_id, c.params, c.complexity_rank, i.method,
               coalesce(i.feature, 'unknown') as feature,
               avg(i.value) as value,
               avg(case when isfinite(i.spread) and i.spread >= 0 then i.spread end) as spread,
               min(min(c.position)) over (partition by c.model) as model_row
        from importances i join cells c on c.sweep_id = i.sweep_id and c.cell_id = i.cell_id
        where i.sweep_id = ? and (?::varchar is null or i.method = ?)
          and isfinite(i.value)
        group by c.model, c.family, i.cell_id, c.params, c.complexity_rank, i.method,
                 coalesce(i.feature, 'unknown')""",
                     [facts.sweep_id, method, method])
    df = df.merge(_pick_marks(store, facts.sweep_id), on="cell_id", how="left")
    df["picked"] = df["picked"].fillna("")
    df["rank"] = (df.groupby(["cell_id", "method"], dropna=False)["value"]
                  .rank(ascending=False, method="min").astype(int))
    df = df.sort_values(["model_row", "complexity_rank", "method", "rank", "feature"])
    undefined = store.query("""select distinct cell_id from importances where sweep_id = ?
        and (?::varchar is null or method = ?) and not coalesce(isfinite(value), false)""",
                            [facts.sweep_id, method, method])["cell_id"]
    return Importances(facts, df.drop(columns="model_row").reset_index(drop=True),
                       _permutation_rows(store, facts.sweep_id), tuple(sorted(undefined)))


def _permutation_rows(store: Store, sweep_id: str) -> int | None:
    """The most test rows any of the sweep's permutations drew (explained.settings)."""
    drawn = []
    for text in store.query("select settings from explained where sweep_id = ?",
                            [sweep_id])["settings"]:
        value = json_object(text).get("permutation_rows")
        if isinstance(value, int) and not isinstance(value, bool):
            drawn.append(value)
    return max(drawn, default=None)


def prediction_table(store: Store, sweep_id: str | None = None) -> pd.DataFrame:
    """The stored test-split predictions of a sweep's explained cells, with model and picks,
    checked to be drawable (`_prediction_fault`)."""
    facts = sweep_facts(store, sweep_id)
    sweep_id = facts.sweep_id
    df = store.query("""
        select c.model, c.family, p.cell_id, p."row", p.observed, p.predicted,
               p.observed_class, p.predicted_class, p.probabilities,
               min(c.position) over (partition by c.model) as model_row
        from test_predictions p
        join cells c on c.sweep_id = p.sweep_id and c.cell_id = p.cell_id
        where p.sweep_id = ? order by model_row, p.cell_id, p."row" """, [sweep_id])
    fault = _prediction_fault(df, facts.task, len(facts.classes))
    if fault:
        raise StoreError(f"store {store.path}: table test_predictions, {fault} in sweep "
                         f"{sweep_id}, so its test predictions cannot be drawn; the store "
                         "was damaged or written by another program: rerun the spec to "
                         "store them again.")
    df = df.merge(_pick_marks(store, sweep_id), on="cell_id", how="left")
    df["picked"] = df["picked"].fillna("")
    return df.drop(columns="model_row")


def _prediction_fault(df: pd.DataFrame, task: str, n_classes: int) -> str | None:
    """What keeps stored test predictions from being drawn, or None: a numeric target's
    observed and predicted values finite; a class target's observed class named and its
    probabilities one finite share in [0, 1] per class of the sweep."""
    import numpy as np

    if task != "classification":
        for column in ("observed", "predicted"):
            values = pd.to_numeric(df[column], errors="coerce").to_numpy(dtype=float)
            if not np.isfinite(values).all():
                return f"column {column} is not a finite number on a row"
        return None
    if not df["observed_class"].map(lambda c: isinstance(c, str)).all():
        return "column observed_class is empty on a row"

    def usable(shares) -> bool:
        try:
            shares = np.asarray(shares, dtype=float)
        except (TypeError, ValueError):
            return False
        return shares.shape == (n_classes,) and bool(((shares >= 0) & (shares <= 1)).all())

    if not df["probabilities"].map(usable).all():
        return (f"column probabilities is not {n_classes} shares between 0 and 1 (one per "
                "class of the sweep) on a row")
    return None


def tree_node_table(store: Store, sweep_id: str, cell_id: str) -> pd.DataFrame:
    """The stored nodes of one cell's refit tree, in node order, checked to be one tree
    (`_tree_fault`): a store from another hand may hold any numbers there."""
    nodes = store.query("select * exclude (sweep_id) from tree_nodes where sweep_id = ? and "
                        "cell_id = ? order by node", [sweep_id, cell_id])
    fault = _tree_fault(nodes)
    if fault:
        raise StoreError(f"store {store.path}: table tree_nodes, {fault} in the tree of cell "
                         f"'{cell_id}' of sweep {sweep_id}, so it is not one tree and cannot "
                         "be drawn; the store was damaged or written by another program: "
                         "rerun the spec to store the tree again.")
    return nodes


def _tree_fault(nodes: pd.DataFrame) -> str | None:
    """What keeps stored nodes from being one tree as scikit-learn numbers it, or None:
    nodes 0..n-1, each split's two children after it and naming it their parent, leaves
    with no children, finite values and row counts of at least one."""
    import numpy as np

    n = len(nodes)
    whole = {c: pd.to_numeric(nodes[c], errors="coerce") for c in
             ("node", "parent", "left_child", "right_child", "n_samples", "value")}
    for column in ("node", "parent", "left_child", "right_child", "n_samples"):
        if whole[column].isna().any():
            return f"column {column} is empty for a node"
    if not np.array_equal(whole["node"].to_numpy(), np.arange(n)):
        return "column node does not number the nodes 0 to n - 1"
    left, right = whole["left_child"].to_numpy(), whole["right_child"].to_numpy()
    parent, ids = whole["parent"].to_numpy(), np.arange(n)
    leaf = (left == -1) & (right == -1)
    split = (left > ids) & (left < n) & (right > ids) & (right < n) & (left != right)
    if not (leaf | split).all():
        return "columns left_child and right_child name a node that is not a child"
    if n and parent[0] != -1 or split.any() and not (
            (parent[left[split].astype(int)] == ids[split]).all()
            and (parent[right[split].astype(int)] == ids[split]).all()):
        return "column parent does not name the node whose child it is"
    if (whole["n_samples"] < 1).any():
        return "column n_samples holds a count below one"
    if not np.isfinite(whole["value"].to_numpy(dtype=float)).all():
        return "column value is not a finite number for a node"
    return None


def tree_fold_table(store: Store, sweep_id: str | None = None) -> pd.DataFrame:
    """Each explained tree's shape per fold: leaves, depth, root split, used columns. A
    missing size reads as NaN and missing used columns as none (a store from another hand
    may hold NULL there)."""
    sweep_id = store.resolve_sweep(sweep_id)
    return store.query("""
        select c.model, t.cell_id, t."repeat", t.fold, t.n_leaves::double as n_leaves,
               t.depth::double as depth, t.root_feature, t.root_threshold, t.root_rule,
               list_filter(coalesce(t.features_used, []::varchar[]), x -> x is not null)
                   as features_used
        from tree_folds t join cells c on c.sweep_id = t.sweep_id and c.cell_id = t.cell_id
        where t.sweep_id = ? order by c.position, t."repeat", t.fold""", [sweep_id])


def stability_table(store: Store, sweep_id: str | None = None) -> Stability:
    """One row per explained cell: rank agreement of per-fold importances for every family,
    and for single trees the root share, Jaccard similarity of used columns and leaf spread
    (the numbers are defined in `stability.py`)."""
    from .stability import summarise

    facts = sweep_facts(store, sweep_id)
    imp = store.query("""
        select c.model, c.family, f.cell_id, f."repeat", f.fold, f.method, f.feature, f.value,
               c.position as cell_row
        from fold_importances f
        join cells c on c.sweep_id = f.sweep_id and c.cell_id = f.cell_id
        where f.sweep_id = ?""", [facts.sweep_id])
    marks = _pick_marks(store, facts.sweep_id).set_index("cell_id")["picked"].to_dict()
    return Stability(facts, summarise(imp, tree_fold_table(store, facts.sweep_id), marks))


# -- built models ----------------------------------------------------------------------------
def cell_record(store: Store, sweep_id: str, cell: str) -> dict:
    """One cell of a sweep by its id or a unique prefix of it."""
    df = store.query("select cell_id, model, family, params, complexity_rank from cells "
                     "where sweep_id = ? and starts_with(cell_id, ?) order by position",
                     [sweep_id, cell])
    if len(df) == 1:
        return df.iloc[0].to_dict()
    if df.empty:
        known = store.query("select cell_id from cells where sweep_id = ? order by position",
                            [sweep_id])["cell_id"]
        raise ModelError(not_found("--cell", cell, "no cell id (nor the start of one) of "
                                   f"sweep {sweep_id}", known, known_as="its cells",
                                   then="`foldwise path --model LABEL --format csv` lists a "
                                        "model's cell ids."))
    raise ModelError(f"cell id prefix '{cell}' matches {len(df)} cells of sweep {sweep_id}; "
                     "give more characters.")


def cell_scores(store: Store, sweep_id: str, cell_id: str) -> pd.DataFrame:
    """A cell's CV mean, SE and folds per metric of the sweep, with its test score
    (`has_test`: whether the refit's row is there; its value is NULL where undefined)."""
    df = store.query(f"""
        select s.metric, s.mean, s.se, s.n, t.value as test, t.metric is not null as has_test
        from {CELL_SUMMARY} s
        left join test_scores t
          on t.sweep_id = s.sweep_id and t.cell_id = s.cell_id and t.metric = s.metric
        where s.sweep_id = ? and s.cell_id = ?""", [sweep_id, cell_id])
    order = {m: i for i, m in enumerate(sweep_facts(store, sweep_id).metrics)}
    return df.sort_values("metric", key=lambda c: c.map(order)).reset_index(drop=True)


def built_models(store: Store, sweep_id: str | None = None) -> pd.DataFrame:
    """The store's built models, newest first (of one sweep if `sweep_id`)."""
    if sweep_id is not None:
        sweep_id = store.resolve_sweep(sweep_id)
    return store.query("""
        select model_id, sweep_id, model, family, rule, cell_id, rows_used, n_rows,
               created_at, user_name, artefact_bytes, artefact_sha256
        from models where ?::varchar is null or sweep_id = ?
        order by created_at desc, model_id desc""", [sweep_id, sweep_id])


def _model_id(store: Store, model_id: str, option: str) -> tuple[str, str, str]:
    """(model id, sweep id, rule) of the one built model whose id starts with `model_id`
    (given as `option`, which a refusal names)."""
    ids = store.query("select model_id, sweep_id, rule from models "
                      "where starts_with(model_id, ?)", [model_id])
    if ids.empty:
        newest = store.query("select model_id, count(*) over () as n from models order by "
                             f"created_at desc, model_id desc limit {_MODELS_NAMED}")
        raise ModelError(not_found(option, model_id, "no built model id (nor the start of "
                                   f"one) in store {store.path}", newest["model_id"],
                                   total=int(newest["n"].iloc[0]) if len(newest) else 0,
                                   known_as="its built models, newest first",
                                   then="`foldwise models` lists them."))
    if len(ids) > 1:
        raise ModelError(f"model id prefix '{model_id}' matches {len(ids)} models; give "
                         "more characters.")
    return tuple(str(v) for v in ids.iloc[0])


_MODELS_NAMED = 10_000
"""The newest built models a refusal of an unknown id looks through for the closest one."""


def model_record(store: Store, model_id: str, *, option: str = "MODEL") -> dict:
    """One built model's row, artefact bytes included, by its id or a unique prefix."""
    row = store.query("select * from models where model_id = ?",
                      [_model_id(store, model_id, option)[0]]).iloc[0].to_dict()
    row["artefact"] = bytes(row["artefact"]) if row["artefact"] is not None else b""
    return row


def coefficient_table(store: Store, sweep_id: str | None = None, *,
                      model_id: str | None = None) -> Coefficients:
    """Signed coefficients: of one built model (`model_id`), or of a sweep's explained
    linear cells, with model, picks and whether each term is the intercept."""
    if model_id is not None:
        model_id, sweep_id, rule = _model_id(store, model_id, "--model-id")
        df = store.query("""
            select m.model, m.cell_id, c.class_label, c.term, c.feature, c.level,
                   c.coefficient, c.standardised, c.mean, c.scale
            from model_coefficients c join models m using (model_id)
            where c.model_id = ? order by c.class_label nulls first, c.position""",
                         [model_id])
        df.insert(2, "picked", rule)
        return Coefficients(sweep_id, model_id, df)
    sweep_id = store.resolve_sweep(sweep_id)
    df = store.query("""
        select c.model, k.cell_id, k.class_label, k.term, k.feature, k.level,
               k.coefficient, k.standardised, k.mean, k.scale
        from coefficients k join cells c on c.sweep_id = k.sweep_id and c.cell_id = k.cell_id
        where k.sweep_id = ? order by c.position, k.class_label nulls first, k.position""",
                    [sweep_id])
    df = df.merge(_pick_marks(store, sweep_id), on="cell_id", how="left")
    df["picked"] = df["picked"].fillna("")
    df = df[["model", "cell_id", "picked", *[c for c in df.columns
                                             if c not in ("model", "cell_id", "picked")]]]
    return Coefficients(sweep_id, None, df.reset_index(drop=True))
