"""The store's tables and view, as DDL text: what every other part of the store creates,
copies, exports or exposes to a user's query. Changing a table bumps SCHEMA_VERSION, with
an upgrade step in `Store._create_schema`."""

from __future__ import annotations

from pathlib import Path

__all__ = ["SCHEMA_VERSION", "DEFAULT_STORE", "TABLE_SQL", "VIEW_SQL", "TABLES", "UPGRADE_SQL",
           "ADDED_IN"]

SCHEMA_VERSION = 3
"""2: cells.position keeps spec order explicit (a server table has no insertion order).
3: sweeps record their fold scheme and plan (scheme, plan_column, plan, checks_key); table
findings holds the leakage checks' findings."""
DEFAULT_STORE = Path("results") / "foldwise.duckdb"

TABLE_SQL = """
create table if not exists foldwise_meta (key varchar primary key, value varchar);
create table if not exists sweeps (
    sweep_id varchar primary key, name varchar, spec_path varchar, spec_text varchar,
    spec_sha256 varchar, data_path varchar, data_sha256 varchar, target varchar,
    n_train integer, n_test integer, k integer, repeats integer, plan_seed bigint,
    metrics varchar, pick_rule varchar, started_at timestamp, finished_at timestamp,
    status varchar, versions json, host varchar, user_name varchar, pid integer,
    n_reused integer, scheme varchar, plan_column varchar, plan json, checks_key varchar);
create table if not exists metrics (metric varchar primary key, better varchar);
create table if not exists cells (
    sweep_id varchar, cell_id varchar, model varchar, family varchar, params json,
    complexity_rank integer, reused_from varchar, position integer,
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
    missing_left boolean, value double, n_samples integer, impurity double);
create table if not exists test_predictions (
    sweep_id varchar, cell_id varchar, "row" integer, observed double, predicted double);
create table if not exists explained (
    sweep_id varchar, cell_id varchar, settings json, reused_from varchar,
    primary key (sweep_id, cell_id));
-- leakage checks (runner/write/leakage.py): one row per finding of a sweep's checks
create table if not exists findings (
    sweep_id varchar, kind varchar, severity varchar, column_name varchar, value double,
    message varchar, allowed boolean);
"""

UPGRADE_SQL = [
    "alter table sweeps add column if not exists scheme varchar",
    "alter table sweeps add column if not exists plan_column varchar",
    "alter table sweeps add column if not exists plan json",
    "alter table sweeps add column if not exists checks_key varchar",
]
"""Columns added to existing tables since schema 2, each safe to run again (new tables come
from TABLE_SQL's `create table if not exists`)."""

VIEW_SQL = """
create or replace view cell_summary as
select f.sweep_id, f.cell_id, c.model, c.family, c.params, c.complexity_rank, f.metric,
       avg(f.value) as mean, stddev_samp(f.value) as sd,
       stddev_samp(f.value) / sqrt(count(*)) as se, count(*) as n,
       avg(f.n_leaves) as mean_leaves, sum(f.fit_seconds) as fit_seconds
from fold_scores f join cells c using (sweep_id, cell_id)
group by all;
"""

TABLES = ("sweeps", "metrics", "cells", "fold_scores", "test_scores", "failures",
          "importances", "fold_importances", "tree_folds", "tree_nodes", "test_predictions",
          "explained", "findings")
"""Every table of results, in the order a copy must fill them."""

ADDED_IN = {"findings": 3}
"""Tables younger than the first schema, by the version that added them: a store or an
export from before that version lacks them, and a merge from it copies the rest."""
