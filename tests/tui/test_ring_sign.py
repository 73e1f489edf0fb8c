"""The ring sign in the station: the settings field, the prompt when closed fringes need it,
and the photo measured again with the answer (issue 10, "Every photo the shop takes").

Most scenarios use the stand-in library (``station_fakes``: a photo named ``*rings*`` is
refused with RingSignNeededError until a sign is stated); one drives the real library on
the demo scenario's closed-ring photo.
"""

from __future__ import annotations

import asyncio
import functools
from pathlib import Path

import pytest
from flatsight.tui.app import FlatsightStation
from flatsight.tui.config import StationSettings, load_settings
from flatsight.tui.screens.bench import BenchScreen
from flatsight.tui.screens.ring_sign_screen import RING_PUSH_TEST, RingSignScreen
from flatsight.tui.screens.settings_screen import SettingsScreen
from station_fakes import fake_backend, settle, write_photos
from textual.widgets import Select

PLAIN, RINGS = "BW-FL-0412.png", "BW-FL-0440-rings.png"
SAMPLES = Path(__file__).resolve().parents[2] / "sample_images"


def sync(scenario):
    """Run an async Pilot scenario as a plain test (the suite has no asyncio plugin)."""

    @functools.wraps(scenario)
    def test(*args, **kwargs):
        asyncio.run(scenario(*args, **kwargs))

    return test


def make_app(tmp_path, names, **settings):
    photos = write_photos(tmp_path, names)
    backend, lib = fake_backend()
    app = FlatsightStation(photos, settings=StationSettings(colour="truecolor", **settings),
                           backend=backend, config_path=tmp_path / "station.toml")
    return app, lib


def text_of(widget) -> str:
    return str(widget.render())


def status(app) -> str:
    return text_of(app.screen.query_one("#status-text"))


async def prompt_shown(pilot) -> RingSignScreen:
    """Wait for the measuring to end; the ring-sign prompt must be on the screen."""
    await settle(pilot)
    assert isinstance(pilot.app.screen, RingSignScreen)
    return pilot.app.screen


def measured_with(lib, name: str) -> list:
    """The settings each measurement of photo ``name`` was asked with, in order."""
    return [s for photo, s in lib.measured if photo == name]


@sync
async def test_a_refused_closed_ring_photo_asks_for_the_sign_and_is_measured_with_it(tmp_path):
    app, lib = make_app(tmp_path, [RINGS])
    async with app.run_test(size=(80, 24)) as pilot:
        prompt = await prompt_shown(pilot)
        assert RINGS in text_of(prompt.query_one("#ring-photo"))
        assert "press gently" in text_of(prompt.query_one("#ring-push-test"))
        bench = app.bench
        e = bench.entries[0]
        assert e.state == "error" and e.needs_ring_sign and "press R" in e.error
        # enter on the focused button cancels: a stray key must not state a sign
        assert app.focused.id == "cancel"
        await pilot.press("o")  # the rings moved out: convex
        await settle(pilot)
        assert app.screen is bench
        used = measured_with(lib, RINGS)
        assert [s.ring_sign for s in used] == [None, "convex"]
        assert e.state == "ok" and e.ring_sign == "convex" and not e.needs_ring_sign
        m = e.measurement
        assert m.quality.sign == "stated" and m.figures.power_nm > 0  # convex: centre high
        # the narrow fringe view says the stated sign where the carrier would stand
        assert "convex stated" in text_of(bench.query_one("#fringes-view"))


@sync
async def test_cancel_leaves_the_photo_unmeasured_and_R_asks_again(tmp_path):
    app, lib = make_app(tmp_path, [RINGS])
    async with app.run_test(size=(80, 24)) as pilot:
        await prompt_shown(pilot)
        await pilot.press("escape")
        await settle(pilot)
        bench = app.bench
        assert app.screen is bench
        assert bench.entries[0].state == "error" and bench.entries[0].measurement is None
        assert "R asks again" in status(app)
        assert len(measured_with(lib, RINGS)) == 1
        await pilot.press("R")
        await pilot.pause()
        assert isinstance(app.screen, RingSignScreen)
        await pilot.press("i")  # the rings moved in: concave
        await settle(pilot)
        m = bench.entries[0].measurement
        assert measured_with(lib, RINGS)[-1].ring_sign == "concave"
        assert m.quality.sign == "stated" and m.figures.power_nm < 0


@sync
async def test_the_prompt_answers_and_the_R_key_are_in_the_command_palette(tmp_path):
    app, _ = make_app(tmp_path, [RINGS])
    async with app.run_test(size=(80, 24)) as pilot:
        prompt = await prompt_shown(pilot)
        titles = [c.title for c in app.get_system_commands(prompt)]
        for binding in prompt.BINDINGS:
            assert binding.description in titles
        bench_titles = [c.title for c in app.get_system_commands(app.bench)]
        assert any(t.startswith("Ring sign of this photo") for t in bench_titles)
        # the palette finds an answer by name and runs it like its key
        await pilot.press("ctrl+p")
        await settle(pilot)
        await pilot.press(*"concave")
        await settle(pilot)
        await pilot.press("enter")
        await settle(pilot)
        assert app.screen is app.bench
        assert app.bench.entries[0].ring_sign == "concave"


@sync
async def test_a_photo_with_tilt_fringes_is_never_asked_nor_R_offered(tmp_path):
    app, lib = make_app(tmp_path, [PLAIN])
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        assert isinstance(app.screen, BenchScreen)
        assert app.bench.entries[0].state == "ok"
        assert measured_with(lib, PLAIN)[0].ring_sign is None
        await pilot.press("R")  # its sign is measured from its tilt: nothing to state
        await pilot.pause()
        assert isinstance(app.screen, BenchScreen) and len(lib.measured) == 1


@sync
async def test_the_settings_ring_sign_measures_closed_rings_and_is_not_remembered(tmp_path):
    app, lib = make_app(tmp_path, [PLAIN, RINGS])
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        bench = app.bench
        plain_result = bench.entries[0].measurement
        await pilot.press("right_square_bracket")
        await prompt_shown(pilot)
        await pilot.press("escape")
        await settle(pilot)
        await pilot.press("w")
        await pilot.pause()
        settings = app.screen
        assert isinstance(settings, SettingsScreen)
        select = settings.query_one("#ring-sign", Select)
        assert select.value == ""  # not stated
        await pilot.press("tab", "tab", "tab")  # wavelength, diameter, terms, ring sign
        assert app.focused is select
        await pilot.press("enter", "down", "enter")  # open the list, convex, take it
        await pilot.pause()
        assert select.value == "convex"
        await pilot.press("ctrl+s")
        await settle(pilot)
        assert app.screen is bench and bench.settings.ring_sign == "convex"
        assert "rings convex" in text_of(bench.query_one("#bench-bar"))
        # the closed-ring photo is measured again with it; the other photo keeps its result
        assert [s.ring_sign for s in measured_with(lib, RINGS)] == [None, "convex"]
        assert bench.entries[1].measurement.figures.power_nm > 0
        assert bench.entries[0].measurement is plain_result
        assert len(measured_with(lib, PLAIN)) == 1
        # a property of the part on the bench: never carried to the next session
        assert load_settings(tmp_path / "station.toml")[0].ring_sign is None
        assert "ring_sign" not in (tmp_path / "station.toml").read_text()


@sync
async def test_the_wide_fringe_view_names_the_method_and_the_stated_sign(tmp_path):
    app, _ = make_app(tmp_path, [RINGS], ring_sign="concave")
    async with app.run_test(size=(120, 40)) as pilot:
        await settle(pilot)
        bench = app.screen
        assert isinstance(bench, BenchScreen)  # the station's sign: nothing to ask
        panel = text_of(bench.query_one("#fringes-view"))
        assert "method intensity-fit" in panel and "sign stated: concave" in panel


@sync
async def test_settings_screen_fits_80x24_with_its_buttons(tmp_path):
    app, _ = make_app(tmp_path, [PLAIN])
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        await pilot.press("w")
        await pilot.pause()
        screen = app.screen
        for widget_id in ("#ring-sign", "#invert", "#apply", "#cancel"):
            region = screen.query_one(widget_id).region
            assert region.height > 0 and region.bottom <= 24, widget_id
        assert "concave" in text_of(screen.query_one("#push-test"))


@sync
async def test_the_prompt_explains_the_push_test_in_two_lines_with_the_caution(tmp_path):
    assert "shop's procedure" in RING_PUSH_TEST and "gently" in RING_PUSH_TEST
    app, _ = make_app(tmp_path, [RINGS])
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        prompt = app.screen
        assert prompt.query_one("#ring-push-test").region.height == 2
        for widget_id in ("#convex", "#concave", "#cancel"):  # every answer on the screen
            region = prompt.query_one(widget_id).region
            assert region.height > 0 and region.right <= 80 and region.bottom <= 24


@pytest.mark.slow
@sync
async def test_the_demo_closed_ring_photo_is_refused_asked_and_measured(tmp_path):
    # the real library on the demo scenario's closed rings (sample_images/README.md): no
    # preset, so no sign: the prompt; o states convex, as the sample's bench preset does
    photo = SAMPLES / "BW-FL-0440_sodium.png"
    app = FlatsightStation([photo], settings=StationSettings(colour="mono", wavelength_nm=589.3),
                           config_path=None)
    async with app.run_test(size=(80, 24)) as pilot:
        await prompt_shown(pilot)
        e = app.bench.entries[0]
        assert e.state == "error" and e.needs_ring_sign
        await pilot.press("o")
        await settle(pilot)
        assert app.screen is app.bench
        m = e.measurement
        assert m is not None and m.settings.ring_sign == "convex"
        q = m.quality
        assert (q.method, q.method_reason, q.sign) == ("intensity-fit", "closed fringes", "stated")
        assert m.figures.power_nm > 0  # convex: centre high (README, "Sign")
