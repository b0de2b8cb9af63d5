"""Removing sweeps from a store: every row of each chosen sweep, from every table, in one
transaction, so a removal stopped at any moment (even by SIGKILL) leaves each sweep whole
or gone, never half.

Removing a sweep never harms another: when a rerun reuses earlier results, it copies those
rows under its own sweep id (`Store.copy_rows`), so no sweep's rows live under another's
id; `reused_from` then names a sweep that may be gone, as a record of where the numbers were
first computed. A sweep still running is refused: its process would go on writing rows."""

from __future__ import annotations

import socket
from typing import Callable

from ..errors import StoreError
from .schema import TABLES

__all__ = ["remove_sweeps", "check_rights", "SWEEP_TABLES"]

SWEEP_TABLES = tuple(t for t in TABLES if t != "metrics")
"""Every table whose rows belong to one sweep (all but the shared `metrics`)."""


def check_rights(store) -> None:
    """Refuse, before anything is listed or changed, a team-store role that may not delete
    rows from every foldwise table; a store file needs nothing."""
    store._require()
    store._check_version()
    store.require_privileges([(t, "DELETE") for t in SWEEP_TABLES], doing="remove sweeps",
                             needs="`remove` needs DELETE on every foldwise table",
                             grant="foldwise_keeper", changed="removed")


def remove_sweeps(store, sweep_ids: list[str], *,
                  alive: Callable[[int], bool] | None = None) -> dict[str, int]:
    """Delete every row of these sweeps from every table in one transaction; return the
    rows deleted per table. A sweep marked running is refused unless it ran on this host
    and `alive(pid)` says its process is gone; then nothing is deleted at all. On a team
    store the role needs DELETE on every foldwise table, and is told before anything
    changes if it lacks it."""
    ids = list(dict.fromkeys(sweep_ids))
    if not ids:
        return {t: 0 for t in SWEEP_TABLES}
    check_rights(store)
    host = socket.gethostname()

    def work(con):
        rows = con.execute("select sweep_id, status, host, pid from sweeps where "
                           "list_contains(?::varchar[], sweep_id)", [ids]).fetchall()
        living = [sid for sid, status, where, pid in rows if status == "running" and (
            where != host or pid is None or alive is None or alive(int(pid)))]
        if living:
            raise StoreError(f"sweep {', '.join(sorted(living))} is still running (or runs "
                             "on another machine), so it was not removed, and neither was "
                             "anything else. Wait until it finishes, or stop it; a sweep "
                             "whose process is gone counts as interrupted and can be removed.")
        counts = {}
        for table in reversed(SWEEP_TABLES):  # the sweeps' own rows last
            where = ("model_id in (select model_id from models where sweep_id in "
                     "(select unnest(?::varchar[])))" if table == "model_coefficients"
                     else "sweep_id in (select unnest(?::varchar[]))")
            counts[table] = int(con.execute(f"delete from {table} where {where}",
                                            [ids]).fetchone()[0])
        return counts

    counts = store._transaction(work, what="removing sweeps")
    return {t: counts[t] for t in SWEEP_TABLES}
