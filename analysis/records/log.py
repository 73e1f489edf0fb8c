"""The inspection log's one interface: where a log is, and writing and reading its records.

A log is either an SQLite file (the embedded default: one station, nothing to set up;
:mod:`.sqlite_store`) or a PostgreSQL database that a shop's stations and its QA office
share (a ``postgresql://`` URL or a ``service=NAME`` connection string;
:mod:`.postgres_store`). Both keep the same columns, the same schema versions and the
same record JSON, so ``history``, ``trend`` and ``report`` read either the same way.

A store is a module with two functions::

    write_row(location, row: dict) -> int            # one record, one transaction
    read_rows(location, selection: Selection) -> list # rows newest first, mappings

and everything about what a record holds (its columns, its JSON, the filters of a
query) lives here, once. A database location is a :class:`DatabaseLocation`, whose text
(``str``, ``repr``, f-strings) never holds a password: every message and listing that
names a log shows the URL with the password taken out.
"""

from __future__ import annotations

import json
import math
import re
from collections.abc import Mapping
from dataclasses import dataclass, field
from datetime import UTC, datetime
from pathlib import Path
from urllib.parse import parse_qsl, urlencode, urlsplit, urlunsplit

from ..errors import InspectionLogError, SettingsError
from ..formatting import finite_number

__all__ = [
    "FIGURE_COLUMNS",
    "SCHEMA_VERSION",
    "DatabaseLocation",
    "Selection",
    "check_named_log",
    "default_log_path",
    "get",
    "is_database",
    "log_location",
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
# version 1: the record and its searchable columns; version 2: the tolerance and its
# verdict in columns of their own. Each store has its own SQL for each step.
SCHEMA_VERSION = 2
VERDICTS = ("pass", "fail", "inconclusive")
URL_SCHEMES = ("postgresql://", "postgres://")


@dataclass(frozen=True)
class DatabaseLocation:
    """A PostgreSQL log: a URL or a ``service=NAME`` string, shown without its password.

    ``conninfo`` is what the driver is given; ``str()`` (and so every message) is the
    same text with any password removed.
    """

    conninfo: str = field(repr=False)

    def __str__(self) -> str:
        return without_password(self.conninfo)

    def __repr__(self) -> str:
        return f"DatabaseLocation({str(self)!r})"

    @property
    def password(self) -> str | None:
        """The password written into the location itself, if any (never shown)."""
        return _password_in(self.conninfo)


LogLocation = Path | DatabaseLocation


def is_database(text: object) -> bool:
    """True when ``text`` names a PostgreSQL log rather than an SQLite file."""
    if isinstance(text, DatabaseLocation):
        return True
    if not isinstance(text, str):
        return False
    t = text.strip()
    return t.lower().startswith(URL_SCHEMES) or t.startswith("service=")


def log_location(given: str | Path | DatabaseLocation | None) -> LogLocation:
    """Where a log is: a PostgreSQL location, an SQLite path (``~`` expanded), or the default.

    Raises
    ------
    SettingsError
        For an empty text, or a database location the driver cannot parse (the message
        shows it without its password).
    """
    if given is None:
        return default_log_path()
    if isinstance(given, DatabaseLocation | Path):
        return given.expanduser() if isinstance(given, Path) else given
    if not given.strip():
        raise SettingsError("the log needs a file path or a postgresql:// URL, not an empty one")
    if is_database(given):
        from .postgres_store import check_location

        return check_location(DatabaseLocation(given.strip()))
    return Path(given).expanduser()


def without_password(conninfo: str) -> str:
    """``conninfo`` with any password taken out (``user:secret@`` and ``password=``)."""
    if conninfo.strip().lower().startswith(URL_SCHEMES):
        parts = urlsplit(conninfo.strip())
        netloc = parts.netloc
        if "@" in netloc:
            userinfo, _, hosts = netloc.rpartition("@")
            netloc = userinfo.partition(":")[0] + "@" + hosts
        query = parse_qsl(parts.query, keep_blank_values=True)
        kept = [(k, v) for k, v in query if k.lower() != "password"]
        query_text = urlencode(kept, safe="/:,") if len(kept) != len(query) else parts.query
        return urlunsplit((parts.scheme, netloc, parts.path, query_text, parts.fragment))
    return _CONNINFO_PASSWORD.sub("", conninfo).strip()


# password=secret or password='it''s secret' in a key=value connection string
_CONNINFO_PASSWORD = re.compile(r"\bpassword\s*=\s*('(?:[^'\\]|\\.)*'|\S*)", re.IGNORECASE)


def _password_in(conninfo: str) -> str | None:
    text = conninfo.strip()
    if text.lower().startswith(URL_SCHEMES):
        parts = urlsplit(text)
        for key, value in parse_qsl(parts.query, keep_blank_values=True):
            if key.lower() == "password" and value:
                return value
        userinfo = parts.netloc.rpartition("@")[0]
        return userinfo.partition(":")[2] or None
    found = _CONNINFO_PASSWORD.search(text)
    return found.group(1).strip("'") or None if found else None


def check_named_log(where: str, text: object) -> str:
    """A log named in a settings or presets file: text, and no password written in it.

    A password belongs in ~/.pgpass, PGPASSWORD or a service file, never in a file the
    station rewrites and that others may read.

    Raises
    ------
    InspectionLogError
        Naming ``where`` and what is wrong (the URL shown without its password).
    """
    if not isinstance(text, str) or not text.strip():
        raise InspectionLogError(f"{where}: log must be a file path or a postgresql:// URL")
    if is_database(text):
        location = log_location(text)
        if location.password:
            raise InspectionLogError(
                f"{where}: the log {location} has its password written in it: keep the "
                "password in ~/.pgpass, PGPASSWORD or a service file instead")
    return text


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


def record_row(record: Mapping, *, part: str | None, operator: str | None,
               station: str | None, logged_utc: str | None) -> dict:
    """The log's columns for one record: searchable fields and the whole record's JSON."""
    spec = record.get("spec") or {}
    return {
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


def record_from_row(row: Mapping) -> dict:
    """A stored row as the record it holds plus the log's own fields."""
    out = json.loads(row["record_json"])
    out.pop("record_id", None)
    return {
        **out,
        "record_id": int(row["record_id"]),
        "logged_utc": row["logged_utc"],
        "part": row["part"],
        "operator": row["operator"],
        "station": row["station"],
        "verdict": row["verdict"],
    }


@dataclass(frozen=True)
class Selection:
    """Which records a query wants: ``(column, operator, value)`` filters and a limit.

    Columns and operators come from this module only, never from a user; values are
    always passed to the database as parameters.
    """

    where: tuple[tuple[str, str, object], ...] = ()
    limit: int | None = None

    def sql(self, table: str, mark: str) -> tuple[str, list]:
        """``SELECT`` text over ``table`` with ``mark`` as the parameter placeholder."""
        sql = f"SELECT * FROM {table}"
        params = [value for _, _, value in self.where]
        if self.where:
            sql += " WHERE " + " AND ".join(f"{c} {op} {mark}" for c, op, _ in self.where)
        sql += " ORDER BY logged_utc DESC, record_id DESC"
        if self.limit is not None:
            sql += f" LIMIT {mark}"
            params.append(int(self.limit))
        return sql, params


def _store(location: LogLocation):
    if isinstance(location, DatabaseLocation):
        from . import postgres_store

        return postgres_store
    from . import sqlite_store

    return sqlite_store


def record_measurement(
    location: str | Path | DatabaseLocation,
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
    location : str, Path or DatabaseLocation
        An SQLite file (created, with its folder, when missing) or a PostgreSQL
        database (its tables made or brought up to date on the first write).
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

    Raises
    ------
    InspectionLogError
        When the record could not be written; it then is not in the log at all.
    """
    where = log_location(location)
    row = record_row(record, part=part, operator=operator, station=station,
                     logged_utc=logged_utc)
    return int(_store(where).write_row(where, row))


def query(
    location: str | Path | DatabaseLocation,
    *,
    part: str | None = None,
    since: str | None = None,
    verdict: str | None = None,
    limit: int | None = None,
    superseded: bool = False,
) -> list[dict]:
    """Logged records, newest first, each the stored record plus the log's own fields.

    A record whose ``supersedes`` names another (the station measured the same photo again
    in one session: the aperture moved, a setting changed) replaces it: the replaced
    record stays in the log, but is left out here unless ``superseded`` is true, so each
    photo of a session counts once in a history, a trend and a pass rate.

    Parameters
    ----------
    location : str, Path or DatabaseLocation
        An existing log.
    part : str, optional
        Only this part.
    since : str, optional
        Only records logged at or after this ISO 8601 date or time (UTC when no zone).
    verdict : {"pass", "fail", "inconclusive"}, optional
        Only records with this verdict (records without a tolerance have none).
    limit : int, optional
        At most this many.
    superseded : bool
        Also the records a later one replaced; each of those carries ``superseded_by``,
        the id of the record that replaced it.

    Returns
    -------
    list of dict
        The ``measure --json`` fields plus ``record_id``, ``logged_utc``, ``part``,
        ``operator``, ``station`` and ``verdict``.
    """
    if verdict not in (None, *VERDICTS):
        raise SettingsError(f"--verdict {verdict!r}: choose pass, fail or inconclusive")
    where = []
    if part is not None:
        where.append(("part", "=", part))
    if since is not None:
        where.append(("logged_utc", ">=", parse_since(since)))
    if verdict is not None:
        where.append(("verdict", "=", verdict))
    at = log_location(location)
    store = _store(at)
    replaced = store.replacements(at)
    # the limit counts the records shown: with replaced ones to leave out, cut afterwards
    cut_here = superseded or not replaced
    rows = store.read_rows(at, Selection(tuple(where), limit if cut_here else None))
    out = []
    for rec in map(record_from_row, rows):
        if rec["record_id"] in replaced:
            if not superseded:
                continue
            rec["superseded_by"] = replaced[rec["record_id"]]
        out.append(rec)
    return out if limit is None else out[:limit]


def get(location: str | Path | DatabaseLocation, record_id: int) -> dict:
    """One logged record by id, shaped like :func:`query`'s entries.

    A record a later one replaced is found too, with ``superseded_by`` saying which.

    Raises
    ------
    SettingsError
        When the log has no such record.
    """
    if not 0 <= record_id < 2**63:
        raise SettingsError(f"no record {record_id}: record ids are whole numbers from 1; "
                            "see 'flatsight history' for the ids")
    at = log_location(location)
    rows = _store(at).read_rows(at, Selection((("record_id", "=", int(record_id)),)))
    if not rows:
        raise SettingsError(
            f"no record {record_id} in {at}: see 'flatsight history' for the ids")
    rec = record_from_row(rows[0])
    replaced_by = _store(at).replacements(at).get(rec["record_id"])
    if replaced_by is not None:
        rec["superseded_by"] = replaced_by
    return rec
