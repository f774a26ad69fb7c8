"""The field app's SQLite store: tests, their revisions, every reading as it was entered, settings.

Why it is built this way:

- Every reading is committed the moment it is entered (one short transaction), so a crash, a kill or a
  flat battery never loses a reading the crew saw accepted. WAL journal with ``synchronous=FULL``: a
  committed transaction survives a power cut, not only a process kill.
- Nothing is overwritten. A reading entered again for the same slot is a new row (the latest wins);
  correcting a finished test opens a new revision, and every older revision stays readable as it was.
- Each value keeps its unit: the SI value, the unit the crew used and the exact text they typed.
- The schema carries a version number and a list of migrations applied in order at open time.
- Any sqlite error (full disk, read-only folder, locked file) becomes a ``StoreError`` that says what
  was not saved and that what was saved before is intact; the failed transaction is rolled back.

This module holds storage only: checking readings and computing results is in ``mobile.services``.
It imports nothing heavier than the standard library, so that a writer process starts quickly.
"""

from __future__ import annotations

import contextlib
import json
import sqlite3
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path

from calib.errors import CalibError

DB_NAME = "field_tests.sqlite3"

#: Migrations by target version; each list runs in one transaction. Never edit a released step:
#: add a new one.
MIGRATIONS: dict[int, list[str]] = {
    1: [
        """CREATE TABLE tests (
               test_id TEXT PRIMARY KEY,
               created_at TEXT NOT NULL,
               area TEXT NOT NULL DEFAULT '',
               status TEXT NOT NULL DEFAULT 'draft' CHECK (status IN ('draft', 'finished')),
               current_revision INTEGER NOT NULL DEFAULT 1)""",
        """CREATE TABLE revisions (
               test_id TEXT NOT NULL REFERENCES tests(test_id),
               revision INTEGER NOT NULL,
               created_at TEXT NOT NULL,
               reason TEXT NOT NULL DEFAULT '',
               header TEXT NOT NULL,
               PRIMARY KEY (test_id, revision))""",
        """CREATE TABLE readings (
               seq INTEGER PRIMARY KEY AUTOINCREMENT,
               test_id TEXT NOT NULL REFERENCES tests(test_id),
               revision INTEGER NOT NULL,
               slot TEXT NOT NULL,
               si_value REAL NOT NULL,
               unit TEXT NOT NULL,
               entered_text TEXT NOT NULL,
               entered_at TEXT NOT NULL)""",
    ],
    2: [
        "CREATE TABLE settings (key TEXT PRIMARY KEY, value TEXT NOT NULL)",
        "CREATE INDEX readings_by_test ON readings (test_id, revision, slot)",
    ],
    3: [
        # When each revision was finished (NULL: never), so that an export of a test under
        # correction can take its last finished revision. Earlier revisions of older databases
        # were finished before a correction opened the next one.
        "ALTER TABLE revisions ADD COLUMN finished_at TEXT",
        """UPDATE revisions SET finished_at = created_at WHERE revision < (SELECT current_revision
               FROM tests WHERE tests.test_id = revisions.test_id) OR revision = (SELECT
               current_revision FROM tests WHERE tests.test_id = revisions.test_id AND
               status = 'finished')""",
        # The on-site model check's verdicts, kept with the revision they judged; ``last_seq`` is
        # the newest reading they saw (a later reading makes the verdict out of date).
        """CREATE TABLE checks (
               seq INTEGER PRIMARY KEY AUTOINCREMENT,
               test_id TEXT NOT NULL REFERENCES tests(test_id),
               revision INTEGER NOT NULL,
               created_at TEXT NOT NULL,
               last_seq INTEGER NOT NULL,
               verdict TEXT NOT NULL)""",
    ],
}
SCHEMA_VERSION = max(MIGRATIONS)


class StoreError(CalibError, RuntimeError):
    """The store could not save or read; the message says what and that earlier data are intact."""


def _plain(value):
    """JSON for what ``json`` does not know (numpy arrays and numbers in a verdict): plain values."""
    return value.tolist() if hasattr(value, "tolist") else str(value)


def now_iso() -> str:
    """Current UTC time as ISO 8601 with seconds, e.g. ``2026-05-14T09:30:00+00:00``."""
    return datetime.now(timezone.utc).replace(microsecond=0).isoformat()


@dataclass(frozen=True)
class Reading:
    """One stored reading: the SI value [Pa, m3/s or m], the unit and the text the crew entered."""

    seq: int
    test_id: str
    revision: int
    slot: str
    si_value: float
    unit: str
    entered_text: str
    entered_at: str


@dataclass(frozen=True)
class TestRow:
    test_id: str
    created_at: str
    area: str
    status: str
    current_revision: int


def _explain(exc: sqlite3.Error, doing: str) -> str:
    text = str(exc)
    if "full" in text.lower():
        hint = "the device storage is full: free some space and enter it again"
    elif "readonly" in text.lower() or "read-only" in text.lower():
        hint = "the data folder is read-only: pick another with --data-dir"
    elif "locked" in text.lower() or "busy" in text.lower():
        hint = "another program holds the database: close it and try again"
    else:
        hint = f"sqlite says: {text}"
    return f"could not {doing} ({hint}); everything saved before is intact"


class Store:
    """The database of one device. Open with ``Store.open(folder)``; close with ``close()``."""

    def __init__(self, conn: sqlite3.Connection, path: Path):
        self.conn = conn
        self.path = path

    # --- opening and schema ------------------------------------------------------------------
    @classmethod
    def open(cls, folder, timeout: float = 5.0) -> "Store":
        """Open (or create) the store in ``folder``, switch on WAL and apply pending migrations."""
        folder = Path(folder)
        try:
            folder.mkdir(parents=True, exist_ok=True)
            path = folder / DB_NAME
            # isolation_level=None: we issue BEGIN/COMMIT ourselves (see ``transaction``).
            conn = sqlite3.connect(path, timeout=timeout, isolation_level=None,
                                   check_same_thread=False)
            conn.row_factory = sqlite3.Row
            conn.execute("PRAGMA journal_mode=WAL")
            conn.execute("PRAGMA synchronous=FULL")
            conn.execute("PRAGMA foreign_keys=ON")
        except (OSError, sqlite3.Error) as exc:
            raise StoreError(f"could not open the field database in '{folder}': {exc}") from exc
        store = cls(conn, path)
        store.migrate()
        return store

    def close(self) -> None:
        with contextlib.suppress(sqlite3.Error):
            self.conn.close()

    def __enter__(self):
        return self

    def __exit__(self, *exc):
        self.close()

    def schema_version(self) -> int:
        row = self.conn.execute(
            "SELECT name FROM sqlite_master WHERE type='table' AND name='schema_version'").fetchone()
        if row is None:
            return 0
        row = self.conn.execute("SELECT version FROM schema_version").fetchone()
        return int(row[0]) if row else 0

    def migrate(self, target: int = SCHEMA_VERSION) -> int:
        """Apply migrations up to ``target``, one transaction per step; returns the new version."""
        with self.transaction("set up the database") as conn:
            conn.execute("CREATE TABLE IF NOT EXISTS schema_version (version INTEGER NOT NULL)")
            if conn.execute("SELECT COUNT(*) FROM schema_version").fetchone()[0] == 0:
                conn.execute("INSERT INTO schema_version VALUES (0)")
        current = self.schema_version()
        if current > SCHEMA_VERSION:
            raise StoreError(f"the field database '{self.path}' has schema version {current}, newer "
                             f"than this app ({SCHEMA_VERSION}): update the app")
        for version in range(current + 1, target + 1):
            with self.transaction(f"upgrade the database to version {version}") as conn:
                for statement in MIGRATIONS[version]:
                    conn.execute(statement)
                conn.execute("UPDATE schema_version SET version = ?", (version,))
        return self.schema_version()

    @contextlib.contextmanager
    def transaction(self, doing: str = "save"):
        """``with store.transaction("save the static reading") as conn:`` - all or nothing.

        Commits on normal exit. On any exception it rolls back and re-raises; an sqlite error becomes
        a ``StoreError`` naming ``doing``. A failure of the rollback itself never hides the original.
        """
        try:
            self.conn.execute("BEGIN IMMEDIATE")
        except sqlite3.Error as exc:
            raise StoreError(_explain(exc, doing)) from exc
        try:
            yield self.conn
        except BaseException as exc:
            with contextlib.suppress(sqlite3.Error):
                self.conn.rollback()
            if isinstance(exc, sqlite3.Error):
                raise StoreError(_explain(exc, doing)) from exc
            raise
        try:
            self.conn.commit()
        except sqlite3.Error as exc:
            with contextlib.suppress(sqlite3.Error):
                self.conn.rollback()
            raise StoreError(_explain(exc, doing)) from exc

    def integrity_ok(self) -> bool:
        return self.conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"

    # --- tests and revisions -----------------------------------------------------------------
    def create_test(self, test_id: str, header: dict, area: str = "") -> None:
        """A new draft test with revision 1 holding ``header`` (JSON-serializable dict)."""
        stamp = now_iso()
        with self.transaction(f"create test {test_id}") as conn:
            if conn.execute("SELECT 1 FROM tests WHERE test_id=?", (test_id,)).fetchone():
                raise StoreError(f"test id '{test_id}' is already used: pick another id")
            conn.execute("INSERT INTO tests (test_id, created_at, area, status, current_revision) "
                         "VALUES (?, ?, ?, 'draft', 1)", (test_id, stamp, area))
            conn.execute("INSERT INTO revisions (test_id, revision, created_at, reason, header) "
                         "VALUES (?, 1, ?, '', ?)",
                         (test_id, stamp, json.dumps(header, sort_keys=True)))

    def has_test(self, test_id: str) -> bool:
        return self.conn.execute("SELECT 1 FROM tests WHERE test_id=?", (test_id,)).fetchone() is not None

    def test(self, test_id: str) -> TestRow:
        row = self.conn.execute("SELECT * FROM tests WHERE test_id=?", (test_id,)).fetchone()
        if row is None:
            raise StoreError(f"test '{test_id}' is not in the field database")
        return TestRow(**dict(row))

    def tests(self) -> list[TestRow]:
        """All tests, newest first."""
        rows = self.conn.execute("SELECT * FROM tests ORDER BY created_at DESC, test_id DESC")
        return [TestRow(**dict(r)) for r in rows]

    def header(self, test_id: str, revision: int | None = None) -> dict:
        revision = revision or self.test(test_id).current_revision
        row = self.conn.execute("SELECT header FROM revisions WHERE test_id=? AND revision=?",
                                (test_id, revision)).fetchone()
        if row is None:
            raise StoreError(f"test '{test_id}' has no revision {revision}")
        return json.loads(row[0])

    def revisions(self, test_id: str) -> list[dict]:
        rows = self.conn.execute("SELECT revision, created_at, reason, finished_at FROM revisions "
                                 "WHERE test_id=? "
                                 "ORDER BY revision", (test_id,))
        return [dict(r) for r in rows]

    def update_header(self, test_id: str, header: dict, area: str | None = None) -> None:
        """Change the header of a draft's current revision (a finished test needs ``new_revision``)."""
        with self.transaction(f"save the set-up of test {test_id}") as conn:
            t = self._test_in(conn, test_id)
            if t["status"] != "draft":
                raise StoreError(f"test '{test_id}' is finished: start a correction to change it")
            conn.execute("UPDATE revisions SET header=? WHERE test_id=? AND revision=?",
                         (json.dumps(header, sort_keys=True), test_id, t["current_revision"]))
            if area is not None:
                conn.execute("UPDATE tests SET area=? WHERE test_id=?", (area, test_id))

    def finish(self, test_id: str) -> None:
        with self.transaction(f"finish test {test_id}") as conn:
            t = self._test_in(conn, test_id)
            conn.execute("UPDATE tests SET status='finished' WHERE test_id=?", (test_id,))
            conn.execute("UPDATE revisions SET finished_at=? WHERE test_id=? AND revision=?",
                         (now_iso(), test_id, t["current_revision"]))

    def last_finished_revision(self, test_id: str) -> int | None:
        """The newest revision that was finished (a test under correction keeps it), or None."""
        row = self.conn.execute("SELECT MAX(revision) FROM revisions WHERE test_id=? AND "
                                "finished_at IS NOT NULL", (test_id,)).fetchone()
        return None if row[0] is None else int(row[0])

    def new_revision(self, test_id: str, reason: str) -> int:
        """Start a correction: a new revision (a copy of the current header), the test back to draft.

        Older revisions and their readings stay as they were. Returns the new revision number.
        """
        if not reason.strip():
            raise StoreError("say why the test is corrected (e.g. 'gauge re-read'): the reason is kept")
        with self.transaction(f"start a correction of test {test_id}") as conn:
            t = self._test_in(conn, test_id)
            if t["status"] != "finished":
                raise StoreError(f"test '{test_id}' is not finished: change its readings directly, "
                                 "no correction is needed")
            old = t["current_revision"]
            header = conn.execute("SELECT header FROM revisions WHERE test_id=? AND revision=?",
                                  (test_id, old)).fetchone()[0]
            conn.execute("INSERT INTO revisions (test_id, revision, created_at, reason, header) "
                         "VALUES (?, ?, ?, ?, ?)",
                         (test_id, old + 1, now_iso(), reason.strip(), header))
            conn.execute("UPDATE tests SET current_revision=?, status='draft' WHERE test_id=?",
                         (old + 1, test_id))
        return old + 1

    @staticmethod
    def _test_in(conn, test_id):
        row = conn.execute("SELECT * FROM tests WHERE test_id=?", (test_id,)).fetchone()
        if row is None:
            raise StoreError(f"test '{test_id}' is not in the field database")
        return row

    # --- readings ----------------------------------------------------------------------------
    def add_reading(self, test_id: str, slot: str, si_value: float, unit: str,
                    entered_text: str) -> int:
        """Commit one reading at once to the test's current revision; returns its sequence number."""
        si_value = float(si_value)
        if si_value != si_value or si_value in (float("inf"), float("-inf")):
            raise StoreError(f"reading '{slot}' is not a finite number: not saved")
        with self.transaction(f"save the {slot} reading of test {test_id}") as conn:
            t = self._test_in(conn, test_id)
            if t["status"] != "draft":
                raise StoreError(f"test '{test_id}' is finished: start a correction to change it")
            cur = conn.execute(
                "INSERT INTO readings (test_id, revision, slot, si_value, unit, entered_text, "
                "entered_at) VALUES (?, ?, ?, ?, ?, ?, ?)",
                (test_id, t["current_revision"], slot, si_value, unit, entered_text, now_iso()))
            return int(cur.lastrowid)

    def readings(self, test_id: str, revision: int | None = None) -> dict[str, Reading]:
        """The readings in force at ``revision`` (default: current): per slot the latest entered."""
        revision = revision or self.test(test_id).current_revision
        rows = self.conn.execute(
            "SELECT * FROM readings WHERE test_id=? AND revision<=? ORDER BY seq", (test_id, revision))
        latest: dict[str, Reading] = {}
        for r in rows:
            latest[r["slot"]] = Reading(**dict(r))
        return latest

    def history(self, test_id: str) -> list[Reading]:
        """Every reading ever entered for the test, oldest first (corrections included)."""
        rows = self.conn.execute("SELECT * FROM readings WHERE test_id=? ORDER BY seq", (test_id,))
        return [Reading(**dict(r)) for r in rows]

    def last_seq(self, test_id: str, revision: int | None = None) -> int:
        """Sequence number of the newest reading in force at ``revision`` (0 when none)."""
        revision = revision or self.test(test_id).current_revision
        row = self.conn.execute("SELECT MAX(seq) FROM readings WHERE test_id=? AND revision<=?",
                                (test_id, revision)).fetchone()
        return int(row[0] or 0)

    # --- model-check verdicts ----------------------------------------------------------------
    def add_check(self, test_id: str, revision: int, last_seq: int, verdict: dict) -> None:
        """Keep one model-check verdict (JSON-serializable dict) with the revision it judged."""
        with self.transaction(f"save the model check of test {test_id}") as conn:
            self._test_in(conn, test_id)
            conn.execute("INSERT INTO checks (test_id, revision, created_at, last_seq, verdict) "
                         "VALUES (?, ?, ?, ?, ?)", (test_id, int(revision), now_iso(), int(last_seq),
                                                    json.dumps(verdict, sort_keys=True,
                                                               default=_plain)))

    def checks(self, test_id: str) -> list[dict]:
        """Every verdict kept for the test, oldest first: revision, created_at, last_seq, verdict."""
        rows = self.conn.execute("SELECT revision, created_at, last_seq, verdict FROM checks "
                                 "WHERE test_id=? ORDER BY seq", (test_id,))
        return [{**dict(r), "verdict": json.loads(r["verdict"])} for r in rows]

    # --- settings ----------------------------------------------------------------------------
    def get_setting(self, key: str, default=None):
        row = self.conn.execute("SELECT value FROM settings WHERE key=?", (key,)).fetchone()
        return json.loads(row[0]) if row else default

    def set_setting(self, key: str, value) -> None:
        with self.transaction(f"save the setting '{key}'") as conn:
            conn.execute("INSERT INTO settings VALUES (?, ?) ON CONFLICT(key) DO UPDATE SET "
                         "value=excluded.value", (key, json.dumps(value)))
