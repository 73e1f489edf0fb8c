"""`flatsight measure`: fringe photos in, flatness figures out, as a table, JSON Lines or CSV."""

from __future__ import annotations

import argparse
import sys
from contextlib import closing
from dataclasses import dataclass
from pathlib import Path

from .multi_options import add_multi_options
from .options import (
    APERTURE_HELP,
    APERTURE_METAVAR,
    TOLERANCE_EXIT_CODES,
    MapNames,
    aperture_type,
    check_map_path,
    circle_type,
    diameter_type,
    expand_photos,
    terms_type,
    wavelength_type,
)
from .parallel import interrupts_held, jobs_type
from .record_options import add_record_options
from .safe_text import shown

# the methods' names, written out so that --help need not import the analysis
METHOD_CHOICES = ("auto", "carrier", "intensity-fit")

HELP = "measure fringe photos: PV, RMS, PVr, power, irregularity"
DESCRIPTION = """\
Measure the flatness of each photo: find the aperture, turn the fringes into
phase, fit Zernike terms (Noll), and report PV, RMS, PVr, power and
irregularity in nm, waves and fringes (one fringe = half a wavelength of height).

Method (--method): with ten or more nearly straight tilt fringes, the carrier
method (Fourier transform, Takeda) demodulates and unwraps them. With fewer
fringes, fringes bent by power, or closed rings, auto (the default) fits a
Zernike phase directly to the fringe intensity instead (intensity-fit). That
fit carries only the low orders a few fringes show: it fits up to radial order
fringes + 2 (15 to 28 terms) and says how many. Every output names the method
and why it was chosen.

Closed fringes (rings, under two fringes of tilt) look the same for a convex
and a concave part, so say which with --ring-sign. The push test: press gently
on the edge of the top flat, following your shop's procedure. Pressing closes
the air gap, and each fringe marks one gap thickness, so the fringes move
toward where the gap is thicker. Rings moving outward, away from the centre: the
gap is thinnest at the centre, the part is high there: convex. Rings shrinking
toward the centre: the gap is thickest at the centre: concave. A closed-fringe
photo without --ring-sign is refused (exit 3). The record says the sign was
stated ("sign": "stated"), not measured; --invert does not change it.

Sign: Flatsight takes the air wedge to be wider toward the top of the photo
(toward the left when the fringes are vertical), so a high point on the part
reads positive and a convex part has positive power. Push test: close the gap
gently (press lightly at the wedge's thin end, following your shop's procedure);
if the fringes travel toward the bottom (right) of the photo instead of the top
(left), the wedge runs the other way: add --invert.

Figures: PV, irregularity (B) and C are taken over the filtered map (a 66-term
Zernike fit, 45 on outlines other than a circle, each term beyond power shrunk by
the non-negative garrote at the noise it carries, plus the measured departures
from the fit, smoothed at the resolution the fringes carry), so neither a noisy
pixel nor a noisy high-order term at the rim can decide a verdict; the raw PV is
kept in the JSON as pv_raw_nm. PVr follows Evans (Opt. Eng. 48, 043605, 2009),
its 36-term fit shrunk the same way.

Uncertainty: every figure comes with its expanded uncertainty U (k = 2, JCGM
100:2008): the map's noise (by Monte Carlo), what the method cannot resolve, and
what you state with --wavelength-uncertainty and --reference-uncertainty. The
table shows it as value ± U. With --spec, --decision guarded passes a part only
when each figure plus its U is within its limit, fails it when the figure minus U
is beyond, and calls it inconclusive (exit status 5) in between.

PHOTO may be a file (PNG, JPEG, TIFF), a folder (its photos) or a glob.

Part: each photo is its own part, named by its file stem (BW-FL-0412_hene.png is
part BW-FL-0412_hene), as in the station and in watch. --part ID names the part of
one photo, or of an --average of several photos of one part (without --part, an
average takes its first photo's stem); with several photos measured one by one it
is a usage error (exit 2), since it would label every photo as one part."""

EXAMPLES = """\
examples:
  flatsight measure sample_images/BW-FL-0412_hene.png --wavelength hene
  flatsight measure shots/*.tif --wavelength 546.07 --json > results.jsonl
  flatsight measure shots/ --wavelength 546.07 --jobs 2   # two photos at a time
  flatsight measure part.png --wavelength 632.8 --aperture 640,480,410 --diameter 100
  flatsight measure part.png --wavelength sodium --spec '3/2(0.5)' --part BW-FL-0412
  flatsight measure part.png -w hene --spec '3/2(1)' --decision guarded
  flatsight measure part.png -w hene --reference-uncertainty 6 --json
"""


def add_parser(sub: argparse._SubParsersAction) -> argparse.ArgumentParser:
    p = sub.add_parser(
        "measure", help=HELP, description=DESCRIPTION,
        epilog=EXAMPLES + "\n" + TOLERANCE_EXIT_CODES,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("photos", nargs="+", metavar="PHOTO", help="photo files, folders or globs")
    p.add_argument("-w", "--wavelength", type=wavelength_type, default=None, metavar="NM",
                   help="test wavelength in nm, or hene (632.8), sodium (589.3), helium-d "
                        "(587.56), mercury-e (546.07); required unless a preset gives it")
    out = p.add_mutually_exclusive_group()
    out.add_argument("--json", action="store_true",
                     help="one JSON object per photo per line (JSON Lines) on stdout")
    out.add_argument("--csv", action="store_true", help="one CSV row per photo on stdout")
    p.add_argument("--aperture", type=aperture_type, metavar=APERTURE_METAVAR,
                   help=APERTURE_HELP)
    p.add_argument("--exclude", type=circle_type, metavar="X,Y,R", action="append",
                   default=[], help="leave a circle out (a chip, a central hole); repeatable")
    p.add_argument("--diameter", type=diameter_type, metavar="MM", default=None,
                   help="physical clear-aperture diameter, for the radius of curvature")
    p.add_argument("--invert", action="store_true",
                   help="flip the sign of the surface (see 'Sign' above)")
    p.add_argument("--method", choices=METHOD_CHOICES, default=None,
                   help="how the fringes become phase: auto (default: carrier when it "
                        "finds tilt fringes, else intensity-fit), carrier or "
                        "intensity-fit (see 'Method' above)")
    p.add_argument("--ring-sign", choices=("convex", "concave"), default=None,
                   help="for closed fringes: the part's form from the push test (see "
                        "'Closed fringes' above)")
    p.add_argument("--terms", type=terms_type, metavar="N", default=None,
                   help="Zernike terms to fit (Noll, default 36, at least 15)")
    p.add_argument("--ordering", choices=("noll", "osa"), default="noll",
                   help="Zernike ordering in the output: noll (from j=1, default) or osa "
                        "(OSA/ANSI, ISO 24157, from 0)")
    p.add_argument("--report-wavelength", type=wavelength_type, metavar="NM", default=None,
                   help="also give the figures in waves of this wavelength")
    p.add_argument("--save-map", metavar="FILE", default=None,
                   help="write the height map in nm (.npy or 32-bit float .tif); with "
                        "several photos put {name} in FILE for each photo's name")
    p.add_argument("--detail", action="store_true",
                   help="the full table for every photo, even in a batch")
    p.add_argument("-j", "--jobs", type=jobs_type, metavar="N", default=None,
                   help="photos measured at once, each in a process of its own (default: "
                        "the cores this process may use); results still print in the "
                        "order given, and each is logged as soon as it is finished")
    add_multi_options(p)
    add_record_options(p)
    p.set_defaults(run=run)
    return p


def _settings(args: argparse.Namespace):
    from flatsight.analysis.aperture import Exclusion
    from flatsight.analysis.pipeline import MeasureSettings

    from .record_options import uncertainty_settings

    aperture = args.aperture  # an Aperture (options.parse_aperture) or None
    return MeasureSettings(
        wavelength_nm=float(args.wavelength),
        n_terms=int(args.terms) if args.terms is not None else 36,
        invert=bool(args.invert),
        diameter_mm=float(args.diameter) if args.diameter is not None else None,
        aperture=aperture,
        exclusions=tuple(Exclusion(*c) for c in args.exclude),
        report_wavelength_nm=args.report_wavelength,
        method=getattr(args, "method", None) or "auto",
        ring_sign=getattr(args, "ring_sign", None),
        **uncertainty_settings(args),
    )


@dataclass(frozen=True)
class Shown:
    """A result logged and ready to print, with the exit status its verdict gives."""

    record: dict
    measurement: object
    status: int


def run(args: argparse.Namespace) -> int:
    from flatsight.analysis.errors import (
        SettingsError,
        UnanalysablePhotoError,
        UnreadablePhotoError,
    )
    from flatsight.analysis.pipeline import measure
    from flatsight.analysis.record import measurement_to_record

    from .multi_options import check_multi_options, combine_with_sections
    from .options import save_map, worst_status
    from .parallel import available_cores, measure_in_parallel
    from .record_options import (
        apply_preset,
        judge_and_log,
        log_location_from_args,
        tolerance_from_args,
    )
    from .report_text import Reporter

    err = sys.stderr

    def photo_args(photo: str | None) -> tuple[argparse.Namespace, object]:
        """The options for one photo (its preset applied) and its settings.

        With ``--presets FILE`` and no ``--preset``, each photo takes the preset that the
        file's ``[photos]`` table gives its name; options on the command line still win.
        """
        chosen = None
        if photo is not None and presets_file is not None:
            chosen = presets_file.for_photo(photo)
        a = apply_preset(args, preset=chosen)
        if a.wavelength is None:
            where = f" for {photo}" if photo else ""
            raise SettingsError(f"no test wavelength{where}: give --wavelength NM (e.g. "
                                "632.8 or hene for a He-Ne laser) or a preset that sets it")
        a.wavelength = wavelength_type(str(a.wavelength))
        tolerance_from_args(a)  # a malformed tolerance fails before the photo is measured
        log_location_from_args(a)  # so does a malformed log location
        return a, _settings(a)

    per_photo = bool(args.presets and not args.preset)
    presets_file = None
    try:
        if per_photo:
            from flatsight.analysis.records.presets import load_presets_file

            # read once; a bad presets file fails before any photo
            presets_file = load_presets_file(args.presets)
        else:
            args, settings = photo_args(None)
    except (SettingsError, argparse.ArgumentTypeError, ValueError) as exc:
        print(f"flatsight measure: error: {shown(exc)}", file=err)
        return 2

    photos, problems = expand_photos(args.photos)
    status = 0
    for problem in problems:
        print(f"flatsight measure: error: {shown(problem)}", file=err)
        status = 2
    if args.part and len(photos) > 1 and not args.average:
        print(f"flatsight measure: error: --part {shown(args.part)} names one part, but "
              f"{len(photos)} photos were given; leave --part out (each photo is then "
              "named by its file stem), measure one photo, or add --average", file=err)
        return 2
    if args.save_map and len(photos) > 1 and "{name}" not in args.save_map:
        print("flatsight measure: error: with several photos, put {name} in --save-map "
              "(e.g. maps/{name}.npy)", file=err)
        return 2
    map_names = None
    if args.save_map:
        try:
            check_map_path(args.save_map)  # a bad suffix fails before any photo is measured
        except SettingsError as exc:
            print(f"flatsight measure: error: {shown(exc)}", file=err)
            return 2
        map_names = MapNames(args.save_map)

    mode = "json" if args.json else "csv" if args.csv else "table"
    reporter = Reporter(mode=mode, detail=args.detail or len(photos) == 1 or args.average,
                        ordering=args.ordering)

    log_failed = False  # after the log refused a record, the rest are shown unlogged
    unlogged: list[str] = []  # the photos whose results are shown but not in the log

    def report(item, photo: str, opts: argparse.Namespace, part_of: str) -> int:
        """Record, save, judge and print one result; returns its exit status.

        The part is ``--part``, else the file stem of ``part_of`` (the photo, or an
        average's first photo), as the station and ``watch`` name parts.
        """
        nonlocal log_failed
        if not opts.part:
            opts = argparse.Namespace(**{**vars(opts), "part": Path(part_of).stem})
        m = item.measurement
        record = measurement_to_record(m, ordering=args.ordering)
        record.update(item.sections)
        map_error = None
        if map_names is not None:
            target = map_names.target(photo)
            map_error = save_map(m, target)
            if map_error is None:
                record["height_map_path"] = str(Path(target).resolve())
        wanted = not opts.no_log  # this result belongs in the log
        if log_failed:
            opts = argparse.Namespace(**{**vars(opts), "no_log": True})
        record, verdict_status, log_error = judge_and_log(opts, record)
        if map_error is not None:
            # the figures are worth more than the map: they are kept, and the record
            # simply names no map (a certificate then draws it from the Zernike fit)
            progress.pause()
            kept = "shown and logged" if record.get("record_id") is not None else "shown"
            print(f"flatsight measure: error: {shown(map_error)}; its figures are {kept} "
                  "without the map", file=err)
            verdict_status = worst_status(verdict_status, 2)
        if log_error is not None:
            log_failed = True
            progress.pause()
            print(f"flatsight measure: cannot write the log: {shown(log_error)}; results "
                  "from here on are shown but not logged (free the log or give another "
                  "--log, or --no-log)", file=err)
        if wanted and "record_id" not in record:
            unlogged.append(Path(photo).name)
            verdict_status = 2
        return Shown(record, m, verdict_status)

    def one_line(exc: Exception, photo: str) -> int:
        if isinstance(exc, UnanalysablePhotoError):
            # the library names the photo in some messages; say it once
            where = "" if photo in str(exc) else f" {photo}"
            print(f"flatsight measure: cannot analyse{shown(where)}: {shown(exc)}", file=err)
            return 3
        print(f"flatsight measure: error: {shown(exc)}", file=err)
        return 2

    try:
        check_multi_options(args)  # a bad reference map fails before any photo
    except (UnreadablePhotoError, SettingsError) as exc:
        print(f"flatsight measure: error: {shown(exc)}", file=err)
        return 2

    def finish(photo: str, opts, outcome) -> list:
        """Log a finished photo at once; return what it shows (records, error lines)."""
        if isinstance(outcome, Exception):
            return [outcome]
        if args.average:
            return [outcome]  # averaged (and logged) once all are in
        try:
            return [report(item, photo, opts, photo)
                    for item in combine_with_sections(opts, [outcome])]
        except (UnreadablePhotoError, UnanalysablePhotoError, SettingsError) as exc:
            return [exc]

    # each photo's options and settings, worked out before anything is measured
    prepared: list[tuple[str, argparse.Namespace | None, object]] = []
    for photo in photos:
        try:
            prepared.append((photo, *(photo_args(photo) if per_photo else (args, settings))))
        except (SettingsError, argparse.ArgumentTypeError, ValueError) as exc:
            prepared.append((photo, None, SettingsError(str(exc))))
    workers = min(args.jobs or available_cores(), len(photos))

    progress = reporter.progress(len(photos), stream=err)
    collected = []  # with --average: every good measurement, reported once at the end
    ready: dict[int, list] = {}  # finished (and logged) results waiting for their turn
    shown_upto = 0

    def show_ready() -> None:
        """Print the finished results whose turn has come, in the order given."""
        nonlocal shown_upto, status
        while shown_upto in ready:
            photo = prepared[shown_upto][0]
            for out in ready.pop(shown_upto):
                if isinstance(out, Shown):
                    reporter.emit(out.record, out.measurement)
                    status = worst_status(status, out.status)
                elif isinstance(out, Exception):
                    progress.pause()
                    status = worst_status(status, one_line(out, photo))
                else:
                    collected.append(out)
            shown_upto += 1

    try:
        if workers <= 1:
            for i, (photo, opts, photo_settings) in enumerate(prepared):
                progress.start(photo, i)
                outcome = photo_settings
                if opts is not None:
                    try:
                        outcome = measure(photo, photo_settings, progress=progress.stage)
                    except (UnreadablePhotoError, UnanalysablePhotoError,
                            SettingsError) as exc:
                        outcome = exc
                progress.pause()
                with interrupts_held():  # a logged result is always shown
                    ready[i] = finish(photo, opts, outcome)
                    show_ready()
        else:
            # settings that failed are reported in their turn; the rest go to the workers
            todo = [(i, p, s) for i, (p, o, s) in enumerate(prepared) if o is not None]
            for i, (_, opts, problem) in enumerate(prepared):
                if opts is None:
                    ready[i] = [problem]
            show_ready()
            done = 0
            progress.start(f"measuring, {workers} at once", 0)
            with closing(measure_in_parallel([(p, s) for _, p, s in todo], workers)) as runs:
                for fin in runs:
                    i = todo[fin.index][0]
                    with interrupts_held():  # a logged result is always shown
                        ready[i] = finish(fin.photo, prepared[i][1], fin.outcome)
                        done += 1
                        progress.pause()
                        show_ready()
                    progress.start(f"measuring, {workers} at once", done)
    except KeyboardInterrupt:
        # ctrl+c: everything finished is logged already; show it all, in the order given,
        # skipping the photos still unfinished ahead of it, as --json and --csv do
        progress.stop()
        for i in sorted(ready):
            shown_upto = i
            show_ready()
        reporter.finish()
        raise
    finally:
        progress.stop()
    if args.average and collected:
        name = "average of " + ", ".join(Path(m.photo).name for m in collected)
        try:
            opts = photo_args(collected[0].photo)[0] if per_photo else args
            for item in combine_with_sections(opts, collected):
                out = report(item, name, opts, collected[0].photo)
                reporter.emit(out.record, out.measurement)
                status = worst_status(status, out.status)
        except (UnreadablePhotoError, UnanalysablePhotoError, SettingsError) as exc:
            status = worst_status(status, one_line(exc, name))
    reporter.finish()
    if unlogged:  # every one of them was shown; say which the log does not hold
        print(f"flatsight measure: not logged ({len(unlogged)}): "
              f"{shown(', '.join(unlogged))}", file=err)
    return status
