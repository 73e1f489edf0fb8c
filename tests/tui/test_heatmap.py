"""Tests of the surface-map renderer (tui/render/heatmap.py), apart from any widget."""

from __future__ import annotations

import numpy as np
import pytest
from flatsight.analysis.colormap import NO_DATA_RGB, diverging_rgb
from flatsight.tui.render.heatmap import (
    MONO_RAMP,
    colour_mode_from_env,
    fit_cells,
    legend_lines,
    legend_ticks,
    render_heatmap,
    resample_nanmean,
    rgb_to_xterm256,
    symmetric_range,
)
from rich._palettes import EIGHT_BIT_PALETTE
from rich.color import ColorType


def _cell_colours(text, col):
    """(foreground, background) triplets of the cell at ``col`` of a rendered line."""
    for span in text.spans:
        if span.start <= col < span.end:
            st = span.style
            fg = st.color.get_truecolor() if st.color else None
            bg = st.bgcolor.get_truecolor() if st.bgcolor else None
            return (tuple(fg) if fg else None, tuple(bg) if bg else None)
    return (None, None)


def _disk_map(n=60, *, value=None):
    y, x = np.mgrid[-1 : 1 : n * 1j, -1 : 1 : n * 1j]
    h = 100.0 * x if value is None else np.full((n, n), value)
    h[x**2 + y**2 > 1.0] = np.nan
    return h


# ---- colour depth ------------------------------------------------------------------------
def test_no_color_wins_over_everything():
    # no-color.org: any non-empty NO_COLOR turns colour off (common practice)
    assert colour_mode_from_env({"NO_COLOR": "1", "COLORTERM": "truecolor"}) == "mono"
    assert colour_mode_from_env({"NO_COLOR": "", "COLORTERM": "truecolor"}) == "truecolor"
    assert colour_mode_from_env({"COLORTERM": "24bit"}) == "truecolor"
    assert colour_mode_from_env({"TERM": "xterm-256color"}) == "256"


def _palette_rgb(index: int) -> np.ndarray:
    # rich's own xterm palette (rich._palettes), independent of our cube arithmetic
    return np.array(EIGHT_BIT_PALETTE[index], dtype=float)


def test_xterm_palette_colours_map_to_themselves():
    # every colour of the cube and grey ramp (indices 16..255) is its own nearest colour
    colours = np.array([EIGHT_BIT_PALETTE[i] for i in range(16, 256)], dtype=float)
    got = rgb_to_xterm256(colours)
    back = np.array([_palette_rgb(i) for i in got])
    np.testing.assert_array_equal(back, colours)


def test_xterm_choice_is_the_nearest_by_brute_force():
    # slow obvious reference: try every palette entry with the same red-mean distance
    rng = np.random.default_rng(7)
    colours = rng.integers(0, 256, size=(60, 3)).astype(float)

    def redmean(a, b):
        r = 0.5 * (a[0] + b[0])
        d = a - b
        return (2 + r / 256) * d[0] ** 2 + 4 * d[1] ** 2 + (2 + (255 - r) / 256) * d[2] ** 2

    got = rgb_to_xterm256(colours)
    for c, idx in zip(colours, got, strict=True):
        best = min(redmean(c, _palette_rgb(i)) for i in range(16, 256))
        assert redmean(c, _palette_rgb(int(idx))) == pytest.approx(best)


# ---- resampling and layout --------------------------------------------------------------
def test_block_means_match_a_slow_loop():
    rng = np.random.default_rng(1)
    a = rng.normal(size=(37, 53))
    a[rng.random(a.shape) < 0.2] = np.nan
    a[:10, :12] = np.nan  # a whole block without data
    shape = (9, 11)
    got = resample_nanmean(a, shape)
    for i in range(shape[0]):
        r0, r1 = i * a.shape[0] // shape[0], (i + 1) * a.shape[0] // shape[0]
        for j in range(shape[1]):
            c0, c1 = j * a.shape[1] // shape[1], (j + 1) * a.shape[1] // shape[1]
            block = a[r0:r1, c0:c1]
            if np.isfinite(block).any():
                assert got[i, j] == pytest.approx(np.nanmean(block))
            else:
                assert np.isnan(got[i, j])


def test_cells_keep_the_aspect_ratio_and_stay_inside():
    # a half-block cell holds two square pixels: a square map needs twice as many pixel
    # rows as terminal rows, so a 40 x 20 room holds a 40 x 40 pixel square
    assert fit_cells((100, 100), 40, 20) == (40, 40)
    rows, cols = fit_cells((100, 200), 40, 20)
    assert (rows, cols) == (20, 40)
    rows, cols = fit_cells((300, 100), 60, 10)
    assert rows == 20 and cols == 7 and rows % 2 == 0


# ---- rendering ----------------------------------------------------------------------------
def test_truecolor_cells_carry_the_colour_map():
    h = _disk_map(40)
    hm = render_heatmap(h, width=40, height=20, mode="truecolor", mark_extremes=False)
    assert len(hm.lines) == 20 and all(len(line) == 40 for line in hm.lines)
    grid = resample_nanmean(h, (40, 40))
    vmin, vmax = symmetric_range(h)
    expected = diverging_rgb(grid, vmin, vmax)
    r, c = 10, 20  # a cell well inside the disk
    fg, bg = _cell_colours(hm.lines[r], c)
    assert hm.lines[r].plain[c] == "▀"
    assert fg == tuple(expected[2 * r, c]) and bg == tuple(expected[2 * r + 1, c])
    # outside the disk nothing is drawn
    assert hm.lines[0].plain[0] == " "


def test_masked_pixels_inside_the_aperture_get_the_no_data_colour():
    h = _disk_map(40)
    inside = np.isfinite(h)
    h[18:22, 18:22] = np.nan  # a masked speck in the middle
    hm = render_heatmap(h, width=40, height=20, inside=inside, mark_extremes=False)
    fg, bg = _cell_colours(hm.lines[10], 20)
    assert fg == NO_DATA_RGB and bg == NO_DATA_RGB


def test_high_and_low_points_are_marked_where_they_are():
    h = _disk_map(60, value=0.0)
    h[15, 40] = 50.0  # the high point: row 15, column 40 of a 60 x 60 map
    h[45, 20] = -30.0  # the low point
    hm = render_heatmap(h, width=30, height=15, mode="truecolor")
    # 60 map pixels onto 30 columns and 30 pixel rows (15 terminal rows)
    assert hm.high_cell == (15 * 30 // 60 // 2, 40 * 30 // 60)
    assert hm.low_cell == (45 * 30 // 60 // 2, 20 * 30 // 60)
    assert hm.lines[hm.high_cell[0]].plain[hm.high_cell[1]] == "▲"
    assert hm.lines[hm.low_cell[0]].plain[hm.low_cell[1]] == "▼"
    assert hm.high_nm == 50.0 and hm.low_nm == -30.0


def test_256_colour_mode_uses_palette_colours():
    hm = render_heatmap(_disk_map(30), width=30, height=15, mode="256", mark_extremes=False)
    types = {span.style.color.type for line in hm.lines for span in line.spans if span.style.color}
    assert types == {ColorType.EIGHT_BIT}


def test_mono_mode_is_characters_only_and_ordered_by_height():
    h = _disk_map(40)  # rises linearly from left (-100 nm) to right (+100 nm)
    hm = render_heatmap(h, width=40, height=20, mode="mono")
    assert all(not line.spans for line in hm.lines)  # no colour at all
    middle = hm.lines[10].plain
    chars = [ch for ch in middle if ch not in " HL"]
    ranks = [MONO_RAMP.index(ch) for ch in chars]
    assert ranks == sorted(ranks) and ranks[0] < 2 and ranks[-1] > len(MONO_RAMP) - 3
    allowed = set(MONO_RAMP) | {" ", "H", "L"}
    assert set("".join(line.plain for line in hm.lines)) <= allowed
    assert "H" in "".join(line.plain for line in hm.lines)


def test_all_nan_map_draws_blank_without_error():
    hm = render_heatmap(np.full((10, 10), np.nan), width=10, height=5)
    assert all(line.plain.strip() == "" for line in hm.lines)
    assert hm.high_cell is None


def test_unknown_mode_is_refused():
    with pytest.raises(ValueError, match="colour mode"):
        render_heatmap(_disk_map(10), width=10, height=5, mode="sepia")


# ---- legend -------------------------------------------------------------------------------
def test_legend_values_in_nm_and_waves():
    # lambda/10 at He-Ne 632.8 nm is 63.28 nm (arithmetic; lambda/10 is the trade's usual
    # flatness grade, common practice)
    lines = legend_lines(-63.28, 63.28, wavelength_nm=632.8, n=5, mode="truecolor")
    text = [line.plain for line in lines]
    assert "+63.3 nm" in text[0] and "+0.100 λ" in text[0]
    assert "-63.3 nm" in text[4] and "-0.100 λ" in text[4]
    # zero is written without a sign: neither "+0.0" nor "-0.0" (analysis/formatting.py)
    assert " 0.0 nm" in text[2] and " 0.000 λ" in text[2] and "+0.0" not in text[2]
    assert text[-1].strip() == "no data"
    np.testing.assert_allclose(legend_ticks(-63.28, 63.28, 5), [63.28, 31.64, 0, -31.64, -63.28])


def test_legend_swatches_match_the_map_colours():
    lines = legend_lines(-10.0, 10.0, wavelength_nm=546.07, n=3)
    expected = diverging_rgb(np.array([10.0, 0.0, -10.0]), -10.0, 10.0)
    for line, rgb in zip(lines[:3], expected, strict=True):
        _, bg = _cell_colours(line, 0)
        assert bg == tuple(rgb)


def test_mono_legend_shows_the_ramp_characters():
    lines = legend_lines(-1.0, 1.0, wavelength_nm=632.8, n=len(MONO_RAMP), mode="mono")
    shown = "".join(line.plain.strip()[0] for line in lines[: len(MONO_RAMP)])
    assert shown == MONO_RAMP[::-1]


def test_a_spread_is_drawn_and_keyed_on_the_sequential_map():
    # issue 9, layout: the spread view used the diverging map (white at mid-scale)
    import numpy as np
    from flatsight.analysis.colormap import sequential_rgb
    from flatsight.tui.render.heatmap import legend_lines, render_heatmap

    spread = np.tile(np.linspace(0.0, 8.0, 40), (40, 1))
    hm = render_heatmap(spread, width=20, height=10, mode="truecolor", vmin=0.0, vmax=8.0,
                        mark_extremes=False, sequential=True)
    colours = {span.style.bgcolor.triplet for line in hm.lines for span in line.spans
               if span.style and getattr(span.style, "bgcolor", None)}
    colours |= {span.style.color.triplet for line in hm.lines for span in line.spans
                if span.style and getattr(span.style, "color", None)}
    allowed = {tuple(int(c) for c in rgb) for rgb in sequential_rgb(np.linspace(0, 8, 2001),
                                                                    0.0, 8.0)}
    assert colours and {tuple(c) for c in colours} <= allowed
    legend = legend_lines(0.0, 8.0, wavelength_nm=632.8, n=5, sequential=True)
    top = legend[0].spans[0].style.bgcolor.triplet
    assert tuple(top) == tuple(int(c) for c in sequential_rgb(np.array([8.0]), 0.0, 8.0)[0])
