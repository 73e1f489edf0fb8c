"""Tests of the fringe-photo and spectrum renderers (tui/render/photo.py)."""

from __future__ import annotations

import numpy as np
import pytest
from flatsight.analysis.aperture import Aperture, Exclusion
from flatsight.tui.render.photo import (
    EXCLUDED_RGB,
    GREY_RAMP,
    OUTLINE_RGB,
    SELECTED_RGB,
    render_photo,
    render_spectrum,
)


def _colours(line, col):
    for span in line.spans:
        if span.start <= col < span.end:
            st = span.style
            return (
                tuple(st.color.get_truecolor()) if st.color else None,
                tuple(st.bgcolor.get_truecolor()) if st.bgcolor else None,
            )
    return (None, None)


def _photo(shape=(200, 200)):
    y, x = np.mgrid[0 : shape[0], 0 : shape[1]].astype(float)
    return 0.5 + 0.4 * np.cos(2 * np.pi * y / 10.0)  # horizontal fringes, period 10 px


def test_grid_keeps_square_pixels_and_fits_the_room():
    lines, grid = render_photo(_photo((200, 400)), width=40, height=20)
    # 400 px across 40 columns: 10 photo px per grid pixel, 20 grid rows = 10 lines
    assert grid.step_px == 10.0 and grid.cols == 40 and grid.rows == 20
    assert len(lines) == 10 and all(len(line) == 40 for line in lines)


def test_half_blocks_carry_the_photo_grey_levels():
    img = np.zeros((40, 40))
    img[:20] = 1.0  # upper half bright, lower half dark
    lines, grid = render_photo(img, width=20, height=10, mode="truecolor")
    fg_top, _ = _colours(lines[0], 5)
    _, bg_bottom = _colours(lines[-1], 5)
    assert lines[0].plain[5] == "▀"
    assert fg_top == (255, 255, 255) and bg_bottom == (0, 0, 0)


def test_aperture_outline_sits_on_the_circle():
    ap = Aperture(99.5, 99.5, 60.0)
    lines, grid = render_photo(_photo(), width=40, height=20, aperture=ap, selected=None)
    # centre of each grid pixel in photo px (CellGrid.source_xy); outline = within half a
    # grid pixel of the radius (slow reference: test every pixel directly)
    x, y = grid.source_xy()
    d = np.hypot(x - ap.center_x_px, y - ap.center_y_px)
    ring = np.abs(d - ap.radius_px) <= grid.step_px / 2
    assert ring.any()
    for r, c in zip(*np.nonzero(ring), strict=True):
        fg, bg = _colours(lines[r // 2], c)
        if (r // 2, c) == grid.cell_of(ap.center_x_px, ap.center_y_px):
            continue
        assert (fg if r % 2 == 0 else bg) == OUTLINE_RGB


def test_selected_outline_and_exclusions_have_their_own_colours():
    ex = Exclusion(99.5, 99.5, 20.0)
    ap = Aperture(99.5, 99.5, 60.0, (ex,))
    lines, grid = render_photo(
        _photo(), width=40, height=20, aperture=ap, selected=0, mode="truecolor"
    )
    x, y = grid.source_xy()
    d = np.hypot(x - 99.5, y - 99.5)
    colours = {
        (_colours(lines[r // 2], c)[r % 2])
        for r, c in zip(*np.nonzero(np.abs(d - 20.0) <= grid.step_px / 2), strict=True)
    }
    assert SELECTED_RGB in colours  # exclusion 0 is being edited
    outer = {
        (_colours(lines[r // 2], c)[r % 2])
        for r, c in zip(*np.nonzero(np.abs(d - 60.0) <= grid.step_px / 2), strict=True)
    }
    assert outer == {OUTLINE_RGB}
    # inside the exclusion the photo is tinted toward the exclusion colour
    fg, _ = _colours(lines[10], 21)
    assert fg != SELECTED_RGB and abs(fg[0] - fg[1]) > 40 and fg[0] > fg[1]
    assert EXCLUDED_RGB[0] > EXCLUDED_RGB[1]


def test_outside_the_aperture_is_dimmed():
    img = np.full((100, 100), 0.5)
    img[:, :5] = 0.0
    img[:, -5:] = 1.0  # the percentile stretch then keeps 0.5 mid-grey
    ap = Aperture(49.5, 49.5, 30.0)
    lines, _ = render_photo(img, width=20, height=10, aperture=ap)
    inside, _ = _colours(lines[5], 7)  # (5, 10) holds the centre mark
    outside, _ = _colours(lines[0], 10)
    assert inside[0] == pytest.approx(127, abs=2)
    assert outside[0] < 0.6 * inside[0]


def test_mono_photo_uses_the_grey_ramp_and_marks_the_outline():
    ap = Aperture(99.5, 99.5, 60.0)
    lines, _ = render_photo(_photo(), width=40, height=20, aperture=ap, selected=-1, mode="mono")
    text = "".join(line.plain for line in lines)
    assert set(text) <= set(GREY_RAMP) | {"@", "o", "+"}
    assert "@" in text and "+" in text  # the edited outline and its centre


def test_spectrum_marks_the_carrier_and_the_background():
    n = 65
    yy, xx = np.mgrid[0:n, 0:n]
    carrier = (32.0, 48.0)  # row, column: a carrier to the right of the centre
    mag = np.exp(-((yy - 32) ** 2 + (xx - 32) ** 2) / 8.0) + np.exp(
        -((yy - carrier[0]) ** 2 + (xx - carrier[1]) ** 2) / 8.0
    )
    lines, grid = render_spectrum(
        np.log1p(100 * mag),
        carrier_rc=carrier,
        window_radius=8.0,
        dc_radius=5.0,
        width=65,
        height=33,
    )
    assert grid.step_px == 1.0
    row, col = grid.cell_of(carrier[1], carrier[0])
    assert lines[row].plain[col] == "×"
    row, col = grid.cell_of(32.0, 32.0)
    assert lines[row].plain[col] == "o"


def test_spectrum_zoom_keeps_both_sidebands_and_drops_the_far_corners():
    n = 129
    mag = np.ones((n, n))
    lines, grid = render_spectrum(
        mag, carrier_rc=(64.0, 80.0), window_radius=6.0, dc_radius=4.0, width=200, height=100
    )
    # reach = 16 (carrier offset) + 2 * 6 (window) = 28 bins each side of the centre
    assert (grid.origin_x_px, grid.origin_y_px) == (36.0, 36.0)
    assert grid.cols * grid.step_px == pytest.approx(57.0)  # bins 36..92 drawn
    for x, y in ((80.0, 64.0), (48.0, 64.0)):  # the carrier and its mirror
        row, col = grid.cell_of(x, y)
        assert 0 <= row < len(lines) and 0 <= col < grid.cols


def test_renderers_do_not_touch_their_input():
    img = _photo()
    before = img.copy()
    render_photo(img, width=30, height=15, aperture=Aperture(99.5, 99.5, 50.0))
    np.testing.assert_array_equal(img, before)


def _tilted_fringes(period_px: float, shape=(960, 1280)) -> np.ndarray:
    y, x = np.mgrid[0 : shape[0], 0 : shape[1]].astype(float)
    angle = np.deg2rad(80.0)
    return 0.5 + 0.35 * np.cos(2 * np.pi * (x * np.cos(angle) + y * np.sin(angle)) / period_px)


@pytest.mark.parametrize("cells_a_period", [1.2, 1.6, 2.0, 2.5])
def test_fringes_too_fine_for_the_cells_turn_grey_not_into_a_checkerboard(cells_a_period):
    # issue 9: at the whole photo the fringes aliased into a checkerboard. A pattern of
    # fewer than two samples a period cannot be shown (the sampling theorem, common
    # practice); drawn anyway it comes back as a false coarser one, and slanted fringes
    # of little more than two read as a checkerboard. The plain block mean kept 20 to
    # 70 % of their contrast there (measured); the blur first leaves under a tenth.
    from flatsight.tui.render.photo import downsample_photo

    shape = (36, 48)
    step = 960 / 36
    photo = _tilted_fringes(cells_a_period * step)
    grey = downsample_photo(photo, shape)
    contrast = grey.std() / photo.std()
    assert contrast < 0.1, contrast


def test_fringes_the_cells_can_show_stay_visible():
    from flatsight.tui.render.photo import downsample_photo

    step = 960 / 36
    photo = _tilted_fringes(8.0 * step)
    assert downsample_photo(photo, (36, 48)).std() / photo.std() > 0.5


def test_downsampling_keeps_the_mean_grey():
    # an area average keeps the mean: the photo's overall brightness is not changed
    from flatsight.tui.render.photo import downsample_photo

    photo = np.random.default_rng(0).uniform(0.2, 0.8, (400, 600))
    assert downsample_photo(photo, (20, 30)).mean() == pytest.approx(photo.mean(), abs=0.01)


def _status_measurement(masked: float = 0.031, fringes: float = 16.0):
    from types import SimpleNamespace

    q = SimpleNamespace(sign="carrier", masked_fraction=masked, carrier_fringes=fringes,
                        per_photo=())
    return SimpleNamespace(quality=q, settings=SimpleNamespace(ring_sign=None))


@pytest.mark.parametrize("width", [200, 60, 46, 40, 32, 24])
def test_the_status_line_under_the_photo_drops_whole_pieces_to_fit(width):
    """The line under a narrow fringe view never cuts a label from its value: at any
    width the masked share keeps its number, and pieces go whole."""
    from flatsight.analysis.shapes import CutCircle
    from flatsight.tui.widgets.fringe_view import _status_line

    ap = Aperture.of_shape(CutCircle(478.0, 362.0, 579.0, ((90.0, 520.0),)))
    text = _status_line(ap, _status_measurement(), width).plain
    full = _status_line(ap, _status_measurement(), 10**6).plain
    assert full.startswith("c 478,362  circle 1158 px, 1 flat  0 excl  16 fr  masked 3 %")
    if width >= len(full):
        assert text == full
    elif width >= len("circle with flats  masked 3 %"):
        assert len(text) <= width
        assert text.endswith("masked 3 %")
        assert "0 excl" not in text  # no exclusion: the count goes first
    else:  # too narrow for even the shortest form: the widget cuts it, nothing else
        assert text == "circle with flats  masked 3 %"


def test_the_status_line_keeps_a_circle_with_exclusions_whole_where_it_fits():
    from flatsight.tui.widgets.fringe_view import _status_line

    ap = Aperture(400.0, 300.0, 250.0, (Exclusion(410.0, 310.0, 12.0),))
    text = _status_line(ap, _status_measurement(0.052, 21.0), 60).plain
    assert text == "c 400,300  r 250 px  1 excl  21 fr  masked 5 %"
    # narrower: the centre goes before the exclusion count that is not zero
    assert _status_line(ap, _status_measurement(0.052, 21.0), 36).plain == (
        "r 250 px  1 excl  21 fr  masked 5 %")
