"""What the station needs from the measurement library, gathered so tests can hand in their own."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from ..analysis.errors import FlatsightError, MeasurementCancelled

__all__ = ["StationBackend", "default_backend", "describe_error"]


@dataclass(frozen=True)
class StationBackend:
    """The analysis functions the station calls (all pure; run in worker threads).

    Attributes
    ----------
    measure : callable
        ``measure(path, MeasureSettings, *, progress=, cancel=) -> Measurement``.
    load_pixels : callable
        ``load_pixels(path) -> (H, W) ndarray`` of grey levels, for the fringe view.
    remove_terms : callable
        ``remove_terms(measurement, noll_terms) -> (height_nm, Figures)``, no new FFT.
    to_record : callable or None
        ``to_record(measurement) -> dict``, the ``measure --json`` document.
    save_height_map : callable or None
        ``save_height_map(measurement, path)``, written atomically (.npy or .tif).
    """

    measure: Callable[..., Any]
    load_pixels: Callable[[Path], np.ndarray]
    remove_terms: Callable[[Any, tuple[int, ...]], tuple[np.ndarray, Any]]
    to_record: Callable[[Any], dict] | None = None
    save_height_map: Callable[[Any, Path], None] | None = None


def _load_pixels(path: Path) -> np.ndarray:
    from ..analysis.loading import load_photo

    return load_photo(path).pixels


def default_backend() -> StationBackend:
    """The real measurement library, imported here so `flatsight --help` stays fast."""
    from ..analysis import pipeline
    from ..analysis.record import measurement_to_record, save_height_map

    return StationBackend(
        measure=pipeline.measure,
        load_pixels=_load_pixels,
        remove_terms=pipeline.with_terms_removed,
        to_record=measurement_to_record,
        save_height_map=save_height_map,
    )


def describe_error(exc: BaseException) -> str:
    """One line an operator can act on, for any failure inside an analysis worker."""
    if isinstance(exc, MeasurementCancelled):
        return "cancelled"
    if isinstance(exc, FlatsightError):
        return str(exc).splitlines()[0] if str(exc) else type(exc).__name__
    if isinstance(exc, MemoryError):
        return "out of memory: try a smaller photo or close other programs"
    if isinstance(exc, OSError):
        return f"{exc.filename or 'file'}: {exc.strerror or exc}"
    # a bug in the library: keep the station alive and say what happened in one line
    return f"internal error ({type(exc).__name__}: {exc}); please report it with the photo"
