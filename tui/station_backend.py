"""What the station needs from the measurement library, gathered so tests can hand in their own."""

from __future__ import annotations

import threading
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

from ..analysis.errors import FlatsightError, MeasurementCancelled
from .safe_text import shown

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


class _LastPhoto:
    """The photo last decoded for the fringe view, so measuring it does not decode it again.

    Keyed by path, size and modification time: a photo rewritten on disk is read anew.
    """

    def __init__(self) -> None:
        self._lock = threading.Lock()
        self._key: tuple | None = None
        self._photo: Any = None

    @staticmethod
    def _key_of(path: Path) -> tuple | None:
        try:
            st = Path(path).stat()
        except OSError:
            return None
        return (str(path), st.st_size, st.st_mtime_ns)

    def load_pixels(self, path: Path) -> np.ndarray:
        from ..analysis.loading import load_photo

        photo = load_photo(path)
        with self._lock:
            self._key, self._photo = self._key_of(path), photo
        return photo.pixels

    def measure(self, path: Path, settings, **kwargs):
        from ..analysis import pipeline

        key = self._key_of(path)
        with self._lock:
            photo = self._photo if key is not None and key == self._key else None
        return pipeline.measure(photo if photo is not None else path, settings, **kwargs)


def default_backend() -> StationBackend:
    """The real measurement library, imported here so `flatsight --help` stays fast."""
    from ..analysis import pipeline
    from ..analysis.record import measurement_to_record, save_height_map

    last = _LastPhoto()
    return StationBackend(
        measure=last.measure,
        load_pixels=last.load_pixels,
        remove_terms=pipeline.with_terms_removed,
        to_record=measurement_to_record,
        save_height_map=save_height_map,
    )


def describe_error(exc: BaseException) -> str:
    """One line an operator can act on, for any failure inside an analysis worker.

    Control characters in it (from a file name) are escaped, so it can be shown as is.
    """
    return shown(_describe(exc))


def _describe(exc: BaseException) -> str:
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
