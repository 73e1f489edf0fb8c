"""The station's inspection records: judge each measurement, log it, read back verdicts and trends.

Every measurement goes through :func:`flatsight.tui.record_options.finish_record`, the
function ``flatsight measure`` uses, so a record logged from the station is the same
document the command line logs. The part of a photo is ``--part`` when given, else the
photo's file stem (``BW-FL-0412_hene.png`` is part ``BW-FL-0412_hene``).
"""

from __future__ import annotations

import argparse
import sqlite3
from dataclasses import dataclass, field
from pathlib import Path

from ..analysis.errors import FlatsightError
from ..analysis.records.log import LogLocation

__all__ = [
    "LogOutcome",
    "StationRecorder",
    "entry_options",
    "last_verdicts",
    "read_log",
    "record_result",
]

# the command-line options that shape a record (argparse dests of add_record_options)
OPTION_KEYS = ("spec", "spec_wavelength", "decision", "part", "operator", "station")


@dataclass(frozen=True)
class StationRecorder:
    """Where and how the station records its measurements.

    Attributes
    ----------
    log_path : Path, DatabaseLocation or None
        The inspection log (an SQLite file or a PostgreSQL database); None records
        nothing (``--no-log``), but tolerances are still judged.
    options : dict
        ``spec``, ``spec_wavelength``, ``decision``, ``part``, ``operator``, ``station``
        from the command line (None: unset, so a preset may fill it).
    """

    log_path: LogLocation | None = None
    options: dict = field(default_factory=dict)


@dataclass(frozen=True)
class LogOutcome:
    """What recording one measurement gave: the record, its verdict, the log's answer."""

    record: dict
    verdict: str | None
    record_id: int | None
    error: str | None = None


def entry_options(recorder: StationRecorder, preset, photo: str | Path) -> argparse.Namespace:
    """The options for one photo's record: command line first, then ``preset`` (may be None).

    The part defaults to the photo's file stem, so each photo of a folder is its own part
    unless ``--part`` names one.
    """
    from .record_options import apply_preset

    base = argparse.Namespace(
        **{k: recorder.options.get(k) for k in OPTION_KEYS},
        log=recorder.log_path,
        no_log=recorder.log_path is None,
        preset=None,
        presets=None,
    )
    out = apply_preset(base, preset=preset) if preset is not None else base
    if not out.part:
        out.part = Path(photo).stem
    return out


def record_result(options: argparse.Namespace, record: dict) -> LogOutcome:
    """Judge and log ``record`` (the ``measure --json`` document); never raises for the log.

    A log that cannot be written still gives the verdict, with ``error`` saying why
    nothing was logged, in one line the operator can act on.
    """
    from .record_options import finish_record

    try:
        out, _ = finish_record(options, record)
        error = None
    except (FlatsightError, OSError, sqlite3.Error) as exc:
        # judge without the log, so the operator still sees pass or fail
        quiet = argparse.Namespace(**{**vars(options), "no_log": True})
        out, _ = finish_record(quiet, record)
        error = f"not logged: {str(exc).splitlines()[0] if str(exc) else type(exc).__name__}"
    spec = out.get("spec") or {}
    return LogOutcome(out, spec.get("verdict"), out.get("record_id"), error)


def read_log(log_path: LogLocation | None, *, parts=(), limit: int = 2000):
    """The log's newest ``limit`` records, each queue part's last verdict, and a note.

    Returns ``(rows, verdicts, note)``: rows newest first; ``verdicts`` maps each of
    ``parts`` found in the log to its newest record's verdict (looked up on its own
    when the part's last inspection is older than the rows read); ``note`` says why
    there is nothing to show, else None.
    """
    if log_path is None:
        return [], {}, "not logging (--no-log): no history to show"
    if isinstance(log_path, Path) and not log_path.exists():
        return [], {}, f"no records yet in {log_path}"
    from ..analysis.records.log import query

    try:
        rows = query(log_path, limit=limit)
        verdicts = last_verdicts(rows)
        for part in set(parts) - set(verdicts):
            older = query(log_path, part=part, limit=1)
            if older:
                verdicts[part] = older[0].get("verdict")
        return rows, verdicts, None
    except (FlatsightError, OSError, sqlite3.Error) as exc:
        return [], {}, f"cannot read the inspection log: {str(exc).splitlines()[0]}"


def last_verdicts(rows: list[dict]) -> dict[str, str | None]:
    """Each part's newest verdict (None when its newest record had no tolerance)."""
    out: dict[str, str | None] = {}
    for row in rows:  # newest first: the first seen is the last measured
        part = row.get("part")
        if part is not None and part not in out:
            out[part] = row.get("verdict")
    return out
