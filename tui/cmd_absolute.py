"""`flatsight absolute`: the three-flat test, each flat's own shape from photos of the pairs."""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from ..analysis.formatting import format_number
from .options import (
    NO_TOLERANCE_EXIT_CODES,
    angle_type,
    diameter_type,
    save_map,
    terms_type,
    wavelength_type,
)
from .safe_text import shown

HELP = "absolute three-flat test: each flat's own shape from the pair photos"
DESCRIPTION = """\
Find the absolute shape of three flats A, B, C from photos of them tested in pairs,
so one of them can serve as a calibrated reference (use its map with
`measure --reference`).

Convention: in the pair photo XY, flat X lies as usual and flat Y faces it after
being turned over about the photo's VERTICAL axis (its left and right swap), so
the photo measures X(x, y) + Y(-x, y). Take AB, AC and BC that way, each photo
with tilt fringes as for `measure`.

With those three photos: the part of each flat that is symmetric about the flip
axis, and so each flat's absolute profile along that axis (Schulz & Schwider 1967;
Fritz 1984). The antisymmetric Zernike terms (coma x, astigmatism at 45 deg, ...)
stay unknown and are listed, not guessed.

With --rotated PHOTO --angle DEG: a fourth photo of A against B, with A turned
about the optical axis by DEG, counter-clockwise as seen in the photo (B turned
over as before). That separates the remaining terms, except those whose symmetry
matches the turn (m x DEG a multiple of 360 deg): they are listed. 90 deg leaves
only the 4-fold antisymmetric terms; an angle like 40 deg leaves none up to order 7.

Each flat's map holds what was separated, on its own aperture, NaN outside;
--save-maps DIR writes A.npy, B.npy and C.npy there.

Safety: handle the flats by their edges with gloves, on a clean soft surface; let
them settle to room temperature before each photo; never look into a laser beam;
follow your shop's procedures."""

EXAMPLES = """\
examples:
  flatsight absolute --ab ab.png --ac ac.png --bc bc.png --wavelength hene
  flatsight absolute --ab ab.png --ac ac.png --bc bc.png --rotated ab_40.png --angle 40 \\
      --wavelength 632.8 --json --save-maps refs/
"""


def add_parser(sub: argparse._SubParsersAction) -> argparse.ArgumentParser:
    p = sub.add_parser(
        "absolute",
        help=HELP,
        description=DESCRIPTION,
        epilog=EXAMPLES + "\n" + NO_TOLERANCE_EXIT_CODES,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("--ab", required=True, metavar="PHOTO", help="A with B turned over on it")
    p.add_argument("--ac", required=True, metavar="PHOTO", help="A with C turned over on it")
    p.add_argument("--bc", required=True, metavar="PHOTO", help="B with C turned over on it")
    p.add_argument(
        "--rotated",
        metavar="PHOTO",
        default=None,
        help="A turned by --angle, with B turned over on it",
    )
    p.add_argument(
        "--angle",
        type=angle_type,
        metavar="DEG",
        default=None,
        help="how far A was turned for --rotated, counter-clockwise as seen in the photo",
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
        "--json",
        action="store_true",
        help="one JSON object with `flats` keyed A, B, C (each as measure --json)",
    )
    p.add_argument(
        "--save-maps",
        metavar="DIR",
        default=None,
        help="write each flat's map (nm, NaN outside) as DIR/A.npy, B.npy, C.npy",
    )
    p.add_argument(
        "--invert",
        action="store_true",
        help="flip the sign of every photo (see measure --help, 'Sign')",
    )
    p.add_argument(
        "--terms",
        type=terms_type,
        metavar="N",
        default=36,
        help="Zernike terms to solve (Noll, whole radial orders; default 36)",
    )
    p.add_argument(
        "--diameter",
        type=diameter_type,
        metavar="MM",
        default=None,
        help="physical clear-aperture diameter, for the radius of curvature",
    )
    p.set_defaults(run=run)
    return p


def flat_record(measurement, flat) -> dict:
    """The `measure --json` document of one solved flat, with what stayed unknown."""
    from flatsight.analysis.record import measurement_to_record

    rec = measurement_to_record(measurement)
    unsep = list(flat.unseparated_terms)
    rec["unseparated_terms"] = unsep
    coef = rec["zernike"]["coefficients_nm"]
    for j in unsep:  # unknown, not zero: the JSON says so with null
        if j - 1 < len(coef):
            coef[j - 1] = None
    for j in (1, 2, 3):
        coef[j - 1] = None  # piston and tilt are set by how each pair lay: meaningless
    rec["method"] = (
        "absolute three-flat test (Schulz & Schwider 1967; Fritz 1984), flip "
        "about the vertical axis; Zernike fit, Noll 1976"
    )
    return rec


def run(args: argparse.Namespace) -> int:
    from flatsight.analysis.errors import (
        RingSignNeededError,
        SettingsError,
        UnanalysablePhotoError,
        UnreadablePhotoError,
    )
    from flatsight.analysis.multiphoto.three_flat import absolute_test
    from flatsight.analysis.pipeline import MeasureSettings, measure

    err = sys.stderr
    if (args.rotated is None) != (args.angle is None):
        print(
            "flatsight absolute: error: --rotated and --angle go together: give both or neither",
            file=err,
        )
        return 2
    current = None
    map_errors: list[str] = []  # --save-maps maps that could not be written
    try:
        settings = MeasureSettings(
            wavelength_nm=float(args.wavelength),
            n_terms=int(args.terms),
            invert=bool(args.invert),
            diameter_mm=args.diameter,
        )
        if args.save_maps and not Path(args.save_maps).is_dir():
            raise SettingsError(
                f"{args.save_maps}: no such folder for --save-maps; create it first"
            )
        photos = {"AB": args.ab, "AC": args.ac, "BC": args.bc}
        if args.rotated:
            photos["rotated"] = args.rotated
        ms = {}
        for key, path in photos.items():
            current = path
            ms[key] = measure(path, settings)
        current = None
        result = absolute_test(
            ms["AB"],
            ms["AC"],
            ms["BC"],
            rotated=ms.get("rotated"),
            angle_deg=args.angle,
            settings=settings,
        )
        doc = {
            "schema": "flatsight.absolute/1",
            "wavelength_nm": float(args.wavelength),
            "convention": "pair XY: Y turned over about the photo's vertical axis; the photo "
            "measures X(x, y) + Y(-x, y); rotation counter-clockwise as seen",
            "photos": result.photos,
            "angle_deg": args.angle,
            "closure_rms_nm": round(result.solution.closure_rms_nm, 4),
            "consistency_rms_nm": round(result.solution.consistency_rms_nm, 4),
            "warnings": list(result.solution.warnings),
            "flats": {},
        }
        for name, m in result.measurements.items():
            rec = flat_record(m, result.solution.flats[name])
            if args.save_maps:
                target = Path(args.save_maps) / f"{name}.npy"
                problem = save_map(m, target)
                if problem is None:
                    rec["height_map_path"] = str(target.resolve())
                else:  # the solution is kept and shown; the map alone is missing
                    map_errors.append(problem)
            doc["flats"][name] = rec
    except (UnreadablePhotoError, SettingsError) as exc:
        print(f"flatsight absolute: error: {shown(exc)}", file=err)
        return 2
    except UnanalysablePhotoError as exc:
        where = f" {current}" if current else ""
        if isinstance(exc, RingSignNeededError):  # its words name an option absolute lacks
            exc = "closed fringes: the three-flat test needs tilt fringes in each pair photo"
        print(f"flatsight absolute: cannot analyse{shown(where)}: {shown(exc)}", file=err)
        return 3

    if args.json:
        sys.stdout.write(json.dumps(doc, allow_nan=False) + "\n")
    else:
        _print_table(doc)
    for problem in map_errors:
        print(f"flatsight absolute: error: {shown(problem)}; the figures are shown without "
              "the map", file=err)
    return 2 if map_errors else 0


def _print_table(doc: dict) -> None:
    from rich.console import Console
    from rich.table import Table
    from rich.text import Text

    from .report_text import warning_text

    c = Console(highlight=False)
    c.print(Text.assemble(
        ("three-flat test", "bold"),
        f"  {doc['wavelength_nm']:g} nm   photos: "
        + ", ".join(f"{k} {shown(v)}" for k, v in doc["photos"].items())
    ))
    t = Table(header_style="bold", show_edge=False)
    for col, just in [
        ("flat", "left"),
        ("PV nm", "right"),
        ("RMS nm", "right"),
        ("power nm", "right"),
        ("irreg. nm", "right"),
        ("not separated (Noll)", "left"),
    ]:
        t.add_column(col, justify=just)
    for name, r in doc["flats"].items():
        unsep = r["unseparated_terms"]
        t.add_row(
            name,
            format_number(r["pv_nm"]),
            format_number(r["rms_nm"]),
            format_number(r["power_nm"]),
            format_number(r["irregularity_nm"]),
            ", ".join(map(str, unsep)) if unsep else "none",
        )
    c.print(t)
    c.print(f"closure of the three photos: {doc['closure_rms_nm']:.2f} nm RMS")
    for w in doc["warnings"]:
        c.print(warning_text(w))
    for name, r in doc["flats"].items():
        if r.get("height_map_path"):
            c.print(Text(f"map of {name}: {shown(r['height_map_path'])}"))
