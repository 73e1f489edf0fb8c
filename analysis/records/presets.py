"""Station presets from TOML: named sets of wavelength, tolerance, decision rule, people...

The file holds one table per preset under ``presets``::

    [presets.bench-2-hene]
    wavelength_nm = 632.8
    diameter_mm = 100
    tolerance = "3/1(0.25)"
    spec_wavelength_nm = 546.07
    zernike_terms = 36
    operator = "Tamsin Ode"
    station = "bench-2"
    decision = "guarded"             # or "simple" (ISO 14253-1; see tolerances.py)
    wavelength_uncertainty_nm = 0.0  # standard uncertainty of the wavelength (k = 1)
    reference_uncertainty_nm = 6.0   # the reference flat's own, expanded (k = 2)
    log = "postgresql://flatsight_station@qa-server/flatsight"  # the shop's shared log

Every key is optional; an unknown key is an error (a misspelt key would otherwise be
silently ignored and the part measured with the wrong settings).

A ``photos`` table may choose the preset by the photo's file name, so one folder can
hold parts shot on several benches (the first matching pattern wins)::

    [photos]
    "*_hene.*" = "bench-2-hene"
    "*_sodium.*" = "bench-1-sodium"
"""

from __future__ import annotations

import fnmatch
import math
import tomllib
from dataclasses import dataclass, fields
from pathlib import Path

from ..errors import SettingsError
from ..records.log import check_named_log
from .tolerances import DECISION_RULES, parse_tolerance

__all__ = ["Preset", "PresetsFile", "default_presets_path", "get_preset", "load_presets",
           "load_presets_file", "preset_for_photo"]


@dataclass(frozen=True)
class Preset:
    """One named preset; None means "not set here" (the command's default applies)."""

    name: str
    wavelength_nm: float | None = None
    diameter_mm: float | None = None
    tolerance: str | None = None
    spec_wavelength_nm: float | None = None
    zernike_terms: int | None = None
    operator: str | None = None
    station: str | None = None
    decision: str | None = None
    wavelength_uncertainty_nm: float | None = None
    reference_uncertainty_nm: float | None = None
    method: str | None = None  # "auto", "carrier" or "intensity-fit" (analysis/methods)
    ring_sign: str | None = None  # closed fringes: "convex" or "concave" (the push test)
    log: str | None = None


_KEYS = tuple(f.name for f in fields(Preset) if f.name != "name")


def default_presets_path() -> Path:
    """``presets.toml`` in the user's config directory (platformdirs)."""
    import platformdirs

    return Path(platformdirs.user_config_dir("flatsight")) / "presets.toml"


def _positive(path: Path, name: str, key: str, value, low: float, high: float) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise SettingsError(f"{path}: preset {name!r}: {key} must be a number, not {value!r}")
    if not (math.isfinite(value) and low <= value <= high):
        raise SettingsError(
            f"{path}: preset {name!r}: {key} = {value} is out of range ({low:g} to {high:g})")
    return float(value)


def _text(path: Path, name: str, key: str, value) -> str:
    if not isinstance(value, str) or not value.strip():
        raise SettingsError(f"{path}: preset {name!r}: {key} must be a non-empty string")
    return value


def _preset(path: Path, name: str, table) -> Preset:
    if not isinstance(table, dict):
        raise SettingsError(f"{path}: presets.{name} must be a table ([presets.{name}])")
    unknown = sorted(set(table) - set(_KEYS))
    if unknown:
        raise SettingsError(
            f"{path}: preset {name!r}: unknown key {unknown[0]!r} (known: {', '.join(_KEYS)})")
    values: dict = {}
    for key in ("wavelength_nm", "spec_wavelength_nm"):
        if key in table:
            values[key] = _positive(path, name, key, table[key], 100.0, 20000.0)
    if "diameter_mm" in table:
        values["diameter_mm"] = _positive(path, name, "diameter_mm", table["diameter_mm"],
                                          0.1, 10000.0)
    if "zernike_terms" in table:
        terms = table["zernike_terms"]
        if isinstance(terms, bool) or not isinstance(terms, int) or not 15 <= terms <= 231:
            raise SettingsError(
                f"{path}: preset {name!r}: zernike_terms must be a whole number from 15 to 231")
        values["zernike_terms"] = terms
    for key in ("wavelength_uncertainty_nm", "reference_uncertainty_nm"):
        if key in table:
            values[key] = _positive(path, name, key, table[key], 0.0, 1000.0)
    for key in ("tolerance", "operator", "station", "decision"):
        if key in table:
            values[key] = _text(path, name, key, table[key])
    if "log" in table:  # a path or a URL, never with a password in it
        values["log"] = check_named_log(f"{path}: preset {name!r}", table["log"])
    for key, allowed in (("method", ("auto", "carrier", "intensity-fit")),
                         ("ring_sign", ("convex", "concave"))):
        if key in table:
            if table[key] not in allowed:
                raise SettingsError(f"{path}: preset {name!r}: {key} must be "
                                    f"{' or '.join(repr(a) for a in allowed)}, "
                                    f"not {table[key]!r}")
            values[key] = table[key]
    if values.get("decision", "simple") not in DECISION_RULES:
        raise SettingsError(f"{path}: preset {name!r}: decision must be "
                            f"{' or '.join(repr(r) for r in DECISION_RULES)}, "
                            f"not {values['decision']!r}")
    if "tolerance" in values:
        try:  # a bad tolerance is found when the file is read, not at the first part
            parse_tolerance(values["tolerance"],
                            spec_wavelength_nm=values.get("spec_wavelength_nm"))
        except SettingsError as exc:
            raise SettingsError(f"{path}: preset {name!r}: {exc}") from None
    return Preset(name=name, **values)


def load_presets(path: str | Path | None = None) -> dict[str, Preset]:
    """All presets in a TOML file, by name (see :func:`_load`)."""
    return _load(path)[0]


def _load(path: str | Path | None = None) -> tuple[dict[str, Preset], dict[str, str]]:
    """All presets in a TOML file, by name, and its ``[photos]`` patterns.

    Parameters
    ----------
    path : str or Path, optional
        The file; :func:`default_presets_path` when None. A missing default file
        holds no presets; a missing file that was named is an error.

    Raises
    ------
    SettingsError
        One line naming the file and what is wrong (bad TOML with its line and column,
        an unknown key, a value out of range, a malformed tolerance).
    """
    explicit = path is not None
    p = Path(path) if explicit else default_presets_path()
    try:
        text = p.read_text(encoding="utf-8")
    except FileNotFoundError:
        if explicit:
            raise SettingsError(f"no presets file at {p}: check the --presets path") from None
        return {}, {}
    except (OSError, UnicodeDecodeError) as exc:
        raise SettingsError(f"cannot read presets file {p}: {exc}") from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise SettingsError(f"presets file {p} is not valid TOML: {exc}") from None
    extra = sorted(set(data) - {"presets", "photos"})
    if extra:
        raise SettingsError(
            f"{p}: unknown top-level key {extra[0]!r}: put each preset under [presets.NAME]")
    tables = data.get("presets", {})
    if not isinstance(tables, dict):
        raise SettingsError(f"{p}: 'presets' must be tables, written [presets.NAME]")
    presets = {name: _preset(p, name, table) for name, table in tables.items()}
    photos = data.get("photos", {})
    if not isinstance(photos, dict):
        raise SettingsError(f"{p}: 'photos' must be a table of \"pattern\" = \"preset\"")
    for pattern, name in photos.items():
        if name not in presets:
            known = ", ".join(sorted(presets)) or "none"
            raise SettingsError(f"{p}: photos {pattern!r} names no preset {name!r} "
                                f"(known: {known})")
    return presets, dict(photos)


@dataclass(frozen=True)
class PresetsFile:
    """A presets file read once: its presets by name and its ``[photos]`` patterns."""

    presets: dict[str, Preset]
    patterns: dict[str, str]

    def for_photo(self, photo: str | Path) -> Preset | None:
        """The preset the first matching ``[photos]`` pattern gives the photo's name."""
        name = Path(photo).name
        for pattern, preset in self.patterns.items():
            if fnmatch.fnmatch(name, pattern):
                return self.presets[preset]
        return None


def load_presets_file(path: str | Path) -> PresetsFile:
    """Read a presets file once, for choosing presets photo by photo."""
    return PresetsFile(*_load(path))


def preset_for_photo(photo: str | Path, *, path: str | Path) -> Preset | None:
    """The preset the ``[photos]`` table of ``path`` gives a photo's file name, or None."""
    return load_presets_file(path).for_photo(photo)


def get_preset(name: str, *, path: str | Path | None = None) -> Preset:
    """The preset called ``name``; an unknown name is an error listing the known ones."""
    presets = load_presets(path)
    if name not in presets:
        where = path if path is not None else default_presets_path()
        known = ", ".join(sorted(presets)) or "none"
        raise SettingsError(f"no preset {name!r} in {where} (known: {known})")
    return presets[name]
