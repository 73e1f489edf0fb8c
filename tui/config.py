"""The station's settings, remembered between runs in a small TOML file in the config folder."""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass, fields, replace
from pathlib import Path

from ..analysis.atomic import atomic_write_text
from ..analysis.errors import InspectionLogError, SettingsError
from ..analysis.records.log import check_named_log
from ..analysis.records.tolerances import DECISION_RULES

__all__ = [
    "StationSettings",
    "configured_log",
    "default_config_path",
    "load_settings",
    "save_settings",
    "validate",
]

UNITS = ("nm", "waves", "fringes")
COLOUR_MODES = ("auto", "truecolor", "256", "mono")
MIN_TERMS, MAX_TERMS = 15, 66  # 15 reaches secondary astigmatism; 66 is Noll order 10
MIN_WAVELENGTH_NM, MAX_WAVELENGTH_NM = 300.0, 1700.0  # UV lamps to telecom lasers
MAX_UNCERTAINTY_NM = 1000.0  # as MeasureSettings accepts


@dataclass(frozen=True)
class StationSettings:
    """What the operator set in the station.

    Attributes
    ----------
    wavelength_nm : float
        Test wavelength (He-Ne 632.8 by default).
    invert : bool
        Flip the surface's sign (see the push test in the settings screen).
    diameter_mm : float or None
        Clear-aperture diameter for radius of curvature and mm axes.
    n_terms : int
        Noll Zernike terms fitted.
    units : {"nm", "waves", "fringes"}
        How heights are shown.
    removed_terms : tuple of int
        Noll terms taken out of the map beyond piston and tilt (4 = power ...).
    colour : {"auto", "truecolor", "256", "mono"}
        How the maps are drawn; "auto" reads the terminal's environment.
    decision : {"simple", "guarded"}
        The decision rule verdicts are given under (ISO 14253-1; see ``tolerances``).
    wavelength_uncertainty_nm : float
        Standard uncertainty (k = 1) of the test wavelength, nm.
    reference_uncertainty_nm : float
        Expanded uncertainty (k = 2) of the reference flat's form, nm.
    method : {"auto", "carrier", "intensity-fit"}
        How the fringes become phase (``flatsight measure --help``, "Method").
    ring_sign : {"convex", "concave"} or None
        The part's form for closed fringes, from the push test; a property of the part
        on the bench, so never carried to the next session.
    log : str or None
        The inspection log every command uses when not given ``--log``: an SQLite path
        or a PostgreSQL URL (never with a password in it); None: the default file.
        Written in the file by hand; the settings screen keeps it as it is.
    """

    wavelength_nm: float = 632.8
    invert: bool = False
    diameter_mm: float | None = None
    n_terms: int = 36
    units: str = "nm"
    removed_terms: tuple[int, ...] = ()
    colour: str = "auto"
    decision: str = "simple"
    wavelength_uncertainty_nm: float = 0.0
    reference_uncertainty_nm: float = 0.0
    method: str = "auto"
    ring_sign: str | None = None
    log: str | None = None


def validate(s: StationSettings) -> StationSettings:
    """Return ``s`` if every value is in range, else raise :class:`SettingsError`."""
    if not (
        math.isfinite(s.wavelength_nm) and MIN_WAVELENGTH_NM <= s.wavelength_nm <= MAX_WAVELENGTH_NM
    ):
        raise SettingsError(
            f"wavelength {s.wavelength_nm:g} nm is out of range; give one between "
            f"{MIN_WAVELENGTH_NM:g} and {MAX_WAVELENGTH_NM:g} nm (He-Ne is 632.8)"
        )
    if s.diameter_mm is not None and not (math.isfinite(s.diameter_mm) and s.diameter_mm > 0):
        raise SettingsError(f"diameter {s.diameter_mm:g} mm must be positive, or left empty")
    if not MIN_TERMS <= s.n_terms <= MAX_TERMS:
        raise SettingsError(
            f"{s.n_terms} Zernike terms is out of range; use {MIN_TERMS} to "
            f"{MAX_TERMS} (36 is usual)"
        )
    if s.units not in UNITS:
        raise SettingsError(f"unknown units {s.units!r}; use one of {', '.join(UNITS)}")
    if s.colour not in COLOUR_MODES:
        raise SettingsError(f"unknown colour {s.colour!r}; use one of {', '.join(COLOUR_MODES)}")
    if any(not 4 <= j <= MAX_TERMS for j in s.removed_terms):
        raise SettingsError("removed terms must be Noll indices from 4 up")
    if s.method not in ("auto", "carrier", "intensity-fit"):
        raise SettingsError(f"unknown method {s.method!r}; use auto, carrier or intensity-fit")
    if s.ring_sign not in (None, "convex", "concave"):
        raise SettingsError(f"unknown ring sign {s.ring_sign!r}; use convex or concave")
    if s.decision not in DECISION_RULES:
        raise SettingsError(f"unknown decision rule {s.decision!r}; use one of "
                            f"{', '.join(DECISION_RULES)}")
    for what, value in (("wavelength uncertainty", s.wavelength_uncertainty_nm),
                        ("reference flat uncertainty", s.reference_uncertainty_nm)):
        if not (math.isfinite(value) and 0.0 <= value <= MAX_UNCERTAINTY_NM):
            raise SettingsError(f"{what} {value:g} nm is out of range; give 0 to "
                                f"{MAX_UNCERTAINTY_NM:g} nm")
    if s.log is not None:
        check_named_log("station.toml", s.log)
    return s


def default_config_path() -> Path:
    """``station.toml`` in the platform's user config folder for flatsight."""
    from platformdirs import user_config_dir

    return Path(user_config_dir("flatsight")) / "station.toml"


def _toml_value(v) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, int | float):
        return repr(v)
    if isinstance(v, tuple):
        return "[" + ", ".join(_toml_value(x) for x in v) + "]"
    s = str(v).replace("\\", "\\\\").replace('"', '\\"')
    return f'"{s}"'


# settings that belong to the part on the bench, not to the bench: never carried to the
# next session (a 50 mm part's diameter would give the next 100 mm flat a wrong radius of
# curvature without a word); --diameter, a preset or the settings screen give it per run
NOT_REMEMBERED = ("diameter_mm", "ring_sign")


def settings_to_toml(s: StationSettings) -> str:
    """The settings as TOML text; the part's diameter is left out (:data:`NOT_REMEMBERED`)."""
    lines = ["# Flatsight station settings; written by `flatsight inspect`.", "[station]"]
    for f in fields(s):
        value = getattr(s, f.name)
        if value is None or f.name in NOT_REMEMBERED:
            continue
        lines.append(f"{f.name} = {_toml_value(value)}")
    return "\n".join(lines) + "\n"


def settings_from_toml(text: str) -> StationSettings:
    """Parse settings written by :func:`settings_to_toml`; unknown keys are ignored.

    Raises :class:`SettingsError` for malformed TOML or values out of range.
    """
    try:
        table = tomllib.loads(text).get("station", {})
    except tomllib.TOMLDecodeError as exc:
        raise SettingsError(f"settings file is not valid TOML ({exc})") from None
    known = {f.name for f in fields(StationSettings)} - set(NOT_REMEMBERED)
    values = {k: v for k, v in table.items() if k in known}
    try:
        if "removed_terms" in values:
            values["removed_terms"] = tuple(int(j) for j in values["removed_terms"])
        for key in ("wavelength_nm", "wavelength_uncertainty_nm", "reference_uncertainty_nm"):
            if key in values:
                values[key] = float(values[key])
        if "n_terms" in values:
            values["n_terms"] = int(values["n_terms"])
        if "invert" in values and not isinstance(values["invert"], bool):
            raise TypeError("invert must be true or false")
        return validate(replace(StationSettings(), **values))
    except (TypeError, ValueError) as exc:
        raise SettingsError(f"settings file has a bad value ({exc})") from None


def load_settings(path: Path | None = None) -> tuple[StationSettings, str | None]:
    """Read the settings; a missing file gives the defaults.

    Returns the settings and, when the file was there but unusable, a one-line note
    saying so (the defaults are used then; the station shows the note and carries on).
    """
    path = default_config_path() if path is None else Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        return StationSettings(), None
    except OSError as exc:
        return StationSettings(), f"{path}: cannot read settings ({exc.strerror}); using defaults"
    try:
        return settings_from_toml(text), None
    except SettingsError as exc:
        return StationSettings(), f"{path}: {exc}; using defaults"


def configured_log(path: str | Path | None = None) -> str | None:
    """The ``log`` that station.toml (or ``path``) names, or None when it names none.

    Unlike :func:`load_settings`, a file that cannot be read is an error here, not a
    note: records sent to the default log instead of the shop's shared one would be
    missed by everyone who reads the shared one.

    Raises
    ------
    InspectionLogError
        The file cannot be read or parsed, or its ``log`` is not usable.
    """
    path = default_config_path() if path is None else Path(path)
    try:
        text = path.read_text(encoding="utf-8")
    except FileNotFoundError:
        return None
    except (OSError, UnicodeDecodeError) as exc:
        raise InspectionLogError(f"{path}: cannot read it to find the log ({exc}); fix it "
                                 "or give --log") from None
    try:
        table = tomllib.loads(text).get("station", {})
    except tomllib.TOMLDecodeError as exc:
        raise InspectionLogError(f"{path} is not valid TOML ({exc}), so the log it names "
                                 "is unknown: fix it or give --log") from None
    if "log" not in table:
        return None
    return check_named_log(str(path), table["log"])


def save_settings(s: StationSettings, path: Path | None = None) -> Path:
    """Write the settings atomically (temporary file in the same folder, then rename)."""
    path = default_config_path() if path is None else Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    atomic_write_text(path, settings_to_toml(validate(s)))
    return path
