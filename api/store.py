"""The record store: immutable files under their content hash, catalogued in SQLite (WAL).

Layout under the data folder::

    catalogue.sqlite3          the catalogue (records, ties, results)
    uploads/                   uploads being read (emptied when the server starts)
    objects/records/<id>.nc    canonical CF NetCDF of each record
    objects/ties/<id>.csv      tie tables as uploaded
    objects/tables/<id>.csv    event tables (surveys) as uploaded
    objects/results/<id>.json  results of analyses
    objects/grids/<id>.nc      common grids made by /resample (CF NetCDF)
    reports/<id>/              rendered report folders (made on demand)

Every write is atomic: the file goes to a temporary name, is flushed to disk and renamed;
only then is the catalogue row inserted, in one transaction. A server killed at any moment
leaves at worst a temporary file or a file without a row; opening the store removes both, so
the catalogue and the files always agree.
"""

from __future__ import annotations

import json
import re
import sqlite3
import threading
from pathlib import Path

from align.provenance import sha256_bytes, utc_now

ID = re.compile(r"^[0-9a-f]{64}$")
KINDS = {"records": ".nc", "ties": ".csv", "tables": ".csv", "results": ".json",
         "grids": ".nc"}

_SCHEMA = """
CREATE TABLE IF NOT EXISTS records (
    id TEXT PRIMARY KEY, name TEXT NOT NULL, archive TEXT, site TEXT, timescale TEXT,
    timescale_kind TEXT, age_reference TEXT, n_samples INTEGER NOT NULL,
    variables TEXT NOT NULL, depth_range TEXT, age_range TEXT, checksum TEXT NOT NULL,
    info TEXT NOT NULL, created TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS ties (
    id TEXT PRIMARY KEY, labels TEXT NOT NULL, ref_kind TEXT NOT NULL, created TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS tables (
    id TEXT PRIMARY KEY, columns TEXT NOT NULL, n_rows INTEGER NOT NULL, created TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS results (
    id TEXT PRIMARY KEY, kind TEXT NOT NULL, created TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS grids (
    id TEXT PRIMARY KEY, created TEXT NOT NULL);
"""


class Store:
    """A data folder holding the catalogue and the object files."""

    def __init__(self, root, *, reconcile=False):
        self.root = Path(root)
        for kind in KINDS:
            (self.root / "objects" / kind).mkdir(parents=True, exist_ok=True)
        (self.root / "reports").mkdir(exist_ok=True)
        (self.root / "uploads").mkdir(exist_ok=True)
        self._local = threading.local()
        self._connection().executescript(_SCHEMA)
        if reconcile:  # only when the server starts: never while uploads are in flight
            self.reconcile()

    # -- plumbing ------------------------------------------------------------------------

    def _connection(self):
        """This thread's connection (WAL mode, so readers never wait for the writer)."""
        db = getattr(self._local, "db", None)
        if db is None:
            db = sqlite3.connect(self.root / "catalogue.sqlite3", timeout=30,
                                 isolation_level=None, check_same_thread=False)
            db.row_factory = sqlite3.Row
            db.execute("PRAGMA journal_mode=WAL")
            db.execute("PRAGMA synchronous=NORMAL")  # WAL: a killed process loses nothing
            self._local.db = db
        return db

    def connect(self):
        """``with store.connect() as db``: one transaction on this thread's connection."""
        return _Transaction(self._connection())

    def path(self, kind, object_id):
        """Where an object lives; ``None`` for an id that is not a content hash."""
        if not ID.match(object_id or ""):
            return None
        return self.root / "objects" / kind / f"{object_id}{KINDS[kind]}"

    def reconcile(self):
        """Remove temporary files, unfinished uploads and reports, and files that no catalogue
        row names (after a crash)."""
        import shutil

        for leftover in (self.root / "uploads").iterdir():
            leftover.unlink(missing_ok=True)
        for folder in (self.root / "reports").iterdir():
            if folder.name.startswith("."):
                shutil.rmtree(folder, ignore_errors=True)
        with self.connect() as db:
            for kind in KINDS:
                known = {row["id"] for row in db.execute(f"SELECT id FROM {kind}")}
                for path in (self.root / "objects" / kind).iterdir():
                    if path.name.startswith(".") or path.stem not in known:
                        path.unlink(missing_ok=True)
                missing = [i for i in known if not self.path(kind, i).exists()]
                for object_id in missing:
                    db.execute(f"DELETE FROM {kind} WHERE id = ?", (object_id,))

    def sweep(self, older_than):
        """Remove temporaries (uploads being read, ``.part`` files, report staging folders)
        last changed more than ``older_than`` seconds ago: what stopped work left behind.
        Returns how many were removed."""
        import shutil
        import time

        cutoff = time.time() - older_than
        leftovers = [*(self.root / "uploads").iterdir(),
                     *(p for kind in KINDS for p in (self.root / "objects" / kind).iterdir()
                       if p.name.startswith(".")),
                     *(p for p in (self.root / "reports").iterdir() if p.name.startswith("."))]
        removed = 0
        for path in leftovers:
            try:
                if path.stat().st_mtime >= cutoff:
                    continue
                if path.is_dir():
                    shutil.rmtree(path, ignore_errors=True)
                else:
                    path.unlink(missing_ok=True)
                removed += 1
            except FileNotFoundError:
                continue  # finished (renamed or removed) meanwhile
        return removed

    def _put(self, kind, object_id, write):
        """Write an object atomically (``write(tmp_path)``), unless it is there already."""
        from align.io import atomic_write

        target = self.path(kind, object_id)
        if not target.exists():
            atomic_write(target, write)
        return target

    # -- records -------------------------------------------------------------------------

    def add_record(self, upload_id, record, info):
        """Store a validated record under ``upload_id``; returns (entry, created)."""
        from align.io import save_record

        existing = self.record_entry(upload_id)
        if existing is not None:
            return existing, False
        self._put("records", upload_id,
                  lambda tmp: save_record(record, tmp, history="stored by the corealign "
                                                               "service"))
        entry = {
            "id": upload_id, "name": info.name, "archive": info.archive, "site": info.site,
            "timescale": info.timescale, "timescale_kind": info.timescale_kind,
            "age_reference": info.age_reference, "n_samples": info.n_samples,
            "variables": json.dumps([v.name for v in info.variables]),
            "depth_range": json.dumps(info.depth.range if info.depth else None),
            "age_range": json.dumps(info.age.range if info.age else None),
            "checksum": sha256_bytes(self.path("records", upload_id).read_bytes()),
            "info": info.model_dump_json(), "created": utc_now()}
        with self.connect() as db:
            db.execute(f"INSERT OR IGNORE INTO records ({', '.join(entry)}) VALUES "
                       f"({', '.join('?' * len(entry))})", tuple(entry.values()))
        return self.record_entry(upload_id), True

    def record_entry(self, object_id):
        """The catalogue entry of a record as a dict, or None."""
        if not ID.match(object_id or ""):
            return None
        with self.connect() as db:
            row = db.execute("SELECT * FROM records WHERE id = ?", (object_id,)).fetchone()
        return None if row is None else _entry(row)

    def record_info(self, object_id):
        """The stored ``RecordInfo`` JSON of a record."""
        with self.connect() as db:
            row = db.execute("SELECT info FROM records WHERE id = ?", (object_id,)).fetchone()
        return None if row is None else json.loads(row["info"])

    def records(self):
        """Every catalogue entry, newest first."""
        with self.connect() as db:
            rows = db.execute("SELECT * FROM records ORDER BY created DESC, id").fetchall()
        return [_entry(row) for row in rows]

    def delete_record(self, object_id):
        """Remove a record's row, then its file; True when it existed."""
        with self.connect() as db:
            gone = db.execute("DELETE FROM records WHERE id = ?", (object_id,)).rowcount
        if gone:
            self.path("records", object_id).unlink(missing_ok=True)
        return bool(gone)

    # -- ties and results ----------------------------------------------------------------

    def add_ties(self, raw, ties):
        """Store a validated tie table (its bytes); returns its id."""
        object_id = sha256_bytes(raw)
        self._put("ties", object_id, lambda tmp: Path(tmp).write_bytes(raw))
        with self.connect() as db:
            db.execute("INSERT OR IGNORE INTO ties VALUES (?, ?, ?, ?)",
                       (object_id, json.dumps(list(ties.labels)), ties.ref_kind, utc_now()))
        return object_id

    def add_table(self, raw, columns, n_rows):
        """Store an event table (its bytes, read once by the caller); returns its id."""
        object_id = sha256_bytes(raw)
        self._put("tables", object_id, lambda tmp: Path(tmp).write_bytes(raw))
        with self.connect() as db:
            db.execute("INSERT OR IGNORE INTO tables VALUES (?, ?, ?, ?)",
                       (object_id, json.dumps(columns), n_rows, utc_now()))
        return object_id

    def has(self, kind, object_id):
        if not ID.match(object_id or ""):
            return False
        with self.connect() as db:
            row = db.execute(f"SELECT 1 FROM {kind} WHERE id = ?", (object_id,)).fetchone()
        return row is not None

    def add_result(self, kind, body):
        """Store a result (its JSON text); returns its id (the hash of the text)."""
        object_id = sha256_bytes(body.encode())
        self._put("results", object_id, lambda tmp: Path(tmp).write_text(body))
        with self.connect() as db:
            db.execute("INSERT OR IGNORE INTO results VALUES (?, ?, ?)",
                       (object_id, kind, utc_now()))
        return object_id

    def add_grid(self, path):
        """Store a grid file (moved in from ``path``); returns its id (the hash of its bytes)."""
        import shutil

        object_id = sha256_bytes(Path(path).read_bytes())
        self._put("grids", object_id, lambda tmp: shutil.copyfile(path, tmp))
        with self.connect() as db:
            db.execute("INSERT OR IGNORE INTO grids VALUES (?, ?)", (object_id, utc_now()))
        return object_id

    def result_kind(self, object_id):
        if not ID.match(object_id or ""):
            return None
        with self.connect() as db:
            row = db.execute("SELECT kind FROM results WHERE id = ?", (object_id,)).fetchone()
        return None if row is None else row["kind"]

    def report_folder(self, object_id):
        return self.root / "reports" / object_id


class _Transaction:
    """``with store.connect() as db``: one transaction, committed or rolled back."""

    def __init__(self, db):
        self.db = db

    def __enter__(self):
        self.db.execute("BEGIN IMMEDIATE")
        return self.db

    def __exit__(self, kind, value, traceback):
        self.db.execute("COMMIT" if kind is None else "ROLLBACK")
        return False


def _entry(row):
    out = {key: row[key] for key in row.keys() if key != "info"}  # noqa: SIM118 (sqlite3.Row)
    for key in ("variables", "depth_range", "age_range"):
        out[key] = json.loads(out[key]) if out[key] is not None else None
    return out
