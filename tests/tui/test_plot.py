"""Tests of the terminal line plot and the diameter profiles (tui/render/plot.py)."""

from __future__ import annotations

import numpy as np
import pytest
from flatsight.tui.render.plot import Series, braille_char, line_plot, nice_ticks, profile

# Unicode braille patterns (U+2800 block): dot k (1..8) is bit k-1; dots 1-3 and 7 run
# down the left column, 4-6 and 8 down the right one (The Unicode Standard, ch. 22).
_BITS = {(0, 0): 0, (0, 1): 1, (0, 2): 2, (1, 0): 3, (1, 1): 4, (1, 2): 5, (0, 3): 6, (1, 3): 7}


def _dots(ch: str) -> set[tuple[int, int]]:
    code = ord(ch) - 0x2800
    return {d for d, bit in _BITS.items() if code >> bit & 1} if 0 <= code < 256 else set()


def test_braille_code_points():
    assert braille_char(set()) == "\u2800"
    assert braille_char({(0, 0)}) == "⠁"  # dot 1
    assert braille_char({(0, 0), (0, 1), (0, 2), (1, 0), (1, 1), (1, 2)}) == "⠿"  # dots 1-6
    assert braille_char(set(_BITS)) == "⣿"  # all eight
    assert braille_char({(0, 3)}) == "⡀" and braille_char({(1, 3)}) == "⢀"  # dots 7, 8


def test_nice_ticks_are_round_and_cover_the_range():
    t = nice_ticks(-23.0, 37.0, 4)
    steps = np.diff(t)
    assert np.allclose(steps, steps[0]) and steps[0] in (10, 20, 25, 50)
    assert t[0] >= -23.0 and t[-1] <= 37.0 and 0.0 in t
    assert list(nice_ticks(0.0, 1.0, 5)) == pytest.approx([0, 0.2, 0.4, 0.6, 0.8, 1.0])


def test_profile_of_a_plane_follows_its_slope():
    # h = 3 * (column - 50): a plane rising to the right; the 0 degree diameter crosses it
    # with slope 3 nm per pixel, the 90 degree one runs along a contour
    h = np.tile(3.0 * (np.arange(101) - 50.0), (101, 1))
    s, along = profile(h, centre_rc=(50.0, 50.0), radius=40.0, angle_deg=0.0, n=81)
    np.testing.assert_allclose(along, 3.0 * np.rint(s * 40.0), atol=1e-9)
    _, across = profile(h, centre_rc=(50.0, 50.0), radius=40.0, angle_deg=90.0, n=81)
    np.testing.assert_allclose(across, 0.0, atol=1e-9)


def test_profile_angle_runs_counter_clockwise_with_rows_growing_down():
    # at 90 degrees the profile starts at the bottom (large rows) and ends at the top
    h = np.tile(np.arange(101.0)[:, None], (1, 101))  # height = row number
    s, v = profile(h, centre_rc=(50.0, 50.0), radius=40.0, angle_deg=90.0, n=5)
    assert v[0] == 90.0 and v[-1] == 10.0


def test_profile_keeps_nan_where_nothing_was_measured():
    h = np.ones((50, 50))
    h[:, :10] = np.nan
    _, v = profile(h, centre_rc=(25.0, 25.0), radius=24.0, angle_deg=0.0, n=49)
    assert np.isnan(v[0]) and np.isfinite(v[-1])


def _plot_dots(lines, rgb=None, margin=9):
    """(x, y) of every raised dot in the plot area (y growing down), of colour ``rgb``."""
    pts = []
    for r, line in enumerate(lines[:-2]):
        for c, ch in enumerate(line.plain[margin:]):
            if rgb is not None:
                styles = [sp.style for sp in line.spans if sp.start <= margin + c < sp.end]
                if (
                    not styles
                    or styles[-1].color is None
                    or tuple(styles[-1].color.get_truecolor()) != rgb
                ):
                    continue
            for dx, dy in _dots(ch):
                pts.append((2 * c + dx, 4 * r + dy))
    return pts


def test_a_rising_line_is_drawn_rising():
    x = np.linspace(-1, 1, 50)
    lines = line_plot([Series("a", x, 10.0 + 5.0 * x, (255, 0, 0))], width=40, height=12)
    assert len(lines) == 12 and all(len(line) == 40 for line in lines)
    pts = _plot_dots(lines, (255, 0, 0))  # the series only, not the dotted zero line
    by_x = {}
    for px, py in pts:
        by_x.setdefault(px, []).append(py)
    xs = sorted(by_x)
    tops = [min(by_x[k]) for k in xs]
    # screen y shrinks as the value grows
    assert tops[0] > tops[-1]
    # every plot column has a dot: the line is continuous
    assert len(xs) == 2 * (40 - 9)


def test_nan_gap_leaves_columns_empty():
    x = np.linspace(0, 1, 100)
    y = np.ones(100)
    y[40:60] = np.nan
    lines = line_plot([Series("a", x, y + 5, (0, 255, 0))], width=40, height=8)
    columns = sorted({px for px, py in _plot_dots(lines, (0, 255, 0))})
    gaps = [b - a for a, b in zip(columns, columns[1:], strict=False)]
    assert max(gaps) > 6  # a visible hole where the profile was masked


def test_tick_labels_and_axis():
    x = np.linspace(-50, 50, 20)
    lines = line_plot(
        [Series("a", x, x, (0, 0, 255))], width=50, height=10, y_label="nm", x_label="mm"
    )
    assert lines[0].plain.startswith("     nm")
    assert "└" in lines[-2].plain
    assert "-50" in lines[-1].plain and "50" in lines[-1].plain and "mm" in lines[-1].plain
    assert any(line.plain.strip().startswith("0 ┤") for line in lines)


def test_too_small_or_empty():
    x = np.linspace(0, 1, 5)
    assert line_plot([Series("a", x, x, (1, 2, 3))], width=8, height=3)[0].plain == "(too small)"
    empty = line_plot([Series("a", x, np.full(5, np.nan), (1, 2, 3))], width=40, height=10)
    assert empty[0].plain == "no data to plot"
