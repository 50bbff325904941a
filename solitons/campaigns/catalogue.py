"""Results catalogue of a campaign: one SQLite file (WAL mode) under the output root with a
row for every finished (or failed) run.

Several worker processes write at once: each write is one short ``BEGIN IMMEDIATE``
transaction (SQLite serialises writers; readers are not blocked in WAL mode) with a busy
timeout, and rows are keyed by the task (the run's directory relative to the root), so a
rerun of a task replaces its row instead of adding one.
"""

from __future__ import annotations

import sqlite3
import time
from pathlib import Path

CATALOGUE = "catalogue.sqlite"

COLUMNS = (
    ("task", "TEXT PRIMARY KEY"),   # run directory relative to the campaign root
    ("config_hash", "TEXT"),
    ("model", "TEXT"),
    ("family", "TEXT"),
    ("expected_charge", "INTEGER"),
    ("hopf_charge", "REAL"),
    ("energy", "REAL"),
    ("label", "TEXT"),
    ("verdict", "TEXT"),
    ("converged", "INTEGER"),
    ("status", "TEXT"),             # finished | failed
    ("error", "TEXT"),
    ("path", "TEXT"),               # the run's directory, relative to the catalogue's
    ("provenance", "TEXT"),         # JSON, as in result.h5 (versions, user-term files with content)
    ("wall_seconds", "REAL"),
    ("worker", "TEXT"),
    ("finished_at", "REAL"),        # unix time
)
NAMES = tuple(name for name, _ in COLUMNS)


def connect(path: str | Path, timeout: float = 120.0) -> sqlite3.Connection:
    """Open (creating if needed) the catalogue at ``path`` in WAL mode."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    connection = sqlite3.connect(path, timeout=timeout, isolation_level=None)
    connection.execute(f"PRAGMA busy_timeout = {int(timeout * 1000)}")
    _retry(lambda: connection.execute("PRAGMA journal_mode = WAL"))
    columns = ", ".join(f"{name} {kind}" for name, kind in COLUMNS)
    _retry(lambda: connection.execute(f"CREATE TABLE IF NOT EXISTS runs ({columns})"))
    present = {row[1] for row in connection.execute("PRAGMA table_info(runs)")}
    for name, kind in COLUMNS:  # a catalogue written by an older version: add the new columns
        if name not in present:
            _retry(lambda: connection.execute(f"ALTER TABLE runs ADD COLUMN {name} {kind}"))
    return connection


def _retry(action, attempts: int = 50):
    for attempt in range(attempts):
        try:
            return action()
        except sqlite3.OperationalError as error:
            if "locked" not in str(error) and "busy" not in str(error) or attempt == attempts - 1:
                raise
            time.sleep(0.05 * (1 + attempt))


def record(path: str | Path, row: dict) -> None:
    """Insert or replace the row of ``row['task']`` in one immediate transaction."""
    values = [row.get(name) for name in NAMES]
    if values[0] is None:
        raise ValueError("a catalogue row needs its task")
    placeholders = ", ".join("?" for _ in NAMES)
    updates = ", ".join(f"{name} = excluded.{name}" for name in NAMES[1:])
    connection = connect(path)
    try:
        def write():
            connection.execute("BEGIN IMMEDIATE")
            try:
                connection.execute(f"INSERT INTO runs ({', '.join(NAMES)}) VALUES ({placeholders}) "
                                   f"ON CONFLICT(task) DO UPDATE SET {updates}", values)
                connection.execute("COMMIT")
            except BaseException:
                connection.execute("ROLLBACK")
                raise
        _retry(write)
    finally:
        connection.close()


def rows(path: str | Path) -> list[dict]:
    """Every row of the catalogue (empty if it does not exist yet)."""
    if not Path(path).exists():
        return []
    connection = connect(path)
    try:
        cursor = connection.execute(f"SELECT {', '.join(NAMES)} FROM runs ORDER BY task")
        return [dict(zip(NAMES, values)) for values in cursor.fetchall()]
    finally:
        connection.close()


def finished(path: str | Path) -> dict[str, dict]:
    """Rows of finished runs by task."""
    return {row["task"]: row for row in rows(path) if row["status"] == "finished"}
