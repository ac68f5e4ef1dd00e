"""The study store: one SQLite file recording every point of a study.

Only the coordinating process writes to it. Each point has a unique key, its
parameters, a status (``pending``, ``running``, ``done``, ``failed``), the number
of attempts, timings, the host that ran it, the folder of its outputs and, once
done, its results as JSON. Every change is one committed transaction, so a
killed coordinator leaves a consistent file; points found ``running`` at start
belong to a coordinator that died and go back to ``pending``.
"""

import json
import socket
import sqlite3
import time

STATUSES = ("pending", "running", "done", "failed")

_SCHEMA = """
CREATE TABLE IF NOT EXISTS points (
    key TEXT PRIMARY KEY,
    n_beads INTEGER NOT NULL,
    control REAL NOT NULL,
    replica INTEGER NOT NULL,
    seed INTEGER NOT NULL,
    folder TEXT NOT NULL,
    status TEXT NOT NULL DEFAULT 'pending',
    attempts INTEGER NOT NULL DEFAULT 0,
    error TEXT,
    host TEXT,
    started REAL,
    finished REAL,
    results TEXT
);
CREATE TABLE IF NOT EXISTS meta (name TEXT PRIMARY KEY, value TEXT NOT NULL);
"""


class StudyStore:
    """Open (or create) the store at ``path``.

    Parameters
    ----------
    path : path-like
        SQLite file.
    """

    def __init__(self, path):
        self.path = str(path)
        self._db = sqlite3.connect(self.path, isolation_level=None, timeout=30)
        self._db.execute("PRAGMA journal_mode=WAL")
        self._db.execute("PRAGMA synchronous=FULL")
        self._db.executescript(_SCHEMA)

    def close(self):
        """Close the database."""
        self._db.close()

    def get_meta(self, name):
        """A stored study-level value (str) or None."""
        row = self._db.execute("SELECT value FROM meta WHERE name = ?", (name,)).fetchone()
        return row[0] if row else None

    def set_meta(self, name, value):
        """Store a study-level value (str)."""
        self._db.execute("INSERT OR REPLACE INTO meta VALUES (?, ?)", (name, value))

    def add_points(self, points):
        """Insert planned points (dicts with key, n_beads, control, replica, seed, folder); keep existing ones."""
        with self._db:
            self._db.executemany(
                "INSERT OR IGNORE INTO points (key, n_beads, control, replica, seed, folder) "
                "VALUES (:key, :n_beads, :control, :replica, :seed, :folder)", points)

    def recover(self):
        """Return points left ``running`` by a coordinator that stopped to ``pending``; return how many."""
        return self._db.execute("UPDATE points SET status = 'pending' WHERE status = 'running'").rowcount

    def mark_running(self, key):
        """Record that a point was handed to a worker."""
        self._db.execute("UPDATE points SET status = 'running', attempts = attempts + 1, started = ?, "
                         "host = ? WHERE key = ?", (time.time(), socket.gethostname(), key))

    def release(self, key):
        """Hand a point that was running back as pending, without counting the attempt."""
        self._db.execute("UPDATE points SET status = 'pending', attempts = MAX(attempts - 1, 0) "
                         "WHERE key = ? AND status = 'running'", (key,))

    def mark_done(self, key, results, host=None):
        """Record a finished point and its results (JSON-serialisable dict), once."""
        self._db.execute("UPDATE points SET status = 'done', finished = ?, results = ?, error = NULL, "
                         "host = COALESCE(?, host) WHERE key = ? AND status != 'done'",
                         (time.time(), json.dumps(results), host, key))

    def replace_results(self, key, results):
        """Overwrite the results of a finished point (re-analysis); the status stays ``done``."""
        self._db.execute("UPDATE points SET results = ? WHERE key = ? AND status = 'done'",
                         (json.dumps(results), key))

    def mark_failed(self, key, message):
        """Record a failed attempt with its error message."""
        self._db.execute("UPDATE points SET status = 'failed', finished = ?, error = ? WHERE key = ?",
                         (time.time(), message, key))

    def points(self, status=None):
        """Points as dicts (all, or those with ``status``), ordered by key."""
        query = "SELECT * FROM points" + (" WHERE status = ?" if status else "") + " ORDER BY key"
        cur = self._db.execute(query, (status,) if status else ())
        names = [d[0] for d in cur.description]
        return [dict(zip(names, row)) for row in cur.fetchall()]

    def counts(self):
        """``{status: count}`` for every status."""
        found = dict(self._db.execute("SELECT status, COUNT(*) FROM points GROUP BY status").fetchall())
        return {s: found.get(s, 0) for s in STATUSES}
