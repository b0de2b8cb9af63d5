"""What a store file's catalog must hold before foldwise reads it: each of its tables a
table (not a view, whose query could compute without end), with its columns, their types
and its primary key, no column that computes its values, and no macro (a macro named like
a SQL function, `avg` say, changes what every query of foldwise's computes). A store passed
on by someone else is checked so, on a file, before anything of it is read."""

from __future__ import annotations

from functools import cache

from .schema import SCHEMA_VERSION, SINCE, TABLE_SQL, TABLES, UPGRADE_COLUMNS, VIEW_SQL

__all__ = ["shape_problem", "summary_view_sql"]

_SAME = {"JSON": {"JSON", "VARCHAR"}}
"""A JSON column may be plain text (another program's copy): its reader checks each value."""
_LATER = {(t, c.split()[0]) for t, c in UPGRADE_COLUMNS} | {("cells", "position")}
"""Columns added since a table was first made: an older store lacks them until upgraded."""
_COLUMNS = ("select table_name, column_name, data_type, column_default is not null "
            "from duckdb_columns() where database_name = {db} and schema_name = 'main'")
_KINDS = ("select table_name, 'table' from duckdb_tables() where database_name = {db} and "
          "schema_name = 'main' union all select view_name, 'view' from duckdb_views() where "
          "database_name = {db} and schema_name = 'main' and not internal")
_KEYS = ("select table_name, constraint_column_names from duckdb_constraints() where "
         "database_name = {db} and schema_name = 'main' and constraint_type = 'PRIMARY KEY'")
_MACROS = ("select function_name from duckdb_functions() where database_name = {db} and not "
           "internal and function_type in ('macro', 'table_macro') order by 1")


@cache
def _expected() -> tuple[dict, dict]:
    """({table: {column: type}}, {table: key columns}) as this foldwise makes them."""
    import duckdb

    with duckdb.connect() as con:
        con.execute(TABLE_SQL)
        return _catalog(con, "memory")


@cache
def summary_view_sql() -> str:
    """The cell_summary view's SQL as DuckDB keeps it, made from this foldwise's DDL."""
    import duckdb

    with duckdb.connect() as con:
        con.execute(TABLE_SQL + VIEW_SQL)
        return con.execute("select sql from duckdb_views() where view_name = "
                           "'cell_summary'").fetchone()[0]


def _catalog(con, catalog: str) -> tuple[dict, dict]:
    db, columns = _literal(catalog), {}
    for table, column, kind, _ in con.execute(_COLUMNS.format(db=db)).fetchall():
        columns.setdefault(table, {})[column] = kind
    keys = {t: tuple(c) for t, c in con.execute(_KEYS.format(db=db)).fetchall()}
    return columns, keys


def _literal(name: str) -> str:
    """A catalog name as an SQL string: bound as text, not as a parameter (binding one
    loads pandas, which a listing must not)."""
    return "'" + name.replace("'", "''") + "'"


def shape_problem(con, catalog: str, version: int = SCHEMA_VERSION) -> str | None:
    """Why the store attached to `con` as `catalog` (a foldwise store of schema `version`)
    cannot be read as one, in a clause naming the table and column; None if it can."""
    expected, expected_keys = _expected()
    db = _literal(catalog)
    macros = [m for (m,) in con.execute(_MACROS.format(db=db)).fetchall()]
    if macros:
        shown = ", ".join(macros[:5]) + (", ..." if len(macros) > 5 else "")
        return (f"it holds {len(macros)} macro(s) ({shown}), which foldwise never makes: a "
                "macro named like a SQL function changes what every query computes")
    kinds = dict(con.execute(_KINDS.format(db=db)).fetchall())
    columns, keys = _catalog(con, catalog)
    computed = [(t, c) for t, c, _, d in con.execute(_COLUMNS.format(db=db)).fetchall()
                if d and t in expected]
    if computed:
        return (f"its table {computed[0][0]}, column {computed[0][1]} computes or fills its "
                "values from an expression, which foldwise never makes")
    for table in ("foldwise_meta", *TABLES):
        if kinds.get(table) == "view":
            return (f"its {table} is a view, not a table: a view runs a query of its own "
                    "(which may read without end) where foldwise reads stored rows")
        if table not in kinds:
            if version < SINCE.get(table, 1):
                continue
            return f"it lacks the table {table}"
        for column, kind in expected[table].items():
            found = columns[table].get(column)
            if found is None:
                if version < SCHEMA_VERSION and (table, column) in _LATER:
                    continue
                return f"its table {table} lacks the column {column}"
            if found not in _SAME.get(kind, {kind}):
                return (f"its table {table}, column {column} is of type {found}, where "
                        f"foldwise stores {kind}")
        if table in expected_keys and keys.get(table) != expected_keys[table]:
            return (f"its table {table} has lost its primary key "
                    f"({', '.join(expected_keys[table])}), so it may hold a row twice")
    return None
