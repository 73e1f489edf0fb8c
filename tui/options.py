"""Option values shared by the commands and the station: wavelengths, apertures, exclusions."""

from __future__ import annotations

import argparse
import glob
import math
import os

__all__ = ["SPECTRAL_LINES", "expand_photos", "parse_wavelength", "parse_circle", "wavelength_type",
           "circle_type", "EXIT_CODES", "TOLERANCE_EXIT_CODES", "STATUS_SEVERITY", "worst_status",
           "parse_uncertainty", "uncertainty_type"]

# Wavelengths in air of the usual test sources: the mercury e, helium d and sodium D
# lines as ISO 7944:1998 (Reference wavelengths) tabulates them, from memory; He-Ne
# 632.8 nm is common practice.
SPECTRAL_LINES = {
    "hene": 632.8,
    "sodium": 589.3,
    "helium-d": 587.56,
    "mercury-e": 546.07,
}

EXIT_CODES = """exit status:
  0  every photo measured
  2  usage error, or a photo could not be read
  3  a photo was read but could not be analysed (no carrier, closed fringes...)
  4  internal error (please report it with the photo)
  130 interrupted (ctrl+c)
In a batch the most severe status applies."""

# for the commands that judge a tolerance (--spec); the README's exit table says the same
TOLERANCE_EXIT_CODES = """exit status:
  0  every photo measured (and within tolerance, when --spec gives one)
  1  a photo measured but out of tolerance
  2  usage error, or a photo could not be read
  3  a photo was read but could not be analysed (no carrier, closed fringes...)
  4  internal error (please report it with the photo)
  5  inconclusive under --decision guarded: a figure lies within its uncertainty
     U of a limit, so neither pass nor fail is proven
  130 interrupted (ctrl+c)
In a batch the most severe status applies, from most to least severe:
130, 4, 3, 2, 1, 5, 0 (an inconclusive verdict is less severe than a fail)."""

# exit statuses from least to most severe: 5 (inconclusive) ranks below 1 (fail)
STATUS_SEVERITY = (0, 5, 1, 2, 3, 4, 130)


def worst_status(*statuses: int) -> int:
    """The most severe of several exit statuses, in the order of :data:`STATUS_SEVERITY`.

    >>> worst_status(0, 5, 1), worst_status(5, 0), worst_status(2, 5, 130)
    (1, 5, 130)
    """
    rank = {status: i for i, status in enumerate(STATUS_SEVERITY)}
    return max(statuses, key=lambda s: rank.get(s, len(STATUS_SEVERITY)))


def parse_wavelength(text: str) -> float:
    """A wavelength in nm, or one of the named lines (hene, sodium, helium-d, mercury-e)."""
    key = text.strip().lower()
    if key in SPECTRAL_LINES:
        return SPECTRAL_LINES[key]
    try:
        value = float(key.removesuffix("nm"))
    except ValueError:
        names = ", ".join(SPECTRAL_LINES)
        raise ValueError(f"{text!r} is not a wavelength in nm nor one of {names}") from None
    if not 100.0 <= value <= 20000.0:
        raise ValueError(f"wavelength {value:g} nm is out of range (100 to 20000 nm)")
    return value


def parse_circle(text: str) -> tuple[float, float, float]:
    """``X,Y,R`` in photo pixels (x right, y down) with a positive radius."""
    parts = text.replace(" ", "").split(",")
    if len(parts) != 3:
        raise ValueError(f"{text!r} is not X,Y,R (three numbers in pixels, e.g. 640,480,400)")
    try:
        x, y, r = (float(p) for p in parts)
    except ValueError:
        raise ValueError(f"{text!r} is not X,Y,R (three numbers in pixels)") from None
    if r <= 0:
        raise ValueError(f"radius in {text!r} must be positive")
    return x, y, r


def _argtype(fn, name):
    def convert(text: str):
        try:
            return fn(text)
        except ValueError as exc:
            raise argparse.ArgumentTypeError(str(exc)) from None

    convert.__name__ = name
    return convert


def parse_uncertainty(text: str) -> float:
    """An uncertainty in nm: a number from 0 to 1000 (``nm`` may follow it)."""
    try:
        value = float(text.strip().lower().removesuffix("nm"))
    except ValueError:
        raise ValueError(f"{text!r} is not an uncertainty in nm (a number such as 2.5)") from None
    if not math.isfinite(value) or not 0.0 <= value <= 1000.0:
        raise ValueError(f"uncertainty {text!r} is out of range (0 to 1000 nm)")
    return value


wavelength_type = _argtype(parse_wavelength, "wavelength")
uncertainty_type = _argtype(parse_uncertainty, "uncertainty")
circle_type = _argtype(parse_circle, "circle")


def expand_photos(items: list[str]) -> tuple[list[str], list[str]]:
    """Files to measure from the command line's files, folders and globs.

    Returns the paths (in the order given, folders and globs sorted) and one-line
    problems for entries that name nothing.
    """
    from flatsight.analysis.loading import is_photo_path, photos_in

    paths: list[str] = []
    problems: list[str] = []
    for item in items:
        if os.path.isdir(item):
            found = [str(p) for p in photos_in(item)]
            if not found:
                problems.append(f"{item}: folder holds no PNG, JPEG or TIFF photos")
            paths.extend(found)
        elif not os.path.exists(item) and glob.has_magic(item):
            found = sorted(p for p in glob.glob(item) if os.path.isfile(p) and is_photo_path(p))
            if not found:
                problems.append(f"{item}: no photos match")
            paths.extend(found)
        else:
            paths.append(item)  # loading reports a missing or unreadable file
    return paths, problems
