"""The results store: one SQLite file holding every finished point of every sweep.

Each point is committed the moment it finishes (write-ahead log), so a sweep killed with
SIGKILL loses nothing that had finished; a rerun reuses every stored point whose key (circuit
content hash, parameters, choices, settings and engine version) matches.

Tables (plain SQL, readable by any SQLite client):

- ``points``: key, circuit, circuit_hash, parameters, choices, settings (JSON text),
  engine_version, status (``ok``, ``unconverged`` or ``failed``), error, steady_state and metrics
  (JSON), document (the full point as JSON), finished_at (UTC, ISO 8601).
- ``harmonics``: point_key, n, freq_hz, ideal_v, ideal_phase_deg, estimate_v, sim_v,
  sim_phase_deg, delta_db: one row per point and harmonic, for queries.
"""

from __future__ import annotations

import json
import sqlite3
import threading
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

from .errors import InputError
from .files import clean_json

SCHEMA_VERSION = "1"

_SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS points (
    key TEXT PRIMARY KEY,
    circuit TEXT NOT NULL,
    circuit_hash TEXT NOT NULL,
    parameters TEXT NOT NULL,
    choices TEXT NOT NULL,
    settings TEXT NOT NULL,
    engine_version TEXT NOT NULL,
    status TEXT NOT NULL,
    error TEXT,
    steady_state TEXT,
    metrics TEXT,
    document TEXT NOT NULL,
    finished_at TEXT NOT NULL
);
CREATE TABLE IF NOT EXISTS harmonics (
    point_key TEXT NOT NULL REFERENCES points(key) ON DELETE CASCADE,
    n INTEGER NOT NULL,
    freq_hz REAL, ideal_v REAL, ideal_phase_deg REAL, estimate_v REAL,
    sim_v REAL, sim_phase_deg REAL, delta_db REAL,
    PRIMARY KEY (point_key, n)
);
"""

_HARMONIC_COLUMNS = ("n", "freq_hz", "ideal_v", "ideal_phase_deg", "estimate_v", "sim_v",
                     "sim_phase_deg", "delta_db")


def _dumps(value: Any) -> str:
    """Strict JSON; NaN and infinities (a -inf dB level of a zero amplitude) become null."""
    return json.dumps(clean_json(value), sort_keys=True, allow_nan=False)


class ResultStore:
    """A SQLite results store (one connection, safe to share between threads).

    Parameters
    ----------
    path : Path
        The database file; created with its folder if missing.

    Raises
    ------
    InputError
        If the file cannot be created or opened, or is not a simloop store.
    """

    def __init__(self, path: Path) -> None:
        self.path = Path(path)
        self._lock = threading.Lock()
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            self._db = sqlite3.connect(self.path, check_same_thread=False, timeout=30.0)
            tables = {r[0] for r in self._db.execute(
                "SELECT name FROM sqlite_master WHERE type='table'")}
            if tables and "meta" not in tables:  # before any PRAGMA changes the file
                self._db.close()
                raise InputError(f"{self.path} is an SQLite file but not a simloop result store "
                                 "(no meta table); choose another --store")
            self._db.execute("PRAGMA journal_mode=WAL")
            self._db.execute("PRAGMA synchronous=NORMAL")
            self._db.execute("PRAGMA foreign_keys=ON")
            self._db.executescript(_SCHEMA)
            row = self._db.execute("SELECT value FROM meta WHERE key='schema'").fetchone()
            if row is None:
                self._db.execute("INSERT INTO meta VALUES ('schema', ?)", (SCHEMA_VERSION,))
                self._db.commit()
            elif row[0] != SCHEMA_VERSION:
                raise InputError(f"result store {self.path} has schema {row[0]}, this simloop "
                                 f"writes {SCHEMA_VERSION}; use another --store or --fresh")
        except (sqlite3.Error, OSError) as exc:
            raise InputError(f"cannot open the result store {self.path}: {exc}; choose a "
                             "writable --store path") from None

    def __enter__(self) -> ResultStore:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def close(self) -> None:
        with self._lock:
            self._db.close()

    def get(self, key: str) -> dict[str, Any] | None:
        """The stored point document under ``key``, or None."""
        with self._lock:
            row = self._db.execute("SELECT document FROM points WHERE key=?", (key,)).fetchone()
        return None if row is None else json.loads(row[0])

    def put(self, key: str, *, circuit: str, circuit_hash: str, settings: dict[str, Any],
            engine_version: str, document: dict[str, Any]) -> None:
        """Store one finished point and commit at once (replacing an older one of that key)."""
        harmonics = document.get("harmonics") or []
        now = datetime.now(timezone.utc).isoformat(timespec="seconds")
        try:
            with self._lock, self._db:
                self._db.execute("DELETE FROM harmonics WHERE point_key=?", (key,))
                self._db.execute(
                    "INSERT OR REPLACE INTO points VALUES (?,?,?,?,?,?,?,?,?,?,?,?,?)",
                    (key, circuit, circuit_hash, _dumps(document.get("parameters", {})),
                     _dumps(document.get("choices", {})), _dumps(settings), engine_version,
                     document["status"], document.get("error"),
                     _dumps(document.get("steady_state")), _dumps(document.get("metrics")),
                     _dumps(document), now),
                )
                self._db.executemany(
                    "INSERT INTO harmonics VALUES (?,?,?,?,?,?,?,?,?)",
                    [(key, *(h.get(c) for c in _HARMONIC_COLUMNS)) for h in harmonics],
                )
        except sqlite3.Error as exc:
            raise InputError(f"cannot write to the result store {self.path}: {exc}") from None

    def count(self) -> int:
        with self._lock:
            return int(self._db.execute("SELECT COUNT(*) FROM points").fetchone()[0])
