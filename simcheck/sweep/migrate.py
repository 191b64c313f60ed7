"""Upgrading a schema-1 sweep store (written before checksums and sweep binding).

A schema-1 store is upgraded in place, in one transaction, the first time a
sweep opens it: the ``checksum`` column and the ``writer`` table are added,
and every row is re-keyed with today's :func:`simcheck.sweep.grid.cell_key`
(which normalises numbers: ``1`` and ``1.0`` are one value) from the row's own
stored scenario, task arguments and seed, so its finished cells count as done.
Rows that collapse onto one key keep the first (``ok`` before ``error``);
rows whose JSON cannot be read are dropped (they would be computed again).
The sweep binding is set by the first sweep that opens the upgraded store.
"""

from __future__ import annotations

import json
import sqlite3
from typing import Any

from simcheck.sweep.integrity import cell_checksum

_WRITER = """CREATE TABLE IF NOT EXISTS writer (
    id INTEGER PRIMARY KEY CHECK (id = 1), pid INTEGER NOT NULL, host TEXT NOT NULL, started_at TEXT NOT NULL)"""


def _new_key(row: dict[str, Any]) -> str | None:
    from simcheck.sweep.grid import cell_key

    try:
        scenario = json.loads(row["scenario_json"])
        args = json.loads(row["task_json"])
        if row["result_json"] is not None:
            json.loads(row["result_json"])
        json.loads(row["vary_json"])
        return cell_key(scenario, row["task"], args, int(row["seed"]))
    except (TypeError, ValueError):
        return None


def upgrade_from_1(store: Any) -> str:
    """Upgrade ``store`` (an open :class:`~simcheck.sweep.store.SweepStore`) from schema 1 to 2; a notice line."""
    conn: sqlite3.Connection = store.conn
    conn.row_factory = sqlite3.Row
    try:
        rows = [dict(r) for r in conn.execute("SELECT * FROM cells ORDER BY status = 'ok' DESC, cell_index, cell_key")]
    finally:
        conn.row_factory = None
    kept: dict[str, dict[str, Any]] = {}
    dropped = 0
    for row in rows:
        key = _new_key(row)
        if key is None or key in kept:
            dropped += 1
            continue
        kept[key] = {**row, "old_key": row["cell_key"], "cell_key": key}
    with store.transaction() as c:
        c.execute("ALTER TABLE cells ADD COLUMN checksum TEXT")
        c.execute(_WRITER)
        c.execute("DELETE FROM cells")
        for row in kept.values():
            row.pop("old_key")
            row["checksum"] = cell_checksum(row)
            cols = ", ".join(row)
            c.execute(f"INSERT INTO cells({cols}) VALUES ({', '.join('?' * len(row))})", tuple(row.values()))
        c.executemany(
            "INSERT OR REPLACE INTO meta(key, value) VALUES (?, ?)",
            [("schema_version", "2"), ("migrated_from", "1")],
        )
    extra = f"; {dropped} unreadable or duplicate rows were dropped and will be computed again" if dropped else ""
    return f"upgraded {store.path} from store schema 1 to 2: {len(kept)} cells kept, with checksums{extra}"
