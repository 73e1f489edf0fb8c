"""The photo and the map as pictures: the same colours, outlines and scale as the cells."""

from __future__ import annotations

import numpy as np
import pytest
from flatsight.analysis.aperture import Aperture, Exclusion
from flatsight.analysis.colormap import NO_DATA_RGB, diverging_rgb
from flatsight.tui.render.heatmap import legend_ticks
from flatsight.tui.render.photo import EXCLUDED_RGB, OUTLINE_RGB, SELECTED_RGB
from flatsight.tui.render.picture import (
    BAR_CELLS,
    BAR_GAP_CELLS,
    fit_picture,
    map_cells,
    map_picture,
    photo_picture,
)

CELL = (8, 16)  # a terminal cell's pixels (width, height)


def bowl(n: int = 41) -> tuple[np.ndarray, np.ndarray]:
    """Power plus a little astigmatism on a disk, NaN outside and in one masked speck."""
    y, x = np.mgrid[-1 : 1 : n * 1j, -1 : 1 : n * 1j]
    inside = x**2 + y**2 <= 1.0
    h = np.where(inside, 50.0 * (2 * (x**2 + y**2) - 1) + 8.0 * (x**2 - y**2), np.nan)
    h[(x - 0.3) ** 2 + (y + 0.2) ** 2 < 0.01] = np.nan
    return h, inside


def rgba(picture) -> np.ndarray:
    return np.asarray(picture.image.convert("RGBA"))


def test_fit_keeps_the_aspect_ratio_and_stays_in_the_room():
    cols, rows, cells_w, cells_h = fit_picture((300, 400), 30, 10, CELL)
    assert rows == 160 and cells_h == 10  # the height limits: 10 cells of 16 px
    assert abs(cols / rows - 400 / 300) < 0.01
    assert cells_w == -(-cols // CELL[0]) <= 30
    assert fit_picture((300, 400), 0, 10, CELL) == (0, 0, 0, 0)


def test_the_map_picture_fills_whole_cells_and_the_map_has_the_cells_colours():
    h, inside = bowl()
    pic = map_picture(h, width=30, height=12, cell_px=CELL, n_ticks=7, inside=inside)
    px = rgba(pic)
    assert px.shape == (pic.cells_h * CELL[1], pic.cells_w * CELL[0], 4)
    assert pic.cells_w == pic.map_cells_w + BAR_GAP_CELLS + BAR_CELLS
    assert (pic.vmin_nm, pic.vmax_nm) == (-np.nanmax(np.abs(h)), np.nanmax(np.abs(h)))
    # reference, pixel by pixel: the nearest map pixel's colour on the same scale
    # (colormap.diverging_rgb, as the half-block cells and the certificate use it)
    cols, rows, _, _ = fit_picture(h.shape, pic.map_cells_w, 12, CELL)
    i_hi = np.unravel_index(np.nanargmax(h), h.shape)
    i_lo = np.unravel_index(np.nanargmin(h), h.shape)
    checked = 0
    for r in range(0, rows, 3):
        for c in range(0, cols, 3):
            i, j = int((r + 0.5) * h.shape[0] / rows), int((c + 0.5) * h.shape[1] / cols)
            near_mark = any(abs(i - a) + abs(j - b) <= 4 for a, b in (i_hi, i_lo))
            if near_mark:
                continue  # the high and low triangles are drawn there
            if np.isfinite(h[i, j]):
                want = tuple(diverging_rgb(np.array([h[i, j]]), pic.vmin_nm, pic.vmax_nm)[0])
                assert tuple(px[r, c, :3]) == want and px[r, c, 3] == 255, (r, c)
                checked += 1
            elif not inside[i, j]:
                assert px[r, c, 3] == 0  # outside the aperture: the terminal's background
    assert checked > 200
    # the masked speck inside the aperture has the no-data colour, as in the cells
    r = int((0.5 - 0.1) * rows)  # y = -0.2 (row 0 is y = -1)
    c = int((0.5 + 0.15) * cols)  # x = +0.3
    assert tuple(px[r, c, :3]) == NO_DATA_RGB and px[r, c, 3] == 255


def test_the_colour_bar_shows_each_legend_value_on_its_line():
    h, inside = bowl()
    n = 5
    pic = map_picture(h, width=30, height=12, cell_px=CELL, n_ticks=n, inside=inside)
    px = rgba(pic)
    x = (pic.map_cells_w + BAR_GAP_CELLS) * CELL[0] + CELL[0]  # inside the bar
    for line, value in enumerate(legend_ticks(pic.vmin_nm, pic.vmax_nm, n)):
        y = line * CELL[1] + CELL[1] // 2  # the middle of the legend's line
        want = diverging_rgb(np.array([value]), pic.vmin_nm, pic.vmax_nm)[0].astype(int)
        # the middle of a line is half a pixel from the tick: one colour step at most
        assert np.abs(px[y, x, :3].astype(int) - want).max() <= 6, line
    y = n * CELL[1] + CELL[1] // 2  # the line after the values: "no data"
    assert tuple(px[y, x, :3]) == NO_DATA_RGB
    assert px[y + CELL[1], x, 3] == 0  # nothing further down


def test_map_cells_say_what_the_picture_fills():
    h, inside = bowl()
    pic = map_picture(h, width=40, height=9, cell_px=CELL, n_ticks=3, inside=inside)
    assert map_cells(h.shape, 40, 9, CELL) == (pic.cells_w, pic.cells_h)
    assert map_picture(np.full((8, 8), np.nan), width=40, height=9, cell_px=CELL,
                       n_ticks=3) is None


def fringes(shape=(120, 160)) -> np.ndarray:
    y, x = np.mgrid[0 : shape[0], 0 : shape[1]].astype(float)
    return 0.5 + 0.4 * np.cos(2 * np.pi * y / 12.0)


APERTURE = Aperture(80.0, 60.0, 45.0, exclusions=(Exclusion(95.0, 50.0, 8.0),))


def at(pic, x: float, y: float) -> tuple[int, int]:
    """The picture pixel (row, col) over photo point (x, y)."""
    g = pic.grid
    return (int(round((y - g.origin_y_px + 0.5) / g.step_px - 0.5)),
            int(round((x - g.origin_x_px + 0.5) / g.step_px - 0.5)))


@pytest.mark.parametrize("selected", [-1, 0])
def test_the_photo_picture_draws_the_outlines_and_the_exclusion(selected):
    pic = photo_picture(fringes(), width=40, height=10, cell_px=CELL, aperture=APERTURE,
                        selected=selected)
    px = rgba(pic).astype(int)
    assert px.shape == (pic.cells_h * CELL[1], pic.cells_w * CELL[0], 4)
    aperture_colour = SELECTED_RGB if selected == -1 else OUTLINE_RGB
    exclusion_colour = SELECTED_RGB if selected == 0 else EXCLUDED_RGB
    assert tuple(px[at(pic, 80.0 - 45.0, 60.0)][:3]) == aperture_colour  # its left edge
    assert tuple(px[at(pic, 80.0, 60.0 + 45.0)][:3]) == aperture_colour  # its bottom
    assert tuple(px[at(pic, 95.0 + 8.0, 50.0)][:3]) == exclusion_colour
    r, c = at(pic, 92.0, 53.0)  # inside the exclusion, off its cross: tinted toward its colour
    assert px[r, c, 0] > px[r, c, 1] + 40
    # outside the aperture the photo is dimmed, as in the cells
    left = px[pic.grid.rows // 2 - 6 : pic.grid.rows // 2 + 6, :5, :3].max()
    centre = px[at(pic, 60.0, 60.0)[0] - 6 : at(pic, 60.0, 60.0)[0] + 6, at(pic, 60.0, 60.0)[1],
                :3].max()
    assert left < 0.6 * centre


def test_the_photo_picture_shows_the_fringes_where_they_are():
    photo = fringes()
    pic = photo_picture(photo, width=40, height=10, cell_px=CELL)
    px = rgba(pic)[..., 0].astype(float)
    # down the middle column, the picture follows the photo's own grey levels
    col = pic.grid.cols // 2
    rows = np.arange(pic.grid.rows)
    y = np.clip(((rows + 0.5) * pic.grid.step_px - 0.5).round().astype(int), 0, 119)
    source = photo[y, 80]
    assert np.corrcoef(px[rows, col], source)[0, 1] > 0.9
