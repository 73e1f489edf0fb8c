"""The options that turn a measurement into an inspection record: tolerance, log, part, presets.

``flatsight measure`` (and ``watch``) call these in order::

    add_record_options(parser)                 # when building the parser
    args = apply_preset(args)                  # after parsing: fill unset options
    tolerance_from_args(args)                  # before measuring: a bad --spec fails fast
    uncertainty_settings(args)                 # MeasureSettings fields for U
    record, status = finish_record(args, rec)  # per photo: spec section, record_id, log

A malformed tolerance or preset raises :class:`SettingsError` (exit 2); a log that cannot
be written raises :class:`InspectionLogError`, and :func:`judge_and_log` turns that into
the judged record, unlogged, with the reason, so the result is still shown. The
decision rule (``--decision``) and the stated uncertainties (``--wavelength-uncertainty``,
``--reference-uncertainty``) come from the command line, else the preset.
"""

from __future__ import annotations

import argparse
import getpass
import socket
from pathlib import Path

from ..analysis.errors import InspectionLogError, SettingsError
from ..analysis.records.log import (
    DatabaseLocation,
    LogLocation,
    default_log_path,
    log_location,
    record_measurement,
    utc_now,
)
from ..analysis.records.tolerances import (
    DECISION_RULES,
    Tolerance,
    evaluate,
    parse_tolerance,
    spec_section,
)
from .options import number_type, uncertainty_type

__all__ = [
    "DECISION_HELP",
    "PRESET_TO_OPTION",
    "SPEC_HELP",
    "VERDICT_STATUS",
    "add_record_options",
    "apply_preset",
    "decision_from_args",
    "finish_record",
    "judge_and_log",
    "LOG_HELP",
    "log_type",
    "log_location_from_args",
    "tolerance_from_args",
    "uncertainty_settings",
]

# preset key -> argparse dest it fills when that option was not given on the command line.
# wavelength/diameter/terms are the measure command's own options: their defaults must be
# None for a preset to fill them (the measure command applies its defaults afterwards).
PRESET_TO_OPTION = {
    "wavelength_nm": "wavelength",
    "diameter_mm": "diameter",
    "zernike_terms": "terms",
    "tolerance": "spec",
    "spec_wavelength_nm": "spec_wavelength",
    "operator": "operator",
    "station": "station",
    "decision": "decision",
    "wavelength_uncertainty_nm": "wavelength_uncertainty",
    "reference_uncertainty_nm": "reference_uncertainty",
    "method": "method",
    "ring_sign": "ring_sign",
    "log": "log",
}

SPEC_HELP = (
    "surface-form tolerance: ISO 10110-5 '3/A(B/C)', '3/A(B)', '3/-(B)', "
    "'3/A(B/C) RMSi < D' (RMSt, RMSi, RMSa), or plain limits such as 'pv<=63nm, rms<=0.02w, "
    "power<=2fr'. A = sag error compared with |power|; B = PV irregularity after power "
    "(astigmatism included); C = rotationally symmetric part of B. A, B, C are fringes "
    "(half waves) and D waves at 546.07 nm unless --spec-wavelength; plain 'w' is a wave of "
    "the test wavelength unless --spec-wavelength. A value equal to its limit passes. "
    "Exit status 1 when a photo fails, 5 when it is inconclusive (--decision guarded)."
)
DECISION_HELP = (
    "how a figure is judged against its limit (ISO 14253-1, ILAC G8): simple (default) "
    "passes a value within the limit; guarded passes only when value + U is within it, "
    "fails when value - U is beyond it, and is otherwise inconclusive (exit status 5); "
    "U is the figure's expanded uncertainty (k = 2)"
)


# a tolerance's verdict -> what it adds to the exit status (tui/options.py)
VERDICT_STATUS = {"pass": 0, "fail": 1, "inconclusive": 5}


# the range a preset's spec_wavelength_nm may take (analysis/records/presets.py)
spec_wavelength_type = number_type("--spec-wavelength (nm)", 100.0, 20000.0)


LOG_HELP = (
    "inspection log: an SQLite file (default {default}), or a PostgreSQL database shared "
    "by several stations, postgresql://USER@HOST[:PORT]/DB or service=NAME (the password "
    "from ~/.pgpass, PGPASSWORD or a service file); without --log, {fallback}"
)


def log_type(text: str) -> Path | DatabaseLocation:
    """``--log PATH|URL``: never empty (an empty one would quietly mean the default).

    A database URL is checked here, so a malformed one fails before any photo; the
    message shows it without its password.
    """
    if not text.strip():
        raise argparse.ArgumentTypeError("needs a file path or a postgresql:// URL, not an "
                                         "empty one")
    try:
        return log_location(text)
    except SettingsError as exc:
        raise argparse.ArgumentTypeError(str(exc)) from None


def add_record_options(parser: argparse.ArgumentParser) -> None:
    """Add the tolerance, log, people and preset options to a command's parser."""
    group = parser.add_argument_group("tolerance and inspection log")
    group.add_argument("--spec", metavar="TEXT", default=None, help=SPEC_HELP)
    group.add_argument("--spec-wavelength", metavar="NM", type=spec_wavelength_type,
                       default=None,
                       help="wavelength the drawing states its fringes in (default 546.07)")
    group.add_argument("--decision", choices=tuple(DECISION_RULES), default=None,
                       help=DECISION_HELP)
    group.add_argument("--wavelength-uncertainty", metavar="NM", type=uncertainty_type,
                       default=None,
                       help="standard uncertainty of the test wavelength in nm (k = 1; "
                            "default 0: a spectral line is known far better than a photo "
                            "measures); it enters every figure's U")
    group.add_argument("--reference-uncertainty", metavar="NM", type=uncertainty_type,
                       default=None,
                       help="expanded uncertainty (k = 2) in nm of the reference flat's own "
                            "form, from its calibration certificate (default 0); it enters "
                            "every figure's U")
    group.add_argument("--log", metavar="PATH|URL", default=None, type=log_type,
                       help=LOG_HELP.format(default=default_log_path(),
                                            fallback="the preset's log or station.toml's "
                                                     "'log' if set"))
    group.add_argument("--no-log", action="store_true", help="do not record this measurement")
    group.add_argument("--part", metavar="ID", default=None, help="part serial, e.g. BW-FL-0412")
    group.add_argument("--operator", metavar="NAME", default=None,
                       help="who measured (default: the login name)")
    group.add_argument("--station", metavar="NAME", default=None,
                       help="where it was measured (default: the host name)")
    group.add_argument("--preset", metavar="NAME", default=None,
                       help="fill unset options from this station preset")
    group.add_argument("--presets", metavar="FILE", default=None,
                       help="presets file (TOML; default presets.toml in the user config dir)")


def apply_preset(args: argparse.Namespace, preset=None) -> argparse.Namespace:
    """A copy of ``args`` with every unset option (None) filled from ``--preset``.

    Options given on the command line win over the preset. ``preset`` (a
    :class:`~flatsight.analysis.records.presets.Preset`) overrides ``--preset``; without
    either the copy equals ``args``.

    Raises
    ------
    SettingsError
        Bad presets file or unknown preset name (the message lists the known ones).
    """
    out = argparse.Namespace(**vars(args))
    name = getattr(args, "preset", None)
    if preset is None:
        if not name:
            return out
        from ..analysis.records.presets import get_preset

        preset = get_preset(name, path=getattr(args, "presets", None))
    for key, dest in PRESET_TO_OPTION.items():
        value = getattr(preset, key)
        if value is not None and getattr(out, dest, None) is None:
            setattr(out, dest, value)
    return out


def tolerance_from_args(args: argparse.Namespace) -> Tolerance | None:
    """The parsed ``--spec`` (None without one); raises a pointed SettingsError if malformed."""
    text = getattr(args, "spec", None)
    if text is None:
        return None
    return parse_tolerance(text, spec_wavelength_nm=getattr(args, "spec_wavelength", None))


def decision_from_args(args: argparse.Namespace) -> str:
    """The decision rule: ``--decision`` or the preset's, else ``simple``."""
    return getattr(args, "decision", None) or "simple"


def uncertainty_settings(args: argparse.Namespace) -> dict:
    """The ``MeasureSettings`` fields the uncertainty options give (0 when unset)."""
    return {
        "wavelength_uncertainty_nm": float(getattr(args, "wavelength_uncertainty", None) or 0.0),
        "reference_uncertainty_nm": float(getattr(args, "reference_uncertainty", None) or 0.0),
    }


def log_location_from_args(args: argparse.Namespace) -> LogLocation | None:
    """Where the log is: ``--log`` (or the preset's ``log``), else the ``log`` that
    station.toml names, else the default SQLite file; None with ``--no-log``.

    Raises
    ------
    SettingsError
        A malformed location, or a station.toml that cannot be read.
    """
    if getattr(args, "no_log", False):
        return None
    given = getattr(args, "log", None)
    if not given:
        from .config import configured_log

        given = configured_log(getattr(args, "config", None))
    return log_location(given)


def _default_operator() -> str | None:
    try:
        return getpass.getuser()
    except (KeyError, OSError):  # no login name in some containers
        return None


def finish_record(args: argparse.Namespace, record: dict) -> tuple[dict, int]:
    """Judge a record against ``--spec``, log it, and say what that adds to the exit status.

    Parameters
    ----------
    args : argparse.Namespace
        Parsed options (after :func:`apply_preset`).
    record : dict
        ``measurement_to_record(m)``; not modified.

    Returns
    -------
    record : dict
        A copy with ``part``, ``operator``, ``station``, ``logged_utc``, the ``spec``
        section when a tolerance was given, and ``record_id`` when logged.
    status : int
        1 when the tolerance fails, 5 when it is inconclusive (guarded rule), else 0;
        combine several with :func:`~flatsight.tui.options.worst_status`.
    """
    out = dict(record)
    status = 0
    tolerance = tolerance_from_args(args)
    if tolerance is not None:
        result = evaluate(tolerance, out, decision=decision_from_args(args))
        out["spec"] = spec_section(result)
        status = VERDICT_STATUS.get(result.verdict, 0)
    out["part"] = getattr(args, "part", None)
    out["operator"] = getattr(args, "operator", None) or _default_operator()
    out["station"] = getattr(args, "station", None) or socket.gethostname() or None
    out["logged_utc"] = utc_now()
    location = log_location_from_args(args)
    if location is not None:
        try:
            out["record_id"] = record_measurement(
                location, out, part=out["part"], operator=out["operator"],
                station=out["station"], logged_utc=out["logged_utc"])
        except OSError as exc:
            raise InspectionLogError(f"{location}: {exc.strerror or exc}") from None
    return out, status


def judge_and_log(args: argparse.Namespace, record: dict
                  ) -> tuple[dict, int, InspectionLogError | None]:
    """:func:`finish_record`, but a log that cannot be written does not lose the result.

    Returns the record, its status, and None; or, when the log refused it, the record
    judged without logging (no ``record_id``) and the log's error, for the caller to say.
    """
    try:
        out, status = finish_record(args, record)
    except InspectionLogError as exc:
        out, status = finish_record(argparse.Namespace(**{**vars(args), "no_log": True}),
                                    record)
        return out, status, exc
    return out, status, None
