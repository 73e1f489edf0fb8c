"""Several photos as one measurement in the station: averaging (with its spread) and sequences."""

from __future__ import annotations

import asyncio
import functools

import numpy as np
import pytest
from flatsight.analysis.pipeline import with_terms_removed
from flatsight.analysis.record import measurement_to_record, save_height_map
from flatsight.analysis.records.log import query
from flatsight.tui.app import FlatsightStation
from flatsight.tui.config import StationSettings
from flatsight.tui.station_backend import StationBackend
from flatsight.tui.station_log import StationRecorder
from station_fakes import (
    FOUND_APERTURE,
    PHOTO_SHAPE,
    FakeLibrary,
    settle,
    shot_to_shot,
    write_photos,
)

WAVELENGTH_NM = 632.8


def sync(scenario):
    @functools.wraps(scenario)
    def test(*args, **kwargs):
        asyncio.run(scenario(*args, **kwargs))

    return test


def phase_frame(k: int, *, power_waves: float = 1.5, step_deg: float = 90.0) -> np.ndarray:
    """Frame ``k`` of a phase-shifted sequence of a part with only power (no tilt carrier)."""
    y, x = np.mgrid[0 : PHOTO_SHAPE[0], 0 : PHOTO_SHAPE[1]].astype(float)
    a = FOUND_APERTURE
    r2 = ((x - a.center_x_px) ** 2 + (y - a.center_y_px) ** 2) / a.radius_px**2
    phase = 2 * np.pi * power_waves * r2
    disk = r2 <= 1.0
    return np.where(disk, 0.5 + 0.4 * np.cos(phase + np.deg2rad(step_deg) * k), 0.05)


def make_app(tmp_path, names, lib):
    photos = write_photos(tmp_path, names)

    def load_pixels(path):
        if "frame" in path.name:
            return phase_frame(int(path.stem.rsplit("-", 1)[-1]))
        return lib.load_pixels(path)

    backend = StationBackend(measure=lib.measure, load_pixels=load_pixels,
                             remove_terms=with_terms_removed, to_record=measurement_to_record,
                             save_height_map=save_height_map)
    return FlatsightStation(
        photos, settings=StationSettings(colour="truecolor", wavelength_nm=WAVELENGTH_NM),
        backend=backend, config_path=None,
        recorder=StationRecorder(tmp_path / "log.sqlite", {"spec": "pv<=500nm"}))


async def average_the_queue(pilot, n: int) -> None:
    """Mark the first ``n`` photos of the queue one by one, then average them (g)."""
    await settle(pilot)
    for _ in range(n):
        await pilot.press("space", "right_square_bracket")
        await settle(pilot)
    await pilot.press("g")
    await settle(pilot)


@sync
async def test_marked_photos_are_averaged_into_one_measurement_with_a_spread_map(tmp_path):
    lib = FakeLibrary(surface_for=shot_to_shot)
    names = ["BW-FL-0412-0.png", "BW-FL-0412-1.png", "BW-FL-0412-2.png"]
    app = make_app(tmp_path, names, lib)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        bench = app.screen
        await pilot.press("7")  # no average yet: a warning, not a crash
        await pilot.press("g")  # nothing marked: a warning
        assert len(bench.entries) == 3
        for _ in range(3):
            await pilot.press("space", "right_square_bracket")
            await settle(pilot)
        assert sum(e.marked for e in bench.entries) == 3
        await pilot.press("g")
        await settle(pilot)
        avg_entry = bench.entries[-1]
        assert avg_entry.kind == "average" and avg_entry.state == "ok"
        assert bench.current == 3 and not any(e.marked for e in bench.entries)
        singles = [e.measurement.figures.power_nm for e in bench.entries[:3]]
        avg = avg_entry.combined
        # numpy's sample standard deviation of the three photos' power (ddof 1)
        assert avg.figure_spread_nm["power_nm"] == pytest.approx(np.std(singles, ddof=1),
                                                                  rel=1e-9)
        assert avg_entry.measurement.figures.power_nm == pytest.approx(np.mean(singles), rel=0.02)
        assert "avg×3" in app.screen.query_one("#queue").get_option_at_index(3).prompt.plain
        await pilot.press("7")
        await pilot.pause()
        shown = app.screen.query_one("#spread-view").render().plain
        assert "spread between photos" in shown and "photos 3" in shown
        row = query(tmp_path / "log.sqlite", limit=1)[0]
        assert row["average"]["n_photos"] == 3 and row["part"] == "BW-FL-0412-0"
        assert row["verdict"] == avg_entry.verdict
        # back on a single photo the spread tab goes away and 7 says why
        await pilot.press("left_square_bracket")
        await settle(pilot)
        assert app.screen.query_one("#views").active != "spread"


@sync
async def test_marked_frames_are_measured_as_a_phase_shifted_sequence(tmp_path):
    lib = FakeLibrary()
    names = [f"BW-FL-0413-frame-{k}.png" for k in range(4)]
    app = make_app(tmp_path, names, lib)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        bench = app.screen
        await pilot.press("space", "right_square_bracket")
        await settle(pilot)
        await pilot.press("n")  # one marked: a sequence needs three
        await settle(pilot)
        assert len(bench.entries) == 4
        for _ in range(3):
            await pilot.press("space", "right_square_bracket")
            await settle(pilot)
        await pilot.press("n")
        await settle(pilot)
        seq = bench.entries[-1]
        assert seq.kind == "sequence" and seq.state in ("ok", "warning"), seq.error
        # as `flatsight stack` without --step: 4 frames of unknown step go to Carre, whose
        # step found in the data must be the 90 degrees the frames were made with
        assert seq.combined.phase.algorithm == "carre"
        assert seq.combined.phase.step_found_deg == pytest.approx(90.0, abs=2.0)
        # 1.5 waves of r^2 is 1.5 * 632.8 / 2 nm of sag: the power term's PV reading,
        # within 10 % (the found aperture edge differs from the drawn one by a pixel or so)
        assert seq.measurement.figures.power_nm == pytest.approx(
            1.5 * WAVELENGTH_NM / 2, rel=0.1)
        row = query(tmp_path / "log.sqlite", limit=1)[0]
        assert row["algorithm"] == "carre" and len(row["frames"]) == 4
        await pilot.press("7")
        await pilot.pause()
        assert app.is_running


@sync
async def test_an_average_is_saved_beside_its_first_photo_under_its_own_name(tmp_path):
    import json

    lib = FakeLibrary(surface_for=shot_to_shot)
    app = make_app(tmp_path, ["BW-FL-0412-0.png", "BW-FL-0412-1.png"], lib)
    async with app.run_test(size=(80, 24)) as pilot:
        await average_the_queue(pilot, 2)
        await pilot.press("s")
        await settle(pilot)
    saved = json.loads((tmp_path / "BW-FL-0412-0.avg2.flatsight.json").read_text())
    assert saved["average"]["n_photos"] == 2
    assert (tmp_path / "BW-FL-0412-0.avg2.height.npy").exists()
    assert not (tmp_path / "BW-FL-0412-0.flatsight.json").exists()  # the photo's own untouched
    assert sorted(p.name for p in tmp_path.iterdir() if p.is_dir()) == []


TWO_LAMPS = """
[presets.bench-2-hene]
wavelength_nm = 632.8

[presets.bench-1-mercury]
wavelength_nm = 546.07

[photos]
"*_hene.*" = "bench-2-hene"
"*_mercury.*" = "bench-1-mercury"
"""


@sync
async def test_an_average_measures_each_photo_at_its_own_benchs_wavelength(tmp_path):
    # issue 9 item 1: the average used the first marked photo's wavelength for all
    lib = FakeLibrary()
    presets = tmp_path / "presets.toml"
    presets.write_text(TWO_LAMPS, encoding="utf-8")
    photos = write_photos(tmp_path, ["BW-FL-0412_mercury.png", "BW-FL-0412_hene.png"])
    backend = StationBackend(measure=lib.measure, load_pixels=lib.load_pixels,
                             remove_terms=with_terms_removed, to_record=measurement_to_record,
                             save_height_map=save_height_map)
    app = FlatsightStation(
        photos, settings=StationSettings(colour="truecolor", wavelength_nm=WAVELENGTH_NM),
        backend=backend, config_path=None, presets_file=presets,
        recorder=StationRecorder(tmp_path / "log.sqlite", {"spec": "pv<=500nm"}))
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        for _ in range(2):
            await pilot.press("space", "right_square_bracket")
            await settle(pilot)
        lib.measured.clear()
        await pilot.press("g")
        await settle(pilot)
        assert app.screen.entries[-1].state == "ok"
        used = {name: s.wavelength_nm for name, s in lib.measured}
        assert used == {"BW-FL-0412_mercury.png": 546.07, "BW-FL-0412_hene.png": 632.8}


@sync
async def test_an_average_shows_its_photos_carriers_not_a_made_up_one(tmp_path):
    # issue 9 item 4: "0.0 tilt fringes, period 0.0 px, visibility 1.00" for an average
    lib = FakeLibrary(surface_for=shot_to_shot)
    app = make_app(tmp_path, ["BW-FL-0412-0.png", "BW-FL-0412-1.png"], lib)
    async with app.run_test(size=(120, 40)) as pilot:
        await average_the_queue(pilot, 2)
        assert app.screen.entry.kind == "average"
        await pilot.press("1")
        await pilot.pause()
        fringes = app.screen.query_one("#fringes-view").render().plain
        # the stand-in photos each have 14 tilt fringes of 6.9 px (station_fakes)
        assert "2 photos, each its own:" in fringes and "tilt fringes 14.0" in fringes
        assert "period 6.9 px" in fringes
        assert "0.0 tilt" not in fringes and "visibility 1.00" not in fringes
        await pilot.press("2")
        await pilot.pause()
        spectrum = app.screen.query_one("#spectrum-view").render().plain
        assert "each has its own spectrum" in spectrum and "0.0 fringes" not in spectrum
