"""The ``watch`` command: measure and log each new photo a camera writes into a folder.

A photo is taken only once it is complete: its size and modification time have not
changed for ``--settle`` seconds and it decodes. Polling (standard library only) works
the same on local disks and network shares. One line per photo, bad files included;
ctrl+c stops with a summary line and exit status 0.
"""

from __future__ import annotations

import argparse
import os
import sys
import time
from collections import Counter
from dataclasses import dataclass
from pathlib import Path

from ..analysis.formatting import format_number, printable
from .options import circle_type, wavelength_type
from .record_options import add_record_options

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
--part is given. Bad files get a one-line error and the watch goes on.

Each line ends with the verdict against --spec: PASS, FAIL, or INCONCLUSIVE under
--decision guarded (a figure within its uncertainty U of a limit).

Stop with ctrl+c, or with --max-files / --timeout: a summary line and exit status 0,
whatever the verdicts (they are in the lines and the log); 2 for bad options.
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
    w.add_argument("--diameter", type=float, metavar="MM", default=None,
                   help="clear-aperture diameter, for the radius of curvature")
    w.add_argument("--terms", type=int, metavar="N", default=None,
                   help="Zernike terms to fit (Noll, default 36)")
    w.add_argument("--invert", action="store_true", help="flip the sign of the surface")
    w.add_argument("--aperture", type=circle_type, metavar="X,Y,R",
                   help="clear aperture in photo pixels (x right, y down) for every photo; "
                        "default: found in each photo")
    w.add_argument("--exclude", type=circle_type, metavar="X,Y,R", action="append",
                   default=[], help="leave a circle out of every photo; repeatable")
    w.add_argument("--save-map", metavar="FILE", default=None,
                   help="write each height map (.npy or .tif); put {name} in FILE for the "
                        "photo's name, e.g. maps/{name}.npy")
    add_record_options(w)
    w.add_argument("--existing", action="store_true",
                   help="also measure the photos already in the folder")
    w.add_argument("--interval", type=float, default=0.5, metavar="S",
                   help="seconds between looks at the folder (default 0.5)")
    w.add_argument("--settle", type=float, default=1.0, metavar="S",
                   help="a photo must keep its size and time this long (default 1.0)")
    w.add_argument("--max-files", type=int, default=None, metavar="N",
                   help="stop after N photos (for scripts and tests)")
    w.add_argument("--timeout", type=float, default=None, metavar="S",
                   help="stop after S seconds")
    w.set_defaults(run=run)
    return w


def _decodes(path: Path) -> bool:
    from PIL import Image, UnidentifiedImageError

    try:
        with Image.open(path) as img:
            img.load()
    except (OSError, UnidentifiedImageError, ValueError, SyntaxError):
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
        if not include_existing:
            self._done = dict(self._scan())

    def _scan(self) -> list[tuple[Path, tuple[int, int]]]:
        found = []
        with os.scandir(self.folder) as entries:
            for entry in entries:
                # cameras and copy tools write hidden or temporary names first
                if entry.name.startswith(".") or not self._is_photo(entry.name):
                    continue
                try:
                    st = entry.stat()
                except FileNotFoundError:
                    continue  # renamed or removed between listing and stat
                if entry.is_file():
                    found.append((Path(entry.path), (st.st_size, st.st_mtime_ns)))
        return found

    def poll(self) -> list[Path]:
        """The photos that became ready since the last call, oldest name first."""
        now = self._clock()
        ready = []
        present = set()
        for path, sig in self._scan():
            present.add(path)
            if self._done.get(path) == sig:
                continue
            seen = self._pending.get(path)
            if seen is None or seen.signature != sig:
                self._pending[path] = _Seen(sig, now)
                continue
            stable_for = now - seen.stable_since
            if sig[0] == 0 or stable_for < self.settle_s:
                continue
            if _decodes(path) or stable_for >= self.give_up_s:
                ready.append(path)
                self._done[path] = sig
                del self._pending[path]
        for gone in set(self._pending) - present:
            del self._pending[gone]
        return sorted(ready)


def measure_photo(path: Path, args: argparse.Namespace) -> dict:
    """Measure one photo with the watch's settings; the record of ``measure --json``."""
    from ..analysis.aperture import Aperture, Exclusion
    from ..analysis.errors import SettingsError
    from ..analysis.pipeline import MeasureSettings, measure
    from ..analysis.record import measurement_to_record, save_height_map
    from .record_options import uncertainty_settings

    aperture = getattr(args, "aperture", None)
    settings = MeasureSettings(
        wavelength_nm=float(args.wavelength),
        n_terms=int(args.terms) if args.terms is not None else 36,
        invert=bool(args.invert),
        diameter_mm=float(args.diameter) if args.diameter is not None else None,
        aperture=Aperture(*aperture) if aperture else None,
        exclusions=tuple(Exclusion(*c) for c in getattr(args, "exclude", []) or []),
        **uncertainty_settings(args),
    )
    m = measure(str(path), settings)
    record = measurement_to_record(m)
    template = getattr(args, "save_map", None)
    if template:
        target = Path(template.replace("{name}", path.stem))
        try:
            save_height_map(m, target)
        except OSError as exc:
            raise SettingsError(f"cannot write the height map {target}: "
                                f"{exc.strerror or exc}") from None
        record["height_map_path"] = str(target.resolve())
    return record


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
    part = printable(record.get("part") or path.stem)
    return (f"{_stamp()}  {part:<16} PV {nm('pv_nm')} nm  "
            f"PVr {nm('pvr_nm')} nm  power {nm('power_nm')} nm  {word:<4}"
            + _deciding_limit(spec) + (f"  #{rid}" if rid is not None else ""))


def _deciding_limit(spec: dict) -> str:
    """`` (B margin -7.6 nm, U 29.0 nm)``: the first limit that did not pass, if any."""
    for lim in spec.get("limits", []):
        if lim.get("verdict") not in (None, "pass"):
            u = lim.get("uncertainty_nm")
            return (f" ({printable(lim.get('name'))} margin "
                    f"{format_number(lim.get('margin_nm'), sign=True)} nm"
                    + (f", U {format_number(u)} nm" if u is not None else "") + ")")
    return ""


def _handle(path: Path, args: argparse.Namespace, counts: Counter) -> None:
    from ..analysis.errors import FlatsightError
    from .record_options import finish_record

    try:
        record = measure_photo(path, args)
        per_photo = argparse.Namespace(**vars(args))
        per_photo.part = args.part or path.stem
        record, _ = finish_record(per_photo, record)
    except FlatsightError as exc:
        counts["error"] += 1
        print(f"{_stamp()}  {printable(path.name)}: error: {printable(exc)}", flush=True)
        return
    except Exception as exc:  # noqa: BLE001 - one bad photo must not stop the station's watch
        counts["error"] += 1
        print(f"{_stamp()}  {printable(path.name)}: internal error: {type(exc).__name__}: "
              f"{printable(exc)}", flush=True)
        return
    verdict = (record.get("spec") or {}).get("verdict")
    counts[verdict or "measured"] += 1
    print(_line(record, path), flush=True)


def _summary(counts: Counter, why: str) -> str:
    total = sum(counts.values())
    return (f"watch stopped ({why}): {total} photos, {counts['pass']} pass, "
            f"{counts['fail']} fail, {counts['inconclusive']} inconclusive, "
            f"{counts['measured']} without tolerance, {counts['error']} errors")


def run(args: argparse.Namespace) -> int:
    """``flatsight watch``: 0 after a clean stop, 2 for bad options or folder."""
    from ..analysis.errors import SettingsError
    from .record_options import apply_preset, log_path_from_args, tolerance_from_args

    try:
        args = apply_preset(args)
        if args.wavelength is None:
            raise SettingsError("give the test wavelength: --wavelength NM (or a --preset "
                                "that sets wavelength_nm)")
        args.wavelength = wavelength_type(str(args.wavelength))
        tolerance_from_args(args)
        folder = Path(args.folder).expanduser()
        if not folder.is_dir():
            raise SettingsError(f"{folder} is not a folder: give the folder the camera "
                                "writes into")
        if args.save_map:
            if "{name}" not in args.save_map:
                raise SettingsError("--save-map needs {name} in it, one map per photo (e.g. "
                                    "maps/{name}.npy)")
            if Path(args.save_map).expanduser().resolve().parent == folder.resolve():
                raise SettingsError("--save-map must write outside the watched folder, or "
                                    "each map would be taken for a new photo")
        for name, value in (("--interval", args.interval), ("--settle", args.settle)):
            if not value >= 0:
                raise SettingsError(f"{name} must be zero or more seconds")
        watcher = FolderWatcher(folder, settle_s=args.settle, include_existing=args.existing,
                                clock=clock)
    except (SettingsError, argparse.ArgumentTypeError, OSError) as exc:
        print(f"flatsight watch: error: {exc}", file=sys.stderr)
        return 2

    log_path = log_path_from_args(args)
    counts: Counter = Counter()
    start = clock()
    why = "ctrl+c"
    try:
        # announced inside the try: from the moment this line is out, ctrl+c ends the
        # watch with its summary line
        print(f"watching {printable(folder)} (logging to "
              f"{printable(log_path) if log_path else 'nothing: --no-log'}); ctrl+c to stop",
              flush=True)
        while True:
            for path in watcher.poll():
                _handle(path, args, counts)
                if args.max_files is not None and sum(counts.values()) >= args.max_files:
                    raise _Stop("--max-files reached")
            if args.timeout is not None and clock() - start >= args.timeout:
                raise _Stop("--timeout reached")
            pause(args.interval)
    except KeyboardInterrupt:
        print(flush=True)
    except _Stop as stop:
        why = str(stop)
    print(_summary(counts, why), flush=True)
    return 0
