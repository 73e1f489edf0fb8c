"""`flatsight inspect`: open the inspection station on photos or folders of photos."""

from __future__ import annotations

import argparse
import os
import sys
from dataclasses import replace
from pathlib import Path

from .options import STATION_EXIT_CODES, diameter_type, expand_photos, wavelength_type
from .picture_mode import ENV_VAR, PICTURE_CHOICES
from .record_options import add_record_options
from .safe_text import shown

HELP = "open the inspection station (a keyboard-driven terminal app)"
DESCRIPTION = """\
Open the inspection station: a queue of fringe photos on the left, and for the
photo in hand its fringes with the aperture drawn over them, the spectrum, the
surface map, two profiles and the figures. The first photo is measured at once.

Keys: 1-7 switch views (6 is the trend from the inspection log, 7 the spread
of averaged photos), [ and ] move through the queue, o opens photos, s saves the
result (JSON record, height map, text summary beside the photo), w opens the
settings, b picks a bench preset, space marks photos that g averages or n
measures as a phase-shifted sequence, u switches nm / waves / fringes, R states
whether a photo of closed rings is convex or concave, ? lists every key, ctrl+q
quits.

Closed rings: a photo refused because one photo of rings cannot tell convex from
concave brings up a prompt with the push test; the answer measures it again.
--ring-sign (or "Closed rings" in the settings, or a preset's ring_sign) states
it for the session's photos instead; it is never remembered.

Every measurement is judged against --spec (or the preset's tolerance) and
recorded in the inspection log, as flatsight measure records it: the default
log (or the one station.toml names), --log PATH, a shared PostgreSQL log with
--log postgresql://USER@HOST/DB, or none with --no-log. The part is --part, or
else the photo's file stem (BW-FL-0412_hene.png is part BW-FL-0412_hene); the
queue shows each part's verdict, P pass, F fail or I inconclusive (under
--decision guarded: a figure within its uncertainty of a limit), bold for the
measurement in hand and plain for the log's last. The figures view gives each
figure with its expanded uncertainty U (k = 2).

Settings changed in the station (wavelength, sign, terms, units) are remembered
in station.toml in your user config folder, with --decision,
--wavelength-uncertainty and --reference-uncertainty; options given here win for
this run and are remembered too. The diameter is the part's: give it with
--diameter (or a preset) each run; it is never carried over to the next.

Sign: Flatsight takes the air wedge to be wider toward the top of the photo, so
the fringes travel up when the gap is gently closed (push test); if yours travel
down, use --invert (or tick Invert in the settings)."""

EXAMPLES = """\
examples:
  flatsight inspect sample_images/ --presets sample_images/presets.toml
  flatsight inspect BW-FL-0412.png --part BW-FL-0412 --spec "3/1(0.5)" --log shop.sqlite
  flatsight inspect BW-FL-0412.png BW-FL-0413.png --wavelength hene --diameter 100
  flatsight inspect shots/ --wavelength mercury-e --out results/
"""


def add_parser(sub: argparse._SubParsersAction) -> argparse.ArgumentParser:
    """Add the ``inspect`` subcommand to ``sub``."""
    p = sub.add_parser(
        "inspect",
        help=HELP,
        description=DESCRIPTION,
        epilog=EXAMPLES + "\n" + STATION_EXIT_CODES,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument(
        "photos",
        nargs="*",
        metavar="PHOTO",
        help="photo files (PNG, JPEG, TIFF) or folders of photos; none opens an "
        "empty queue (press o to pick photos)",
    )
    p.add_argument(
        "-w",
        "--wavelength",
        type=wavelength_type,
        default=None,
        metavar="NM",
        help="test wavelength in nm, or hene, sodium, helium-d, mercury-e "
        "(default: the remembered one, else 632.8)",
    )
    p.add_argument(
        "--diameter",
        type=diameter_type,
        metavar="MM",
        default=None,
        help="physical clear-aperture diameter, for the radius of curvature",
    )
    p.add_argument(
        "--invert",
        action="store_true",
        default=None,
        help="flip the sign of the surface (see 'Sign' above)",
    )
    p.add_argument(
        "--method", choices=("auto", "carrier", "intensity-fit"), default=None,
        help="how the fringes become phase (see flatsight measure --help, 'Method')",
    )
    p.add_argument(
        "--ring-sign", choices=("convex", "concave"), default=None,
        help="for closed fringes: the part's form from the push test (see flatsight "
             "measure --help, 'Closed fringes'); shown in the fringe view",
    )
    p.add_argument(
        "--terms",
        type=int,
        metavar="N",
        default=None,
        help="Zernike terms to fit (Noll, 15 to 66; default 36)",
    )
    p.add_argument(
        "--out",
        metavar="FOLDER",
        default=None,
        help="save results in FOLDER (default: beside each photo)",
    )
    p.add_argument(
        "--colour",
        choices=("auto", "truecolor", "256", "mono"),
        default=None,
        help="how maps are drawn (default auto: 24-bit if the terminal says so, "
        "256 colours otherwise, characters with NO_COLOR)",
    )
    p.add_argument(
        "--images",
        choices=PICTURE_CHOICES,
        default=None,
        help="draw the photo and the surface map as pictures: auto (default, or "
        "$FLATSIGHT_IMAGES) where the terminal answers that it draws Sixel or Kitty "
        "graphics and NO_COLOR is unset; on for them even unasked (behind tmux: Kitty's "
        "in kitty, else Sixel); sixel or kitty for that one; off for half-block cells",
    )
    p.add_argument(
        "--config",
        metavar="FILE",
        default=None,
        help="settings file (default: station.toml in the user config folder)",
    )
    add_record_options(p)
    p.set_defaults(run=run)
    return p


def expand(items: list[str]) -> tuple[list[Path], list[str]]:
    """Photo paths from files, folders and globs, and one-line problems for names that hold none.

    A photo that is there but unreadable shows as an error in the queue, not here.
    """
    found, problems = expand_photos(items)
    paths: list[Path] = []
    for item in found:
        if Path(item).exists():
            paths.append(Path(item))
        else:
            problems.append(f"{item}: no such file or folder")
    return paths, problems


def settings_from_args(args: argparse.Namespace, remembered):
    """The remembered settings with this run's options laid over them (validated)."""
    from .config import validate

    changes = {}
    if args.wavelength is not None:
        changes["wavelength_nm"] = float(args.wavelength)
    if args.diameter is not None:
        changes["diameter_mm"] = float(args.diameter)
    if args.invert:
        changes["invert"] = True
    if args.terms is not None:
        changes["n_terms"] = int(args.terms)
    if args.colour is not None:
        changes["colour"] = args.colour
    for key in ("method", "ring_sign"):
        if getattr(args, key, None) is not None:
            changes[key] = getattr(args, key)
    if getattr(args, "decision", None) is not None:
        changes["decision"] = args.decision
    for key in ("wavelength_uncertainty", "reference_uncertainty"):
        if getattr(args, key, None) is not None:
            changes[f"{key}_nm"] = float(getattr(args, key))
    return validate(replace(remembered, **changes))


def run(args: argparse.Namespace) -> int:
    """Start the station; returns 0 on a normal quit, 2 for bad options or no photos."""
    from ..analysis.errors import SettingsError
    from .config import default_config_path, load_settings

    photos, problems = expand(args.photos)
    for problem in problems:
        print(f"flatsight inspect: {shown(problem)}", file=sys.stderr)
    if args.photos and not photos:
        return 2
    config_path = Path(args.config) if args.config else default_config_path()
    remembered, notice = load_settings(config_path)
    try:
        settings = settings_from_args(args, remembered)
    except SettingsError as exc:
        print(f"flatsight inspect: error: {shown(exc)}", file=sys.stderr)
        return 2
    from .record_options import apply_preset, log_location_from_args, tolerance_from_args
    from .station_log import OPTION_KEYS, StationRecorder

    presets_file = Path(args.presets) if args.presets else None
    chosen = None
    try:
        if presets_file is not None:
            from ..analysis.records.presets import load_presets

            load_presets(presets_file)
        if args.preset:
            from ..analysis.records.presets import get_preset

            chosen = get_preset(args.preset, path=presets_file)
            # the preset fills the measuring options this command line left unset
            settings = settings_from_args(apply_preset(args, preset=chosen), remembered)
        tolerance_from_args(args)  # a malformed --spec fails here, pointing at the character
        # the log is the command line's, else the preset's, else station.toml's
        recorder = StationRecorder(log_location_from_args(apply_preset(args, preset=chosen)),
                                   {k: getattr(args, k) for k in OPTION_KEYS})
    except SettingsError as exc:
        print(f"flatsight inspect: error: {shown(exc)}", file=sys.stderr)
        return 2
    out_dir = Path(args.out) if args.out else None
    if out_dir is not None and out_dir.exists() and not out_dir.is_dir():
        print(
            f"flatsight inspect: error: --out {shown(out_dir)} is a file; give a folder",
            file=sys.stderr,
        )
        return 2

    images = args.images or os.environ.get(ENV_VAR) or "auto"
    if images not in PICTURE_CHOICES:
        print(f"flatsight inspect: error: {ENV_VAR}={shown(images)} is not one of "
              f"{', '.join(PICTURE_CHOICES)}", file=sys.stderr)
        return 2
    from .picture_mode import cell_pixels, picture_protocol

    # asked before Textual starts: it reads the keyboard, where the terminal answers
    pictures = picture_protocol(images)
    cell_px = cell_pixels() if pictures else (10, 20)

    from .app import FlatsightStation  # Textual only now, so `flatsight --help` stays quick

    app = FlatsightStation(
        photos, settings=settings, config_path=config_path, out_dir=out_dir, notice=notice,
        presets_file=presets_file, recorder=recorder, preset=chosen, pictures=pictures,
        cell_px=cell_px,
    )
    app.run()
    return int(app.return_code or 0)
