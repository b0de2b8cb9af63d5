"""Build a small store by writing rows through Store (begin_sweep / write_batch), so pick and
compare queries can be checked against hand-made fold scores without fitting anything."""

from __future__ import annotations

import json
from datetime import datetime, timedelta
from pathlib import Path

import pandas as pd

from runner.store import Store


def write_sweep(path: Path, models: dict[str, list[list[float]]], *, k: int, repeats: int,
                metric: str = "rmse", better: str = "lower", pick_rule: str = "one_se",
                sweep_id: str = "20260101-000000-aaaa", n_train=80, n_valid=20,
                tests: dict[str, list[float]] | None = None, failures=(), drop=(),
                family: str = "linear", started_at: datetime | None = None,
                status: str = "finished", host: str | None = None,
                pid: int | None = None, tiers: dict[str, list[int]] | None = None) -> Store:
    """Write one sweep: `models` maps a label to its cells in complexity order (rank 0 first),
    each cell a list of k·repeats fold scores (position i = repeat i // k, fold i % k).

    Cell ids are '<label>-<rank>'; `tiers` gives a model's complexity tier per cell (none:
    NULL, as in a store an older foldwise wrote). `failures` lists cell ids with a failed
    fit; `drop` lists (cell_id, position) fold rows left out; n_train / n_valid are a number
    or one per fold.
    `status`, `host` and `pid` are recorded as a sweep's own would be."""
    store = Store(path)
    store.ensure_schema()
    n_folds = k * repeats
    cells, folds, test_rows = [], [], []
    for label, model_cells in models.items():
        model_tiers = (tiers or {}).get(label, [None] * len(model_cells))
        for rank, scores in enumerate(model_cells):
            assert len(scores) == n_folds, (label, rank, len(scores))
            cid = f"{label}-{rank}"
            cells.append({"sweep_id": sweep_id, "cell_id": cid, "model": label,
                          "family": family, "params": json.dumps({"rank": rank}),
                          "complexity_rank": rank, "position": len(cells),
                          "complexity_tier": model_tiers[rank]})
            for i, value in enumerate(scores):
                if (cid, i) in set(drop):
                    continue
                nt = n_train[i] if isinstance(n_train, (list, tuple)) else n_train
                nv = n_valid[i] if isinstance(n_valid, (list, tuple)) else n_valid
                folds.append({"sweep_id": sweep_id, "cell_id": cid, "repeat": i // k,
                              "fold": i % k, "metric": metric, "value": float(value),
                              "fit_seconds": 0.01, "n_train": nt, "n_valid": nv, "seed": i,
                              "n_leaves": float(rank + 2) if family == "pruned_tree" else None})
            test = (tests or {}).get(label)
            test_rows.append({"sweep_id": sweep_id, "cell_id": cid, "metric": metric,
                              "value": float(test[rank]) if test else float(sum(scores) / len(scores)),
                              "fit_seconds": 0.01, "n_train": 100, "n_test": 25, "seed": 0,
                              "n_leaves": None})
    fail_rows = [{"sweep_id": sweep_id, "cell_id": cid, "repeat": 0, "fold": 0,
                  "kind": "ValueError", "message": "made to fail"} for cid in failures]
    store.begin_sweep({"sweep_id": sweep_id, "name": "built", "target": "y", "n_train": 100,
                       "n_test": 25, "k": k, "repeats": repeats, "plan_seed": 0,
                       "metrics": metric, "pick_rule": pick_rule,
                       "started_at": started_at or datetime(2026, 1, 1) + timedelta(seconds=1),
                       "status": status, "host": host, "pid": pid, "versions": {}},
                      pd.DataFrame(cells), {metric: better})
    store.write_batch({"fold_scores": pd.DataFrame(folds), "test_scores": pd.DataFrame(test_rows),
                       "failures": pd.DataFrame(fail_rows)})
    return store
