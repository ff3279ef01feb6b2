"""Embedded SQLite storage: one file under the data folder, WAL mode, versioned migrations.

Migrations are the numbered ``*.sql`` files in ``service/migrations``; each is applied once, in
order, inside a transaction, and recorded in SQLite's ``user_version`` so that a crash never
leaves a half-applied schema.
"""

import sqlite3
import threading
from contextlib import contextmanager
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


class Store:
    """One SQLite connection shared by the threads of one process, serialised by a lock.

    Every write goes through :meth:`transaction` (``BEGIN IMMEDIATE``: the write lock is taken
    at the start, so a transaction either commits whole or leaves nothing behind); reads through
    :meth:`query`, which runs one statement and so sees one consistent snapshot (WAL). Several
    processes (``uvicorn --workers``) each hold their own :class:`Store` on the same file.
    """

    def __init__(self, path: Path):
        self.path = Path(path)
        self.conn = connect(self.path)
        self.conn.row_factory = sqlite3.Row
        self._lock = threading.RLock()

    @contextmanager
    def transaction(self):
        """Run the body in one write transaction; roll back on any exception."""
        with self._lock:
            self.conn.execute("BEGIN IMMEDIATE")
            try:
                yield self.conn
            except BaseException:
                self.conn.execute("ROLLBACK")
                raise
            self.conn.execute("COMMIT")

    def query(self, sql: str, params=()) -> list[sqlite3.Row]:
        """Rows of one read-only statement."""
        with self._lock:
            return self.conn.execute(sql, params).fetchall()

    def close(self) -> None:
        with self._lock:
            self.conn.close()
