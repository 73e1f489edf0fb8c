"""Tests of the flatness figures and their uncertainties (analysis/figures.py, uncertainty.py).

Every expected value comes from outside the module under test: closed forms of single
Zernike terms (Noll, JOSA 66, 207, 1976), the sag formula, and the independent reference
truth in ``tests/refset`` (direct quadrature, written without the project's code).
"""

from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np
import pytest
from flatsight.analysis.figures import (
    MapFigures,
    compute_figures,
    radius_of_curvature_m,
    to_fringes,
    to_waves,
)
from flatsight.analysis.zernike import fit_zernike

from tests.refset.surface import RefSurface, truth, zernike

SQ3, SQ5, SQ6 = math.sqrt(3.0), math.sqrt(5.0), math.sqrt(6.0)


def grid(n: int = 241):
    """A square map over the unit disk's square: x right, y up (Zernike coordinates)."""
    t = np.linspace(-1.0, 1.0, n)
    xu, yu = np.meshgrid(t, -t)
    return xu, yu


def figures_of(coeffs: dict[int, float], n: int = 241, *, n_terms: int = 36, **kw):
    """Figures of a surface made of Noll terms, evaluated by the reference set's own
    Zernike code (tests/refset/surface.py, checked there against aotools)."""
    xu, yu = grid(n)
    disk = np.hypot(xu, yu) <= 1.0
    h = np.zeros(xu.shape)
    for j, c in coeffs.items():
        h += c * zernike(j, xu, yu)
    fit = fit_zernike(h[disk], xu[disk], yu[disk], n_terms=n_terms)
    kw.setdefault("wavelength_nm", 632.8)
    return compute_figures(h, disk, xu, yu, fit, **kw)


# --- units -------------------------------------------------------------------------------


def test_one_fringe_is_half_a_wavelength():
    # common practice: one fringe = lambda/2 of height in double pass (He-Ne 632.8, sodium
    # 589.3, helium 587.56, mercury e 546.07 nm)
    for lam, fringe_nm in ((632.8, 316.40), (589.3, 294.65), (587.56, 293.78), (546.07, 273.035)):
        assert to_fringes(fringe_nm, lam) == pytest.approx(1.0, abs=1e-5)
        assert to_waves(fringe_nm, lam) == pytest.approx(0.5, abs=1e-5)
    # common practice: flatness grades lambda/4, /10, /20 PV at 632.8 nm
    assert to_waves(158.2, 632.8) == pytest.approx(0.25)
    assert to_waves(63.28, 632.8) == pytest.approx(0.1)
    assert to_fringes(31.64, 632.8) == pytest.approx(0.1)


# --- power and radius --------------------------------------------------------------------


@pytest.mark.parametrize("a4", [-50.0, 30.0])
def test_power_is_edge_to_centre_sag_with_the_documented_sign(a4):
    f = figures_of({4: a4})
    # closed form (Noll 1976): Z4 = sqrt 3 (2 rho^2 - 1), so centre minus rim is -2 sqrt 3 a4
    centre, rim = (a4 * SQ3 * (2 * rho**2 - 1) for rho in (0.0, 1.0))
    assert f.power_nm == pytest.approx(centre - rim, rel=1e-6)
    assert (f.power_nm > 0) == (a4 < 0)
    assert f.power_fringes == pytest.approx(f.power_nm / 316.4, rel=1e-9)
    assert f.irregularity_nm == pytest.approx(0.0, abs=0.01)  # power alone is not irregular


def test_radius_of_curvature_check_values():
    # computed from the sag formula R = (r^2 + s^2) / (2 s) (common practice): D = 100 mm,
    # one fringe of sag gives 3950.7 m at 632.8 nm and 4578.2 m at 546.07 nm
    assert radius_of_curvature_m(632.8 / 2, 100.0) == pytest.approx(3950.7, abs=0.05)
    assert radius_of_curvature_m(546.07 / 2, 100.0) == pytest.approx(4578.2, abs=0.05)
    for s_nm, d_mm in ((100.0, 25.0), (-800.0, 150.0), (5000.0, 10.0)):
        r, s = d_mm * 1e-3 / 2, s_nm * 1e-9
        assert radius_of_curvature_m(s_nm, d_mm) == pytest.approx((r * r + s * s) / (2 * s))
        assert radius_of_curvature_m(s_nm, d_mm) == pytest.approx(
            (d_mm * 1e-3) ** 2 / (8 * s), rel=1e-6)  # the D^2 / (8 s) approximation
    assert radius_of_curvature_m(0.0, 100.0) is None
    assert radius_of_curvature_m(float("nan"), 100.0) is None


def test_radius_in_the_figures_follows_the_power():
    f = figures_of({4: -40.0}, 121, diameter_mm=100.0)  # convex: centre high
    assert f.radius_of_curvature_m == pytest.approx(
        radius_of_curvature_m(f.power_nm, 100.0), rel=1e-12)
    assert f.radius_of_curvature_m > 0
    assert figures_of({4: -40.0}, 121).radius_of_curvature_m is None  # no diameter


# --- single terms against their closed forms ----------------------------------------------


@pytest.mark.parametrize("j, pv_per_nm", [
    (5, 2 * SQ6),  # astigmatism: sqrt 6 rho^2 sin 2t spans +-sqrt 6
    (7, 4 * math.sqrt(2)),  # coma: sqrt 8 (3 rho^3 - 2 rho) sin t spans +-sqrt 8
    (9, 4 * math.sqrt(2)),  # trefoil: sqrt 8 rho^3 sin 3t
    (11, 1.5 * SQ5),  # spherical: sqrt 5 (6 rho^4 - 6 rho^2 + 1) from -sqrt5/2 to sqrt 5
])
def test_pv_rms_and_irregularity_of_single_terms(j, pv_per_nm):
    # closed forms (Noll 1976; PVs computed from the polynomials as commented): a term's
    # coefficient is its RMS; none of these holds power, so B = PV
    a = 10.0
    f = figures_of({j: a, 2: 300.0, 3: -200.0})  # with tilt, which PV and RMS leave out
    assert f.pv_nm == pytest.approx(pv_per_nm * a, rel=0.01)
    assert f.irregularity_nm == pytest.approx(pv_per_nm * a, rel=0.01)
    assert f.rms_nm == pytest.approx(a, rel=0.01)
    assert f.rms_irregularity_nm == pytest.approx(a, rel=0.01)


def test_symmetric_irregularity_takes_only_the_rotationally_symmetric_part():
    # C of spherical aberration is its PV, 1.5 sqrt 5 a (closed form); astigmatism, coma and
    # power add nothing to C; RMSa is the RMS of the non-symmetric terms (Noll: their
    # coefficients in quadrature)
    f = figures_of({11: 6.0, 5: 20.0, 8: -9.0, 4: 40.0})
    assert f.symmetric_irregularity_nm == pytest.approx(1.5 * SQ5 * 6.0, rel=0.02)
    assert f.rms_asymmetric_nm == pytest.approx(math.hypot(20.0, 9.0), rel=0.01)
    g = figures_of({5: 20.0, 7: 9.0})
    assert g.symmetric_irregularity_nm == pytest.approx(0.0, abs=0.1)


@pytest.mark.parametrize("outline", ["ring", "rect"])
def test_symmetric_irregularity_over_a_part_that_is_not_the_disk(outline):
    # ISO 10110-5's C is the rotationally symmetric part beyond power: power and
    # astigmatism alone leave none, over any outline. On a ring, a term in rho^4 leaves
    # its own profile less the best a + b rho^2 (least squares by area, weight rho); the
    # truth here is that PV on a fine 1-D grid by numpy.linalg.lstsq (direct numerical
    # evaluation). Terms made orthonormal over the part have no radial term, and the
    # power left within each ring two pixels wide once read C 12 nm on a surface with none.
    xu, yu = grid(241)
    rho = np.hypot(xu, yu)
    region = (rho <= 1.0) & (rho >= 0.35) if outline == "ring" else (
        (np.abs(xu) <= 0.8) & (np.abs(yu) <= 0.6))

    def c_of(h):
        fit = fit_zernike(h[region], xu[region], yu[region], n_terms=36)
        return compute_figures(h, region, xu, yu, fit, wavelength_nm=632.8, region=region)

    plain = c_of(300.0 * rho**2 + 40.0 * (xu**2 - yu**2) + 5.0 * xu)
    assert plain.symmetric_irregularity_nm == pytest.approx(0.0, abs=0.3)
    if outline == "ring":
        r = np.linspace(0.35, 1.0, 20001)
        profile = 30.0 * r**4
        design = np.column_stack([np.ones_like(r), r**2]) * np.sqrt(r)[:, None]
        ab = np.linalg.lstsq(design, profile * np.sqrt(r), rcond=None)[0]
        expected = float(np.ptp(profile - ab[0] - ab[1] * r**2))
        f = c_of(300.0 * rho**2 + 30.0 * rho**4 + 40.0 * xu * yu)
        assert f.symmetric_irregularity_nm == pytest.approx(expected, rel=0.03)


@pytest.mark.parametrize("a5, a6, axis", [(0.0, 10.0, 0.0), (10.0, 0.0, 45.0),
                                          (0.0, -10.0, 90.0), (-10.0, 0.0, 135.0)])
def test_astigmatism_pv_and_axis(a5, a6, axis):
    # closed form: a6 sqrt 6 rho^2 cos 2t + a5 sqrt 6 rho^2 sin 2t is highest along
    # t0 = atan2(a5, a6) / 2 and spans 2 sqrt 6 sqrt(a5^2 + a6^2)
    f = figures_of({5: a5, 6: a6})
    assert f.astigmatism_nm == pytest.approx(2 * SQ6 * 10.0, rel=1e-6)
    assert f.astigmatism_axis_deg == pytest.approx(axis, abs=1e-6)


# --- PVr against the independent reference truth -------------------------------------------


@pytest.mark.parametrize("coeffs", [
    {4: 20.0, 6: -8.0, 11: 3.0},  # inside both 36-term sets
    {4: 10.0, 35: 5.0},  # Noll 35 (n 7, m -7): in Noll's first 36, not in the Fringe 36
    {5: 12.0, 56: 4.0},  # Noll 56 (n 10, m 0): in the Fringe 36 (its term 36), not Noll's
])
def test_pvr_is_evans_with_the_fringe_set(coeffs):
    # Evans, Opt. Eng. 48(4), 043605 (2009): PV of a 36-term fit + 3 x RMS of the residual;
    # the term set is the Fringe 36 (Wyant & Creath 1992, from memory). The truth is the
    # reference set's own quadrature (tests/refset/surface.py), sharing no project code.
    expected = truth(RefSurface(dict(coeffs)), 632.8)["pvr_nm"]
    f = figures_of(coeffs, 301)
    assert f.pvr_nm == pytest.approx(expected, rel=0.01, abs=0.1)


def test_pvr_differs_from_a_noll_36_fit_where_the_sets_differ():
    # a term in Noll's 36 but outside the Fringe 36 is residual for PVr (3 x its RMS)
    t = truth(RefSurface({35: 5.0}), 632.8)
    assert t["pvr_nm"] == pytest.approx(15.0, rel=0.01)  # 3 x RMS, RMS = coefficient
    assert t["pvr_noll36_nm"] > 20.0  # PV of Z35 itself (sqrt 16 rho^7 sin 7t spans +-4 x 5)
    # a 301-pixel disk samples rho^7 sin 7t coarsely at the rim, which leaks ~0.05 nm into
    # each fitted term; the fitted PV of that leak is under 1 nm, far from the 40 nm of Z35
    assert figures_of({35: 5.0}, 301).pvr_nm == pytest.approx(15.0, abs=1.0)


# --- robust figures: one bad pixel cannot decide a verdict ----------------------------------


def test_a_spike_moves_the_raw_pv_but_not_the_robust_figures():
    xu, yu = grid(241)
    disk = np.hypot(xu, yu) <= 1.0
    h = 10.0 * zernike(6, xu, yu) + 5.0 * zernike(4, xu, yu)
    clean_fit = fit_zernike(h[disk], xu[disk], yu[disk], n_terms=36)
    clean = compute_figures(h, disk, xu, yu, clean_fit, wavelength_nm=632.8, resolution_px=4.0)
    spiked = h.copy()
    spiked[120, 236] += 40.0  # one rim pixel 40 nm off
    fit = fit_zernike(spiked[disk], xu[disk], yu[disk], n_terms=36)
    f = compute_figures(spiked, disk, xu, yu, fit, wavelength_nm=632.8, resolution_px=4.0)
    assert f.pv_raw_nm > clean.pv_raw_nm + 30.0
    assert f.pv_nm == pytest.approx(clean.pv_nm, abs=1.0)
    assert f.irregularity_nm == pytest.approx(clean.irregularity_nm, abs=1.0)
    # PVr: 2 sqrt 6 x 10 nm of astigmatism (closed form) and a tiny residual
    assert f.pvr_nm == pytest.approx(2 * SQ6 * 10.0, abs=1.5)


def _noisy_disk_map(n: int, noise_nm: float, resolution_px: float, coeffs: dict[int, float],
                    seed: int = 7):
    """A map of Noll terms plus Gaussian-smoothed white noise (numpy, scipy.ndimage),
    prepared for figures with its noise set to ``noise_nm``."""
    from dataclasses import replace

    from scipy import ndimage

    xu, yu = grid(n)
    disk = np.hypot(xu, yu) <= 1.0
    h = sum(c * zernike(j, xu, yu) for j, c in coeffs.items())
    noise = ndimage.gaussian_filter(np.random.default_rng(seed).standard_normal(xu.shape),
                                    0.5 * resolution_px)
    h = h + noise * (noise_nm / noise[disk].std())
    prepared = MapFigures.of(h, disk, xu, yu, resolution_px=resolution_px)
    return replace(prepared, noise_nm=noise_nm), xu, yu, disk


def test_the_fits_coefficient_noise_is_the_least_squares_covariance():
    # generalised least squares (e.g. Bjorck, Numerical methods for least squares
    # problems, SIAM 1996, 4.1): coefficients a = F h have covariance F S F^T for noise of
    # covariance S. White noise smoothed by a Gaussian of width s has correlation
    # exp(-d^2 / 4 s^2) at distance d (the Gaussian's autocorrelation).
    s = 3.0
    prepared, xu, yu, disk = _noisy_disk_map(61, 2.0, 2 * s, {4: 10.0})
    ys, xs = np.nonzero(disk)
    d2 = (ys[:, None] - ys[None, :]) ** 2 + (xs[:, None] - xs[None, :]) ** 2
    cov = 2.0**2 * np.exp(-d2 / (4 * s * s))
    from flatsight.analysis.figures import FIGURE_TERMS

    basis = np.stack([zernike(j, xu[disk], yu[disk]) for j in range(1, FIGURE_TERMS + 1)],
                     axis=1)
    f = np.linalg.pinv(basis)
    expected = np.sqrt(np.diag(f @ cov @ f.T))
    # the kernel scipy.ndimage smooths by is the continuous Gaussian to far better than
    # a part in a thousand at this width
    assert prepared.coefficient_noise_nm == pytest.approx(expected, rel=2e-3)


def test_terms_at_their_noise_are_shrunk_and_clear_terms_kept():
    # the non-negative garrote (Breiman, Technometrics 37(4), 373, 1995) for orthogonal
    # terms: a max(0, 1 - s^2 / a^2) (Gao, J. Comput. Graph. Stat. 7(4), 469, 1998;
    # from memory)
    prepared, *_ = _noisy_disk_map(161, 3.0, 6.0, {4: 40.0, 6: 20.0, 11: 6.0})
    a, s = prepared.coefficients_nm, prepared.coefficient_noise_nm
    kept = prepared.map_coefficients_nm
    # piston, tilt and power are never shrunk
    assert np.array_equal(kept[:4], a[:4])
    assert kept[4:] == pytest.approx(a[4:] * np.maximum(0.0, 1.0 - s[4:] ** 2 / a[4:] ** 2))
    assert kept[5] == pytest.approx(20.0, abs=0.3) and kept[10] == pytest.approx(6.0, abs=0.3)
    noise_only = [j - 1 for j in range(7, 46) if j != 11]
    assert np.all(kept[noise_only][np.abs(a[noise_only]) <= s[noise_only]] == 0.0)
    # of terms that are pure noise it keeps sqrt(1/3) = 0.58 of the RMS (the integral of
    # (z - 1/z)^2 over |z| > 1 under the standard normal density is 1/3)
    assert 0.4 * _rms(a[noise_only]) < _rms(kept[noise_only]) < 0.75 * _rms(a[noise_only])


def test_detail_finer_than_the_fit_is_not_taken_for_noise():
    # a ripple of 12 cycles per diameter, 3 nm in amplitude, on 10 nm of Noll 4, and no
    # noise: the map's fine-scale roughness reads the ripple, but the photo's noise (the
    # demodulation's own estimate, from the spectrum beside the fringes) is 0.2 nm
    xu, yu = grid(241)
    disk = np.hypot(xu, yu) <= 1.0
    h = 10.0 * zernike(4, xu, yu) + 3.0 * np.cos(2.0 * np.pi * 6.0 * xu)
    sigma = np.full(h.shape, 0.2)
    prepared = MapFigures.of(h, disk, xu, yu, resolution_px=4.0, height_sigma_nm=sigma)
    assert prepared.noise_nm == pytest.approx(0.2)
    assert prepared.roughness_nm > 1.5  # the ripple, kept for the method's part of U
    assert MapFigures.of(h, disk, xu, yu, resolution_px=4.0).noise_nm > 1.5  # no estimate
    # PVr as Evans defines it (Opt. Eng. 48(4), 043605, 2009): the PV of the Fringe-36
    # fit, piston and tilt out, plus three times the RMS of what it leaves; here by
    # numpy's lstsq over the reference set's Zernike terms (tests/refset/surface.py).
    # With the ripple taken for noise its residual was taken out: PVr read 30 for 41 nm
    from tests.refset.surface import FRINGE36_NOLL

    basis = np.stack([zernike(j, xu[disk], yu[disk]) for j in FRINGE36_NOLL], axis=1)
    c, *_ = np.linalg.lstsq(basis, h[disk], rcond=None)
    expected = np.ptp(basis[:, 3:] @ c[3:]) + 3.0 * np.std(h[disk] - basis @ c)
    fit = fit_zernike(h[disk], xu[disk], yu[disk], n_terms=36)
    f = compute_figures(h, disk, xu, yu, fit, wavelength_nm=632.8, resolution_px=4.0,
                        height_sigma_nm=sigma)
    assert f.noise_nm == pytest.approx(0.2)
    assert f.pvr_nm == pytest.approx(expected, abs=1.0)


def test_a_noisy_map_keeps_the_noise_its_roughness_reads():
    # where the demodulation's estimate is the larger, the roughness stands
    prepared, xu, yu, disk = _noisy_disk_map(121, 2.0, 4.0, {4: 10.0})
    h = np.zeros(xu.shape)
    h[disk] = prepared.raw_nm
    rough = MapFigures.of(h, disk, xu, yu, resolution_px=4.0)
    capped = MapFigures.of(h, disk, xu, yu, resolution_px=4.0,
                           height_sigma_nm=np.full(h.shape, 10.0))
    assert rough.noise_nm > 1.0
    assert capped.noise_nm == rough.noise_nm == capped.roughness_nm


def _rms(v):
    return float(np.sqrt(np.mean(np.square(v))))


def test_inputs_are_not_mutated():
    xu, yu = grid(121)
    disk = np.hypot(xu, yu) <= 1.0
    h = 7.0 * zernike(5, xu, yu)
    before = (h.copy(), disk.copy(), xu.copy())
    fit = fit_zernike(h[disk], xu[disk], yu[disk], n_terms=36)
    compute_figures(h, disk, xu, yu, fit, wavelength_nm=632.8, resolution_px=3.0)
    for a, b in zip(before, (h, disk, xu), strict=True):
        assert np.array_equal(a, b)


def test_more_terms_removed():
    f = MapFigures.of(*_map({4: 30.0, 5: 10.0, 11: 4.0})).figures(
        wavelength_nm=632.8, diameter_mm=None, removed_terms=(4, 5))
    # what is left is spherical alone: PV 1.5 sqrt 5 a11 (closed form)
    assert f.pv_nm == pytest.approx(1.5 * SQ5 * 4.0, rel=0.02)
    assert f.power_nm == 0.0 and f.astigmatism_nm == pytest.approx(0.0)


def _map(coeffs, n=201):
    xu, yu = grid(n)
    disk = np.hypot(xu, yu) <= 1.0
    h = sum(c * zernike(j, xu, yu) for j, c in coeffs.items())
    return h, disk, xu, yu


# --- uncertainty ------------------------------------------------------------------------------


def test_every_figure_carries_a_positive_expanded_uncertainty():
    f = figures_of({4: 20.0, 6: 8.0})
    for name in ("pv_nm", "rms_nm", "pvr_nm", "power_nm", "irregularity_nm",
                 "symmetric_irregularity_nm", "rms_irregularity_nm", "rms_asymmetric_nm",
                 "astigmatism_nm"):
        assert f.uncertainty_nm[name] > 0
        assert set(f.uncertainty_budget[name]) == {"noise_nm", "method_nm", "wavelength_nm",
                                                   "reference_nm"}


def test_stated_uncertainties_enter_in_quadrature_with_k_2():
    # GUM (JCGM 100:2008) 5.1 and 6.3: standard uncertainties add in quadrature, U = k u
    # with k = 2. A reference flat stated at U = 10 nm contributes 5 nm standard.
    base = figures_of({4: 40.0})
    ref = figures_of({4: 40.0}, reference_uncertainty_nm=10.0)
    for name in ("pv_nm", "power_nm"):
        u0 = base.uncertainty_nm[name] / 2
        assert ref.uncertainty_nm[name] / 2 == pytest.approx(math.hypot(u0, 5.0), rel=1e-9)
    # the wavelength scales every height: u(power) gains |power| u(lambda) / lambda
    wl = figures_of({4: 40.0}, wavelength_uncertainty_nm=6.328)
    u_lam = abs(base.power_nm) * 0.01
    assert wl.uncertainty_nm["power_nm"] / 2 == pytest.approx(
        math.hypot(base.uncertainty_nm["power_nm"] / 2, u_lam), rel=1e-9)


def test_a_scale_uncertainty_is_a_share_of_every_figure_in_the_method_part():
    # GUM (JCGM 100:2008) 5.1: independent parts add in quadrature. The intensity fit's
    # aperture sets the height scale to about 1 % (u), so every figure gains u |F| there.
    from flatsight.analysis.pipeline import _scale_uncertainty
    from flatsight.analysis.uncertainty import INTENSITY_FIT_SCALE

    base = figures_of({4: 40.0, 6: 12.0})
    scaled = figures_of({4: 40.0, 6: 12.0}, scale_uncertainty=INTENSITY_FIT_SCALE)
    for name in ("rms_nm", "power_nm", "astigmatism_nm", "rms_irregularity_nm"):
        value = abs(getattr(base, name))
        assert scaled.uncertainty_budget[name]["method_nm"] == pytest.approx(math.hypot(
            base.uncertainty_budget[name]["method_nm"], INTENSITY_FIT_SCALE * value),
            rel=1e-9)
        assert scaled.uncertainty_nm[name] > base.uncertainty_nm[name]
    # only the intensity fit's aperture carries it: its own photo, or any averaged one
    assert _scale_uncertainty("carrier") == 0.0
    assert _scale_uncertainty("intensity-fit") == INTENSITY_FIT_SCALE
    assert _scale_uncertainty(None, [SimpleNamespace(method="carrier"),
                                     SimpleNamespace(method="intensity-fit")]) > 0


def test_corners_add_their_share_to_the_peak_figures_of_one_photo_only():
    # GUM (JCGM 100:2008) 5.1 again: a rectangle's corners leave detail one photo cannot
    # resolve, a further share of PV, PVr and B in the method part; the RMS figures keep
    # theirs (their errors on shaped reference photos stay within the round parts' U).
    from flatsight.analysis.aperture import Aperture
    from flatsight.analysis.pipeline import _demodulated_outline
    from flatsight.analysis.shapes import Rectangle
    from flatsight.analysis.uncertainty import OUTLINE_METHOD

    base = figures_of({4: 40.0, 6: 12.0, 11: 8.0})
    rect = figures_of({4: 40.0, 6: 12.0, 11: 8.0}, outline="rect")
    for name in ("pv_nm", "pvr_nm", "irregularity_nm"):
        share = OUTLINE_METHOD["rect"][name]
        assert share > 0.0
        assert rect.uncertainty_budget[name]["method_nm"] == pytest.approx(math.hypot(
            base.uncertainty_budget[name]["method_nm"], share * abs(getattr(base, name))),
            rel=1e-9)
    for name in ("rms_nm", "rms_irregularity_nm"):
        assert rect.uncertainty_nm[name] == pytest.approx(base.uncertainty_nm[name], rel=1e-9)
    # a circle adds nothing; a demodulated photo (or an average of them) takes its
    # outline's share, a phase-shifted stack (no single-photo method) none
    assert figures_of({4: 40.0}, outline="circle").uncertainty_nm == pytest.approx(
        figures_of({4: 40.0}).uncertainty_nm, rel=1e-12)
    part = Aperture.of_shape(Rectangle(200.0, 150.0, 240.0, 120.0, 10.0))
    assert _demodulated_outline(part, "carrier") == "rect"
    assert _demodulated_outline(part, "", [SimpleNamespace(method="intensity-fit")]) == "rect"
    assert _demodulated_outline(part, "") is None


def test_pvr_takes_the_noise_out_of_its_residual_once():
    # PVr (Evans, Opt. Eng. 48(4), 043605, 2009): the Fringe-36 fit's PV plus three times
    # the RMS it leaves; here that residual is Gaussian-smoothed white noise (numpy,
    # scipy.ndimage) of 2 nm, which PVr takes out in quadrature. The Monte Carlo copies
    # carry more noise and must take out their own: while they took out only the map's,
    # their PVr rose with the added noise and SIMEX took the noise out a second time
    # (2.8-3.0 nm here, and a speckled photo of the reference set, tests/refset seed 621,
    # read PVr 16.1 nm for 28.5). Expected: numpy's lstsq over the reference set's
    # Zernike terms (tests/refset/surface.py) on the map without noise.
    from flatsight.analysis.uncertainty import noise_effects

    from tests.refset.surface import FRINGE36_NOLL

    coeffs = {4: 10.0, 7: 8.0, 9: 5.0}
    corrected = []
    for seed in (7, 8, 9):
        prepared, xu, yu, disk = _noisy_disk_map(121, 2.0, 4.0, coeffs, seed=seed)
        f = prepared.figures(wavelength_nm=632.8, diameter_mm=None, removed_terms=(1, 2, 3))
        _, fixed = noise_effects(prepared, f, removed=(1, 2, 3), noise_scale=None,
                                 wavelength_nm=632.8)
        assert 0.0 <= f.pvr_nm - fixed["pvr_nm"] < 0.6, (f.pvr_nm, fixed["pvr_nm"])
        corrected.append(fixed["pvr_nm"])
    basis = np.stack([zernike(j, xu[disk], yu[disk]) for j in FRINGE36_NOLL], axis=1)
    h = sum(c * zernike(j, xu, yu) for j, c in coeffs.items())[disk]
    c, *_ = np.linalg.lstsq(basis, h, rcond=None)
    expected = np.ptp(basis[:, 3:] @ c[3:]) + 3.0 * np.std(h - basis @ c)
    assert np.mean(corrected) == pytest.approx(expected, abs=1.0)


def test_the_photo_count_is_no_second_divisor():
    # An average's map carries the noise averaging left (GUM 4.2.3: u / sqrt N for the
    # mean of N independent values), and U is taken on that map; dividing U by sqrt N
    # again would count the averaging twice, and the method's bias is shared by the
    # photos of one part. So the same map gives the same U whatever the count says.
    one = figures_of({4: 40.0, 5: 10.0})
    four = figures_of({4: 40.0, 5: 10.0}, photos=4)
    for name in ("pv_nm", "irregularity_nm", "power_nm"):
        assert four.uncertainty_nm[name] == pytest.approx(one.uncertainty_nm[name],
                                                          rel=1e-9)


@pytest.mark.parametrize("j_beyond", [56, 67, 72])
def test_rms_counts_what_lies_beyond_the_fitted_terms(j_beyond):
    # Noll terms are orthonormal over the disk (Noll, JOSA 66, 207, 1976): the RMS of a
    # sum is the root-sum-square of the coefficients, so a term beyond the fits (36
    # terms here; the filtered map's 66 hold Z56, n 10, but not Z67 and Z72, n 11) must
    # still count in RMSt, RMSi and RMSa. The terms come from the reference set's own
    # Zernike code (tests/refset/surface.py, checked against aotools).
    f = figures_of({4: 12.0, 6: 5.0, j_beyond: 6.0}, 401)
    assert f.rms_nm == pytest.approx(math.sqrt(12.0**2 + 5.0**2 + 6.0**2), rel=0.02)
    assert f.rms_irregularity_nm == pytest.approx(math.sqrt(5.0**2 + 6.0**2), rel=0.02)
    expected_a = 5.0 if j_beyond == 56 else math.sqrt(5.0**2 + 6.0**2)  # Z56 is m = 0
    assert f.rms_asymmetric_nm == pytest.approx(expected_a, rel=0.03)
