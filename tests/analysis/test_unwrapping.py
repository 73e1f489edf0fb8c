"""Tests of phase unwrapping and the phase-to-height conversion (analysis/unwrapping.py)."""

from __future__ import annotations

import numpy as np
import pytest
from flatsight.analysis.synthetic import SyntheticSurface
from flatsight.analysis.unwrapping import phase_to_height_nm, unwrap
from skimage.restoration import unwrap_phase


def wrap(phase: np.ndarray) -> np.ndarray:
    return np.angle(np.exp(1j * phase))


def smooth_phase(shape=(120, 140)) -> np.ndarray:
    yy, xx = np.mgrid[0 : shape[0], 0 : shape[1]].astype(float)
    return 0.21 * xx - 0.13 * yy + 6.0 * np.exp(-((xx - 70) ** 2 + (yy - 50) ** 2) / 900.0)


def same_up_to_2pi_offset(a: np.ndarray, b: np.ndarray, sel: np.ndarray) -> float:
    d = (a - b)[sel]
    k = np.round(np.mean(d) / (2 * np.pi))
    return float(np.max(np.abs(d - 2 * np.pi * k)))


# --- height ------------------------------------------------------------------------------


def test_one_fringe_is_half_a_wavelength_of_height():
    # a phase of 2 pi (one fringe) is lambda/2 of height in double pass (D. Malacara, ed.,
    # Optical Shop Testing, 3rd ed., Wiley, 2007, ch. 1, from memory): 316.4 nm at
    # 632.8 nm, 273.035 nm at 546.07 nm
    assert phase_to_height_nm(np.array(2 * np.pi), 632.8) == pytest.approx(316.4)
    assert phase_to_height_nm(np.array(2 * np.pi), 546.07) == pytest.approx(273.035)
    # lambda/4 of height is a phase of pi: a bright fringe turns dark
    assert phase_to_height_nm(np.array(np.pi), 632.8) == pytest.approx(632.8 / 4)


def test_invert_flips_the_sign():
    phase = np.linspace(-3, 3, 7)
    np.testing.assert_allclose(phase_to_height_nm(phase, 589.3, invert=True),
                               -phase_to_height_nm(phase, 589.3))


def test_raising_the_mirror_by_a_quarter_wave_turns_bright_to_dark(make_clean_photo):
    # a mirror moved by lambda/4 changes the path by lambda/2 and turns a bright fringe
    # dark (double pass; Malacara, Optical Shop Testing, 2007, from memory). Two clean
    # photos, the second of a flat raised by lambda/4 everywhere (Noll piston = height,
    # Noll 1976).
    lam = 632.8
    flat = make_clean_photo(SyntheticSurface({}), wavelength_nm=lam)
    raised = make_clean_photo(SyntheticSurface({1: lam / 4}), wavelength_nm=lam)
    ap = flat.aperture
    yy, xx = np.mgrid[0 : flat.image.shape[0], 0 : flat.image.shape[1]]
    inner = np.hypot(xx - ap.center_x_px, yy - ap.center_y_px) < 0.5 * ap.radius_px
    top, bottom = flat.image[inner].max(), flat.image[inner].min()
    bright = inner & (flat.image > top - 0.02 * (top - bottom))
    dark = inner & (flat.image < bottom + 0.02 * (top - bottom))
    assert bright.sum() > 100 and dark.sum() > 100
    # the bright fringes of the first photo are dark in the second, and the other way
    assert np.all(raised.image[bright] < bottom + 0.05 * (top - bottom))
    assert np.all(raised.image[dark] > top - 0.05 * (top - bottom))
    # and the height Flatsight gives that phase step is the quarter wave
    assert phase_to_height_nm(np.array(np.pi), lam) == pytest.approx(lam / 4)


@pytest.mark.slow
def test_flatsight_sees_the_quarter_wave_step(make_clean_photo):
    # the same fact end to end (common practice): raising the whole part by lambda/4 moves
    # the measured piston by lambda/4, known only up to whole fringes (lambda/2) because
    # a single photo cannot count fringes it does not see
    from flatsight.analysis.pipeline import MeasureSettings, measure

    lam = 632.8
    pistons = []
    for raise_nm in (0.0, lam / 4):
        photo = make_clean_photo(SyntheticSurface({1: raise_nm, 4: 10.0}), wavelength_nm=lam)
        m = measure(photo.image, MeasureSettings(wavelength_nm=lam, aperture=photo.aperture))
        pistons.append(m.zernike.coefficients_nm[0])
        assert m.zernike.coefficients_nm[3] == pytest.approx(10.0, abs=1.0)
    step = (pistons[1] - pistons[0]) % (lam / 2)
    assert step == pytest.approx(lam / 4, abs=2.0)


# --- unwrapping --------------------------------------------------------------------------


def test_matches_np_unwrap_on_a_ramp():
    # reference: numpy.unwrap along each row of a 1-D ramp repeated down the rows
    ramp = np.linspace(0.0, 40.0, 300)
    wrapped = np.tile(wrap(ramp), (8, 1))
    out = unwrap(wrapped, np.ones(wrapped.shape, bool))
    for row in out:
        ref = np.unwrap(wrapped[0])
        assert same_up_to_2pi_offset(row, ref, np.ones(ref.shape, bool)) < 1e-9
        assert same_up_to_2pi_offset(row, ramp, np.ones(ramp.shape, bool)) < 1e-9


def test_matches_skimage_over_a_disk():
    # reference: skimage.restoration.unwrap_phase (Herraez et al. 2002) called directly
    phase = smooth_phase()
    yy, xx = np.mgrid[0 : phase.shape[0], 0 : phase.shape[1]]
    valid = np.hypot(xx - 70, yy - 60) < 55
    wrapped = wrap(phase)
    before = wrapped.copy()
    out = unwrap(wrapped, valid)
    ref = np.ma.filled(unwrap_phase(np.ma.masked_array(wrapped, mask=~valid), rng=0), np.nan)
    assert np.all(np.isnan(out[~valid]))
    assert same_up_to_2pi_offset(out, ref, valid) < 1e-9
    assert same_up_to_2pi_offset(out, phase, valid) < 1e-9
    np.testing.assert_array_equal(wrapped, before)  # input not mutated


def test_masked_speck_does_not_break_the_path():
    phase = smooth_phase()
    yy, xx = np.mgrid[0 : phase.shape[0], 0 : phase.shape[1]]
    valid = np.ones(phase.shape, bool)
    valid[(xx - 60) ** 2 + (yy - 40) ** 2 < 64] = False  # a dust speck
    wrapped = wrap(phase)
    wrapped[~valid] = np.random.default_rng(0).uniform(-np.pi, np.pi, (~valid).sum())
    out = unwrap(wrapped, valid)
    assert same_up_to_2pi_offset(out, phase, valid) < 1e-9


def test_island_cut_off_by_the_mask_continues_the_main_region():
    # The docstring promises that islands the mask cuts off are "brought to the offset that
    # best continues the largest region". A steep plane (about 9 fringes across) with a
    # thin masked line cutting off one corner: the corner must continue the plane.
    yy, xx = np.mgrid[0:100, 0:100].astype(float)
    phase = 0.55 * xx + 0.05 * yy
    valid = np.ones(phase.shape, bool)
    valid[:, 80:82] = False  # the island is x >= 82, about 45 rad away from the mean
    out = unwrap(wrap(phase), valid)
    main = valid & (xx < 80)
    island = valid & (xx >= 82)
    k = np.round(np.mean((out - phase)[main]) / (2 * np.pi))
    aligned = out - 2 * np.pi * k
    np.testing.assert_allclose(aligned[main], phase[main], atol=1e-9)
    # the island's values continue the plane (an error of 2 pi or more is a wrong offset)
    assert np.max(np.abs(aligned[island] - phase[island])) < 1.0


def test_islands_of_a_small_residual_are_aligned():
    # the pipeline unwraps a residual phase of well under a fringe: islands there must be
    # put on the same 2 pi sheet as the main region
    rng = np.random.default_rng(1)
    phase = 0.3 * np.sin(smooth_phase() / 4) + rng.normal(0, 0.02, (120, 140))
    valid = np.ones(phase.shape, bool)
    valid[60:62, :] = False  # two halves
    valid[:, 100:102] = False
    wrapped = wrap(phase + 2 * np.pi * 3)
    out = unwrap(wrapped, valid)
    assert same_up_to_2pi_offset(out, phase, valid) < 1e-6
