"""The store's tables and view, as DDL text: what every other part of the store creates,
copies, exports or exposes to a user's query. Changing a table bumps SCHEMA_VERSION, with
an upgrade step in `Store._create_schema`."""

from __future__ import annotations

from pathlib import Path

__all__ = ["SCHEMA_VERSION", "DEFAULT_STORE", "TABLE_SQL", "VIEW_SQL", "TABLES", "MODEL_TABLES",
           "SINCE", "UPGRADE_COLUMNS"]

SCHEMA_VERSION = 5
"""2: cells.position keeps spec order explicit (a server table has no insertion order).
3: classes (sweeps.task and .classes, tree_nodes.label, test_predictions of classes), built
models (`models`, `model_coefficients`), the signed coefficients of explained linear cells
(`coefficients`), a sweep's labels (`sweep_labels`), note and plan identity (sweeps.note,
sweeps.plan, so two sweeps' folds can be told equal or not), the size of an explained
cell's refit (explained.n_terms), the fold scheme (sweeps.scheme, .plan_column,
.checks_key) and the leakage checks' `findings`; new tables by `create table if not
exists`, new columns by UPGRADE_COLUMNS.
4: cells.complexity_tier, shared by equally simple cells (NULL in cells an older foldwise
wrote: their picks order by complexity_rank alone, as before).
5: sweeps.n_features, the feature columns the models were given (NULL in sweeps an older
foldwise wrote: a forest's fractional max_features on its grid's edge is then noted
whatever number of columns it means, as before)."""
DEFAULT_STORE = Path("results") / "foldwise.duckdb"

TABLE_SQL = """
create table if not exists foldwise_meta (key varchar primary key, value varchar);
create table if not exists sweeps (
    sweep_id varchar primary key, name varchar, spec_path varchar, spec_text varchar,
    spec_sha256 varchar, data_path varchar, data_sha256 varchar, target varchar,
    n_train integer, n_test integer, k integer, repeats integer, plan_seed bigint,
    metrics varchar, pick_rule varchar, started_at timestamp, finished_at timestamp,
    status varchar, versions json, host varchar, user_name varchar, pid integer,
    n_reused integer, task varchar, classes json, note varchar, plan json, scheme varchar,
    plan_column varchar, checks_key varchar, n_features integer);
create table if not exists sweep_labels (
    sweep_id varchar, key varchar, value varchar, primary key (sweep_id, key));
create table if not exists metrics (metric varchar primary key, better varchar);
create table if not exists cells (
    sweep_id varchar, cell_id varchar, model varchar, family varchar, params json,
    complexity_rank integer, reused_from varchar, position integer, complexity_tier integer,
    primary key (sweep_id, cell_id));
create table if not exists fold_scores (
    sweep_id varchar, cell_id varchar, "repeat" integer, fold integer, metric varchar,
    value double, fit_seconds double, n_train integer, n_valid integer, seed bigint,
    n_leaves double, how varchar, n_warnings integer, reused_from varchar,
    primary key (sweep_id, cell_id, "repeat", fold, metric));
create table if not exists test_scores (
    sweep_id varchar, cell_id varchar, metric varchar, value double, fit_seconds double,
    n_train integer, n_test integer, seed bigint, n_leaves double, how varchar,
    n_warnings integer, reused_from varchar, primary key (sweep_id, cell_id, metric));
create table if not exists failures (
    sweep_id varchar, cell_id varchar, "repeat" integer, fold integer, kind varchar,
    message varchar);
create table if not exists importances (
    sweep_id varchar, cell_id varchar, feature varchar, method varchar, value double,
    spread double);
-- explain step (runner/explain.py): per-fold importances, tree shapes, the refit tree's
-- nodes and the refit's test predictions, for the explained cells of a sweep
create table if not exists fold_importances (
    sweep_id varchar, cell_id varchar, "repeat" integer, fold integer, feature varchar,
    method varchar, value double);
create table if not exists tree_folds (
    sweep_id varchar, cell_id varchar, "repeat" integer, fold integer, n_leaves integer,
    depth integer, root_feature varchar, root_threshold double, root_rule varchar,
    features_used varchar[]);
create table if not exists tree_nodes (
    sweep_id varchar, cell_id varchar, node integer, parent integer, left_child integer,
    right_child integer, depth integer, feature varchar, threshold double, rule varchar,
    missing_left boolean, value double, n_samples integer, impurity double, label varchar);
create table if not exists test_predictions (
    sweep_id varchar, cell_id varchar, "row" integer, observed double, predicted double,
    observed_class varchar, predicted_class varchar, probabilities double[]);
create table if not exists explained (
    sweep_id varchar, cell_id varchar, settings json, reused_from varchar, n_terms integer,
    primary key (sweep_id, cell_id));
-- signed coefficients of an explained linear cell's refit: in the data's units and per
-- standard deviation, with the centring and scale used (families/linear.py); class_label
-- is null for a regression model
create table if not exists coefficients (
    sweep_id varchar, cell_id varchar, class_label varchar, position integer, term varchar,
    feature varchar, level varchar, coefficient double, standardised double, mean double,
    scale double);
-- built models (runner/model/): a picked cell fitted and saved, its card (JSON) and the
-- artefact's bytes with their SHA-256; and a built linear model's coefficients
create table if not exists models (
    model_id varchar primary key, sweep_id varchar, cell_id varchar, model varchar,
    family varchar, rule varchar, rows_used varchar, n_rows integer,
    created_at timestamp, user_name varchar, host varchar, card json, artefact blob,
    artefact_sha256 varchar, artefact_bytes bigint);
create table if not exists model_coefficients (
    model_id varchar, class_label varchar, position integer, term varchar, feature varchar,
    level varchar, coefficient double, standardised double, mean double, scale double);
-- leakage checks (runner/write/leakage.py): one row per finding of a sweep's checks
create table if not exists findings (
    sweep_id varchar, kind varchar, severity varchar, column_name varchar, value double,
    message varchar, allowed boolean);
"""

VIEW_SQL = """
create or replace view cell_summary as
select f.sweep_id, f.cell_id, c.model, c.family, c.params, c.complexity_rank,
       c.complexity_tier, f.metric,
       avg(f.value) as mean, stddev_samp(f.value) as sd,
       stddev_samp(f.value) / sqrt(count(f.value)) as se, count(f.value) as n,
       avg(f.n_leaves) as mean_leaves, sum(f.fit_seconds) as fit_seconds
from fold_scores f join cells c using (sweep_id, cell_id)
group by all;
"""

MODEL_TABLES = ("models", "model_coefficients")
"""The tables of built models: keyed by model id, not by sweep (a model can be built on a
sweep long after it ran, so a merge copies the models a store lacks by their id)."""

TABLES = ("sweeps", "sweep_labels", "metrics", "cells", "fold_scores", "test_scores", "failures",
          "importances", "fold_importances", "tree_folds", "tree_nodes", "test_predictions",
          "explained", "coefficients", "findings") + MODEL_TABLES
"""Every table of results, in the order a copy must fill them."""

UPGRADE_COLUMNS = (
    ("sweeps", "task varchar"), ("sweeps", "classes json"), ("sweeps", "note varchar"),
    ("sweeps", "plan json"), ("tree_nodes", "label varchar"),
    ("test_predictions", "observed_class varchar"),
    ("test_predictions", "predicted_class varchar"),
    ("test_predictions", "probabilities double[]"), ("explained", "n_terms integer"),
    ("sweeps", "scheme varchar"), ("sweeps", "plan_column varchar"),
    ("sweeps", "checks_key varchar"), ("cells", "complexity_tier integer"),
    ("sweeps", "n_features integer"),
)
"""(table, column definition) added since a table was first created: an older store gains
them on upgrade (idempotent: `add column if not exists`)."""

SINCE = {"coefficients": 3, "models": 3, "model_coefficients": 3, "sweep_labels": 3,
         "findings": 3}
"""The schema version that added a table: an export or store older than it lacks it."""
