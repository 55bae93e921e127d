"""Results store: one SQLite row per analysed run, so that a study re-analyses only changes.

The key of a row is the SHA-256 of (the run's input bytes, the analysis settings, the tool
version): a task is a pure function of those, so an unchanged run is never analysed twice,
a new replica is the only task of the next compare, a changed setting re-analyses what it
affects, and a new version of the tool never reads an old version's numbers. The value is
the run's JSON record.

Concurrency: SQLite with a busy timeout; every write is one ``BEGIN IMMEDIATE`` transaction
(one writer at a time) and ``INSERT OR IGNORE``, so two compares of the same study running
at once each get complete, consistent rows (the first writer's row wins; both computed the
same numbers from the same bytes and settings).
"""

from __future__ import annotations

import hashlib
import json
import os
import sqlite3
import time
from collections.abc import Iterable, Mapping
from pathlib import Path
from typing import Any

from .errors import InputError

__all__ = ["ResultStore", "run_key"]

_SCHEMA = """
CREATE TABLE IF NOT EXISTS runs (
    key TEXT PRIMARY KEY,
    run TEXT NOT NULL,
    content_sha256 TEXT NOT NULL,
    settings TEXT NOT NULL,
    version TEXT NOT NULL,
    created REAL NOT NULL,
    record TEXT NOT NULL
)
"""


def run_key(content_sha256: str, settings: Mapping[str, Any], version: str) -> str:
    """The row key: SHA-256 of the content hash, the settings (sorted JSON) and version."""
    blob = json.dumps({"content": content_sha256, "settings": dict(settings),
                       "version": version}, sort_keys=True, default=str)
    return hashlib.sha256(blob.encode()).hexdigest()


class ResultStore:
    """An SQLite file of analysed runs (see the module notes).

    Parameters
    ----------
    path : path
        The database file (created with its table when missing).
    timeout : float
        Seconds to wait for another writer.
    """

    def __init__(self, path: str | os.PathLike[str], *, timeout: float = 120.0) -> None:
        self.path = Path(path)
        try:
            self._db = sqlite3.connect(self.path, timeout=timeout, isolation_level=None)
            self._db.execute("PRAGMA journal_mode=WAL")
            self._db.execute(_SCHEMA)
        except sqlite3.DatabaseError as exc:
            raise InputError(f"cannot use the results store ({exc})", path=str(self.path),
                             expected="an SQLite file written by transport compare",
                             fix="give another --store path or remove the file") from None

    def close(self) -> None:
        """Close the connection."""
        self._db.close()

    def __enter__(self) -> ResultStore:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def get_many(self, keys: Iterable[str]) -> dict[str, dict[str, Any]]:
        """Records of the keys that are stored (key -> record)."""
        keys = list(keys)
        out: dict[str, dict[str, Any]] = {}
        for i in range(0, len(keys), 500):
            part = keys[i:i + 500]
            q = f"SELECT key, record FROM runs WHERE key IN ({','.join('?' * len(part))})"
            for k, rec in self._db.execute(q, part):
                out[k] = json.loads(rec)
        return out

    def put_many(self, rows: Iterable[tuple[str, str, str, Mapping[str, Any], str,
                                            Mapping[str, Any]]]) -> None:
        """Store (key, run, content_sha256, settings, version, record) rows in one
        transaction (one writer at a time; an existing key is kept)."""
        rows = list(rows)
        if not rows:
            return
        now = time.time()
        self._db.execute("BEGIN IMMEDIATE")
        try:
            self._db.executemany(
                "INSERT OR IGNORE INTO runs VALUES (?, ?, ?, ?, ?, ?, ?)",
                [(k, run, h, json.dumps(dict(s), sort_keys=True, default=str), v, now,
                  json.dumps(rec, allow_nan=True)) for k, run, h, s, v, rec in rows])
            self._db.execute("COMMIT")
        except BaseException:
            self._db.execute("ROLLBACK")
            raise

    def count(self) -> int:
        """Rows stored."""
        return int(self._db.execute("SELECT COUNT(*) FROM runs").fetchone()[0])
