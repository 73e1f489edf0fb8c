"""The inspection log: every measurement's record in one SQLite file that many processes share.

The file is a plain SQLite database in WAL mode (readers never wait for a writer), with
its schema version in ``PRAGMA user_version`` and migrations applied in order when an
older log is opened. Each record is written in one ``BEGIN IMMEDIATE`` transaction, so
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
from pathlib import Path

from .errors import SettingsError
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


def _connect(log_path: Path, *, create: bool) -> sqlite3.Connection:
    if not create and not log_path.exists():
        raise SettingsError(
            f"no inspection log at {log_path}: measure something first, or give --log PATH")
    if create:
        log_path.parent.mkdir(parents=True, exist_ok=True)
    # isolation_level=None: transactions are ours (BEGIN IMMEDIATE ... COMMIT)
    con = sqlite3.connect(str(log_path), timeout=BUSY_TIMEOUT_MS / 1000, isolation_level=None)
    try:
        con.execute(f"PRAGMA busy_timeout = {BUSY_TIMEOUT_MS}")
        _with_retry(lambda: con.execute("PRAGMA journal_mode = WAL").fetchone())
        # FULL: a committed record survives a power cut, not only a killed process
        con.execute("PRAGMA synchronous = FULL")
        _with_retry(lambda: _migrate(con, log_path))
    except sqlite3.DatabaseError as exc:
        con.close()
        if isinstance(exc, sqlite3.OperationalError) and _is_busy(exc):
            raise
        raise SettingsError(
            f"{log_path} is not a readable Flatsight inspection log ({exc}): "
            "give another --log PATH") from None
    except BaseException:
        con.close()
        raise
    return con


def _migrate(con: sqlite3.Connection, log_path: Path) -> None:
    """Bring the schema up to :data:`SCHEMA_VERSION`, all in one transaction."""
    version = con.execute("PRAGMA user_version").fetchone()[0]
    if version == SCHEMA_VERSION:
        return
    if version > SCHEMA_VERSION:
        raise SettingsError(
            f"{log_path} was written by a newer Flatsight (log schema {version}, this one "
            f"knows {SCHEMA_VERSION}): upgrade Flatsight or give another --log PATH")
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
    con = _connect(path, create=True)
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
    sql = "SELECT * FROM inspections"
    if where:
        sql += " WHERE " + " AND ".join(where)
    sql += " ORDER BY logged_utc DESC, record_id DESC"
    if limit is not None:
        sql += " LIMIT ?"
        params.append(int(limit))
    con = _connect(Path(log_path), create=False)
    try:
        con.row_factory = sqlite3.Row
        rows = _with_retry(lambda: con.execute(sql, params).fetchall())
        return [_row_to_dict(r) for r in rows]
    finally:
        con.close()


def get(log_path: str | Path, record_id: int) -> dict:
    """One logged record by id, shaped like :func:`query`'s entries.

    Raises
    ------
    SettingsError
        When the log has no such record.
    """
    con = _connect(Path(log_path), create=False)
    try:
        con.row_factory = sqlite3.Row
        row = _with_retry(lambda: con.execute(
            "SELECT * FROM inspections WHERE record_id = ?", (int(record_id),)).fetchone())
    finally:
        con.close()
    if row is None:
        raise SettingsError(
            f"no record {record_id} in {log_path}: see 'flatsight history' for the ids")
    return _row_to_dict(row)
