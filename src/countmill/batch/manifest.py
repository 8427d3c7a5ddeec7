"""The batch manifest: which raw file content became which output, with which map.

Stored as SQLite (stdlib :mod:`sqlite3`) at ``DIR/batch-manifest.sqlite``.

Why SQLite and not a JSON file
------------------------------
- One transaction per converted file: an entry is committed right after its output is in
  place, in O(1), however long the history grows. A JSON manifest would be rewritten whole
  (temp file, fsync, rename) after every file, which grows with years of nightly runs.
- Crash safety comes from SQLite's rollback journal with ``synchronous=FULL``: a run killed
  in the middle of a commit leaves the previous state, and the next open rolls the journal
  back. (``journal_mode=DELETE``, not WAL: WAL needs shared memory, which network file
  systems do not give.)
- An operator can ask it questions: ``sqlite3 DIR/batch-manifest.sqlite "select source_name,
  output, rows, rejects, converted_at from conversions order by id desc limit 10"``.
- Only the coordinating process opens it, under the folder lock (:mod:`countmill.batch.lock`),
  so SQLite's own locking on shared storage never has to arbitrate between writers.

Tables
------
``conversions``: append-only history, one row per completed conversion. The latest row of
an ``output`` says what that output holds. A file counts as converted when the latest row for
its output has the same source SHA-256 (of the bytes as stored, compressed for ``.gz``) and
the same map SHA-256, and the output file is still the one recorded (same size, mtime and
inode). The last check matters after a killed run: it may have put a new output in place
without recording it, and a later run with the earlier map must not take that file for its
own.

``hashes``: a cache of source SHA-256 by path, valid while size, mtime, ctime and inode are
unchanged (ctime cannot be set back by users, so any write to the file invalidates it); it
spares re-reading every old file of a large inbox each night. ``--rehash`` ignores it.

``runs``: one row per run with its counts and exit code.
"""

from __future__ import annotations

import sqlite3
from dataclasses import dataclass
from pathlib import Path

from countmill.errors import CountmillError

MANIFEST_NAME = "batch-manifest.sqlite"
SCHEMA_VERSION = "1"

_SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS conversions (
    id INTEGER PRIMARY KEY AUTOINCREMENT,
    output TEXT NOT NULL,
    output_size INTEGER NOT NULL,
    output_mtime_ns INTEGER NOT NULL,
    output_inode INTEGER NOT NULL,
    rejects_file TEXT,
    source_name TEXT NOT NULL,
    source_sha256 TEXT NOT NULL,
    source_size INTEGER NOT NULL,
    map_path TEXT NOT NULL,
    map_name TEXT NOT NULL,
    map_sha256 TEXT NOT NULL,
    data_lines INTEGER NOT NULL,
    rows INTEGER NOT NULL,
    rejects INTEGER NOT NULL,
    seconds REAL NOT NULL,
    converted_at TEXT NOT NULL,
    run_id TEXT NOT NULL
);
CREATE INDEX IF NOT EXISTS conversions_by_output ON conversions (output, id);
CREATE INDEX IF NOT EXISTS conversions_by_source ON conversions (source_sha256, map_sha256);
CREATE TABLE IF NOT EXISTS hashes (
    path TEXT PRIMARY KEY,
    size INTEGER NOT NULL,
    mtime_ns INTEGER NOT NULL,
    ctime_ns INTEGER NOT NULL,
    inode INTEGER NOT NULL,
    sha256 TEXT NOT NULL
);
CREATE TABLE IF NOT EXISTS runs (
    run_id TEXT PRIMARY KEY,
    started TEXT NOT NULL,
    finished TEXT,
    exit_code INTEGER,
    converted INTEGER,
    skipped INTEGER,
    left_settling INTEGER,
    failed INTEGER
);
"""


@dataclass(frozen=True)
class Conversion:
    """One completed conversion, as recorded."""

    output: str
    output_size: int
    output_mtime_ns: int
    output_inode: int
    rejects_file: str | None
    source_name: str
    source_sha256: str
    source_size: int
    map_path: str
    map_name: str
    map_sha256: str
    data_lines: int
    rows: int
    rejects: int
    seconds: float
    converted_at: str
    run_id: str


_FIELDS = tuple(Conversion.__dataclass_fields__)


def output_is_recorded(entry: Conversion, path: Path) -> bool:
    """Is the file at ``path`` still the output ``entry`` recorded?"""
    try:
        st = path.stat()
    except OSError:
        return False
    return (st.st_size, st.st_mtime_ns, st.st_ino) == (entry.output_size, entry.output_mtime_ns, entry.output_inode)


class Manifest:
    """The manifest of one output folder. Open it only while holding the folder lock."""

    def __init__(self, folder: str | Path):
        self.path = Path(folder) / MANIFEST_NAME
        try:
            self.db = sqlite3.connect(self.path, timeout=30)
            self.db.execute("PRAGMA journal_mode=DELETE")
            self.db.execute("PRAGMA synchronous=FULL")
            with self.db:
                self.db.executescript(_SCHEMA)
                self.db.execute("INSERT OR IGNORE INTO meta VALUES ('schema_version', ?)", (SCHEMA_VERSION,))
            version = self.db.execute("SELECT value FROM meta WHERE key='schema_version'").fetchone()[0]
        except sqlite3.Error as exc:
            raise CountmillError(
                f"{self.path}: the manifest cannot be used ({exc}); move it aside to start a new one"
                " (every file in the inbox is then converted again)"
            ) from None
        if version != SCHEMA_VERSION:
            raise CountmillError(f"{self.path}: manifest schema {version}, this countmill reads {SCHEMA_VERSION}")

    def close(self) -> None:
        self.db.close()

    # --- conversions -------------------------------------------------------------------
    def latest(self, output: str) -> Conversion | None:
        row = self.db.execute(
            f"SELECT {', '.join(_FIELDS)} FROM conversions WHERE output = ? ORDER BY id DESC LIMIT 1", (output,)
        ).fetchone()
        return Conversion(*row) if row else None

    def outputs_holding(self, source_sha256: str, map_sha256: str) -> list[Conversion]:
        """Latest entries of the outputs whose recorded content came from this source and map."""
        rows = self.db.execute(
            f"""SELECT {', '.join('c.' + f for f in _FIELDS)} FROM conversions c
               WHERE c.source_sha256 = ? AND c.map_sha256 = ?
                 AND c.id = (SELECT max(id) FROM conversions WHERE output = c.output)
               ORDER BY c.output""",
            (source_sha256, map_sha256),
        ).fetchall()
        return [Conversion(*r) for r in rows]

    def record(self, entry: Conversion) -> None:
        """Commit one conversion; call only once its output is in place."""
        with self.db:
            self.db.execute(
                f"INSERT INTO conversions ({', '.join(_FIELDS)}) VALUES ({', '.join('?' * len(_FIELDS))})",
                tuple(getattr(entry, f) for f in _FIELDS),
            )

    # --- hash cache ---------------------------------------------------------------------
    def cached_hash(self, path: str, size: int, mtime_ns: int, ctime_ns: int, inode: int) -> str | None:
        row = self.db.execute(
            "SELECT sha256 FROM hashes WHERE path = ? AND size = ? AND mtime_ns = ? AND ctime_ns = ? AND inode = ?",
            (path, size, mtime_ns, ctime_ns, inode),
        ).fetchone()
        return row[0] if row else None

    def remember_hash(self, path: str, size: int, mtime_ns: int, ctime_ns: int, inode: int, sha256: str) -> None:
        with self.db:
            self.db.execute(
                "INSERT OR REPLACE INTO hashes VALUES (?, ?, ?, ?, ?, ?)", (path, size, mtime_ns, ctime_ns, inode, sha256)
            )

    # --- runs ---------------------------------------------------------------------------
    def start_run(self, run_id: str, started: str) -> None:
        with self.db:
            self.db.execute("INSERT OR REPLACE INTO runs (run_id, started) VALUES (?, ?)", (run_id, started))

    def finish_run(self, run_id: str, finished: str, exit_code: int, counts: dict[str, int]) -> None:
        with self.db:
            self.db.execute(
                "UPDATE runs SET finished = ?, exit_code = ?, converted = ?, skipped = ?, left_settling = ?, failed = ?"
                " WHERE run_id = ?",
                (finished, exit_code, counts["converted"], counts["skipped"], counts["left"], counts["failed"], run_id),
            )
