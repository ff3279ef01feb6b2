"""Embedded SQLite storage: one file under the data folder, WAL mode, versioned migrations.

Migrations are the numbered ``*.sql`` files in ``service/migrations``; each is applied once, in
order, inside a transaction, and recorded in SQLite's ``user_version`` so that a crash never
leaves a half-applied schema.
"""

import sqlite3
from pathlib import Path

_MIGRATIONS_DIR = Path(__file__).resolve().parent / "migrations"


def _migrations() -> list[tuple[int, str]]:
    out = []
    for entry in _MIGRATIONS_DIR.glob("*.sql"):
        out.append((int(entry.name.split("_", 1)[0]), entry.read_text(encoding="utf-8")))
    return sorted(out)


def schema_version() -> int:
    """Newest schema version this code knows."""
    return max(v for v, _ in _migrations())


def connect(path: Path) -> sqlite3.Connection:
    """Open (creating if needed) the database at ``path`` and bring its schema up to date."""
    path.parent.mkdir(parents=True, exist_ok=True)
    conn = sqlite3.connect(path, timeout=30.0, isolation_level=None, check_same_thread=False)
    conn.execute("PRAGMA journal_mode=WAL")
    conn.execute("PRAGMA foreign_keys=ON")
    conn.execute("PRAGMA synchronous=NORMAL")
    migrate(conn)
    return conn


def migrate(conn: sqlite3.Connection) -> int:
    """Apply pending migrations; return the schema version reached."""
    current = conn.execute("PRAGMA user_version").fetchone()[0]
    for version, sql in _migrations():
        if version <= current:
            continue
        # One script, one transaction: the schema change and its version number land together.
        try:
            conn.executescript(
                f"BEGIN IMMEDIATE;\n{sql}\n;PRAGMA user_version = {int(version)};\nCOMMIT;"
            )
        except BaseException:
            if conn.in_transaction:
                conn.execute("ROLLBACK")
            raise
        current = version
    return current
