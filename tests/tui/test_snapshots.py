"""Snapshot tests of the station's main views at 80x24 and 120x40 (pytest-textual-snapshot).

The photos and the stand-in analysis are deterministic, so the screens are too. After a
deliberate change of the look, review the new screens and accept them with
``pytest tests/tui/test_snapshots.py --snapshot-update``.
"""

from __future__ import annotations

import pytest
from flatsight.tui.app import FlatsightStation
from flatsight.tui.config import StationSettings
from station_fakes import fake_backend, settle, write_photos
from textual.widgets import Input

PARTS = ["BW-FL-0412.png", "BW-FL-0413.png", "bad-photo.png"]


def _app(tmp_path) -> FlatsightStation:
    photos = write_photos(tmp_path, PARTS)
    backend, _ = fake_backend()
    # a fixed colour depth, so the terminal running the tests does not matter
    settings = StationSettings(colour="truecolor", diameter_mm=100.0)
    return FlatsightStation(photos, settings=settings, backend=backend, config_path=None)


def _keys_then_settle(*keys: str):
    async def run_before(pilot) -> None:
        await settle(pilot)
        for key in keys:
            await pilot.press(key)
            await settle(pilot)
        for inp in pilot.app.screen.query(Input):
            inp.cursor_blink = False
        await pilot.pause()

    return run_before


VIEWS = {"fringes": ("1",), "surface": ("3",), "figures": ("5",)}
LARGE_ONLY = {"spectrum": ("2",), "profiles": ("4",), "surface_no_power": ("3", "p")}


@pytest.mark.parametrize("size", [(80, 24), (120, 40)], ids=["80x24", "120x40"])
@pytest.mark.parametrize("view", sorted(VIEWS))
def test_main_views(snap_compare, tmp_path, view, size):
    assert snap_compare(
        _app(tmp_path), terminal_size=size, run_before=_keys_then_settle(*VIEWS[view])
    )


@pytest.mark.parametrize("view", sorted(LARGE_ONLY))
def test_more_views_at_120x40(snap_compare, tmp_path, view):
    assert snap_compare(
        _app(tmp_path), terminal_size=(120, 40), run_before=_keys_then_settle(*LARGE_ONLY[view])
    )


def test_error_in_the_queue(snap_compare, tmp_path):
    assert snap_compare(
        _app(tmp_path),
        terminal_size=(80, 24),
        run_before=_keys_then_settle("right_square_bracket", "right_square_bracket"),
    )


def test_settings_screen(snap_compare, tmp_path):
    assert snap_compare(_app(tmp_path), terminal_size=(80, 24), run_before=_keys_then_settle("w"))


def test_help_screen(snap_compare, tmp_path):
    assert snap_compare(
        _app(tmp_path), terminal_size=(80, 24), run_before=_keys_then_settle("question_mark")
    )


def _logged_app(tmp_path, monkeypatch) -> FlatsightStation:
    """The station logging to a log that already holds a week of one part's inspections."""
    from flatsight.analysis.records.log import record_measurement
    from flatsight.tui import record_options
    from flatsight.tui.station_log import StationRecorder

    log = tmp_path / "log.sqlite"
    spec = {"tolerance": "pv<=200nm", "limits": [
        {"figure": "pv_nm", "limit_nm": 200.0, "compared": "value", "name": "pv"}]}
    for day, pv in ((23, 150.0), (25, 170.0), (26, 230.0), (28, 160.0)):
        verdict = "pass" if pv <= 200.0 else "fail"
        record_measurement(log, {"pv_nm": pv, "spec": {**spec, "verdict": verdict}},
                           part="BW-FL-0412", logged_utc=f"2026-11-{day}T08:00:00Z")
    # a fixed clock, so the station's own record lands on the same day in every run
    monkeypatch.setattr(record_options, "utc_now", lambda: "2026-11-30T08:00:00Z")
    photos = write_photos(tmp_path, PARTS)
    backend, _ = fake_backend()
    return FlatsightStation(
        photos, settings=StationSettings(colour="truecolor", diameter_mm=100.0),
        backend=backend, config_path=None,
        recorder=StationRecorder(log, {"spec": "pv<=200nm", "operator": "Tamsin Ode",
                                       "station": "bench-2"}))


@pytest.mark.parametrize("size", [(80, 24), (120, 40)], ids=["80x24", "120x40"])
def test_trend_view_with_the_part_history(snap_compare, tmp_path, monkeypatch, size):
    assert snap_compare(_logged_app(tmp_path, monkeypatch), terminal_size=size,
                        run_before=_keys_then_settle("6"))


def test_spread_of_three_averaged_photos(snap_compare, tmp_path):
    from station_fakes import FakeLibrary, shot_to_shot

    photos = write_photos(tmp_path, [f"BW-FL-0412-{k}.png" for k in range(3)])
    backend, _ = fake_backend(FakeLibrary(surface_for=shot_to_shot))
    app = FlatsightStation(photos, settings=StationSettings(colour="truecolor"),
                           backend=backend, config_path=None)
    keys = ["space", "right_square_bracket"] * 3 + ["g", "7"]
    assert snap_compare(app, terminal_size=(80, 24), run_before=_keys_then_settle(*keys))


def test_surface_with_four_term_groups_out_at_80x24(snap_compare, tmp_path):
    # issue 9, layout: the "without …" note wrapped onto the map and shifted it a row
    assert snap_compare(_app(tmp_path), terminal_size=(80, 24),
                        run_before=_keys_then_settle("3", "p", "a", "c", "t"))


def test_queue_of_one_parts_photos_at_80x24(snap_compare, tmp_path):
    # issue 9, layout: `BW-FL-041…` for hene and mercury; five frames all `BW-FL-0999_f…`
    names = ["BW-FL-0412_hene.png", "BW-FL-0412_mercury.jpg",
             *(f"BW-FL-0999_f0{k}.png" for k in range(1, 6))]
    photos = write_photos(tmp_path, names)
    backend, _ = fake_backend()
    app = FlatsightStation(photos, settings=StationSettings(colour="truecolor"),
                           backend=backend, config_path=None)
    assert snap_compare(app, terminal_size=(80, 24), run_before=_keys_then_settle())


def _rings_app(tmp_path) -> FlatsightStation:
    """A closed-ring photo first (the stand-in refuses it until a sign is stated)."""
    photos = write_photos(tmp_path, ["BW-FL-0440-rings.png", "BW-FL-0412.png"])
    backend, _ = fake_backend()
    return FlatsightStation(photos, settings=StationSettings(colour="truecolor"),
                            backend=backend, config_path=None)


def test_the_ring_sign_prompt_at_80x24(snap_compare, tmp_path):
    assert snap_compare(_rings_app(tmp_path), terminal_size=(80, 24),
                        run_before=_keys_then_settle())


def test_closed_rings_measured_with_the_stated_sign_at_120x40(snap_compare, tmp_path):
    assert snap_compare(_rings_app(tmp_path), terminal_size=(120, 40),
                        run_before=_keys_then_settle("o"))
