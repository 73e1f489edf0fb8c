"""Saving a measurement from the station: the JSON record, the height map and a text summary."""

from __future__ import annotations

import argparse
import json
import math
from pathlib import Path

from ..analysis.atomic import atomic_write_text
from .render.summary import summary_text
from .report_text import inspection_text

__all__ = ["output_paths", "save_result", "saved_record"]


def output_paths(photo: str | Path, folder: str | Path | None = None) -> dict[str, Path]:
    """Where the three files of ``photo``'s result go: beside it, or in ``folder``."""
    photo = Path(photo)
    base = Path(folder) if folder is not None else photo.parent
    stem = photo.stem
    return {
        "json": base / f"{stem}.flatsight.json",
        "map": base / f"{stem}.height.npy",
        "summary": base / f"{stem}.summary.txt",
    }


def saved_record(entry, backend, options) -> dict | None:
    """The document ``s`` saves for a queue entry: what ``measure --json`` prints for it.

    The record the station judged and logged (tolerance, verdict, part, operator, station,
    record id), or, while that is still being written, the same record judged now and
    not logged (the log gets it from the recorder, once). None when this build cannot
    make records.
    """
    from .station_combine import combined_record
    from .station_log import record_result

    if entry.record is not None:
        return entry.record
    record = combined_record(entry, backend)
    if record is None:
        return None
    unlogged = argparse.Namespace(**{**vars(options), "no_log": True})
    return record_result(unlogged, record).record


def _clean(value):
    # JSON has no NaN or infinity: write null so every reader can load the file
    if isinstance(value, float) and not math.isfinite(value):
        return None
    if isinstance(value, dict):
        return {k: _clean(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [_clean(v) for v in value]
    return value


def save_result(
    m,
    backend,
    *,
    folder: str | Path | None = None,
    figures=None,
    removed_terms: tuple[int, ...] = (),
    photo: str | Path | None = None,
    record: dict | None = None,
) -> list[Path]:
    """Write the result files for ``m``; every file is written atomically.

    ``photo`` names the files instead of ``m.photo`` (an average or a sequence, whose
    ``m.photo`` lists several files); ``record`` replaces ``backend.to_record(m)``.
    Returns the paths written. Raises ``OSError`` when the folder cannot be written, and
    ``RuntimeError`` when the library cannot make the JSON record or the map file.
    """
    paths = output_paths(photo if photo is not None else m.photo, folder)
    paths["json"].parent.mkdir(parents=True, exist_ok=True)
    written = []
    if backend.to_record is None or backend.save_height_map is None:
        raise RuntimeError(
            "this build of flatsight cannot write records yet "
            "(flatsight.analysis.record is missing)"
        )
    record = _clean(record if record is not None else backend.to_record(m))
    atomic_write_text(paths["json"], json.dumps(record, indent=2, allow_nan=False) + "\n")
    written.append(paths["json"])
    backend.save_height_map(m, paths["map"])
    written.append(paths["map"])
    summary = summary_text(m, figures=figures, removed_terms=removed_terms)
    judged = inspection_text(record)
    if judged:  # the verdict right under the photo's header, before the figures
        head, _, rest = summary.partition("\n\n")
        summary = f"{head}\n{judged}\n{rest}"
    atomic_write_text(paths["summary"], summary)
    written.append(paths["summary"])
    return written
