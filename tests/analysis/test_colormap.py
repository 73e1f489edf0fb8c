"""Tests of the diverging height-map colour map (analysis/colormap.py)."""

from __future__ import annotations

import numpy as np
import pytest
from flatsight.analysis import colormap
from flatsight.analysis.colormap import NO_DATA_RGB, diverging_rgb, lab_to_srgb
from skimage.color import deltaE_ciede2000, lab2rgb, rgb2lab

# Machado, Oliveira & Fernandes, "A physiologically-based model for simulation of color
# vision deficiency", IEEE TVCG 15(6), 1291 (2009): matrices for severity 1.0, applied to
# linear sRGB. Values from memory (each row sums to 1, which the test below checks).
MACHADO_PROTANOPIA = np.array(
    [
        [0.152286, 1.052583, -0.204868],
        [0.114503, 0.786281, 0.099216],
        [-0.003882, -0.048116, 1.051998],
    ]
)
MACHADO_DEUTERANOPIA = np.array(
    [
        [0.367322, 0.860646, -0.227968],
        [0.280085, 0.672501, 0.047413],
        [-0.011820, 0.042940, 0.968881],
    ]
)


def _lab_of(rgb_u8: np.ndarray) -> np.ndarray:
    # skimage.color.rgb2lab: sRGB (IEC 61966-2-1) -> CIELAB D65 (CIE 15:2004)
    return rgb2lab(np.asarray(rgb_u8, dtype=float) / 255.0)


def _simulate(rgb_u8: np.ndarray, matrix: np.ndarray) -> np.ndarray:
    """Machado et al.'s simulation: linearise sRGB, multiply, re-encode (IEC 61966-2-1)."""
    c = np.asarray(rgb_u8, dtype=float) / 255.0
    lin = np.where(c <= 0.04045, c / 12.92, ((c + 0.055) / 1.055) ** 2.4)
    sim = np.clip(lin @ matrix.T, 0.0, 1.0)
    enc = np.where(sim <= 0.0031308, 12.92 * sim, 1.055 * sim ** (1 / 2.4) - 0.055)
    return enc * 255.0  # same scale as the map's 8-bit colours


def test_lab_to_srgb_matches_scikit_image():
    # Reference: skimage.color.lab2rgb (D65, sRGB) on colours inside the gamut.
    rng = np.random.default_rng(3)
    lab = np.stack(
        [rng.uniform(30, 90, 200), rng.uniform(-20, 20, 200), rng.uniform(-20, 20, 200)], axis=-1
    )
    ours = lab_to_srgb(lab)
    inside = np.all((ours >= 0) & (ours <= 1), axis=-1)
    assert inside.sum() > 150
    np.testing.assert_allclose(ours[inside], lab2rgb(lab[inside]), atol=2e-4)


def test_whole_map_is_inside_srgb_gamut():
    # no clipping, or the designed lightness steps would be bent at the ends
    raw = lab_to_srgb(colormap.LAB_TABLE)
    assert raw.min() >= 0.0 and raw.max() <= 1.0


def test_lightness_falls_monotonically_and_symmetrically_from_zero():
    t = np.linspace(0.0, 1.0, 65)
    highs = _lab_of(diverging_rgb(t, -1.0, 1.0))[..., 0]
    lows = _lab_of(diverging_rgb(-t, -1.0, 1.0))[..., 0]
    # monotone on each side (8-bit rounding allows a tiny wobble)
    assert np.all(np.diff(highs) < 0.3)
    assert np.all(np.diff(lows) < 0.3)
    assert highs[0] - highs[-1] > 50 and lows[0] - lows[-1] > 50
    # symmetric lightness: a hill and a valley of equal size look equally strong
    np.testing.assert_allclose(highs, lows, atol=1.0)


def test_steps_are_perceptually_even_on_each_side():
    # CIEDE2000 between neighbours (skimage.color.deltaE_ciede2000, CIE 142-2001) should be
    # nearly constant along each side for a perceptually uniform map (common practice).
    for sign in (1.0, -1.0):
        lab = _lab_of(diverging_rgb(sign * np.linspace(0, 1, 17), -1.0, 1.0))
        steps = deltaE_ciede2000(lab[:-1], lab[1:])
        assert steps.min() > 0.6 * steps.mean(), steps
        assert steps.max() < 1.5 * steps.mean(), steps


def test_machado_matrices_preserve_white():
    # a dichromat still sees white as white: each row sums to one (Machado et al. 2009)
    for m in (MACHADO_PROTANOPIA, MACHADO_DEUTERANOPIA):
        np.testing.assert_allclose(m.sum(axis=1), 1.0, atol=2e-6)


@pytest.mark.parametrize(
    "matrix", [MACHADO_PROTANOPIA, MACHADO_DEUTERANOPIA], ids=["protanopia", "deuteranopia"]
)
def test_highs_and_lows_stay_apart_under_simulated_colour_blindness(matrix):
    t = np.linspace(0.25, 1.0, 13)
    highs = _lab_of(_simulate(diverging_rgb(t, -1.0, 1.0), matrix))
    lows = _lab_of(_simulate(diverging_rgb(-t, -1.0, 1.0), matrix))
    # equal lightness by design, so the difference must come from hue: well above the
    # ~2-3 units of a just-noticeable difference (common practice)
    d = deltaE_ciede2000(highs, lows)
    assert d.min() > 10.0, d
    # a dichromat still sees lightness order on each side
    full = np.linspace(0, 1, 33)
    for sign in (1.0, -1.0):
        L = _lab_of(_simulate(diverging_rgb(sign * full, -1.0, 1.0), matrix))[..., 0]
        assert np.all(np.diff(L) < 0.5)


def test_neighbouring_levels_are_distinguishable_for_dichromats():
    # eight levels across the range, as a legend shows them: every neighbouring pair is
    # at least a few CIEDE2000 units apart after simulation
    levels = np.linspace(-1, 1, 9)
    for matrix in (MACHADO_PROTANOPIA, MACHADO_DEUTERANOPIA):
        lab = _lab_of(_simulate(diverging_rgb(levels, -1.0, 1.0), matrix))
        assert deltaE_ciede2000(lab[:-1], lab[1:]).min() > 5.0


def test_mapping_range_clipping_and_no_data():
    v = np.array([[-3.0, -1.0, 0.0], [1.0, 3.0, np.nan]])
    out = diverging_rgb(v, -1.0, 1.0)
    assert out.shape == (2, 3, 3) and out.dtype == np.uint8
    np.testing.assert_array_equal(out[0, 0], out[0, 1])  # clipped below
    np.testing.assert_array_equal(out[1, 0], out[1, 1])  # clipped above
    np.testing.assert_array_equal(out[0, 2], colormap.RGB_TABLE[colormap.TABLE_SIZE // 2])
    np.testing.assert_array_equal(out[1, 2], NO_DATA_RGB)
    # the no-data colour is not one the map uses for heights
    assert not np.any(np.all(colormap.RGB_TABLE == np.array(NO_DATA_RGB), axis=1))
    assert np.isnan(v[1, 2])  # input untouched


def test_zero_sits_in_the_middle_of_an_asymmetric_range():
    out = diverging_rgb(np.array([5.0]), 0.0, 10.0)
    np.testing.assert_array_equal(out[0], colormap.RGB_TABLE[colormap.TABLE_SIZE // 2])


def test_bad_range_is_refused():
    with pytest.raises(ValueError, match="vmin < vmax"):
        diverging_rgb(np.zeros(3), 1.0, 1.0)


def test_the_sequential_map_darkens_steadily_from_zero_to_the_top():
    # issue 9, layout: the spread (a non-negative std. dev.) was drawn on the diverging
    # map, white at mid-scale, as if half of it were negative. A sequential map: one
    # hue, CIELAB lightness falling monotonically (common practice for magnitudes; from
    # memory: Moreland, "Why we use bad color maps", 2016)
    from flatsight.analysis.colormap import sequential_rgb

    values = np.linspace(0.0, 10.0, 41)
    rgb = sequential_rgb(values, 0.0, 10.0).astype(float)
    # relative luminance by the sRGB/Rec. 709 weights (IEC 61966-2-1), on the encoded
    # values: enough to order them
    luma = rgb @ np.array([0.2126, 0.7152, 0.0722])
    assert np.all(np.diff(luma) < 0)
    assert luma[0] > 200 and luma[-1] < 120
    assert tuple(sequential_rgb(np.array([np.nan]), 0.0, 1.0)[0]) == NO_DATA_RGB
