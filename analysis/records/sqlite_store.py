"""The inspection log: every measurement's record in one SQLite file that many processes share.

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
"""

from __future__ import annotations

import json
import math
import random
import sqlite3
import time
from collections.abc import Callable, Mapping
from datetime import UTC, datetime
from functools import partial
from pathlib import Path

from .errors import InspectionLogError, SettingsError
from .formatting import finite_number

__all__ = [
    "FIGURE_COLUMNS",
    "SCHEMA_VERSION",
    "default_log_path",
    "get",
    "parse_since",
    "query",
    "record_measurement",
    "utc_now",
]

# figures copied into their own columns (all nanometres but the radius, in metres)
FIGURE_COLUMNS = (
    "pv_nm", "rms_nm", "pvr_nm", "power_nm", "irregularity_nm", "astigmatism_nm",
    "symmetric_irregularity_nm", "rms_irregularity_nm", "rms_asymmetric_nm",
    "radius_of_curvature_m",
)
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
SCHEMA_VERSION = len(MIGRATIONS)


def default_log_path() -> Path:
    """``inspections.sqlite`` in the user's data directory (platformdirs)."""
    import platformdirs

    return Path(platformdirs.user_data_dir("flatsight")) / "inspections.sqlite"


def utc_now() -> str:
    """The time now in UTC, ISO 8601 with milliseconds and a ``Z``."""
    return _iso_utc(datetime.now(UTC))


def _iso_utc(t: datetime) -> str:
    return t.astimezone(UTC).isoformat(timespec="milliseconds").replace("+00:00", "Z")


def parse_since(text: str) -> str:
    """A date or date-time (ISO 8601; no zone means UTC) as the log's own time format.

    Raises
    ------
    SettingsError
        When the text is not an ISO 8601 date.
    """
    try:
        t = datetime.fromisoformat(text.strip().replace("Z", "+00:00"))
    except ValueError:
        raise SettingsError(
            f"--since {text!r} is not a date: write it as 2026-11-30 or 2026-11-30T08:00"
        ) from None
    if t.tzinfo is None:
        t = t.replace(tzinfo=UTC)
    return _iso_utc(t)


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
    version = con.execute("PRAGMA user_version").fetchone()[0]
    tables = {row[0] for row in con.execute(
        "SELECT name FROM sqlite_master WHERE type = 'table' AND name NOT LIKE 'sqlite_%'")}
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


def _json(value) -> str:
    # NaN is not JSON; a figure that could not be measured is stored as null
    return json.dumps(_finite(value), allow_nan=False, default=_plain)


def _plain(value):
    """numpy scalars and arrays as plain numbers and lists."""
    if hasattr(value, "tolist"):
        return _finite(value.tolist())
    raise TypeError(f"cannot store {type(value).__name__} in the inspection log")


def _finite(value):
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, Mapping):
        return {str(k): _finite(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_finite(v) for v in value]
    return value


def record_measurement(
    log_path: str | Path,
    record: Mapping,
    *,
    part: str | None = None,
    operator: str | None = None,
    station: str | None = None,
    logged_utc: str | None = None,
) -> int:
    """Log one measurement record and return its ``record_id``.

    Parameters
    ----------
    log_path : str or Path
        The SQLite file; created (with its folder) when missing.
    record : mapping
        The ``measure --json`` document, with its ``spec`` section if a tolerance was given.
    part, operator, station : str, optional
        Who measured what, where.
    logged_utc : str, optional
        The time to record (ISO 8601, UTC); now by default.

    Returns
    -------
    int
        The new record's id, unique in this log.
    """
    path = Path(log_path)
    spec = record.get("spec") or {}
    row = {
        "logged_utc": logged_utc or utc_now(),
        "part": part, "operator": operator, "station": station,
        "photo": record.get("photo"), "photo_sha256": record.get("photo_sha256"),
        "wavelength_nm": finite_number(record.get("wavelength_nm")),
        **{c: finite_number(record.get(c)) for c in FIGURE_COLUMNS},
        "zernike_json": _json(record.get("zernike")),
        "settings_json": _json(record.get("settings")),
        "spec_text": spec.get("tolerance"), "verdict": spec.get("verdict"),
        "record_json": _json(dict(record)),
    }
    sql = (f"INSERT INTO inspections ({', '.join(row)}) "
           f"VALUES ({', '.join('?' for _ in row)})")
    con = _connect_for_writing(path)
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
        raise _write_error(path, exc) from None
    finally:
        con.close()


def _row_to_dict(row: sqlite3.Row) -> dict:
    out = json.loads(row["record_json"])
    out.pop("record_id", None)
    return {
        **out,
        "record_id": row["record_id"],
        "logged_utc": row["logged_utc"],
        "part": row["part"],
        "operator": row["operator"],
        "station": row["station"],
        "verdict": row["verdict"],
    }


def query(
    log_path: str | Path,
    *,
    part: str | None = None,
    since: str | None = None,
    verdict: str | None = None,
    limit: int | None = None,
) -> list[dict]:
    """Logged records, newest first, each the stored record plus the log's own fields.

    Parameters
    ----------
    log_path : str or Path
        An existing log.
    part : str, optional
        Only this part.
    since : str, optional
        Only records logged at or after this ISO 8601 date or time (UTC when no zone).
    verdict : {"pass", "fail", "inconclusive"}, optional
        Only records with this verdict (records without a tolerance have none).
    limit : int, optional
        At most this many.

    Returns
    -------
    list of dict
        The ``measure --json`` fields plus ``record_id``, ``logged_utc``, ``part``,
        ``operator``, ``station`` and ``verdict``.
    """
    if verdict not in (None, "pass", "fail", "inconclusive"):
        raise SettingsError(f"--verdict {verdict!r}: choose pass, fail or inconclusive")
    where, params = [], []
    if part is not None:
        where.append("part = ?")
        params.append(part)
    if since is not None:
        where.append("logged_utc >= ?")
        params.append(parse_since(since))
    if verdict is not None:
        where.append("verdict = ?")
        params.append(verdict)
    sql = "SELECT * FROM {table}"
    if where:
        sql += " WHERE " + " AND ".join(where)
    sql += " ORDER BY logged_utc DESC, record_id DESC"
    if limit is not None:
        sql += " LIMIT ?"
        params.append(int(limit))
    rows = _read(Path(log_path),
                 lambda con, table: con.execute(sql.format(table=table), params).fetchall())
    return [_row_to_dict(r) for r in rows]


def get(log_path: str | Path, record_id: int) -> dict:
    """One logged record by id, shaped like :func:`query`'s entries.

    Raises
    ------
    SettingsError
        When the log has no such record.
    """
    if not 0 <= record_id < 2**63:
        raise SettingsError(f"no record {record_id}: record ids are whole numbers from 1; "
                            "see 'flatsight history' for the ids")
    rows = _read(Path(log_path), lambda con, table: con.execute(
        f"SELECT * FROM {table} WHERE record_id = ?", (int(record_id),)).fetchall())
    row = rows[0] if rows else None
    if row is None:
        raise SettingsError(
            f"no record {record_id} in {log_path}: see 'flatsight history' for the ids")
    return _row_to_dict(row)
