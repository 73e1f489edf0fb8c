"""The inspection log's SQLite store: every record in one file that a station's processes share.

The file is a plain SQLite database in WAL mode (readers never wait for a writer), with
its schema version in ``PRAGMA user_version`` and migrations applied in order when a
writer opens an older log. Readers open it read-only and change nothing, so a user
without write access can read a log; a database that is not a Flatsight log is refused
untouched. Problems are :class:`InspectionLogError` (a full disk is said to be one, never
taken for a damaged log). Each record is written in one ``BEGIN IMMEDIATE`` transaction, so
a process killed mid-write leaves either the whole record or none of it. Writers that
find the database locked wait (``busy_timeout``) and retry, so several operators and a
watched folder logging at once lose nothing.

Besides columns for searching (part, time, verdict, figures) every row keeps the full
record JSON, so ``history --json`` gives back exactly what ``measure --json`` printed.
What a record holds, and the functions callers use, are in :mod:`.log`; this module is
its SQLite half (``write_row`` and ``read_rows``).
"""

from __future__ import annotations

import random
import sqlite3
import time
from collections.abc import Callable
from functools import partial
from pathlib import Path

from ..errors import InspectionLogError
from .log import FIGURE_COLUMNS, SCHEMA_VERSION, Selection

__all__ = ["MIGRATIONS", "read_rows", "write_row"]

BUSY_TIMEOUT_MS = 5000
RETRY_FOR_S = 120.0  # a writer gives up only after this long without getting the lock

_V1 = f"""
CREATE TABLE inspections (
    record_id INTEGER PRIMARY KEY AUTOINCREMENT,
    logged_utc TEXT NOT NULL,
    part TEXT,
    operator TEXT,
    station TEXT,
    photo TEXT,
    photo_sha256 TEXT,
    wavelength_nm REAL,
    {", ".join(f"{c} REAL" for c in FIGURE_COLUMNS)},
    zernike_json TEXT,
    settings_json TEXT,
    record_json TEXT NOT NULL
);
"""
# version 2: the tolerance and its verdict get columns of their own (searching by verdict
# without reading every record's JSON), filled in from the records already logged
_V2 = """
ALTER TABLE inspections ADD COLUMN spec_text TEXT;
ALTER TABLE inspections ADD COLUMN verdict TEXT;
UPDATE inspections SET
    spec_text = json_extract(record_json, '$.spec.tolerance'),
    verdict = json_extract(record_json, '$.spec.verdict');
CREATE INDEX inspections_part_time ON inspections (part, logged_utc);
CREATE INDEX inspections_time ON inspections (logged_utc);
"""
MIGRATIONS: tuple[str, ...] = (_V1, _V2)  # MIGRATIONS[k] takes a log from version k to k+1
assert len(MIGRATIONS) == SCHEMA_VERSION


def _is_busy(exc: sqlite3.OperationalError) -> bool:
    msg = str(exc).lower()
    return "locked" in msg or "busy" in msg


def _with_retry(action: Callable[[], object]) -> object:
    """Run ``action``; while the database is locked, wait a little and try again."""
    deadline = time.monotonic() + RETRY_FOR_S
    delay = 0.01
    while True:
        try:
            return action()
        except sqlite3.OperationalError as exc:
            if not _is_busy(exc) or time.monotonic() > deadline:
                raise
        # jitter, so writers that collided do not collide again in step
        time.sleep(delay * (0.5 + random.random()))
        delay = min(delay * 2, 0.5)


def _problem(exc: sqlite3.Error) -> str:
    """What went wrong, in words an operator can act on (SQLite's result codes)."""
    name = getattr(exc, "sqlite_errorname", "") or ""
    text = str(exc)
    if name.startswith("SQLITE_FULL") or "disk is full" in text:
        return "the disk is full"
    if name.startswith("SQLITE_READONLY") or "readonly" in text:
        return "it is read-only (the file, its folder or the disk)"
    if name.startswith("SQLITE_CANTOPEN") or "unable to open" in text:
        return "it cannot be opened or created there (no write access to the folder?)"
    if name.startswith(("SQLITE_PERM", "SQLITE_AUTH")):
        return "permission denied"
    if _is_busy(exc):
        return "another program kept it locked too long"
    return text


def _not_a_database(exc: sqlite3.Error) -> bool:
    name = getattr(exc, "sqlite_errorname", "") or ""
    text = str(exc)
    return (name.startswith(("SQLITE_NOTADB", "SQLITE_CORRUPT"))
            or "not a database" in text or "malformed" in text)


def _not_readable(log_path: Path, exc: sqlite3.Error) -> InspectionLogError:
    return InspectionLogError(
        f"{log_path} is not a readable Flatsight inspection log ({exc}): "
        "give another --log PATH")


def _write_error(log_path: Path, exc: sqlite3.Error) -> InspectionLogError:
    if _not_a_database(exc):
        return _not_readable(log_path, exc)
    return InspectionLogError(f"{log_path}: {_problem(exc)}")


def _schema_version(con: sqlite3.Connection, log_path: Path) -> int:
    """The log's schema version (0: an empty database, where a log may be made).

    Only reads: a database that is not a Flatsight log, or one from a newer Flatsight, is
    refused before anything in it is changed.
    """
    # the tables before the version: a writer making the log commits both at once, so a
    # log seen with tables is then seen with its version (the other order could catch
    # version 0 and then the tables another process had just made)
    tables = {row[0] for row in con.execute(
        "SELECT name FROM sqlite_master WHERE type = 'table' AND name NOT LIKE 'sqlite_%'")}
    version = con.execute("PRAGMA user_version").fetchone()[0]
    if version == 0 and not tables:
        return 0
    columns = {row[1] for row in con.execute("PRAGMA table_info(inspections)")}
    if version < 1 or not {"record_id", "logged_utc", "record_json"} <= columns:
        raise InspectionLogError(
            f"{log_path} is an SQLite database of another program, not a Flatsight "
            "inspection log; it was left as it was: give another --log PATH")
    if version > SCHEMA_VERSION:
        raise InspectionLogError(
            f"{log_path} was written by a newer Flatsight (log schema {version}, this one "
            f"knows {SCHEMA_VERSION}): upgrade Flatsight or give another --log PATH")
    return version


def _connect_for_writing(log_path: Path) -> sqlite3.Connection:
    """A connection that may write, the log made or brought up to date first.

    Raises InspectionLogError for anything that stops the log being written; another
    program's database is refused before its journal mode or tables are touched.
    """
    if log_path.is_dir():
        raise InspectionLogError(f"{log_path} is a folder: give the log a file name, e.g. "
                                 f"{log_path / 'inspections.sqlite'}")
    try:
        log_path.parent.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise InspectionLogError(
            f"{log_path}: cannot make its folder ({exc.strerror or exc})") from None
    try:
        # isolation_level=None: transactions are ours (BEGIN IMMEDIATE ... COMMIT)
        con = sqlite3.connect(str(log_path), timeout=BUSY_TIMEOUT_MS / 1000,
                              isolation_level=None)
    except sqlite3.Error as exc:
        raise _write_error(log_path, exc) from None
    try:
        con.execute(f"PRAGMA busy_timeout = {BUSY_TIMEOUT_MS}")
        _with_retry(lambda: _schema_version(con, log_path))
        _with_retry(lambda: con.execute("PRAGMA journal_mode = WAL").fetchone())
        # FULL: a committed record survives a power cut, not only a killed process
        con.execute("PRAGMA synchronous = FULL")
        _with_retry(lambda: _migrate(con, log_path))
    except sqlite3.Error as exc:
        con.close()
        raise _write_error(log_path, exc) from None
    except BaseException:
        con.close()
        raise
    return con


def _connect_for_reading(log_path: Path) -> tuple[sqlite3.Connection, int, bool]:
    """A read-only connection, the log's schema version, and whether it was opened immutable.

    Reading needs no write access and changes nothing: no journal mode, no migration. A
    log in WAL mode whose folder the reader cannot write (so SQLite cannot make its
    shared-memory file) is opened immutable when no write-ahead file is waiting; the
    caller then checks that the file did not change while it read.
    """
    if not log_path.exists():
        raise InspectionLogError(
            f"no inspection log at {log_path}: measure something first, or give --log PATH")
    if log_path.is_dir():
        raise InspectionLogError(f"{log_path} is a folder, not an inspection log: give "
                                 "the log file with --log PATH")
    uri = log_path.resolve().as_uri() + "?mode=ro"
    immutable = False
    while True:
        try:
            con = sqlite3.connect(uri + ("&immutable=1" if immutable else ""), uri=True,
                                  timeout=BUSY_TIMEOUT_MS / 1000, isolation_level=None)
        except sqlite3.Error as exc:
            raise _read_error(log_path, exc) from None
        try:
            con.execute(f"PRAGMA busy_timeout = {BUSY_TIMEOUT_MS}")
            version = _with_retry(partial(_schema_version, con, log_path))
            return con, int(version), immutable
        except sqlite3.Error as exc:
            con.close()
            wal = Path(f"{log_path}-wal")
            waiting = wal.exists() and wal.stat().st_size > 0
            if (not immutable and not waiting
                    and (getattr(exc, "sqlite_errorname", "") or "").startswith(
                        ("SQLITE_READONLY", "SQLITE_CANTOPEN"))):
                immutable = True
                continue
            raise _read_error(log_path, exc) from None
        except BaseException:
            con.close()
            raise


def _read_error(log_path: Path, exc: sqlite3.Error) -> InspectionLogError:
    if _not_a_database(exc):
        return _not_readable(log_path, exc)
    return InspectionLogError(f"cannot read the log {log_path}: {_problem(exc)}")


def _signature(path: Path) -> tuple[int, int]:
    st = path.stat()
    return st.st_size, st.st_mtime_ns


def _read(log_path: Path, fetch: Callable[[sqlite3.Connection, str], list]) -> list:
    """``fetch(con, table)`` on a read-only connection; ``table`` is what to select from.

    A log of schema version 1 is read as it is (its verdict and tolerance from each
    record's JSON), not migrated; an empty database holds no records.
    """
    for _ in range(5):
        con, version, immutable = _connect_for_reading(log_path)
        before = _signature(log_path) if immutable else None
        try:
            con.row_factory = sqlite3.Row
            table = _TABLES.get(version, "inspections")
            rows = [] if version == 0 else _with_retry(partial(fetch, con, table))
        except sqlite3.Error as exc:
            raise _read_error(log_path, exc) from None
        finally:
            con.close()
        if before is None or _signature(log_path) == before:
            return rows
    raise InspectionLogError(f"cannot read the log {log_path}: it kept changing while it "
                             "was read without write access to its folder; try again")


# what a reader selects from, by schema version (the latest: the table itself); version 1
# had no verdict columns
_TABLES = {
    1: "(SELECT *, json_extract(record_json, '$.spec.tolerance') AS spec_text, "
       "json_extract(record_json, '$.spec.verdict') AS verdict FROM inspections)",
}


def _migrate(con: sqlite3.Connection, log_path: Path) -> None:
    """Bring the schema up to :data:`SCHEMA_VERSION`, all in one transaction."""
    version = con.execute("PRAGMA user_version").fetchone()[0]
    if version >= SCHEMA_VERSION:  # a newer log was refused by _schema_version
        return
    con.execute("BEGIN IMMEDIATE")
    try:
        # another process may have migrated while we waited for the lock
        version = con.execute("PRAGMA user_version").fetchone()[0]
        for step in range(version, SCHEMA_VERSION):
            for statement in MIGRATIONS[step].split(";"):
                if statement.strip():
                    con.execute(statement)
        con.execute(f"PRAGMA user_version = {SCHEMA_VERSION}")
        con.execute("COMMIT")
    except BaseException:
        con.execute("ROLLBACK")
        raise


def write_row(log_path: Path, row: dict) -> int:
    """Write one record's columns in one ``BEGIN IMMEDIATE`` transaction; its ``record_id``."""
    sql = (f"INSERT INTO inspections ({', '.join(row)}) "
           f"VALUES ({', '.join('?' for _ in row)})")
    con = _connect_for_writing(log_path)
    try:
        def write() -> int:
            con.execute("BEGIN IMMEDIATE")
            try:
                cur = con.execute(sql, tuple(row.values()))
                con.execute("COMMIT")
            except BaseException:
                if con.in_transaction:
                    con.execute("ROLLBACK")
                raise
            return int(cur.lastrowid)

        return int(_with_retry(write))
    except sqlite3.Error as exc:  # a full disk, a read-only file: the record is not logged
        raise _write_error(log_path, exc) from None
    except OSError as exc:
        raise InspectionLogError(f"{log_path}: {exc.strerror or exc}") from None
    finally:
        con.close()


def read_rows(log_path: Path, selection: Selection) -> list[sqlite3.Row]:
    """The rows ``selection`` picks, newest first, read without changing the log."""
    def fetch(con: sqlite3.Connection, table: str) -> list:
        sql, params = selection.sql(table, "?")
        return con.execute(sql, params).fetchall()

    return _read(log_path, fetch)


# which record replaced which: (old id, the newest id that names it in ``supersedes``)
_REPLACED = ("SELECT CAST(json_extract(record_json, '$.supersedes') AS INTEGER) AS old, "
             "MAX(record_id) AS new FROM inspections "
             "WHERE json_extract(record_json, '$.supersedes') IS NOT NULL GROUP BY old")


def replacements(log_path: Path) -> dict[int, int]:
    """Which record replaced which (see ``log.query``), read without changing the log."""
    rows = _read(log_path, lambda con, table: con.execute(_REPLACED).fetchall())
    return {int(old): int(new) for old, new in rows}
