"""`measure --average` and `--reference MAP`: options, and combining the measurements they touch.

The measure command adds the options with :func:`add_multi_options`, checks them once
before any photo with :func:`check_multi_options`, and after measuring calls
:func:`combine_with_sections`, which returns each measurement to report with the extra
JSON sections (``average``, ``reference``) to merge into its record.
"""

from __future__ import annotations

import argparse
from dataclasses import dataclass, field

__all__ = [
    "Combined",
    "add_multi_options",
    "check_multi_options",
    "combine",
    "combine_with_sections",
    "reference_section",
    "spread_section",
]


def add_multi_options(parser: argparse.ArgumentParser) -> None:
    """Add ``--average`` and ``--reference MAP`` to a command's parser."""
    g = parser.add_argument_group("several photos and reference maps")
    g.add_argument(
        "--average",
        action="store_true",
        help="the photos show one part: align them on the aperture, check their "
        "signs agree, average the maps and report the spread between photos",
    )
    g.add_argument(
        "--reference",
        metavar="MAP",
        default=None,
        help="subtract this map of the reference flat (.npy or 32-bit float .tif "
        "from --save-map or absolute --save-maps), scaled to the aperture",
    )


def check_multi_options(args: argparse.Namespace):
    """Load the reference map before any photo, so a bad file fails at once (exit 2).

    Returns the :class:`~flatsight.analysis.multiphoto.reference.ReferenceMap`, or None. Raises
    ``UnreadablePhotoError`` with a one-line message naming the file.
    """
    if getattr(args, "reference", None) is None:
        return None
    cached = getattr(args, "_reference_map", None)
    if cached is not None:
        return cached
    from flatsight.analysis.multiphoto.reference import load_reference_map

    ref = load_reference_map(args.reference)
    args._reference_map = ref
    return ref


@dataclass(frozen=True)
class Combined:
    """A measurement to report and the sections to add to its JSON record."""

    measurement: object
    sections: dict = field(default_factory=dict)
    averaged: object | None = None  # the AveragedMeasurement (spread map) with --average


def _num(v, digits=4):
    import math

    return None if v is None or not math.isfinite(v) else round(float(v), digits)


def reference_section(subtraction) -> dict:
    """The ``reference`` section: which map was subtracted and how much it covered."""
    ref = subtraction.reference
    return {
        "path": ref.path,
        "sha256": ref.sha256,
        "map_rms_nm": _num(ref.rms_nm, 3),
        "covered_fraction": _num(subtraction.covered_fraction, 4),
    }


def spread_section(averaged) -> dict:
    """The ``average`` section: the photos averaged and their spread (repeatability)."""
    import numpy as np

    spread = averaged.spread_nm[np.isfinite(averaged.spread_nm)]
    return {
        "photos": list(averaged.photos),
        "n_photos": averaged.n_photos,
        "spread_rms_nm": _num(averaged.rms_spread_nm, 3),
        "spread_max_nm": _num(float(spread.max()) if spread.size else None, 3),
        "standard_error_rms_nm": _num(averaged.rms_standard_error_nm, 3),
        "figures_std_nm": {k: _num(v, 3) for k, v in averaged.figure_spread_nm.items()},
        "figures_standard_error_nm": {
            k: _num(v, 3) for k, v in averaged.figure_standard_error_nm.items()
        },
        "sign_correlations": [_num(c, 3) for c in averaged.sign_correlations],
        "note": "std between photos (ddof 1); standard error = std / sqrt(N), the "
        "uncertainty of the average",
    }


def combine_with_sections(args: argparse.Namespace, measurements: list) -> list[Combined]:
    """Apply ``--reference`` to each measurement, then ``--average`` to all of them.

    Returns
    -------
    list of Combined
        One per photo without ``--average``; a single averaged one with it.

    Raises
    ------
    SettingsError, UnreadablePhotoError, UnanalysablePhotoError
        One-line messages (fewer than two photos to average, a bad reference map, a
        photo with the opposite sign).
    """
    from flatsight.analysis.multiphoto.reference import subtract_reference

    items = [Combined(m, {}) for m in measurements]
    ref = check_multi_options(args)
    if ref is not None:
        items = []
        for m in measurements:
            sub = subtract_reference(m, ref)
            items.append(Combined(sub.measurement, {"reference": reference_section(sub)}))
    if getattr(args, "average", False):
        from flatsight.analysis.multiphoto.averaging import average_measurements

        avg = average_measurements([c.measurement for c in items])
        sections = {"average": spread_section(avg)}
        if ref is not None:
            sections["reference"] = items[0].sections["reference"] | {"covered_fraction": None}
        items = [Combined(avg.measurement, sections, averaged=avg)]
    return items


def combine(args: argparse.Namespace, measurements: list) -> list:
    """The measurements to report after ``--reference`` and ``--average`` (see
    :func:`combine_with_sections` for the record sections)."""
    return [c.measurement for c in combine_with_sections(args, measurements)]
