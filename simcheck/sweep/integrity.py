"""Integrity of a sweep store: per-cell checksums and the whole-file check.

Every stored cell carries ``checksum``: the SHA-256 (hex) of the canonical
JSON array of the columns that make its result (key, task, varied values,
scenario, task arguments, root seed, status, result, error), taken over the
stored text itself. A flipped digit, a truncated row or a hand edit changes
it. The sweep re-runs a cell that fails its checksum; ``export`` and reports
mark it ``status = 'corrupt'`` with empty results instead of crashing or
passing it on; ``simcheck store check`` lists it.
"""

from __future__ import annotations

import hashlib
import json
import sqlite3
from dataclasses import dataclass, field
from typing import Any

#: the columns a checksum covers, in this order
CHECKED_COLUMNS = (
    "cell_key", "task", "vary_json", "scenario_json", "task_json", "seed", "status", "result_json", "error",
)


def cell_checksum(row: dict[str, Any]) -> str:
    """SHA-256 of the canonical JSON array of a cell's :data:`CHECKED_COLUMNS` (stored text as is)."""
    values = [row.get(c) for c in CHECKED_COLUMNS]
    text = json.dumps(values, separators=(",", ":"), ensure_ascii=True)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def cell_problem(row: dict[str, Any], *, checksums: bool = True) -> str | None:
    """Why a stored cell row cannot be trusted, or None when it is sound.

    ``checksums=False`` (stores written before checksums existed) checks only
    that the JSON columns parse.
    """
    if checksums:
        got = row.get("checksum")
        if got is None:
            return "no checksum"
        if got != cell_checksum(row):
            return "checksum mismatch (the row was changed after it was written)"
    for col in ("vary_json", "scenario_json", "task_json", "result_json"):
        text = row.get(col)
        if text is None and col == "result_json":
            continue
        try:
            json.loads(text)  # type: ignore[arg-type]
        except (TypeError, ValueError):
            return f"{col} is not valid JSON"
    if row.get("status") not in ("ok", "error"):
        return f"unknown status {row.get('status')!r}"
    return None


def has_checksums(conn: sqlite3.Connection) -> bool:
    """Whether the store's ``cells`` table has the ``checksum`` column (schema 2 and later)."""
    return any(r[1] == "checksum" for r in conn.execute("PRAGMA table_info(cells)"))


@dataclass(frozen=True)
class StoreCheck:
    """The outcome of :func:`check_store`."""

    path: str
    schema_version: str
    integrity: str
    cells: int
    corrupt: tuple[tuple[str, str], ...] = field(default=())
    checksums: bool = True

    @property
    def ok(self) -> bool:
        return self.integrity == "ok" and not self.corrupt

    def to_dict(self) -> dict[str, Any]:
        return {
            "store": self.path,
            "ok": self.ok,
            "schema_version": self.schema_version,
            "integrity": self.integrity,
            "cells": self.cells,
            "cells_corrupt": len(self.corrupt),
            "corrupt": [{"cell_key": k, "problem": p} for k, p in self.corrupt],
            "checksums": self.checksums,
        }


def check_store(conn: sqlite3.Connection, path: str) -> StoreCheck:
    """SQLite's ``PRAGMA integrity_check`` and every cell's checksum."""
    lines = [r[0] for r in conn.execute("PRAGMA integrity_check")]
    integrity = "ok" if lines == ["ok"] else "; ".join(lines[:3]) + (" ..." if len(lines) > 3 else "")
    row = conn.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchone()
    schema = row[0] if row else "?"
    checksums = has_checksums(conn)
    conn.row_factory = sqlite3.Row
    bad: list[tuple[str, str]] = []
    n = 0
    for r in conn.execute("SELECT * FROM cells"):
        n += 1
        problem = cell_problem(dict(r), checksums=checksums)
        if problem:
            bad.append((str(r["cell_key"]), problem))
    conn.row_factory = None
    return StoreCheck(path, schema, integrity, n, tuple(bad), checksums)
