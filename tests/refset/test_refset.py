"""Tests of the independent reference set itself: terms, quadrature, truth, photos and files."""

from __future__ import annotations

import math
import os
import warnings

import numpy as np
import pytest
from PIL import Image
from scipy import ndimage, optimize, special

from .cases import (
    FORMATS,
    NAMED_CASES,
    SLOPE_LIMIT,
    WAVELENGTHS_NM,
    _tilt_removed_pv_and_slope,
    draw_settings,
    named_case,
    random_case,
)
from .photo import (
    EDGES,
    carrier_for,
    edge_profile,
    illumination_field,
    render,
    tone_curve,
    write,
)
from .surface import (
    FRINGE36_NM,
    FRINGE36_NOLL,
    NOLL_MAX,
    Bump,
    Edge,
    RefSurface,
    Ring,
    Ripple,
    nm_to_noll,
    noll_to_nm,
    polar_grid,
    pv_over_disk,
    radial,
    truth,
    zernike,
    zernike_polar,
)

# a surface with something of everything, inside the reference set's ranges
RICH = RefSurface(
    {4: 30.0, 5: -10.0, 6: 4.0, 9: 3.0, 11: 3.0, 16: -2.0, 22: 2.0, 37: 1.5, 56: 1.0},
    bumps=(Bump(0.3, -0.2, 0.08, -20.0),),
    rings=(Ring(0.55, 0.06, 10.0),),
    edge=Edge(0.85, -40.0, 2.0),
    ripples=(Ripple(2.0, 8.0, 30.0, 10.0), Ripple(1.0, 4.0, circular=True)),
)


# ---------------------------------------------------------------------------------------------
# Zernike terms
# ---------------------------------------------------------------------------------------------


def test_noll_index_mapping():
    # Noll 1976, table 1 (from memory): j -> (n, signed m), even j cosine, odd j sine
    known = {1: (0, 0), 2: (1, 1), 3: (1, -1), 4: (2, 0), 5: (2, -2), 6: (2, 2), 7: (3, -1),
             8: (3, 1), 9: (3, -3), 10: (3, 3), 11: (4, 0), 12: (4, 2), 13: (4, -2),
             14: (4, 4), 15: (4, -4), 16: (5, 1), 22: (6, 0), 37: (8, 0), 56: (10, 0),
             66: (10, 10)}
    for j, nm in known.items():
        assert noll_to_nm(j) == nm
    # order n holds n + 1 indices (closed form: j runs to (n + 1)(n + 2) / 2)
    for j in range(1, 200):
        n, m = noll_to_nm(j)
        assert n * (n + 1) // 2 < j <= (n + 1) * (n + 2) // 2
        assert abs(m) <= n and (n - abs(m)) % 2 == 0
        assert m == 0 or (m > 0) == (j % 2 == 0)
        assert nm_to_noll(n, m) == j


def test_radial_polynomial_matches_jacobi_form():
    # closed form: R_n^m(r) = (-1)^((n-m)/2) r^m P_((n-m)/2)^(m, 0)(1 - 2 r^2) (from memory)
    r = np.linspace(0.0, 1.0, 101)
    for j in range(1, NOLL_MAX + 1):
        n, m = noll_to_nm(j)
        m = abs(m)
        k = (n - m) // 2
        ref = (-1) ** k * r**m * special.eval_jacobi(k, m, 0, 1.0 - 2.0 * r**2)
        np.testing.assert_allclose(radial(n, m, r), ref, atol=1e-9)
        assert radial(n, m, np.array([1.0]))[0] == pytest.approx(1.0)  # R(1) = 1, closed form


def test_terms_match_aotools():
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        import aotools
    n_px = 64
    # aotools samples pixel centres at (i - N/2 + 0.5) / (N/2) along both axes, X along the
    # columns and Y along the rows with Y growing with the row index, i.e. DOWN the array as
    # displayed. Our y grows toward the top of a photo, so aotools' array is our term at the
    # same (x, y) numbers, and a photo-oriented sampling of ours is aotools' array flipped up-down.
    c = (np.arange(n_px) - n_px / 2 + 0.5) / (n_px / 2)
    xx, yy = np.meshgrid(c, c)
    inside = np.hypot(xx, yy) < 0.999  # both define the term here; aotools zeroes the rest
    photo_y = ((n_px - 1) / 2 - np.arange(n_px))[:, None] / (n_px / 2)  # (cy - row) / R
    for j in range(1, 46):
        theirs = aotools.functions.zernike.zernike_noll(j, n_px)
        ours = zernike(j, xx, yy)
        # source: aotools.functions.zernike.zernike_noll
        np.testing.assert_allclose(ours[inside], theirs[inside], atol=1e-9, err_msg=f"j={j}")
        ours_photo = zernike(j, xx, np.broadcast_to(photo_y, xx.shape))
        np.testing.assert_allclose(ours_photo[inside], np.flipud(theirs)[inside], atol=1e-9)


def test_terms_are_orthonormal_under_the_quadrature():
    # closed form (Noll 1976): (1/pi) int Z_j Z_k dA = delta_jk
    grid = polar_grid()
    terms = np.stack([zernike_polar(j, grid.rho[:, None], grid.theta[None, :])
                      for j in range(1, NOLL_MAX + 1)])
    w = grid.ring_weight[:, None] / grid.theta.size
    gram = np.einsum("jab,kab,ab->jk", terms, terms, w)
    np.testing.assert_allclose(gram, np.eye(NOLL_MAX), atol=1e-10)


def test_fringe_set_structure():
    # FRINGE 36 (Wyant & Creath 1992, from memory): every (n, |m|) with (n + |m|) / 2 <= 5,
    # piston first, 10th-order spherical last; 36 distinct terms within Noll 1..66
    assert len(FRINGE36_NM) == 36 == len(set(FRINGE36_NM)) == len(FRINGE36_NOLL)
    assert FRINGE36_NM[0] == (0, 0) and FRINGE36_NM[-1] == (10, 0)
    assert FRINGE36_NM[:9] == ((0, 0), (1, 1), (1, -1), (2, 0), (2, 2), (2, -2), (3, 1),
                               (3, -1), (4, 0))
    assert all((n + abs(m)) // 2 <= 5 for n, m in FRINGE36_NM)
    assert max(FRINGE36_NOLL) == 56 and 35 not in FRINGE36_NOLL and 37 in FRINGE36_NOLL


def test_fast_forms_match_the_polar_form():
    # the Cartesian monomial form is algebraically the same function (closed form)
    rng = np.random.default_rng(3)
    x = rng.uniform(-1.05, 1.05, 70)
    y = rng.uniform(-1.05, 1.05, 50)
    direct = RICH.height_nm(x[None, :], y[:, None])
    np.testing.assert_allclose(RICH.height_grid(x, y), direct, atol=1e-8)
    np.testing.assert_allclose(RICH.height_fast_nm(x[None, :], y[:, None]), direct, atol=1e-8)
    for j in (1, 7, 22, 37, 56, 66, 78):
        surf = RefSurface({j: 1.0})
        np.testing.assert_allclose(surf.height_grid(x, y), zernike(j, x[None, :], y[:, None]),
                                   atol=1e-9)


def test_features_follow_their_definitions():
    # closed forms of each feature as specified
    assert Bump(0.2, 0.1, 0.1, 5.0)(0.2, 0.1) == pytest.approx(5.0)
    assert Bump(0.0, 0.0, 0.1, 5.0)(0.1, 0.0) == pytest.approx(5.0 * math.exp(-0.5))
    assert Ring(0.5, 0.05, -3.0).of_rho(np.array(0.5)) == pytest.approx(-3.0)
    e = Edge(0.8, -40.0, 2.0)
    assert e.of_rho(np.array(0.7)) == 0.0
    assert e.of_rho(np.array(1.0)) == pytest.approx(-40.0)
    assert e.of_rho(np.array(0.9)) == pytest.approx(-10.0)
    r = Ripple(2.0, 10.0, direction_deg=0.0)  # 10 cycles per diameter: period 0.2 in x
    assert r(np.array(0.2), np.array(0.7)) == pytest.approx(2.0)
    assert r(np.array(0.1), np.array(0.0)) == pytest.approx(-2.0)
    c = Ripple(1.0, 4.0, circular=True)  # 4 cycles per radius
    assert c(np.array(0.0), np.array(0.125)) == pytest.approx(-1.0)


# ---------------------------------------------------------------------------------------------
# Truth
# ---------------------------------------------------------------------------------------------


def test_pv_of_single_terms_over_the_disk():
    # closed forms over the unit disk: tilt 2 rho cos: 4; power sqrt3 (2 rho^2 - 1): 2 sqrt3;
    # astigmatism sqrt6 rho^2 cos 2t: 2 sqrt6; coma sqrt8 (3 rho^3 - 2 rho) cos t: 4 sqrt2;
    # spherical sqrt5 (6 rho^4 - 6 rho^2 + 1): from sqrt5 at the rim to -sqrt5/2 at rho^2 = 1/2
    expected = {2: 4.0, 3: 4.0, 4: 2 * math.sqrt(3), 5: 2 * math.sqrt(6), 6: 2 * math.sqrt(6),
                7: 4 * math.sqrt(2), 8: 4 * math.sqrt(2), 11: 1.5 * math.sqrt(5)}
    for j, pv in expected.items():
        assert pv_over_disk(lambda x, y, j=j: zernike(j, x, y)) == pytest.approx(pv, abs=1e-7)
    assert 1.5 * math.sqrt(5) == pytest.approx(3.3541, abs=1e-4)  # the value quoted


def test_truth_of_pure_power():
    t = truth(RefSurface({4: 10.0}), 632.8)
    root3 = math.sqrt(3)
    assert t["pv_nm"] == pytest.approx(20 * root3, abs=1e-6)  # closed form, PV of Z4 = 2 sqrt3
    assert t["rms_nm"] == pytest.approx(10.0, abs=1e-9)  # Noll normalisation: RMS 1
    assert t["power_nm"] == pytest.approx(-20 * root3, abs=1e-9)  # -2 sqrt3 a4 (sag, concave)
    assert t["irregularity_nm"] == pytest.approx(0.0, abs=1e-6)  # B of Z4 alone: 0
    assert t["rms_irregularity_nm"] == pytest.approx(0.0, abs=1e-6)
    assert t["symmetric_irregularity_nm"] == pytest.approx(0.0, abs=1e-6)
    assert t["rms_asymmetric_nm"] == pytest.approx(0.0, abs=1e-9)
    assert t["astigmatism_nm"] == pytest.approx(0.0, abs=1e-9)
    assert t["pvr_nm"] == pytest.approx(20 * root3, abs=1e-6)  # exact fit, no residual
    assert t["zernike_nm"][4] == pytest.approx(10.0, abs=1e-9)
    assert truth(RefSurface({4: -7.0}), 632.8)["power_nm"] == pytest.approx(14 * root3)  # convex


def test_truth_of_pure_spherical():
    a = 4.0
    t = truth(RefSurface({11: a}), 589.3)
    c = 1.5 * math.sqrt(5)  # closed form PV of Z11
    assert t["pv_nm"] == pytest.approx(c * a, abs=1e-6)
    assert t["symmetric_irregularity_nm"] == pytest.approx(c * a, abs=1e-6)  # C = 1.5 sqrt5 a11
    assert t["rms_asymmetric_nm"] == pytest.approx(0.0, abs=1e-9)  # rotationally symmetric
    assert t["power_nm"] == pytest.approx(0.0, abs=1e-9)  # Z11 is orthogonal to Z4
    assert t["irregularity_nm"] == pytest.approx(c * a, abs=1e-6)
    assert t["rms_irregularity_nm"] == pytest.approx(a, abs=1e-9)


def test_truth_of_pure_astigmatism():
    root6 = math.sqrt(6)
    t5 = truth(RefSurface({5: 3.0}), 632.8)
    assert t5["rms_asymmetric_nm"] == pytest.approx(3.0, abs=1e-9)  # RMSa of Z5 = a5
    assert t5["astigmatism_nm"] == pytest.approx(6 * root6, abs=1e-9)  # 2 sqrt6 hypot(a5, a6)
    assert t5["pv_nm"] == pytest.approx(6 * root6, abs=1e-6)  # closed form PV of Z5
    assert t5["symmetric_irregularity_nm"] == pytest.approx(0.0, abs=1e-6)
    # axis of the high direction: sqrt6 rho^2 sin 2t peaks at 45 deg, cos 2t at 0 (closed form)
    assert t5["astigmatism_axis_deg"] == pytest.approx(45.0, abs=1e-6)
    t6 = truth(RefSurface({6: -2.0}), 632.8)
    assert t6["astigmatism_axis_deg"] == pytest.approx(90.0, abs=1e-6)
    assert t6["rms_asymmetric_nm"] == pytest.approx(2.0, abs=1e-9)


def test_truth_of_coma_and_tilt():
    t = truth(RefSurface({2: 50.0, 3: -20.0, 7: 2.0}), 632.8)
    assert t["pv_nm"] == pytest.approx(8 * math.sqrt(2), abs=1e-6)  # tilt removed, 4 sqrt2 a7
    assert t["rms_nm"] == pytest.approx(2.0, abs=1e-9)
    assert t["zernike_nm"][2] == pytest.approx(50.0, abs=1e-9)
    assert t["zernike_nm"][3] == pytest.approx(-20.0, abs=1e-9)


def test_pvr_uses_the_right_term_sets():
    # closed forms: a term inside the fitted set leaves no residual (PVr = its PV); a term
    # outside it is all residual (PVr = 3 x its RMS = 3 a). Noll 36 is (7, 7): outside FRINGE
    # 36, inside Noll 1..36, PV of sqrt16 rho^7 sin 7t = 8. Noll 37 is (8, 0): the reverse.
    t36 = truth(RefSurface({36: 1.0}), 632.8)
    assert t36["pvr_nm"] == pytest.approx(3.0, abs=1e-6)
    assert t36["pvr_noll36_nm"] == pytest.approx(8.0, abs=1e-6)
    t37 = truth(RefSurface({37: 2.0}), 632.8)
    assert t37["pvr_noll36_nm"] == pytest.approx(6.0, abs=1e-6)
    assert t37["pvr_nm"] == pytest.approx(t37["pv_nm"], abs=1e-6)


def test_rotationally_symmetric_features_have_no_asymmetric_part():
    # closed form: an azimuthally constant height equals its own azimuthal mean
    t = truth(RefSurface(rings=(Ring(0.5, 0.08, 10.0),), edge=Edge(0.85, -30.0),
                         ripples=(Ripple(3.0, 3.0, circular=True),)), 546.07)
    assert t["rms_asymmetric_nm"] == pytest.approx(0.0, abs=1e-9)
    assert t["symmetric_irregularity_nm"] == pytest.approx(t["irregularity_nm"], abs=1e-6)


def test_truth_of_a_rich_surface_is_consistent_and_converged():
    coarse = truth(RICH, 632.8)
    fine = truth(RICH, 632.8, nodes_per_panel=36, panels=10, n_theta=1080)
    for key, value in coarse.items():
        if key == "zernike_nm":
            for j in range(1, NOLL_MAX + 1):
                assert value[j] == pytest.approx(fine[key][j], abs=0.01)  # 0.01 nm, as asked
        else:
            assert value == pytest.approx(fine[key], abs=0.01), key
    # power from the {1, x, y, rho^2} fit equals -2 sqrt3 a4 for any surface (closed form:
    # span{1, rho^2} = span{Z1, Z4}, and Z2, Z3 are orthogonal to both)
    assert coarse["power_nm"] == pytest.approx(-2 * math.sqrt(3) * coarse["zernike_nm"][4],
                                               abs=1e-9)
    # common practice: RMSt^2 = RMSi^2 + (power's Z4 part)^2, and every figure is ordered
    assert coarse["rms_nm"] ** 2 == pytest.approx(coarse["rms_irregularity_nm"] ** 2
                                                  + coarse["zernike_nm"][4] ** 2, rel=1e-9)
    assert coarse["pv_nm"] >= coarse["rms_nm"] > coarse["rms_asymmetric_nm"] > 0
    # a pure Zernike surface projects back onto its own coefficients (orthonormality)
    coeffs = {4: 12.0, 9: -3.0, 22: 6.0, 37: 8.0, 46: 1.5, 66: -0.7}
    zern = truth(RefSurface(coeffs), 632.8)["zernike_nm"]
    for j in range(1, NOLL_MAX + 1):
        assert zern[j] == pytest.approx(coeffs.get(j, 0.0), abs=1e-9)


# ---------------------------------------------------------------------------------------------
# Photos
# ---------------------------------------------------------------------------------------------


def _line(pixels: np.ndarray, center: tuple[float, float], direction: tuple[float, float],
          half: float, step: float = 0.25) -> np.ndarray:
    """Bilinear samples of a photo along a line through ``center`` (pixel x, y)."""
    t = np.arange(-half, half + step / 2, step)
    u = np.asarray(direction, dtype=float) / math.hypot(*direction)
    xs, ys = center[0] + t * u[0], center[1] + t * u[1]
    return ndimage.map_coordinates(pixels.astype(float), [ys, xs], order=1)


def _fringes_along(photo, span: float = 0.9) -> float:
    """Fringes across the diameter, from the zero crossings along the carrier (from memory:
    successive crossings of a fringe signal about its mean are half a period apart)."""
    step = 0.25
    v = _line(photo.pixels, photo.center_px, photo.carrier, span * photo.radius_px, step)
    v = v - v.mean()
    i = np.nonzero(np.sign(v[:-1]) * np.sign(v[1:]) < 0)[0]
    cross = (i + v[i] / (v[i] - v[i + 1])) * step  # linear interpolation
    period = 2.0 * (cross[-1] - cross[0]) / (cross.size - 1)
    return 2.0 * photo.radius_px / period


@pytest.mark.parametrize("angle", [0.0, 0.1, 30.0, 90.0, 135.0, 179.9, 180.0, 210.0, 359.0])
def test_carrier_points_down_the_photo(angle):
    fx, fy = carrier_for(25.0, angle, 200.0)
    near_x_axis = min(angle % 180.0, 180.0 - angle % 180.0) <= 0.2
    # the sign rule (Flatsight's README, "Sign convention"): down the photo, or to the
    # right when the carrier lies within 0.2 degrees of the x axis
    assert fx > 0 if near_x_axis else fy > 0
    assert math.hypot(fx, fy) * 400.0 == pytest.approx(25.0)  # fringes = |f| 2R
    a = math.radians(angle)
    # across the fringes means parallel to (cos a, sin a) as seen, i.e. (cos a, -sin a) in px
    assert abs(fx * math.sin(a) + fy * math.cos(a)) < 1e-12


def test_flat_photo_has_the_asked_mean_and_fringe_count():
    photo = render(RefSurface(), shape=(400, 520), radius_px=170.0, center_px=(265.3, 196.8),
                   fringes=20.0, angle_deg=30.0, visibility=0.8, level=0.4, bit_depth=16,
                   illumination=0.3, illumination_angle_deg=70.0)
    xu, yu = photo.unit_coordinates()
    inside = np.hypot(xu, yu) < 1.0 - 3.0 / 170.0
    # the illumination field has mean 1 over the disk and cos averages out over 20 fringes
    # (closed form: disk mean of cos(k x) = 2 J1(kR) / kR, here below 0.003)
    assert photo.pixels[inside].mean() / 65535 == pytest.approx(0.4, rel=0.01)
    assert _fringes_along(photo) == pytest.approx(20.0, abs=0.15)
    assert photo.carrier[1] > 0
    assert photo.pixels.dtype == np.uint16


@pytest.mark.parametrize("angle", [0.0, 30.0, 90.0, 135.0])
def test_a_height_rising_along_the_carrier_adds_fringes(angle):
    # the engine reports +phase lambda / 4pi against a downward carrier, so a height rising
    # by lambda/2 over the diameter along the carrier must add exactly one fringe (closed form,
    # double pass); with the opposite sign rule it would remove one
    lam = 589.3
    fx, fy = carrier_for(20.0, angle, 150.0)
    ux, uy = fx / math.hypot(fx, fy), -fy / math.hypot(fx, fy)  # unit coordinates, y up
    k = lam / 4.0  # nm per radius: lambda/2 over the diameter
    surf = RefSurface({2: k * ux / 2.0, 3: k * uy / 2.0})  # Z2 = 2x, Z3 = 2y
    photo = render(surf, shape=(340, 360), radius_px=150.0, fringes=20.0, angle_deg=angle,
                   wavelength_nm=lam, bit_depth=16)
    assert _fringes_along(photo) == pytest.approx(21.0, abs=0.15)


def test_pixel_average_matches_brute_force_supersampling():
    # reference: 8 x 8 point samples per pixel of the phase formula, with height_nm (the polar
    # form, not the renderer's monomial path); fringes here are 2.9 px apart
    surf = RefSurface({4: 200.0, 5: -80.0, 7: 40.0}, bumps=(Bump(0.3, -0.2, 0.1, -60.0),))
    lam, radius, cx, cy = 632.8, 40.0, 60.3, 44.6
    photo = render(surf, shape=(90, 120), radius_px=radius, center_px=(cx, cy), fringes=28.0,
                   angle_deg=63.0, wavelength_nm=lam, bit_depth=16, level=0.45, visibility=0.8)
    fx, fy = photo.carrier
    rows, cols = np.mgrid[0:90, 0:120].astype(float)
    acc = np.zeros(rows.shape)
    sub = (np.arange(8) + 0.5) / 8 - 0.5
    for a in sub:
        for b in sub:
            x, y = cols + a, rows + b
            h = surf.height_nm((x - cx) / radius, (cy - y) / radius)
            acc += np.cos(2 * math.pi * (fx * (x - cx) + fy * (y - cy)) + 4 * math.pi * h / lam)
    ref = 0.45 * (1 + 0.8 * acc / 64)
    inside = np.hypot(cols - cx, rows - cy) < radius - 2
    assert np.abs(photo.pixels / 65535 - ref)[inside].max() < 0.005


@pytest.mark.parametrize("kind", EDGES)
def test_edge_profiles(kind):
    w = 6.0
    assert edge_profile(np.array(0.0), kind, w) == pytest.approx(0.5)  # 50 % at the radius
    assert edge_profile(np.array(-40.0), kind, w) == pytest.approx(1.0)
    assert edge_profile(np.array(60.0), kind, w) == pytest.approx(0.0, abs=1e-7)
    if kind != "hard":
        # the 10-90 % rise equals the asked width (definition of edge_width_px)
        def at(level):
            return optimize.brentq(lambda d: float(edge_profile(np.array(d), kind, w)) - level,
                                   -50.0, 50.0, xtol=1e-12)
        assert at(0.1) - at(0.9) == pytest.approx(w, abs=1e-6)


@pytest.mark.parametrize("kind", ["linear", "gaussian", "rolled"])
def test_photo_edge_is_half_bright_at_the_true_radius(kind):
    radius = 100.0
    photo = render(RefSurface(), shape=(260, 280), radius_px=radius, center_px=(141.2, 128.7),
                   visibility=0.0, level=0.5, edge=kind, edge_width_px=6.0, bit_depth=16)
    inside, outside = 0.5, 0.5 * 0.02  # flat and dark surround levels (render's definitions)
    mid = 0.5 * (inside + outside) * 65535
    for ang in np.radians([10.0, 100.0, 200.0, 300.0]):
        d = (math.cos(ang), math.sin(ang))
        t = np.arange(80.0, 120.0, 0.05)
        v = ndimage.map_coordinates(photo.pixels.astype(float),
                                    [photo.center_px[1] + t * d[1], photo.center_px[0] + t * d[0]],
                                    order=1)
        k = int(np.nonzero(v < mid)[0][0])
        r50 = t[k - 1] + (v[k - 1] - mid) / (v[k - 1] - v[k]) * 0.05
        assert r50 == pytest.approx(radius, abs=0.15)


def test_tone_curves_noise_and_saturation():
    # sRGB transfer (IEC 61966-2-1, closed form) and a power law, on a fringe-free flat
    xs = np.array([0.0, 0.002, 0.0031308, 0.2, 1.0])
    srgb = np.where(xs <= 0.0031308, 12.92 * xs, 1.055 * xs ** (1 / 2.4) - 0.055)
    np.testing.assert_allclose(tone_curve(xs, "srgb"), srgb, atol=1e-12)
    assert tone_curve(np.array([1.0]), "srgb")[0] == pytest.approx(1.0)
    for tone, gamma, expect in (("srgb", 1.0, 1.055 * 0.2 ** (1 / 2.4) - 0.055),
                                ("gamma", 0.7, 0.2**0.7), ("linear", 1.0, 0.2)):
        p = render(RefSurface(), shape=(120, 120), radius_px=50.0, visibility=0.0, level=0.2,
                   tone=tone, gamma=gamma, bit_depth=16)
        assert p.pixels[60, 60] == round(expect * 65535)
    # additive noise of 2 % of full scale (common practice: sample std within 10 %)
    p = render(RefSurface(), shape=(200, 200), radius_px=90.0, visibility=0.0, level=0.4,
               noise=0.02, bit_depth=16, seed=5)
    assert p.pixels[60:140, 60:140].std() / 65535 == pytest.approx(0.02, rel=0.1)
    # saturation: crests pushed 30 % past full scale clip there
    p = render(RefSurface(), shape=(200, 200), radius_px=90.0, visibility=0.8, saturation=0.3)
    assert (p.pixels == 255).mean() > 0.1
    assert p.params["gain"] > 1.0


def test_speckle_contrast_and_dust():
    # fully developed speckle has exponential statistics: std / mean = 1 (closed form); mixed
    # in at contrast c the multiplier's std / mean is c
    for c in (1.0, 0.5):
        p = render(RefSurface(), shape=(300, 300), radius_px=140.0, visibility=0.0, level=0.3,
                   speckle=c, speckle_grain_px=2.5, bit_depth=16, seed=2)
        core = p.pixels[90:210, 90:210].astype(float)
        assert core.std() / core.mean() == pytest.approx(c, rel=0.12)
    clean = render(RefSurface(), shape=(300, 300), radius_px=140.0, seed=4)
    dusty = render(RefSurface(), shape=(300, 300), radius_px=140.0, dust=12, seed=4)
    specks = dusty.params["dust_specks"]
    assert len(specks) == 12
    changed = clean.pixels != dusty.pixels
    assert 0 < changed.mean() < 0.02  # small, local
    for sx, sy, rad, opacity, _bright in specks:
        assert 3.0 <= 2 * rad <= max(4.0, 0.01 * 140.0) and 0.3 <= opacity <= 0.8
        assert math.hypot(sx - 149.5, sy - 149.5) <= 1.1 * 140.0


def test_illumination_field_has_the_asked_range():
    # closed form: mean 1 over the disk, peak-to-peak equal to the asked amount
    grid = polar_grid()
    rho = np.append(grid.rho, 1.0)[:, None]
    f = illumination_field(rho * np.cos(grid.theta), rho * np.sin(grid.theta), 0.3, 25.0)
    assert grid.mean(f[:-1]) == pytest.approx(1.0, abs=1e-12)
    assert f.max() - f.min() == pytest.approx(0.3, abs=1e-3)


# ---------------------------------------------------------------------------------------------
# Files
# ---------------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def small_photos():
    surf = RefSurface({4: 40.0, 6: 10.0})
    kw = dict(shape=(120, 160), radius_px=50.0, fringes=16.0, noise=0.01, seed=1)
    return render(surf, bit_depth=8, **kw), render(surf, bit_depth=16, **kw)


@pytest.mark.parametrize(("fmt", "depth"), [("png", 8), ("png", 16), ("tiff", 8), ("tiff", 16)])
def test_lossless_files_round_trip(tmp_path, small_photos, fmt, depth):
    photo = small_photos[0 if depth == 8 else 1]
    path = write(photo, tmp_path / f"p.{fmt}")
    with Image.open(path) as im:
        assert im.format == {"png": "PNG", "tiff": "TIFF"}[fmt]
        assert im.mode == ("L" if depth == 8 else "I;16")
        back = np.array(im)
    np.testing.assert_array_equal(back, photo.pixels)
    if depth == 16:
        assert back.max() > 255  # really 16 bit
    assert os.listdir(tmp_path) == [f"p.{fmt}"]  # no temporary file left


# IJG base luminance table (ITU-T T.81 Annex K, table K.1; from memory)
_K1 = [16, 11, 10, 16, 24, 40, 51, 61, 12, 12, 14, 19, 26, 58, 60, 55, 14, 13, 16, 24, 40, 57,
       69, 56, 14, 17, 22, 29, 51, 87, 80, 62, 18, 22, 37, 56, 68, 109, 103, 77, 24, 35, 55, 64,
       81, 104, 113, 92, 49, 64, 78, 87, 103, 121, 120, 101, 72, 92, 95, 98, 112, 100, 103, 99]


@pytest.mark.parametrize("quality", [70, 80, 90])
def test_jpeg_quality_is_honoured(tmp_path, small_photos, quality):
    path = write(small_photos[1], tmp_path / "p.jpg", quality=quality)  # 16-bit photo -> 8 bit
    # libjpeg quality scaling (IJG jcparam.c, from memory): 200 - 2q percent for q >= 50
    scale = 200 - 2 * quality
    expect = sorted(min(max((b * scale + 50) // 100, 1), 255) for b in _K1)
    with Image.open(path) as im:
        assert im.format == "JPEG" and im.mode == "L"
        assert sorted(im.quantization[0]) == expect  # sorted: independent of zig-zag order
        back = np.array(im).astype(float)
    ref = np.rint(small_photos[1].pixels / 257.0)
    assert np.abs(back - ref).mean() < 3.0  # common practice: a few levels at q >= 70
    assert os.listdir(tmp_path) == ["p.jpg"]


def test_rgb_jpeg_and_colour_cast(tmp_path, small_photos):
    grey = write(small_photos[0], tmp_path / "g.jpg", rgb=True, quality=90)
    cast = write(small_photos[0], tmp_path / "c.jpg", color_cast=(1.08, 1.0, 0.9), quality=90)
    with Image.open(grey) as im:
        assert im.mode == "RGB"
        g = np.array(im).astype(float)
    with Image.open(cast) as im:
        c = np.array(im).astype(float)
    assert np.abs(g[..., 0] - g[..., 2]).mean() < 1.5  # grey replicated
    assert c[..., 0].mean() > c[..., 1].mean() > c[..., 2].mean()


def test_failed_write_leaves_the_old_file_and_no_temporary(tmp_path, small_photos, monkeypatch):
    path = tmp_path / "p.png"
    path.write_bytes(b"old")

    def broken_save(self, fp, *args, **kwargs):
        fp.write(b"partial")
        raise OSError("disk full")

    monkeypatch.setattr(Image.Image, "save", broken_save)
    with pytest.raises(OSError, match="disk full"):
        write(small_photos[0], path)
    assert path.read_bytes() == b"old"
    assert os.listdir(tmp_path) == ["p.png"]
    with pytest.raises(ValueError):
        write(small_photos[0], tmp_path / "p.bmp")


# ---------------------------------------------------------------------------------------------
# Cases
# ---------------------------------------------------------------------------------------------


def test_random_draws_stay_in_their_ranges():
    fmts, small, speckled, dusty, featured = set(), 0, 0, 0, 0
    n = 60
    for seed in range(n):
        d = draw_settings(seed)
        r, surf = d["render"], d["surface"]
        rows, cols = r["shape"]
        short = min(rows, cols)
        mp = rows * cols / 1e6
        assert 0.29 <= mp <= 12.1
        small += mp <= 3.0
        assert any(abs(max(rows, cols) / short - a) < 0.01 for a in (4 / 3, 1.5, 1.0))
        assert 0.30 * short <= r["radius_px"] <= 0.45 * short
        cx, cy = r["center_px"]
        assert math.hypot(cx - (cols - 1) / 2, cy - (rows - 1) / 2) <= 0.10 * short + 1e-9
        assert r["radius_px"] < cx < cols - 1 - r["radius_px"]
        assert r["radius_px"] < cy < rows - 1 - r["radius_px"]
        assert 12 <= r["fringes"] <= 40 and 0 <= r["angle_deg"] < 180
        assert 0.35 <= r["visibility"] <= 0.95 and 0 <= r["noise"] <= 0.03
        assert 0 <= r["illumination"] <= 0.3
        assert r["tone"] in ("linear", "srgb", "gamma") and 0.6 <= r["gamma"] <= 1.0
        assert 0.01 * r["radius_px"] <= r["edge_width_px"] <= 0.04 * r["radius_px"]
        assert r["surround"] in ("dark", "grey")
        assert r["wavelength_nm"] in WAVELENGTHS_NM
        assert (d["fmt"], r["bit_depth"]) in FORMATS
        assert (d["quality"] is None) == (d["fmt"] != "jpeg")
        if d["quality"] is not None:
            assert 70 <= d["quality"] <= 90
        fmts.add((d["fmt"], r["bit_depth"]))
        speckled += r["speckle"] > 0
        dusty += r["dust"] > 0
        # surfaces: power and astigmatism always, Noll terms within 66, resolvable features
        assert surf.zernike_nm[4] != 0 and math.hypot(surf.zernike_nm[5], surf.zernike_nm[6]) > 0
        assert max(surf.zernike_nm) <= 66
        featured += bool(surf.bumps or surf.rings or surf.edge or surf.ripples)
        assert all(b.sigma >= 0.06 for b in surf.bumps)
        assert all(g.width >= 0.06 for g in surf.rings)
        for rip in surf.ripples:
            assert rip.cycles <= r["fringes"] / (6.0 if rip.circular else 3.0)
        pv, slope = _tilt_removed_pv_and_slope(surf)
        assert pv <= r["wavelength_nm"] * 1.0001
        assert 2 * slope / r["wavelength_nm"] <= SLOPE_LIMIT * r["fringes"] / 2 * 1.0001
    assert small >= 0.7 * n and len(fmts) == len(FORMATS)
    assert 0.1 * n <= speckled <= 0.45 * n and 0.3 * n <= dusty <= 0.7 * n
    assert 0.3 * n <= featured <= 0.7 * n


def test_random_case_is_reproducible(tmp_path):
    a = random_case(11, megapixels=(0.3, 0.3))
    b = draw_settings(11, megapixels=(0.3, 0.3))
    again = render(b["surface"], **b["render"])
    np.testing.assert_array_equal(a.photo.pixels, again.pixels)
    assert a.photo.pixels.size == pytest.approx(0.3e6, rel=0.01)
    assert a.truth["power_nm"] == pytest.approx(-2 * math.sqrt(3) * a.truth["zernike_nm"][4])
    path = a.save(tmp_path)
    assert path.name == a.filename and os.listdir(tmp_path) == [a.filename]
    with Image.open(path) as im:
        assert im.size == (a.photo.shape[1], a.photo.shape[0])


def test_a_named_case():
    assert len(NAMED_CASES) == 16
    assert "z22_6nm_f20" in NAMED_CASES and "local_dig_f32" in NAMED_CASES
    case = named_case("z22_6nm_f32")
    assert case.photo.fringes == 32 and case.photo.pixels.size == pytest.approx(1e6, rel=0.01)
    assert case.truth["zernike_nm"][22] == pytest.approx(6.0, abs=1e-9)
    assert _fringes_along(case.photo) == pytest.approx(32.0, abs=0.3)
    with pytest.raises(KeyError):
        named_case("z22_6nm_f25")


def test_area_truth_agrees_with_gauss_legendre_and_the_disk():
    # The polygon's and annulus' truth (a plain sum on a fine grid) against two other
    # numerical methods of this generator: Gauss-Legendre quadrature over a rectangle
    # (numpy.polynomial.legendre.leggauss) given as a polygon, and the disk's polar
    # quadrature for an annulus with no hole. The grid's edge error is O(step): within
    # 0.5 % (RMS, power) and 1 % (PV, whose peak the grid may miss by a step).
    from .shaped import _turn, area_truth, rect_truth

    part = {"width_px": 300.0, "height_px": 140.0, "angle_deg": 25.0}
    u, v = _turn(np.array([1, -1, -1, 1]) * 150.0, np.array([1, 1, -1, -1]) * 70.0, 25.0)
    poly = {"corners_px": tuple(zip(u.tolist(), v.tolist(), strict=True))}
    by_grid, by_nodes = area_truth(RICH, "poly", poly), rect_truth(RICH, part)
    for name in ("rms_nm", "rms_irregularity_nm", "power_nm"):
        assert by_grid[name] == pytest.approx(by_nodes[name], rel=5e-3)
    for name in ("pv_nm", "irregularity_nm", "pvr_nm"):
        assert by_grid[name] == pytest.approx(by_nodes[name], rel=1e-2)
    disk = truth(RICH, 632.8)
    ring = area_truth(RICH, "annulus", {"radius_px": 250.0, "inner_px": 0.0})
    for name in ("rms_nm", "rms_irregularity_nm", "power_nm"):
        assert ring[name] == pytest.approx(disk[name], rel=5e-3)
    # PVr (Evans, Opt. Eng. 48(4), 043605, 2009) by a least-squares FRINGE-36 fit over
    # the points, against the disk's by projection onto the orthogonal terms
    assert ring["pvr_nm"] == pytest.approx(disk["pvr_nm"], rel=1e-2)
    # astigmatism as the quadratic fit's part beyond {1, x, y, rho^2}, against the disk's
    # from its Noll 5 and 6 coefficients by projection; C and RMSa from the means around
    # thin rings of the grid's points, against the disk's polar quadrature
    assert ring["astigmatism_nm"] == pytest.approx(disk["astigmatism_nm"], rel=2e-3)
    assert ring["symmetric_irregularity_nm"] == pytest.approx(
        disk["symmetric_irregularity_nm"], rel=1e-2)
    assert ring["rms_asymmetric_nm"] == pytest.approx(disk["rms_asymmetric_nm"], rel=2e-3)
    # the rectangle's astigmatism by the grid and by Gauss-Legendre nodes
    assert by_grid["astigmatism_nm"] == pytest.approx(by_nodes["astigmatism_nm"], rel=1e-2)
