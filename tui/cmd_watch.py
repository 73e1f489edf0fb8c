"""The ``watch`` command: measure and log each new photo a camera writes into a folder.

A photo is taken only once it is complete: its size and modification time have not
changed for ``--settle`` seconds and it decodes. Polling (standard library only) works
the same on local disks and network shares. One line per photo, and one error line per
bad file (a damaged or oversized image, a link loop, a named pipe, an empty file; a file
that keeps failing while it is still being written counts once); the watch goes on, and
waits for the folder when it disappears. ctrl+c stops with a summary line and exit
status 130.
"""

from __future__ import annotations

import argparse
import os
import stat
import sys
import time
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path

from ..analysis.formatting import format_number
from .options import (
    APERTURE_HELP,
    APERTURE_METAVAR,
    MapNames,
    aperture_type,
    check_map_path,
    circle_type,
    count_type,
    diameter_type,
    save_map,
    seconds_type,
    terms_type,
    wavelength_type,
)
from .parallel import jobs_type
from .record_options import add_record_options
from .safe_text import shown

__all__ = ["FolderWatcher", "VERDICT_WORDS", "add_parser", "measure_photo", "run"]

# the watch's clock and its pause between looks (tests put a clock of their own here)
clock = time.monotonic
pause = time.sleep

# a verdict as each photo's line writes it
VERDICT_WORDS = {"pass": "PASS", "fail": "FAIL", "inconclusive": "INCONCLUSIVE"}

DESCRIPTION = """\
Watch FOLDER and measure each new photo (PNG, JPEG, TIFF) once the camera has finished
writing it; log it to the inspection log and print one line with its verdict. The part
is the photo's file name without its suffix (BW-FL-0412.png is part BW-FL-0412) unless
--part is given. With --presets FILE (and no --preset), each photo takes the bench
settings, tolerance and people of the preset its name matches in the file's [photos]
table, as measure does. Bad files get a one-line error and the watch goes on; if the folder
disappears, the watch says so and waits for it to come back.

Each line ends with the verdict against --spec: PASS, FAIL, or INCONCLUSIVE under
--decision guarded (a figure within its uncertainty U of a limit).

Closed fringes (rings against a test plate) need the part's form stated, as in
measure: --ring-sign convex or concave (or the preset's ring_sign), from the push
test; without it such a photo gets an error line and the watch goes on.

Stop with ctrl+c (exit status 130), or with --max-files / --timeout: a summary line and
exit status 0, whatever the verdicts (they are in the lines and the log); 2 for bad
options, or when a result could not be written to the log (it is still shown) or its
--save-map map could not be written (its figures are still shown and logged).
Photos already in the folder are left alone unless --existing is given; a photo that
is rewritten later is measured again."""


def add_parser(subparsers) -> argparse.ArgumentParser:
    """Add ``watch`` to a CLI's subparsers."""
    w = subparsers.add_parser("watch", help="measure each new photo written into a folder",
                              description=DESCRIPTION,
                              formatter_class=argparse.RawDescriptionHelpFormatter)
    w.add_argument("folder", metavar="FOLDER", help="the folder the camera writes into")
    w.add_argument("-w", "--wavelength", type=wavelength_type, default=None, metavar="NM",
                   help="test wavelength in nm or hene, sodium, helium-d, mercury-e "
                        "(required unless the preset gives it)")
    w.add_argument("--diameter", type=diameter_type, metavar="MM", default=None,
                   help="clear-aperture diameter, for the radius of curvature")
    w.add_argument("--terms", type=terms_type, metavar="N", default=None,
                   help="Zernike terms to fit (Noll, default 36)")
    w.add_argument("--invert", action="store_true", help="flip the sign of the surface")
    w.add_argument("--method", choices=("auto", "carrier", "intensity-fit"), default=None,
                   help="how the fringes become phase (see flatsight measure --help, "
                        "'Method'; default auto)")
    w.add_argument("--ring-sign", choices=("convex", "concave"), default=None,
                   help="for closed fringes: the part's form from the push test (see "
                        "flatsight measure --help, 'Closed fringes'); without it (or a "
                        "preset's ring_sign) a photo of closed rings gets an error line")
    w.add_argument("--aperture", type=aperture_type, metavar=APERTURE_METAVAR,
                   help=APERTURE_HELP.replace("default: found automatically",
                                              "for every photo; default: found in each"))
    w.add_argument("--exclude", type=circle_type, metavar="X,Y,R", action="append",
                   default=[], help="leave a circle out of every photo; repeatable")
    w.add_argument("--save-map", metavar="FILE", default=None,
                   help="write each height map (.npy or .tif); put {name} in FILE for the "
                        "photo's name, e.g. maps/{name}.npy")
    add_record_options(w)
    w.add_argument("--existing", action="store_true",
                   help="also measure the photos already in the folder")
    w.add_argument("--interval", type=seconds_type, default=0.5, metavar="S",
                   help="seconds between looks at the folder (default 0.5)")
    w.add_argument("--settle", type=seconds_type, default=1.0, metavar="S",
                   help="a photo must keep its size and time this long (default 1.0)")
    w.add_argument("--max-files", type=count_type, default=None, metavar="N",
                   help="stop after N photos (for scripts and tests)")
    w.add_argument("--timeout", type=seconds_type, default=None, metavar="S",
                   help="stop after S seconds")
    w.add_argument("-j", "--jobs", type=jobs_type, metavar="N", default=None,
                   help="photos that arrive together are measured N at once, each in a "
                        "process of its own (default: the cores this process may use)")
    w.set_defaults(run=run)
    return w


def _decodes(path: Path) -> bool:
    """Whether the file is ready to hand to the measurement: it decodes, or it is an image
    too large to take, which no amount of waiting will change."""
    import warnings

    from PIL import Image

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error", Image.DecompressionBombWarning)
            with Image.open(path) as img:
                img.load()
    except (Image.DecompressionBombError, Image.DecompressionBombWarning):
        return True  # the measurement refuses it in one line
    except Exception:  # noqa: BLE001 - cut short, not yet an image, unreadable: wait
        return False
    return True


@dataclass
class _Seen:
    signature: tuple[int, int]  # (size, mtime_ns)
    stable_since: float


class FolderWatcher:
    """Finds the photos in a folder that are new and completely written.

    Parameters
    ----------
    folder : Path
        The folder to look in (not its subfolders).
    settle_s : float
        How long size and modification time must stay the same.
    include_existing : bool
        Whether photos present at the first look count as new.
    give_up_s : float, optional
        A stable file that still does not decode after this long is handed out anyway,
        so the measurement reports it as bad instead of the watch waiting forever.
    clock : callable
        Monotonic time source (tests may replace it).
    """

    def __init__(self, folder: Path, *, settle_s: float = 1.0, include_existing: bool = False,
                 give_up_s: float | None = None, clock=time.monotonic):
        from ..analysis.loading import is_photo_path

        self.folder = Path(folder)
        self.settle_s = settle_s
        self.give_up_s = give_up_s if give_up_s is not None else max(3.0 * settle_s, 2.0)
        self._clock = clock
        self._is_photo = is_photo_path
        self._pending: dict[Path, _Seen] = {}
        self._done: dict[Path, tuple[int, int]] = {}
        self._problems: list[tuple[Path, str]] = []
        self._reported: dict[Path, str] = {}  # the problem each bad file was reported with
        #: why the folder cannot be looked at (gone, no access); None while it can
        self.missing: str | None = None
        if not include_existing:
            self._done = dict(self._scan())
            self._problems.clear()  # files already there are left alone, bad ones too

    def take_problems(self) -> list[tuple[Path, str]]:
        """Files found since the last call that can never be measured, each said once:
        a link loop, a link to nothing, a named pipe or device with a photo's name."""
        problems, self._problems = self._problems, []
        return problems

    def _problem(self, path: Path, message: str) -> None:
        if self._reported.get(path) != message:
            self._reported[path] = message
            self._problems.append((path, message))

    def _scan(self) -> list[tuple[Path, tuple[int, int]]]:
        found = []
        with os.scandir(self.folder) as entries:
            for entry in entries:
                # cameras and copy tools write hidden or temporary names first
                if entry.name.startswith(".") or not self._is_photo(entry.name):
                    continue
                path = Path(entry.path)
                try:
                    st = entry.stat()  # through a link, to what the measurement would read
                except FileNotFoundError:
                    if entry.is_symlink():
                        self._problem(path, "a link to nothing; left alone")
                    continue  # else renamed or removed between listing and stat
                except OSError as exc:  # a link loop, a file the system cannot look at
                    self._problem(path, f"cannot be looked at ({exc.strerror or exc}); "
                                        "left alone")
                    continue
                if stat.S_ISREG(st.st_mode):
                    self._reported.pop(path, None)
                    found.append((path, (st.st_size, st.st_mtime_ns)))
                elif not stat.S_ISDIR(st.st_mode):
                    self._problem(path, "not a regular file (a named pipe or a device); "
                                        "left alone")
        return found

    def poll(self) -> list[Path]:
        """The photos that became ready since the last call, oldest name first.

        A folder that cannot be looked at (removed, unmounted, no access) gives no
        photos and sets :attr:`missing` to the reason until it can be again.
        """
        now = self._clock()
        ready = []
        present = set()
        try:
            scanned = self._scan()
        except OSError as exc:
            self.missing = exc.strerror or str(exc)
            return []
        self.missing = None
        for path, sig in scanned:
            present.add(path)
            if self._done.get(path) == sig:
                continue
            seen = self._pending.get(path)
            if seen is None or seen.signature != sig:
                self._pending[path] = _Seen(sig, now)
                continue
            stable_for = now - seen.stable_since
            if stable_for < self.settle_s or (sig[0] == 0 and stable_for < self.give_up_s):
                continue  # an empty file may be a camera about to write: it gets longer
            if _decodes(path) or stable_for >= self.give_up_s:
                ready.append(path)
                self._done[path] = sig
                del self._pending[path]
        for gone in set(self._pending) - present:
            del self._pending[gone]
        return sorted(ready)


def watch_settings(args: argparse.Namespace):
    """The MeasureSettings the watch's options (one photo's, presets applied) give."""
    from ..analysis.aperture import Exclusion
    from ..analysis.pipeline import MeasureSettings
    from .record_options import uncertainty_settings

    aperture = getattr(args, "aperture", None)
    return MeasureSettings(
        wavelength_nm=float(args.wavelength),
        n_terms=int(args.terms) if args.terms is not None else 36,
        invert=bool(args.invert),
        diameter_mm=float(args.diameter) if args.diameter is not None else None,
        aperture=aperture,  # an Aperture (options.parse_aperture) or None
        exclusions=tuple(Exclusion(*c) for c in getattr(args, "exclude", []) or []),
        method=getattr(args, "method", None) or "auto",
        ring_sign=getattr(args, "ring_sign", None),
        **uncertainty_settings(args),
    )


def measure_photo(path: Path, args: argparse.Namespace) -> tuple[dict, str | None]:
    """Measure one photo with the watch's settings (see :func:`photo_record`)."""
    from ..analysis.pipeline import measure

    return photo_record(measure(str(path), watch_settings(args)), path, args)


def photo_record(m, path: Path, args: argparse.Namespace) -> tuple[dict, str | None]:
    """The ``measure --json`` record of a measurement, its height map saved if asked.

    Returns the record, and why its ``--save-map`` map could not be written (None when
    it was, or when none was asked for): the record then names no map, and keeps its
    figures.
    """
    from ..analysis.record import measurement_to_record

    record = measurement_to_record(m)
    template = getattr(args, "save_map", None)
    map_error = None
    if template:
        # one MapNames for the whole watch, so two photos of one stem get two maps
        names = getattr(args, "map_names", None) or MapNames(template)
        target = Path(names.target(path))
        map_error = save_map(m, target)
        if map_error is None:
            record["height_map_path"] = str(target.resolve())
    return record, map_error


class _Stop(Exception):
    """The watch reached --max-files or --timeout."""


def _stamp() -> str:
    return time.strftime("%H:%M:%S", time.gmtime())


def _line(record: dict, path: Path) -> str:
    def nm(key: str) -> str:
        return f"{format_number(record.get(key)):>7}"

    spec = record.get("spec") or {}
    word = VERDICT_WORDS.get(spec.get("verdict"), "—")
    rid = record.get("record_id")
    return (f"{_stamp()}  {shown(record.get('part') or path.stem):<16} PV {nm('pv_nm')} nm  "
            f"PVr {nm('pvr_nm')} nm  power {nm('power_nm')} nm  {word:<4}"
            + _deciding_limit(spec) + (f"  #{rid}" if rid is not None else ""))


def _deciding_limit(spec: dict) -> str:
    """`` (B margin -7.6 nm, U 29.0 nm)``: the first limit that did not pass, if any."""
    for lim in spec.get("limits", []):
        if lim.get("verdict") not in (None, "pass"):
            u = lim.get("uncertainty_nm")
            return (f" ({shown(lim.get('name'))} margin "
                    f"{format_number(lim.get('margin_nm'), sign=True)} nm"
                    + (f", U {format_number(u)} nm" if u is not None else "") + ")")
    return ""


@dataclass
class Tally:
    """What the watch has seen: outcomes per file, and what could not be logged.

    A file counts once: one that fails again (a writer that stalls more than once) is
    not reported or counted again, and one that measures after failing is no longer an
    error.
    """

    counts: Counter = field(default_factory=Counter)
    failed: set = field(default_factory=set)
    not_logged: int = 0
    log_problem: str | None = None
    maps_not_written: int = 0

    def error(self, path: Path, message: str) -> None:
        if path in self.failed:
            return
        self.failed.add(path)
        self.counts["error"] += 1
        print(f"{_stamp()}  {shown(path.name)}: {shown(message)}", flush=True)

    def measured(self, path: Path, outcome: str, line: str) -> None:
        if path in self.failed:
            self.failed.discard(path)
            self.counts["error"] -= 1
        self.counts[outcome] += 1
        print(line, flush=True)

    def unlogged(self, problem: str) -> None:
        self.not_logged += 1
        if problem != self.log_problem:  # said once, and again only when it changes
            self.log_problem = problem
            print(f"{_stamp()}  cannot write the log: {shown(problem)}; results are shown "
                  "but not logged until it can be written", flush=True)

    def map_not_written(self, path: Path, problem: str, logged: bool) -> None:
        self.maps_not_written += 1
        kept = "logged" if logged else "shown"
        print(f"{_stamp()}  {shown(path.name)}: error: {shown(problem)}; its figures are "
              f"{kept} without the map", flush=True)

    def total(self) -> int:
        return sum(self.counts.values())


def photo_options(path: Path, args: argparse.Namespace) -> argparse.Namespace:
    """The options for one photo: with ``--presets FILE`` (and no ``--preset``), the
    preset its name matches in the file's ``[photos]`` table fills what the command line
    left unset, as in ``measure``."""
    from ..analysis.errors import SettingsError
    from .record_options import apply_preset, tolerance_from_args

    presets = getattr(args, "photo_presets", None)
    if presets is None:
        return args
    a = apply_preset(args, preset=presets.for_photo(path))
    if a.wavelength is None:
        raise SettingsError("no test wavelength: no [photos] pattern in the presets file "
                            "matches its name; give --wavelength NM or add a pattern")
    try:
        a.wavelength = wavelength_type(str(a.wavelength))
    except argparse.ArgumentTypeError as exc:
        raise SettingsError(f"its preset's wavelength: {exc}") from None
    tolerance_from_args(a)
    return a


def _handle(path: Path, args: argparse.Namespace, tally: Tally) -> None:
    from .parallel import interrupts_held

    try:  # ctrl+c stops the measurement at once (KeyboardInterrupt is no Exception)
        outcome = (photo_options(path, args),)
        outcome += (measure_photo(path, outcome[0]),)
    except Exception as exc:  # noqa: BLE001 - judged (and told) below, as _judged says
        outcome = exc

    def measured() -> tuple[argparse.Namespace, tuple[dict, str | None]]:
        if isinstance(outcome, Exception):
            raise outcome
        return outcome

    with interrupts_held():  # a logged result is always shown
        _tell(path, _judged(path, measured), tally)


def _judged(path: Path, measured) -> tuple:
    """Judge and log what ``measured()`` gives.

    ``measured`` returns the photo's options and ``(record, map_error)``, or raises.
    Returns ``(record, log_error, map_error)``, or ``(None, error, None)``.
    """
    from ..analysis.errors import FlatsightError
    from .record_options import judge_and_log

    try:
        args, (record, map_error) = measured()
        per_photo = argparse.Namespace(**vars(args))
        per_photo.part = args.part or path.stem
        record, _, log_error = judge_and_log(per_photo, record)
    except FlatsightError as exc:
        return None, f"error: {exc}", None
    except Exception as exc:  # noqa: BLE001 - one bad photo must not stop the station's watch
        return None, f"internal error: {type(exc).__name__}: {exc}", None
    return record, log_error, map_error


def _tell(path: Path, judged: tuple, tally: Tally) -> None:
    """Print one photo's line (or its error) and count it."""
    record, problem, map_error = judged
    if record is None:
        tally.error(path, problem)
        return
    verdict = (record.get("spec") or {}).get("verdict")
    tally.measured(path, verdict or "measured",
                   _line(record, path) + ("  not logged" if problem else ""))
    if map_error is not None:
        tally.map_not_written(path, map_error, logged=record.get("record_id") is not None)
    if problem is not None:
        tally.unlogged(str(problem))


def _handle_together(paths: list[Path], args: argparse.Namespace, tally: Tally,
                     workers: int) -> None:
    """Photos that arrived together, measured in parallel processes.

    Each is judged and logged as soon as it is finished and its line printed in the
    order the photos arrived; on ctrl+c the finished ones are printed before the watch
    stops.
    """
    from contextlib import closing

    from ..analysis.errors import FlatsightError
    from .parallel import interrupts_held, measure_in_parallel

    todo, told, judged = [], 0, {}
    for path in paths:
        try:
            opts = photo_options(path, args)
            todo.append((path, opts, watch_settings(opts)))
        except FlatsightError as exc:
            todo.append((path, None, exc))

    def tell_ready() -> None:
        nonlocal told
        while told in judged:
            _tell(todo[told][0], judged.pop(told), tally)
            told += 1

    def finished(i: int, outcome) -> None:
        path, opts, _ = todo[i]

        def measured():
            if isinstance(outcome, Exception):
                raise outcome
            return opts, photo_record(outcome, path, opts)

        judged[i] = _judged(path, measured)

    try:
        for i, (_, opts, problem) in enumerate(todo):
            if opts is None:
                finished(i, problem)
        runs = [(i, str(p), s) for i, (p, o, s) in enumerate(todo) if o is not None]
        with closing(measure_in_parallel([(p, s) for _, p, s in runs], workers)) as done:
            for fin in done:
                with interrupts_held():  # a logged result is always shown
                    finished(runs[fin.index][0], fin.outcome)
                    tell_ready()
        tell_ready()
    except KeyboardInterrupt:
        for i in sorted(judged):  # finished, logged: shown before the watch stops
            told = i
            tell_ready()
        raise


def _summary(tally: Tally, why: str) -> str:
    counts = tally.counts
    return (f"watch stopped ({why}): {tally.total()} photos, {counts['pass']} pass, "
            f"{counts['fail']} fail, {counts['inconclusive']} inconclusive, "
            f"{counts['measured']} without tolerance, {counts['error']} errors"
            + (f", {tally.not_logged} not logged" if tally.not_logged else "")
            + (f", {tally.maps_not_written} map{'s' * (tally.maps_not_written > 1)} not "
               "written" if tally.maps_not_written else ""))


def run(args: argparse.Namespace) -> int:
    """``flatsight watch``: 0 after a clean stop, 130 after ctrl+c, 2 for bad options or
    folder, or when a result could not be logged or its map written."""
    from ..analysis.errors import SettingsError
    from .parallel import available_cores
    from .record_options import apply_preset, log_location_from_args, tolerance_from_args

    try:
        args = apply_preset(args)
        by_name = bool(args.presets and not args.preset)
        if by_name:
            from ..analysis.records.presets import load_presets_file

            # read once; a bad presets file fails before any photo
            args.photo_presets = load_presets_file(args.presets)
        if args.wavelength is None and not by_name:
            raise SettingsError("give the test wavelength: --wavelength NM (or a --preset "
                                "that sets wavelength_nm, or --presets FILE whose [photos] "
                                "table gives each photo its bench)")
        if args.wavelength is not None:
            args.wavelength = wavelength_type(str(args.wavelength))
        tolerance_from_args(args)
        log_path = log_location_from_args(args)
        folder = Path(args.folder).expanduser()
        if not folder.is_dir():
            raise SettingsError(f"{folder} is not a folder: give the folder the camera "
                                "writes into")
        if args.save_map:
            if "{name}" not in args.save_map:
                raise SettingsError("--save-map needs {name} in it, one map per photo (e.g. "
                                    "maps/{name}.npy)")
            check_map_path(args.save_map)
            if Path(args.save_map).expanduser().resolve().parent == folder.resolve():
                raise SettingsError("--save-map must write outside the watched folder, or "
                                    "each map would be taken for a new photo")
            args.map_names = MapNames(args.save_map)
        for name, value in (("--interval", args.interval), ("--settle", args.settle)):
            if not value >= 0:
                raise SettingsError(f"{name} must be zero or more seconds")
        watcher = FolderWatcher(folder, settle_s=args.settle, include_existing=args.existing,
                                clock=clock)
    except (SettingsError, argparse.ArgumentTypeError, OSError) as exc:
        print(f"flatsight watch: error: {shown(exc)}", file=sys.stderr)
        return 2

    workers = args.jobs or available_cores()
    tally = Tally()
    start = clock()
    missing = None
    try:
        # announced inside the try: from the moment this line is out, ctrl+c ends the
        # watch with its summary line
        print(f"watching {shown(folder)} (logging to "
              f"{shown(log_path) if log_path else 'nothing: --no-log'}); ctrl+c to stop",
              flush=True)
        while True:
            arrived = watcher.poll()
            if args.max_files is not None:
                arrived = arrived[:max(args.max_files - tally.total(), 0)]
            if len(arrived) > 1 and workers > 1:
                _handle_together(arrived, args, tally, workers)
            else:
                for path in arrived:
                    _handle(path, args, tally)
            if args.max_files is not None and tally.total() >= args.max_files:
                raise _Stop("--max-files reached")
            for path, problem in watcher.take_problems():
                tally.error(path, f"error: {problem}")
            if watcher.missing != missing:
                missing = watcher.missing
                print(f"{_stamp()}  {shown(folder)} "
                      + (f"cannot be looked at ({shown(missing)}); waiting for it to come "
                         "back (ctrl+c to stop)" if missing else "is back; watching again"),
                      flush=True)
            if args.timeout is not None and clock() - start >= args.timeout:
                raise _Stop("--timeout reached")
            pause(args.interval)
    except KeyboardInterrupt:
        print(flush=True)
        print(_summary(tally, "ctrl+c"), flush=True)
        return 130
    except _Stop as stop:
        print(_summary(tally, str(stop)), flush=True)
    return 2 if tally.not_logged or tally.maps_not_written else 0
