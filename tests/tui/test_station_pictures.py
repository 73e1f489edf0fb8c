"""The station with pictures forced on (Sixel), and its half-block cells where they are off.

Under the Pilot no terminal answers, so the station draws cells unless a protocol is
handed in; the snapshot tests show those cells are unchanged. Here the Sixel widget is
used as a terminal that answered would get it, and what it was given and what it sends
are read back.
"""

from __future__ import annotations

import threading

import numpy as np
from flatsight.analysis.colormap import diverging_rgb
from flatsight.analysis.formatting import format_number
from flatsight.tui.app import FlatsightStation
from flatsight.tui.config import StationSettings
from flatsight.tui.render.photo import EXCLUDED_RGB
from station_fakes import (
    ManualTimers,
    fake_backend,
    fringe_image,
    settle,
    sync,
    write_photos,
)
from textual.geometry import Region
from textual_image.widget import SixelImage

CELL = (8, 16)


def make_app(tmp_path, *, pictures="sixel", colour="truecolor"):
    photos = write_photos(tmp_path, ["BW-FL-0412.png", "BW-FL-0413.png"])
    backend, lib = fake_backend()
    app = FlatsightStation(photos, settings=StationSettings(colour=colour), backend=backend,
                           config_path=None, pictures=pictures, cell_px=CELL)
    return app, lib


async def open_view(pilot, key: str) -> None:
    """The first photo measured, then the view of ``key`` in front."""
    await settle(pilot)
    await pilot.press(key)
    await settle(pilot)


def picture_of(app, view: str):
    return app.screen.query_one(f"#{view}-view").query_one(".picture")


def bar(app) -> str:
    return str(app.screen.query_one("#bench-bar").render())


@sync
async def test_the_map_is_a_sixel_picture_in_the_maps_colours(tmp_path):
    app, lib = make_app(tmp_path)
    async with app.run_test(size=(80, 24)) as pilot:
        await open_view(pilot, "3")
        widget = picture_of(app, "surface")
        assert isinstance(widget, SixelImage) and widget.display
        m = app.screen.entry.measurement
        image = np.asarray(widget.image.convert("RGBA"))
        view = app.screen.query_one("#surface-view")
        pic = view._picture  # what the view made: the picture fills its cells exactly
        assert widget.image is pic.image and widget.size == (pic.cells_w, pic.cells_h)
        assert pic.image.size == (pic.cells_w * CELL[0], pic.cells_h * CELL[1])
        # and its colours are the map's: the centre pixel, low point aside, is the
        # height there on the symmetric scale (colormap.diverging_rgb)
        h = m.height_nm
        vmax = float(np.nanmax(np.abs(h)))
        i, j = h.shape[0] // 4, h.shape[1] // 2
        y = int((i + 0.5) * image.shape[0] / h.shape[0])
        x = int((j + 0.5) * pic.map_cells_w * CELL[0] / h.shape[1])
        assert tuple(image[y, x, :3]) == tuple(diverging_rgb(np.array([h[i, j]]), -vmax, vmax)[0])
        # the legend names the mode and states the scale the picture uses
        text = view.render().plain
        assert "picture: Sixel" in text and "Sixel" in bar(app)
        assert f"{format_number(vmax, 1, sign=True)} nm" in text  # the top of the colour bar
        # the next photo, still being measured: its text, and no picture of the last map
        lib.gate = threading.Event()
        await pilot.press("right_square_bracket")
        await pilot.pause()
        assert "Measuring" in view.render().plain and not widget.display
        lib.gate.set()
        await settle(pilot)
        assert widget.display and app.screen.entry.measurement is not m
        # the widget sends Sixel data: a device control string ESC P ... q ... ESC \
        sent = "".join(seg.text for strip in widget.children[0].render_lines(
            Region(0, 0, widget.size.width, widget.size.height)) for seg in strip)
        start = sent.index("\x1bP")
        assert sent.index("q", start) < sent.index("\x1b\\", start)


@sync
async def test_the_fringe_picture_follows_the_aperture_keys(tmp_path):
    app, lib = make_app(tmp_path)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        ManualTimers(app.screen)  # the re-run after an aperture key waits for the test
        await open_view(pilot, "1")
        widget = picture_of(app, "fringes")
        assert widget.display
        view = app.screen.query_one("#fringes-view")
        before = np.asarray(widget.image.convert("RGB")).astype(int)
        whole = view._shown_picture
        # the picture fits the narrow layout at 80x24 and leaves the two summary lines
        assert widget.size.height <= view.size.height - 2
        lines = view.render().plain.splitlines()
        assert lines[-2].startswith("BW-FL-0412.png") and lines[-1].startswith("c 80,60")
        # the photo itself: its grey follows the test photo down the middle column
        photo = fringe_image(seed=len("BW-FL-0412.png"))
        rows = np.arange(whole.grid.rows)
        y = np.clip(((rows + 0.5) * whole.grid.step_px - 0.5).round().astype(int), 0, 119)
        assert np.corrcoef(before[rows, whole.grid.cols // 2 + 9, 0], photo[y, 89])[0, 1] > 0.8
        await pilot.press("x")  # an exclusion at the aperture's centre, now edited
        await settle(pilot)
        after = np.asarray(widget.image.convert("RGB")).astype(int)
        e = app.screen.entry
        assert len(e.exclusions) == 1
        ex = e.exclusions[0]
        g = view._shown_picture.grid
        r = int((ex.center_y_px - g.origin_y_px + 0.5) / g.step_px + 4)
        c = int((ex.center_x_px - 0.5 * ex.radius_px - g.origin_x_px + 0.5) / g.step_px)
        # inside it the photo is mixed half and half with the exclusions' colour, as in the cells
        assert np.abs(after[r, c] - (before[r, c] + np.array(EXCLUDED_RGB)) / 2).max() <= 1
        await pilot.press("z")  # zoom: the aperture fills more of the picture
        await settle(pilot)
        assert view._shown_picture.grid.step_px < whole.grid.step_px
        assert widget.image is view._shown_picture.image


@sync
async def test_a_click_on_the_picture_moves_the_outline_there(tmp_path):
    app, _ = make_app(tmp_path)
    async with app.run_test(size=(120, 40)) as pilot:
        await open_view(pilot, "1")
        view = app.screen.query_one("#fringes-view")
        pic = view._shown_picture
        await pilot.click(view, offset=(10, 8))
        await settle(pilot)
        x, y = pic.photo_xy(10.5, 8.5, CELL)
        a = app.screen.entry.aperture
        assert a is not None
        assert abs(a.center_x_px - x) < 1.0 and abs(a.center_y_px - y) < 1.0


@sync
async def test_characters_mode_and_no_protocol_draw_cells(tmp_path):
    # v down to characters (NO_COLOR's mode): the cells, the picture hidden
    app, _ = make_app(tmp_path, colour="mono")
    async with app.run_test(size=(80, 24)) as pilot:
        await open_view(pilot, "3")
        assert not picture_of(app, "surface").display
        text = app.screen.query_one("#surface-view").render().plain
        assert "picture:" not in text and "H high" in text
        assert "Sixel" not in bar(app)  # the title bar names pictures only where they are
    # no protocol (every terminal that does not answer): no picture widget at all
    (tmp_path / "cells").mkdir()
    app, _ = make_app(tmp_path / "cells", pictures=None)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        assert not app.screen.query(".picture")
        assert "Sixel" not in bar(app)
        assert "▀" in app.screen.query_one("#fringes-view").render().plain
