"""Option values shared by the commands and the station: wavelengths, apertures, exclusions."""

from __future__ import annotations

import argparse
import glob
import os

__all__ = ["SPECTRAL_LINES", "expand_photos", "parse_wavelength", "parse_circle", "wavelength_type",
           "circle_type", "EXIT_CODES"]

# Wavelengths in air of the usual test sources (common practice; references.md).
SPECTRAL_LINES = {
    "hene": 632.8,
    "sodium": 589.3,
    "helium-d": 587.56,
    "mercury-e": 546.07,
}

EXIT_CODES = """exit status:
  0  every photo measured (and within tolerance, when one is given)
  1  a photo measured but out of tolerance
  2  usage error, or a photo could not be read
  3  a photo was read but could not be analysed (no carrier, closed fringes...)
  4  internal error (please report it with the photo)
  130 interrupted (ctrl+c)
In a batch the highest status applies."""


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


wavelength_type = _argtype(parse_wavelength, "wavelength")
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
