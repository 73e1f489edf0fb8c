"""Several photos as one measurement in the station: an average, or a phase-shifted sequence.

Both run in the bench's analysis worker and give back the library's own result objects
(:class:`~flatsight.analysis.multiphoto.averaging.AveragedMeasurement`,
:class:`~flatsight.analysis.multiphoto.phase_shifting.StackMeasurement`), so the station records
exactly what ``flatsight measure --average`` and ``flatsight stack`` would.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import replace
from pathlib import Path

from ..analysis.errors import MeasurementCancelled, SettingsError

__all__ = ["combined_record", "measure_average", "measure_sequence"]


def measure_average(backend, sources: Sequence[Path], settings, *, progress=None, cancel=None,
                    per_photo: Sequence = ()):
    """Measure each photo with its own aperture, then align, sign-check and average them.

    ``per_photo`` gives each photo its own settings (the wavelength, diameter and terms
    of the bench it was taken on), as ``measure --average --presets`` does; without it
    every photo is measured with ``settings``. The averaged figures use ``settings``.
    """
    from ..analysis.multiphoto.averaging import average_measurements

    if len(sources) < 2:
        raise SettingsError("averaging needs at least two photos of the same part")
    n = len(sources)
    # each photo finds its own aperture: the part sits a little differently every time
    own = [replace(s, aperture=None, exclusions=())
           for s in (per_photo if len(per_photo) == n else [settings] * n)]
    measurements = []
    for k, path in enumerate(sources):
        if cancel is not None and cancel.is_set():
            raise MeasurementCancelled("stopped by the operator")
        if progress is not None:
            progress(f"photo {k + 1} of {n}", k / (n + 1))
        measurements.append(backend.measure(path, own[k], progress=None, cancel=cancel))
    if progress is not None:
        progress("averaging", n / (n + 1))
    return average_measurements(measurements, settings=settings)


def measure_sequence(backend, sources: Sequence[Path], settings, *, progress=None, cancel=None):
    """A phase-shifted sequence (frames in the order taken) measured as one surface."""
    from ..analysis.multiphoto.phase_shifting import measure_stack

    if len(sources) < 3:
        raise SettingsError(
            f"a phase-shifted sequence needs at least 3 frames, got {len(sources)}")
    frames = []
    for path in sources:
        pixels = backend.load_pixels(Path(path))
        if frames and pixels.shape != frames[0].shape:
            raise SettingsError(
                f"{path}: {pixels.shape[1]}x{pixels.shape[0]} px, but {sources[0]} is "
                f"{frames[0].shape[1]}x{frames[0].shape[0]}; take all frames with one "
                "camera setting")
        frames.append(pixels)
    return measure_stack(frames, settings, names=tuple(str(p) for p in sources),
                         progress=progress, cancel=cancel)


def combined_record(entry, backend) -> dict | None:
    """The ``measure --json`` document of a queue entry's result, as the command line makes it.

    A single photo: ``backend.to_record``; an average: the same plus the ``average``
    section of ``measure --average``; a sequence: ``flatsight stack``'s record.
    """
    if entry.kind == "sequence":
        from .cmd_stack import stack_record

        return stack_record(entry.combined, [str(p) for p in entry.sources])
    if backend.to_record is None:
        return None
    record = backend.to_record(entry.measurement)
    if entry.kind == "average":
        from .multi_options import spread_section

        record["average"] = spread_section(entry.combined)
    return record
