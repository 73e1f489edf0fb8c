"""Tests of the flatness figures: PV, RMS, PVr, power, irregularity (analysis/figures.py)."""

from __future__ import annotations

import numpy as np
import pytest
from flatsight.analysis.figures import (
    compute_figures,
    radius_of_curvature_m,
    to_fringes,
    to_waves,
)
from flatsight.analysis.zernike import fit_zernike, zernike_basis


def disk(n: int = 201):
    g = np.linspace(-1, 1, n)
    x, y = np.meshgrid(g, g)
    keep = np.hypot(x, y) <= 1.0
    return x[keep], y[keep]


def figures_of(h, x, y, *, n_terms=36, **kw):
    basis = zernike_basis(n_terms, x, y)
    fit = fit_zernike(h, x, y, n_terms=n_terms, basis=basis)
    return compute_figures(h, basis, fit, **kw), basis, fit


# --- units -------------------------------------------------------------------------------


def test_one_fringe_is_half_a_wavelength():
    # common practice (references.md): one fringe = lambda/2 of height in double pass
    for lam, fringe_nm in ((632.8, 316.40), (589.3, 294.65), (587.56, 293.78), (546.07, 273.035)):
        assert to_fringes(fringe_nm, lam) == pytest.approx(1.0, abs=1e-5)
        assert to_waves(fringe_nm, lam) == pytest.approx(0.5, abs=1e-5)
    # flatness grades at 632.8 nm (references.md): lambda/4, /10, /20 PV
    assert to_waves(158.2, 632.8) == pytest.approx(0.25)
    assert to_waves(63.28, 632.8) == pytest.approx(0.1)
    assert to_fringes(31.64, 632.8) == pytest.approx(0.1)


# --- power and radius --------------------------------------------------------------------


@pytest.mark.parametrize("a4", [-50.0, 30.0])
def test_power_is_edge_to_centre_sag_with_the_documented_sign(a4):
    # references.md: sag from Noll's a4 = 2 sqrt 3 |a4|; figures.py documents power positive
    # when the centre stands high (convex), which is a4 < 0 since Z4 = sqrt 3 (2 rho^2 - 1)
    x, y = disk()
    h = a4 * zernike_basis(4, x, y)[:, 3]
    f, _, _ = figures_of(h, x, y, wavelength_nm=632.8)
    assert abs(f.power_nm) == pytest.approx(2 * np.sqrt(3) * abs(a4), rel=1e-9)
    # directly: the height at the centre minus the height at the rim, with the power
    # term written out (Noll 1976: Z4 = sqrt 3 (2 rho^2 - 1))
    centre, rim = (a4 * np.sqrt(3) * (2 * rho**2 - 1) for rho in (0.0, 1.0))
    assert f.power_nm == pytest.approx(centre - rim, rel=1e-9)
    assert (f.power_nm > 0) == (a4 < 0)
    assert f.power_fringes == pytest.approx(f.power_nm / 316.4, rel=1e-9)


def test_radius_of_curvature_check_values():
    # references.md (computed): D = 100 mm, one fringe of sag: R = 3950.7 m at 632.8 nm and
    # 4578.2 m at 546.07 nm; R = (r^2 + s^2) / (2 s) (sag formula, common practice)
    assert radius_of_curvature_m(632.8 / 2, 100.0) == pytest.approx(3950.7, abs=0.05)
    assert radius_of_curvature_m(546.07 / 2, 100.0) == pytest.approx(4578.2, abs=0.05)
    # the same from the closed form written out here, and its approximation D^2 / (4 N lambda)
    for s_nm, d_mm in ((100.0, 25.0), (-800.0, 150.0), (5000.0, 10.0)):
        r, s = d_mm * 1e-3 / 2, s_nm * 1e-9
        assert radius_of_curvature_m(s_nm, d_mm) == pytest.approx((r * r + s * s) / (2 * s))
        assert radius_of_curvature_m(s_nm, d_mm) == pytest.approx(
            (d_mm * 1e-3) ** 2 / (8 * s), rel=1e-6)
    assert radius_of_curvature_m(0.0, 100.0) is None
    assert radius_of_curvature_m(float("nan"), 100.0) is None


def test_radius_in_the_figures_follows_the_power():
    x, y = disk(101)
    h = -40.0 * zernike_basis(4, x, y)[:, 3]  # convex: centre high
    f, _, _ = figures_of(h, x, y, wavelength_nm=632.8, diameter_mm=100.0)
    assert f.radius_of_curvature_m == pytest.approx(
        radius_of_curvature_m(f.power_nm, 100.0), rel=1e-12)
    assert f.radius_of_curvature_m > 0
    f2, _, _ = figures_of(h, x, y, wavelength_nm=632.8)
    assert f2.radius_of_curvature_m is None  # no diameter, no radius


# --- PV, RMS, PVr, irregularity against direct computations ------------------------------


@pytest.fixture(scope="module")
def rough_surface():
    """Low-order terms, a term beyond the 36-term fit, a ripple and noise."""
    rng = np.random.default_rng(5)
    x, y = disk()
    coef = np.zeros(60)
    coef[1:3] = [200.0, -150.0]  # tilt, to be removed
    coef[3:15] = rng.normal(0, 15.0, 12)
    coef[55] = 4.0  # Noll 56: outside the 36-term fit, left in the residual
    h = zernike_basis(60, x, y) @ coef + 2.0 * np.cos(30 * np.hypot(x, y))
    h += rng.normal(0, 0.8, h.size)
    return x, y, h


def test_pv_and_rms_after_piston_and_tilt(rough_surface):
    x, y, h = rough_surface
    f, basis, fit = figures_of(h, x, y, wavelength_nm=632.8)
    # direct: take out the plane of the 36-term fit, then PV and RMS of what is left
    expected, *_ = np.linalg.lstsq(basis, h, rcond=None)
    surface = h - basis[:, :3] @ expected[:3]
    assert f.pv_nm == pytest.approx(np.ptp(surface), rel=1e-9)
    assert f.rms_nm == pytest.approx(np.std(surface), rel=1e-9)
    assert f.removed_terms == (1, 2, 3)


def test_pvr_is_evans(rough_surface):
    # Evans 2009: PVr = PV of the 36-term Zernike fit (piston and tilt out) + 3 x RMS of
    # the fit residual; reference: numpy lstsq on the basis, written out here
    x, y, h = rough_surface
    f, basis, _ = figures_of(h, x, y, wavelength_nm=632.8)
    c, *_ = np.linalg.lstsq(basis, h, rcond=None)
    fitted = basis[:, 3:] @ c[3:]
    residual = h - basis @ c
    assert np.std(residual) > 1.0  # the residual is not trivial here
    assert f.pvr_nm == pytest.approx(np.ptp(fitted) + 3 * np.std(residual), rel=1e-9)


def test_irregularity_is_pv_after_power(rough_surface):
    # ISO 14999-4 (from memory): irregularity = PV after the best-fit sphere is removed
    x, y, h = rough_surface
    f, basis, _ = figures_of(h, x, y, wavelength_nm=632.8)
    c, *_ = np.linalg.lstsq(basis, h, rcond=None)
    without_power = h - basis[:, :4] @ c[:4]
    assert f.irregularity_nm == pytest.approx(np.ptp(without_power), rel=1e-9)
    assert f.rms_irregularity_nm == pytest.approx(np.std(without_power), rel=1e-9)


def test_pure_power_has_no_irregularity():
    x, y = disk()
    h = 60.0 * zernike_basis(4, x, y)[:, 3] + 7.0 * x - 3.0
    f, _, _ = figures_of(h, x, y, wavelength_nm=632.8)
    assert f.irregularity_nm < 1e-9
    assert f.pv_nm == pytest.approx(2 * np.sqrt(3) * 60.0, rel=1e-3)  # closed form
    assert f.rms_nm == pytest.approx(60.0, rel=1e-2)  # orthonormal terms (Noll 1976)


def test_rms_of_a_zernike_surface_is_the_root_sum_of_squares():
    # Noll 1976: orthonormal terms, so RMS = sqrt(sum of squared coefficients, j >= 2)
    # on a fine sampling of the disk (sampling error well under 1 %)
    x, y = disk(301)
    coef = np.zeros(15)
    coef[3:15] = [12.0, -5.0, 8.0, 3.0, -4.0, 2.0, 1.5, 6.0, -2.0, 1.0, 0.5, -1.0]
    f, _, _ = figures_of(zernike_basis(15, x, y) @ coef, x, y, wavelength_nm=632.8)
    assert f.rms_nm == pytest.approx(np.sqrt(np.sum(coef[3:] ** 2)), rel=5e-3)


@pytest.mark.parametrize("a5, a6, axis", [(0.0, 10.0, 0.0), (10.0, 0.0, 45.0),
                                           (0.0, -10.0, 90.0), (-10.0, 0.0, 135.0)])
def test_astigmatism_pv_and_axis(a5, a6, axis):
    # closed form (references.md): PV of astigmatism = 2 sqrt 6 x its RMS; the high axis
    # found directly as the direction of the highest rim point
    x, y = disk(301)
    B = zernike_basis(6, x, y)
    h = a5 * B[:, 4] + a6 * B[:, 5]
    f, _, _ = figures_of(h, x, y, n_terms=15, wavelength_nm=632.8)
    assert f.astigmatism_nm == pytest.approx(2 * np.sqrt(6) * np.hypot(a5, a6), rel=1e-6)
    high = np.degrees(np.arctan2(y, x)[np.argmax(h)]) % 180.0
    assert f.astigmatism_axis_deg == pytest.approx(axis, abs=1e-6)
    assert min(abs(high - axis), 180 - abs(high - axis)) < 2.0


def test_more_terms_removed():
    x, y = disk(151)
    B = zernike_basis(15, x, y)
    h = B[:, 3] * 40.0 + B[:, 5] * 20.0 + B[:, 10] * 5.0
    f, basis, fit = figures_of(h, x, y, n_terms=15, wavelength_nm=632.8, removed_terms=(4, 5, 6))
    rest = 5.0 * B[:, 10]  # only the spherical term is left
    assert f.pv_nm == pytest.approx(np.ptp(rest), rel=1e-6)
    assert f.removed_terms == (1, 2, 3, 4, 5, 6)
    assert f.symmetric_irregularity_nm == pytest.approx(1.5 * np.sqrt(5) * 5.0, rel=1e-3)


def test_inputs_are_not_mutated():
    x, y = disk(61)
    h = zernike_basis(10, x, y) @ np.linspace(1, 10, 10)
    basis = zernike_basis(15, x, y)
    fit = fit_zernike(h, x, y, n_terms=15, basis=basis)
    copies = (h.copy(), basis.copy(), fit.coefficients_nm.copy())
    compute_figures(h, basis, fit, wavelength_nm=546.07, diameter_mm=50.0)
    for before, after in zip(copies, (h, basis, fit.coefficients_nm), strict=True):
        np.testing.assert_array_equal(before, after)
