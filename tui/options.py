"""Option values shared by the commands and the station: wavelengths, apertures, exclusions."""

from __future__ import annotations

import argparse
import glob
import math
import os

from .safe_text import shown

__all__ = ["SPECTRAL_LINES", "expand_photos", "parse_wavelength", "parse_circle", "wavelength_type",
           "circle_type", "parse_aperture", "aperture_type", "APERTURE_HELP", "APERTURE_METAVAR",
           "diameter_type", "terms_type", "angle_type", "number_type",
           "whole_number_type", "seconds_type", "count_type",
           "check_map_path", "save_map", "MapNames", "EXIT_CODES", "TOLERANCE_EXIT_CODES",
           "STATUS_SEVERITY", "worst_status", "parse_uncertainty", "uncertainty_type",
           "NO_TOLERANCE_EXIT_CODES", "STATION_EXIT_CODES"]

#: The largest coordinate or radius taken in pixels: no photo Flatsight reads is wider.
MAX_PIXELS_ACROSS = 1_000_000

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
  2  usage error, a photo could not be read, or the log or a --save-map map
     could not be written (the figures are still shown, and logged if possible)
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

# commands that take no --spec (stack, absolute): no verdict, so no status 1
NO_TOLERANCE_EXIT_CODES = """exit status:
  0  measured
  2  usage error, a photo could not be read, or a map could not be saved (the
     figures are still shown)
  3  the photos were read but could not be analysed
  4  internal error (please report it with the photos)
  130 interrupted (ctrl+c)"""

# the station: verdicts are shown in it and logged, not given as the exit status
STATION_EXIT_CODES = """exit status:
  0  the station was closed (ctrl+q), whatever the verdicts: they are in the log
  2  usage error, or none of the photos given could be found
  4  internal error (please report it with the photo)"""


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
    if not all(math.isfinite(v) and abs(v) <= MAX_PIXELS_ACROSS for v in (x, y, r)):
        raise ValueError(f"{text!r}: X, Y and R are photo pixels, at most "
                         f"{MAX_PIXELS_ACROSS:,} in size")
    if r <= 0:
        raise ValueError(f"radius in {text!r} must be positive")
    return x, y, r


APERTURE_METAVAR = "X,Y,R|SHAPE:..."
APERTURE_HELP = (
    "the part's outline in photo pixels (x right, y down; angles in degrees counter-"
    "clockwise as the photo is seen); default: found automatically. X,Y,R a circle; "
    "ellipse:CX,CY,A,B,ANGLE a round part photographed at an angle (semi-axes A >= B, "
    "ANGLE of the A axis; measured over the part's own circle); rect:CX,CY,W,H,ANGLE a "
    "rectangle (W along ANGLE); poly:X1,Y1;X2,Y2;X3,Y3;... corners in order; "
    "annulus:CX,CY,R,RIN a ring; cut:CX,CY,R;ANGLE,DIST;... a circle with flats (each "
    "flat's outward direction and its distance from the centre)")


def parse_aperture(text: str):
    """An ``--aperture`` value as an ``Aperture``: today's ``X,Y,R`` circle, or a shape
    (``analysis.shapes``: ``ellipse:``, ``rect:``, ``poly:``, ``annulus:``, ``cut:``,
    ``circle:``)."""
    from ..analysis.aperture import Aperture
    from ..analysis.shapes import parse_shape

    if ":" not in text:
        return Aperture(*parse_circle(text))
    value = parse_shape(text)
    return Aperture(*value) if isinstance(value, tuple) else Aperture.of_shape(value)


def _quoted(text: str) -> str:
    """``text`` quoted for a message, cut short when it is long (a 400-digit number)."""
    return repr(text) if len(text) <= 40 else repr(text[:37]) + "…"


def parse_number(text: str, what: str, low: float, high: float) -> float:
    """A finite number from ``low`` to ``high``; ``what`` names it in the message."""
    try:
        value = float(text)
    except ValueError:
        raise ValueError(f"{what} {_quoted(text)} is not a number") from None
    if not (math.isfinite(value) and low <= value <= high):
        raise ValueError(f"{what} {_quoted(text)} is out of range ({low:g} to {high:g})")
    return value


def parse_whole(text: str, what: str, low: int, high: int) -> int:
    """A whole number from ``low`` to ``high``."""
    try:
        value = int(text.strip())
    except ValueError:
        raise ValueError(f"{what} {_quoted(text)} is not a whole number") from None
    if not low <= value <= high:
        raise ValueError(f"{what} {_quoted(text)} is out of range ({low} to {high})")
    return value


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
aperture_type = _argtype(parse_aperture, "aperture")


def number_type(what: str, low: float, high: float):
    """An argparse type: a finite number from ``low`` to ``high`` (never inf or nan)."""
    return _argtype(lambda text: parse_number(text, what, low, high), "number")


def whole_number_type(what: str, low: int, high: int):
    """An argparse type: a whole number from ``low`` to ``high``."""
    return _argtype(lambda text: parse_whole(text, what, low, high), "whole number")


# the same ranges as a preset's (analysis/records/presets.py) and the pipeline's
diameter_type = number_type("diameter (mm)", 0.1, 10000.0)
terms_type = whole_number_type("number of Zernike terms", 15, 231)
seconds_type = number_type("seconds", 0.0, 1e6)
count_type = whole_number_type("count", 1, 10**9)
angle_type = number_type("angle (degrees)", -360.0, 360.0)


def check_map_path(template: str) -> None:
    """Refuse a ``--save-map`` FILE whose suffix is not a map format, before any photo."""
    from flatsight.analysis.errors import SettingsError
    from flatsight.analysis.record import MAP_SUFFIXES

    if not template.strip():
        raise SettingsError("--save-map needs a file name, e.g. maps/{name}.npy")
    suffix = os.path.splitext(template.replace("{name}", "photo"))[1].lower()
    if suffix not in MAP_SUFFIXES:
        raise SettingsError(f"cannot save a height map as {shown(template)}: name it .npy or "
                            ".tif (32-bit float)")


def save_map(measurement, target: str | os.PathLike) -> str | None:
    """Write ``measurement``'s height map to ``target``; None, or why it could not be.

    A map that cannot be written (a read-only or missing folder, a full disk) must not
    cost the photo its figures, so the caller keeps the result and prints the reason,
    one line naming the file.
    """
    from flatsight.analysis.record import save_height_map

    try:
        save_height_map(measurement, target)
    except OSError as exc:
        return f"cannot write the height map {target}: {exc.strerror or exc}"
    return None


class MapNames:
    """Where each photo's ``--save-map`` goes: ``{name}`` is the photo's stem, made unique.

    Two photos of one stem (``a/BW-1.png`` and ``b/BW-1.png``, or ``part.png`` and
    ``part.tif``) would write one file; the second gets ``-2`` after its stem (then
    ``-3`` ...), so every record points at its own map. The same photo asked again
    (a rewritten photo in ``watch``) keeps its file.
    """

    def __init__(self, template: str) -> None:
        self.template = template
        self._owner: dict[str, str] = {}  # resolved target -> the photo it belongs to
        self._given: dict[str, str] = {}  # photo -> its target

    def target(self, photo: str | os.PathLike) -> str:
        key = os.path.abspath(os.fspath(photo))
        if key in self._given:
            return self._given[key]
        stem = os.path.splitext(os.path.basename(key))[0]
        n = 1
        while True:
            name = stem if n == 1 else f"{stem}-{n}"
            target = self.template.replace("{name}", name)
            resolved = os.path.abspath(os.path.expanduser(target))
            if self._owner.setdefault(resolved, key) == key:
                break
            n += 1
        self._given[key] = target
        return target


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
