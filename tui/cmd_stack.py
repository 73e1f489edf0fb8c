"""`flatsight stack`: a phase-shifted sequence of frames in, flatness figures out."""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from .options import (
    APERTURE_HELP,
    APERTURE_METAVAR,
    NO_TOLERANCE_EXIT_CODES,
    aperture_type,
    check_map_path,
    diameter_type,
    save_map,
    terms_type,
    wavelength_type,
)
from .safe_text import shown

HELP = "measure a phase-shifted sequence of frames (no tilt fringes needed)"
DESCRIPTION = """\
Measure a flat from N frames of one set-up, taken while the gap between the flats
is changed by the same step between frames (a piezo or a thermal shifter). No tilt
fringes are needed; the aperture is found from where the frames change.

Give the frames in the order taken, the gap WIDENING from one to the next; a high
point then reads positive, as in `measure`. For a sequence taken with the gap
closing, add --invert.

The algorithm follows from the number of frames and the step:
  4 frames, 90 deg       the 4-step (Bruning 1974)
  4 frames, step unknown Carre (1966): any equal step, found from the frames
  5 frames, 90 deg       Hariharan-Oreb-Eiju (1987): tolerant of a miscalibrated step
  anything else          least squares for known steps (Greivenkamp 1984)
--algorithm overrides the choice. The step actually present in the frames is found
and reported; a step 5 deg or more from --step gives a warning.

Safety: never look into a laser beam or its reflections; follow your shop's laser and
glass-handling procedures."""

EXAMPLES = """\
examples:
  flatsight stack seq/BW-FL-0412_*.png --wavelength hene
  flatsight stack f1.tif f2.tif f3.tif f4.tif f5.tif --wavelength 632.8 --step 90 --json
  flatsight stack f*.png --wavelength 546.07 --step 0,60,120,180,240,300
"""

ALGORITHM_NAMES = ("four-step", "hariharan", "carre", "least-squares")


def _step_type(text: str):
    """``90`` (equal steps) or ``0,70,150,...`` (one phase shift per frame), in degrees."""
    try:
        parts = [float(p) for p in text.replace(" ", "").split(",") if p]
    except ValueError:
        raise argparse.ArgumentTypeError(
            f"{text!r} is not a step in degrees (e.g. 90) nor a list of shifts (e.g. 0,90,180,270)"
        ) from None
    if not parts:
        raise argparse.ArgumentTypeError("--step needs a value in degrees")
    if len(parts) == 1:
        if not 0.0 < parts[0] < 180.0:
            raise argparse.ArgumentTypeError(f"a step of {parts[0]:g} deg is outside 0 to 180")
        return parts[0]
    return tuple(parts)


def add_parser(sub: argparse._SubParsersAction) -> argparse.ArgumentParser:
    p = sub.add_parser(
        "stack",
        help=HELP,
        description=DESCRIPTION,
        epilog=EXAMPLES + "\n" + NO_TOLERANCE_EXIT_CODES,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument(
        "frames",
        nargs="+",
        metavar="FRAME",
        help="the frames in the order taken (files, a folder or a glob; folders "
        "and globs are sorted by name)",
    )
    p.add_argument(
        "-w",
        "--wavelength",
        type=wavelength_type,
        required=True,
        metavar="NM",
        help="test wavelength in nm, or hene, sodium, helium-d, mercury-e",
    )
    p.add_argument(
        "--step",
        type=_step_type,
        default=None,
        metavar="DEG",
        help="phase step between frames in degrees, or one shift per frame "
        "(0,90,180,...); default: found in the frames",
    )
    p.add_argument(
        "--algorithm",
        choices=ALGORITHM_NAMES,
        default=None,
        help="override the algorithm chosen from the frames and the step",
    )
    p.add_argument(
        "--json",
        action="store_true",
        help="the measurement as one JSON object (as measure --json, plus "
        "step_found_deg and algorithm)",
    )
    p.add_argument(
        "--aperture",
        type=aperture_type,
        metavar=APERTURE_METAVAR,
        default=None,
        help=APERTURE_HELP.replace("found automatically", "a circle found from the frames"),
    )
    p.add_argument(
        "--diameter",
        type=diameter_type,
        metavar="MM",
        default=None,
        help="physical clear-aperture diameter, for the radius of curvature",
    )
    p.add_argument(
        "--invert", action="store_true", help="flip the sign (frames taken with the gap closing)"
    )
    p.add_argument(
        "--terms",
        type=terms_type,
        metavar="N",
        default=36,
        help="Zernike terms to fit (Noll, default 36, at least 15)",
    )
    p.add_argument(
        "--save-map",
        metavar="FILE",
        default=None,
        help="write the height map in nm (.npy or 32-bit float .tif)",
    )
    p.set_defaults(run=run)
    return p


def _frames(items: list[str]) -> list[str]:
    from .options import expand_photos

    paths, problems = expand_photos(items)
    if problems:
        from flatsight.analysis.errors import SettingsError

        raise SettingsError(problems[0])
    return paths


def stack_record(result, frame_paths: list[str]) -> dict:
    """The `measure --json` document of a stack measurement, with the phase-shifting fields."""
    from flatsight.analysis.record import measurement_to_record

    rec = measurement_to_record(result.measurement)
    ph = result.phase
    rec["step_found_deg"] = None if ph.step_found_deg is None else round(ph.step_found_deg, 3)
    rec["algorithm"] = ph.algorithm
    rec["steps_deg"] = [round(s, 3) for s in ph.steps_deg]
    rec["frames"] = list(frame_paths)
    rec["method"] = {
        "four-step": "phase shifting, 4-step (Bruning et al. 1974)",
        "hariharan": "phase shifting, 5-step (Hariharan, Oreb, Eiju 1987)",
        "carre": "phase shifting, Carre (1966), equal step found from the frames",
        "least-squares": "phase shifting, least squares for known steps (Greivenkamp 1984)",
    }[ph.algorithm] + "; Zernike fit, Noll 1976"
    rec["sign_convention"] = (
        "frames taken with the gap widening; height = -phase x "
        "wavelength / (4 pi): positive = high point on the part"
    )
    return rec


def run(args: argparse.Namespace) -> int:
    from flatsight.analysis.errors import (
        SettingsError,
        UnanalysablePhotoError,
        UnreadablePhotoError,
    )
    from flatsight.analysis.loading import load_photo
    from flatsight.analysis.multiphoto.phase_shifting import measure_stack
    from flatsight.analysis.pipeline import MeasureSettings

    err = sys.stderr
    try:
        if args.save_map:
            check_map_path(args.save_map)  # a bad suffix fails before the frames are read
        paths = _frames(args.frames)
        if len(paths) < 3:
            raise SettingsError(
                f"a phase-shifted sequence needs at least 3 frames, got {len(paths)}"
            )
        if isinstance(args.step, tuple) and len(args.step) != len(paths):
            raise SettingsError(f"--step lists {len(args.step)} shifts for {len(paths)} frames")
        settings = MeasureSettings(
            wavelength_nm=float(args.wavelength),
            n_terms=int(args.terms),
            invert=bool(args.invert),
            diameter_mm=args.diameter,
            aperture=args.aperture,  # an Aperture (options.parse_aperture) or None
        )
        frames, notes = [], []
        for path in paths:
            photo = load_photo(path)
            notes += [f"{path}: {note}" for note in photo.notes]
            if frames and photo.pixels.shape != frames[0].shape:
                raise SettingsError(
                    f"{path}: {photo.pixels.shape[1]}x{photo.pixels.shape[0]} px, but "
                    f"{paths[0]} is {frames[0].shape[1]}x{frames[0].shape[0]}; take all frames "
                    "with one camera setting"
                )
            frames.append(photo.pixels)
        result = measure_stack(
            frames, settings, step_deg=args.step, algorithm=args.algorithm, names=tuple(paths)
        )
        record = stack_record(result, paths)
        record["warnings"] = notes + record["warnings"]
        map_error = save_map(result.measurement, args.save_map) if args.save_map else None
        if args.save_map and map_error is None:
            record["height_map_path"] = str(Path(args.save_map).resolve())
    except (UnreadablePhotoError, SettingsError) as exc:
        print(f"flatsight stack: error: {shown(exc)}", file=err)
        return 2
    except UnanalysablePhotoError as exc:
        print(f"flatsight stack: cannot analyse the sequence: {shown(exc)}", file=err)
        return 3

    if args.json:
        sys.stdout.write(json.dumps(record, allow_nan=False) + "\n")
    else:
        _print_table(record)
    if map_error is not None:  # the figures are shown all the same
        print(f"flatsight stack: error: {shown(map_error)}; the figures are shown without "
              "the map", file=err)
        return 2
    return 0


def _outline_text(ap: dict) -> str:
    """``r=412.0 px at (640.0, 480.0)``, or an outline's description and centre."""
    where = f"({ap['center_x_px']:.1f}, {ap['center_y_px']:.1f})"
    if ap.get("shape"):
        from flatsight.analysis.shapes import shape_from_dict

        try:
            return f"{shape_from_dict(ap['shape']).describe()} at {where}"
        except (KeyError, TypeError, ValueError):
            return f"outline {shown(str(ap['shape'].get('kind')))} at {where}"
    return f"r={ap['radius_px']:.1f} px at {where}"


def _print_table(record: dict) -> None:
    from rich.console import Console
    from rich.text import Text

    from .report_text import figures_table, warning_text, zernike_table

    c = Console(highlight=False)
    ap = record["aperture"]
    step = record["step_found_deg"]
    c.print(Text.assemble(
        (f"{len(record['frames'])} frames", "bold"),
        f" from {shown(record['frames'][0])}   {record['wavelength_nm']:g} nm"
    ))
    c.print(Text(f"aperture {_outline_text(ap)}"))  # data, never markup
    c.print(
        f"algorithm: {record['algorithm']}   step found: "
        f"{'-' if step is None else f'{step:.2f} deg'}   visibility "
        f"{record['quality']['mean_modulation']:.2f}   masked "
        f"{100 * record['quality']['masked_fraction']:.1f} %"
    )
    c.print(figures_table(record))
    c.print()
    c.print(zernike_table(record))
    for w in record.get("warnings", []):
        c.print(warning_text(w))
