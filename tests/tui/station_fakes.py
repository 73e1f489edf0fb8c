"""Small synthetic photos and a quick stand-in measurement for driving the station in tests.

The stand-in measure skips the Fourier analysis (that has its own tests) but builds its
result with the library's own ``measurement_from_height`` from a known Zernike surface,
so figures, term removal and saving run the real code.
"""

from __future__ import annotations

import asyncio
import functools
import threading
from pathlib import Path

import numpy as np
from flatsight.analysis.aperture import Aperture
from flatsight.analysis.demodulation import MapGeometry, Spectrum
from flatsight.analysis.errors import (
    MeasurementCancelled,
    RingSignNeededError,
    UnanalysablePhotoError,
    UnreadablePhotoError,
)
from flatsight.analysis.pipeline import measurement_from_height, with_terms_removed
from flatsight.analysis.record import measurement_to_record, save_height_map
from flatsight.analysis.zernike import zernike_basis
from flatsight.tui.station_backend import StationBackend

PHOTO_SHAPE = (120, 160)  # rows, columns: small, so tests stay quick
FOUND_APERTURE = Aperture(80.0, 60.0, 48.0)
# Brindlewick Optical Works demo part: 40 nm RMS of power, some astigmatism and coma
SURFACE_NM = {4: 40.0, 5: 12.0, 6: -6.0, 7: 5.0, 11: 3.0}
MAP_STEP_PX = 2.0


def fringe_image(shape=PHOTO_SHAPE, *, fringes: float = 14.0, seed: int = 0) -> np.ndarray:
    """A deterministic grey fringe pattern with a bright disk (values 0..1)."""
    rng = np.random.default_rng(seed)
    y, x = np.mgrid[0 : shape[0], 0 : shape[1]].astype(float)
    a = FOUND_APERTURE
    r = np.hypot(x - a.center_x_px, y - a.center_y_px) / a.radius_px
    phase = 2 * np.pi * fringes * (y - a.center_y_px) / (2 * a.radius_px) + 3.0 * r**2
    disk = np.clip((1.0 - r) * 8.0, 0.0, 1.0)
    img = 0.1 + disk * (0.45 + 0.35 * np.cos(phase)) + 0.01 * rng.standard_normal(shape)
    return np.clip(img, 0.0, 1.0)


def write_photos(folder: Path, names: list[str]) -> list[Path]:
    """Stand-in photo files (their bytes are never decoded: the fake loader keys on names)."""
    paths = []
    for name in names:
        p = folder / name
        p.write_bytes(b"stand-in photo for the station tests\n")
        paths.append(p)
    return paths


class FakeLibrary:
    """Counts calls and can be told to block, so tests see cancellation and progress."""

    def __init__(self, surface_for=None) -> None:
        self.measured: list[tuple[str, object]] = []
        self.gate: threading.Event | None = None
        # path -> {Noll j: nm RMS}: a surface per photo (default: SURFACE_NM for all)
        self.surface_for = surface_for

    def load_pixels(self, path: Path) -> np.ndarray:
        if "bad" in path.name:
            raise UnreadablePhotoError(
                f"{path}: not a PNG, JPEG or TIFF photo; check the file or export it again"
            )
        return fringe_image(seed=len(path.name))

    def measure(self, path, settings, *, progress=None, cancel=None):
        self.measured.append((Path(path).name, settings))
        for k, stage in enumerate(("aperture", "demodulation", "unwrapping", "fit")):
            if progress:
                progress(stage, k / 4)
            if self.gate is not None:
                self.gate.wait(5.0)
            if cancel is not None and cancel.is_set():
                raise MeasurementCancelled(f"{path}: cancelled")
        if "nofringes" in Path(path).name:
            raise UnanalysablePhotoError(
                f"{path}: no straight fringes found; add tilt until 10 to 30 fringes cross the flat"
            )
        rings = "rings" in Path(path).name  # closed fringes: measured once the sign is stated
        if rings and settings.ring_sign is None:
            raise RingSignNeededError(
                f"closed fringes in {path}: one photo cannot tell convex from concave; state "
                "it with --ring-sign convex or --ring-sign concave"
            )
        aperture = settings.aperture or FOUND_APERTURE
        aperture = aperture.with_exclusions(tuple(aperture.exclusions) + tuple(settings.exclusions))
        n = int(2 * aperture.radius_px / MAP_STEP_PX) + 3
        geometry = MapGeometry(
            aperture.center_x_px - MAP_STEP_PX * (n - 1) / 2,
            aperture.center_y_px - MAP_STEP_PX * (n - 1) / 2,
            MAP_STEP_PX,
            (n, n),
        )
        xu, yu = geometry.unit_xy(aperture)
        inside = np.hypot(xu, yu) <= 1.0
        surface = self.surface_for(Path(path)) if self.surface_for else SURFACE_NM
        if rings:  # convex: centre high, Noll 4 negative in height (DEVELOPERS.md, "Sign")
            surface = {**surface, 4: -abs(surface[4]) if settings.ring_sign == "convex"
                       else abs(surface[4])}
        basis = zernike_basis(max(surface), xu[inside], yu[inside])
        h = np.full((n, n), np.nan)
        h[inside] = sum(c * basis[:, j - 1] for j, c in surface.items())
        px, py = geometry.photo_xy()
        valid = inside & aperture.inside(px, py)
        yy, xx = np.mgrid[-16:17, -16:17]
        spectrum = Spectrum(
            np.log1p(
                100 * np.exp(-(xx**2 + (yy - 9) ** 2) / 4.0) + 300 * np.exp(-(xx**2 + yy**2) / 3.0)
            ),
            (25.0, 16.0),
            5.0,
            3.0,
        )
        return measurement_from_height(
            h,
            valid,
            inside,
            aperture=aperture,
            geometry=geometry,
            settings=settings,
            photo=str(path),
            spectrum=spectrum,
            quality_fields={
                "carrier_fringes": 14.0,
                "fringe_period_px": 6.9,
                "carrier_angle_deg": 90.0,
                "resolution_cycles_per_aperture": 5.0,
            } | ({"carrier_fringes": float("nan"), "method": "intensity-fit",
                  "method_reason": "closed fringes", "sign": "stated"} if rings else {}),
        )


def shot_to_shot(path: Path) -> dict:
    """A surface that reads 3 nm RMS more power per shot (``...-0.png``, ``...-1.png``):
    air and handling differ between photos of one part."""
    shot = int(Path(path).stem.rsplit("-", 1)[-1])
    return {**SURFACE_NM, 4: SURFACE_NM[4] + 3.0 * shot, 6: SURFACE_NM[6] - 1.5 * shot}


def fake_backend(lib: FakeLibrary | None = None) -> tuple[StationBackend, FakeLibrary]:
    lib = lib or FakeLibrary()
    return StationBackend(
        measure=lib.measure,
        load_pixels=lib.load_pixels,
        remove_terms=with_terms_removed,
        to_record=measurement_to_record,
        save_height_map=save_height_map,
    ), lib


# workers that live as long as their widget, waiting for work (the directory tree of the
# open screen keeps one to load folders as they are opened): never waited for
LONG_LIVED_WORKER_GROUPS = frozenset({"_loader"})


def sync(scenario):
    """Run an async Pilot scenario as a plain test (the suite has no asyncio plugin)."""

    @functools.wraps(scenario)
    def test(*args, **kwargs):
        asyncio.run(scenario(*args, **kwargs))

    return test


async def settle(pilot, *, most_rounds: int = 200) -> None:
    """Wait until no worker of the app is running, and the messages they sent are handled.

    A worker that fails or is cancelled is part of the scenario (the station shows the
    failure as a message), so its error is not raised here: ``wait_for_complete`` would
    re-raise it whenever the failed worker happens to be still listed when it is called.
    A finished worker may start another (a measurement starts a record, a record a log
    read), so this waits round after round until a round finds nothing running; no
    round depends on how long anything takes.
    """
    app = pilot.app
    for _ in range(most_rounds):
        await pilot.pause()
        running = [w for w in app.workers
                   if not w.is_finished and w.group not in LONG_LIVED_WORKER_GROUPS]
        if not running:
            await pilot.pause()
            return
        await asyncio.gather(*(w.wait() for w in running), return_exceptions=True)
    raise AssertionError(f"workers still running after {most_rounds} rounds: {running}")


class ManualTimers:
    """Stands in for a screen's ``set_timer``: timers fire only when the test says so.

    The bench waits for a burst of aperture keys to end (a debounce timer) before it
    measures again; with this the test decides when the burst has ended, so how many
    measurements a burst gives never depends on how fast the keys arrive.
    """

    class Timer:
        def __init__(self, callback) -> None:
            self.callback = callback
            self.stopped = False

        def stop(self) -> None:
            self.stopped = True

    def __init__(self, screen) -> None:
        self.made: list[ManualTimers.Timer] = []
        screen.set_timer = self.set_timer

    def set_timer(self, delay, callback=None, **kwargs):
        timer = ManualTimers.Timer(callback)
        self.made.append(timer)
        return timer

    @property
    def pending(self) -> list[ManualTimers.Timer]:
        return [t for t in self.made if not t.stopped]

    def fire(self) -> int:
        """Run every pending timer's callback once; returns how many there were."""
        due = self.pending
        for timer in due:
            timer.stopped = True
            timer.callback()
        return len(due)
