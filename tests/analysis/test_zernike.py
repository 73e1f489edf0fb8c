"""Tests of the Zernike terms, their indices and the least-squares fit (analysis/zernike.py)."""

from __future__ import annotations

import re
from math import factorial

import numpy as np
import pytest
from flatsight.analysis.zernike import (
    ZernikeFit,
    fit_zernike,
    nm_to_noll,
    noll_to_nm,
    noll_to_osa,
    osa_to_noll,
    radial,
    term_name,
    zernike,
    zernike_basis,
)
from numpy.polynomial.legendre import leggauss
from scipy.special import eval_jacobi

# Noll 1976, Table 1 (from memory): (n, m) of the first 15 terms; m > 0 a cosine term
# (even j), m < 0 a sine term (odd j).
NOLL_TABLE = {
    1: (0, 0), 2: (1, 1), 3: (1, -1), 4: (2, 0), 5: (2, -2), 6: (2, 2), 7: (3, -1),
    8: (3, 1), 9: (3, -3), 10: (3, 3), 11: (4, 0), 12: (4, 2), 13: (4, -2), 14: (4, 4),
    15: (4, -4),
}


def all_nm(n_max: int):
    for n in range(n_max + 1):
        for m in range(-n, n + 1, 2):
            yield n, m


# --- radial polynomials ------------------------------------------------------------------


@pytest.mark.parametrize("n, m", [(n, m) for n, m in all_nm(10) if m >= 0])
def test_radial_matches_jacobi(n, m):
    # R_n^m(rho) = (-1)^k rho^m P_k^(m,0)(1 - 2 rho^2), k = (n - m)/2 (M. Born, E. Wolf,
    # Principles of Optics, 7th ed., 1999, Appendix VII, from memory), with
    # scipy.special.eval_jacobi as the reference
    rho = np.linspace(0.0, 1.0, 257)
    k = (n - m) // 2
    expected = (-1) ** k * rho**m * eval_jacobi(k, m, 0, 1.0 - 2.0 * rho**2)
    np.testing.assert_allclose(radial(n, m, rho), expected, rtol=0, atol=1e-12)
    # the sign of m (cosine or sine term) does not change the radial part
    np.testing.assert_array_equal(radial(n, -m, rho), radial(n, m, rho))


def test_radial_is_one_at_the_rim():
    # R_n^m(1) = 1 for every n, m (Noll 1976; a property of the Jacobi form, from memory)
    for n, m in all_nm(10):
        assert radial(n, m, np.array([1.0]))[0] == pytest.approx(1.0, abs=1e-12)


# --- Noll's terms ------------------------------------------------------------------------

# Noll terms at rho = 0.5, theta = 30 degrees, worked out by hand from the table of Noll,
# JOSA 66(3), 207 (1976): e.g. Z4 = sqrt(3)(2 x 0.25 - 1) = -0.866025
CHECK_VALUES = {
    2: 0.866025, 3: 0.500000, 4: -0.866025, 5: 0.530330, 6: 0.306186, 7: -0.883883,
    8: -1.530931, 9: 0.353553, 10: 0.000000, 11: -0.279508, 12: -0.790569, 13: -1.369306,
    14: -0.098821, 15: 0.171163,
}


@pytest.mark.parametrize("j", sorted(CHECK_VALUES))
def test_noll_check_values(j):
    value = zernike(j, np.array(0.5), np.array(np.radians(30.0)))
    assert float(value) == pytest.approx(CHECK_VALUES[j], abs=2e-6)


def test_piston_is_one():
    assert np.all(zernike(1, np.linspace(0, 1, 5), np.zeros(5)) == 1.0)


def test_orthonormal_over_the_unit_disk():
    # Noll 1976: (1/pi) * integral over the unit disk of Z_j Z_k dA = delta_jk.
    # Gauss-Legendre in rho (exact for the degree-21 integrands of n <= 10 with 16 nodes)
    # times a uniform rule in theta (exact for trigonometric degree below the node count).
    x, w = leggauss(16)
    rho = 0.5 * (x + 1.0)
    w_rho = 0.5 * w * rho  # dA = rho d(rho) d(theta)
    theta = np.arange(64) * (2 * np.pi / 64)
    R, T = np.meshgrid(rho, theta, indexing="ij")
    W = np.outer(w_rho, np.full(theta.size, 2 * np.pi / theta.size))
    J = 66  # every term with n <= 10
    Z = np.stack([zernike(j, R, T).ravel() for j in range(1, J + 1)])
    gram = (Z * W.ravel()) @ Z.T / np.pi
    np.testing.assert_allclose(gram, np.eye(J), atol=1e-10)


# closed forms, worked out from Noll's table (JOSA 66(3), 207, 1976) with unit RMS: tilt 4,
# power 2 sqrt 3, astigmatism 2 sqrt 6, coma and trefoil 4 sqrt 2, primary spherical
# (3/2) sqrt 5
PV_OVER_RMS = {
    2: 4.0, 3: 4.0, 4: 2 * np.sqrt(3), 5: 2 * np.sqrt(6), 6: 2 * np.sqrt(6),
    7: 4 * np.sqrt(2), 8: 4 * np.sqrt(2), 9: 4 * np.sqrt(2), 10: 4 * np.sqrt(2),
    11: 1.5 * np.sqrt(5),
}


@pytest.mark.parametrize("j", sorted(PV_OVER_RMS))
def test_pv_over_rms_of_single_terms(j):
    # a fine polar grid that holds the rim, the centre and theta = 0, 30, 45, 90 ... degrees
    rho = np.linspace(0.0, 1.0, 4001)
    theta = np.radians(np.arange(0.0, 360.0, 0.5))
    R, T = np.meshgrid(rho, theta, indexing="ij")
    z = zernike(j, R, T)
    pv = z.max() - z.min()
    # RMS by area: weight each ring by rho (the grid is uniform in rho, not in area)
    w = np.broadcast_to(rho[:, None], z.shape)
    mean = np.sum(z * w) / np.sum(w)
    rms = np.sqrt(np.sum((z - mean) ** 2 * w) / np.sum(w))
    assert rms == pytest.approx(1.0, rel=2e-3)  # orthonormal: a unit coefficient is 1 RMS
    assert pv == pytest.approx(PV_OVER_RMS[j], rel=1e-6)


def test_zernike_convention_x_right_y_up():
    # DEVELOPERS.md: theta counter-clockwise from x, y toward the photo's top; tilt x
    # (Noll 2, cos theta) rises to the right, tilt y (Noll 3, sin theta) rises upward
    x = np.array([1.0, 0.0, -1.0, 0.0])
    y = np.array([0.0, 1.0, 0.0, -1.0])
    B = zernike_basis(3, x, y)
    np.testing.assert_allclose(B[:, 1], [2, 0, -2, 0], atol=1e-12)  # Z2 = 2 rho cos theta
    np.testing.assert_allclose(B[:, 2], [0, 2, 0, -2], atol=1e-12)  # Z3 = 2 rho sin theta


# --- indices -----------------------------------------------------------------------------


def test_first_fifteen_against_noll_table():
    for j, nm in NOLL_TABLE.items():
        assert noll_to_nm(j) == nm
        assert nm_to_noll(*nm) == j


def test_noll_rules_for_every_term_to_n_20():
    # Noll 1976: within each order n the terms go by increasing |m|; even j carry cos
    # (m > 0), odd j sin (m < 0); every (n, m) with n - |m| even appears once
    seen = set()
    j = 1
    for n in range(21):
        row = []
        for _ in range(n + 1):
            nn, m = noll_to_nm(j)
            assert nn == n
            if m != 0:
                assert (m > 0) == (j % 2 == 0)
            row.append(abs(m))
            seen.add((nn, m))
            assert nm_to_noll(nn, m) == j
            j += 1
        assert row == sorted(row)
    assert seen == set(all_nm(20))


def test_osa_index_formula_and_round_trip():
    # Thibos et al. 2002 / ANSI Z80.28 / ISO 24157: j_osa = (n (n + 2) + m) / 2 from 0
    for j in range(1, 232):
        n, m = noll_to_nm(j)
        k = noll_to_osa(j)
        assert k == (n * (n + 2) + m) // 2
        assert osa_to_noll(k) == j
    # OSA order runs n = 0, 1, ..., m = -n, -n + 2, ..., n: the indices 0, 1, 2 ...
    order = [noll_to_osa(nm_to_noll(n, m)) for n, m in all_nm(20)]
    assert order == list(range(len(order)))


def test_osa_first_terms():
    # ISO 24157 / Thibos et al. 2002 (from memory): OSA 0 piston, 1 tilt y (m = -1),
    # 2 tilt x, 3 oblique astigmatism (m = -2), 4 defocus, 5 astigmatism 0/90 degrees
    assert [osa_to_noll(k) for k in range(6)] == [1, 3, 2, 5, 4, 6]


@pytest.mark.parametrize("bad", [0, -3])
def test_bad_indices_are_refused(bad):
    with pytest.raises(ValueError):
        noll_to_nm(bad)
    with pytest.raises(ValueError):
        osa_to_noll(bad - 1)
    with pytest.raises(ValueError):
        nm_to_noll(3, 2)  # n - |m| odd: no such term


def test_term_names_use_the_trade_words():
    assert [term_name(j) for j in (1, 2, 3, 4, 11, 22)] == [
        "piston", "tilt x", "tilt y", "power", "spherical", "secondary spherical"]
    assert term_name(5).startswith("astigmatism") and term_name(6).startswith("astigmatism")
    assert term_name(7).startswith("coma") and term_name(9).startswith("trefoil")
    # issue 9 item 12: a sine term's orientation, 90/|m| degrees, read "heptafoil 12.8571°";
    # to a tenth of a degree it is 12.9° (sin m t = cos m (t - 90°/m), from memory)
    assert term_name(nm_to_noll(7, -7)) == "heptafoil 12.9°"
    assert term_name(nm_to_noll(4, -4)) == "tetrafoil 22.5°"
    assert term_name(nm_to_noll(2, -2)) == "astigmatism 45°"
    assert not any(re.search(r"\d\.\d\d", term_name(j)) for j in range(1, 67))


# --- the fit -----------------------------------------------------------------------------


def reference_term(j: int, x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Noll term j straight from the paper's finite sum (Noll 1976, eq. 2 and normalisation).

    Written independently of the module under test: its own index walk, its own sum.
    """
    # the j-th pair of Noll's ordering, built by listing each order's terms
    pairs = []
    for n in range(30):
        start = n * (n + 1) // 2 + 1
        for i, am in enumerate(sorted([abs(m) for m in range(-n, n + 1, 2)])):
            jj = start + i
            m = am if (am == 0 or jj % 2 == 0) else -am
            pairs.append((n, m))
        if len(pairs) >= j:
            break
    n, m = pairs[j - 1]
    rho = np.hypot(x, y)
    theta = np.arctan2(y, x)
    am = abs(m)
    r = sum((-1) ** s * factorial(n - s)
            / (factorial(s) * factorial((n + am) // 2 - s) * factorial((n - am) // 2 - s))
            * rho ** (n - 2 * s) for s in range((n - am) // 2 + 1))
    if m == 0:
        return np.sqrt(n + 1) * r
    ang = np.cos(am * theta) if m > 0 else np.sin(am * theta)
    return np.sqrt(2 * (n + 1)) * r * ang


def disk_points(n: int = 121):
    g = np.linspace(-1, 1, n)
    x, y = np.meshgrid(g, g)
    keep = np.hypot(x, y) <= 1.0
    return x[keep], y[keep]


def test_basis_against_the_paper_formula():
    x, y = disk_points(41)
    B = zernike_basis(45, x, y)
    for j in range(1, 46):
        np.testing.assert_allclose(B[:, j - 1], reference_term(j, x, y), atol=1e-11)


def test_fit_recovers_known_coefficients():
    rng = np.random.default_rng(12)
    x, y = disk_points()
    truth = rng.normal(0, 20.0, 36)
    B = np.stack([reference_term(j, x, y) for j in range(1, 37)], axis=1)
    h = B @ truth
    x_before, h_before = x.copy(), h.copy()
    fit = fit_zernike(h, x, y, n_terms=36)
    assert isinstance(fit, ZernikeFit) and fit.n_terms == 36 and fit.n_pixels == h.size
    np.testing.assert_allclose(fit.coefficients_nm, truth, atol=1e-8)
    assert fit.residual_rms_nm < 1e-8
    np.testing.assert_array_equal(x, x_before)  # inputs never mutated
    np.testing.assert_array_equal(h, h_before)


def test_fit_equals_a_plain_lstsq_on_noisy_data():
    # slow obvious reference: numpy.linalg.lstsq on a basis built from the paper's formula
    rng = np.random.default_rng(3)
    x, y = disk_points()
    B = np.stack([reference_term(j, x, y) for j in range(1, 37)], axis=1)
    h = B @ rng.normal(0, 10.0, 36) + 5.0 * np.sin(9 * x) + rng.normal(0, 1.0, x.size)
    expected, *_ = np.linalg.lstsq(B, h, rcond=None)
    fit = fit_zernike(h, x, y, n_terms=36)
    np.testing.assert_allclose(fit.coefficients_nm, expected, atol=1e-9)
    resid = h - B @ expected
    assert fit.residual_rms_nm == pytest.approx(np.sqrt(np.mean(resid**2)), rel=1e-9)


def test_fit_keeps_the_full_radius_when_the_edge_is_masked():
    # issue 2, item 7: normalise over the full aperture radius even when edge pixels are
    # masked, so the same surface gives the same coefficients
    x, y = disk_points()
    truth = np.zeros(15)
    truth[[3, 5, 7, 10]] = [50.0, -12.0, 6.0, 3.0]
    h = zernike_basis(15, x, y) @ truth
    keep = (np.hypot(x, y) < 0.9) & ~((x > 0.3) & (y > 0.3))  # a missing rim and a chunk
    fit = fit_zernike(h[keep], x[keep], y[keep], n_terms=15)
    np.testing.assert_allclose(fit.coefficients_nm, truth, atol=1e-8)


def test_osa_reordering_of_a_fit():
    x, y = disk_points(61)
    coef = np.arange(1.0, 22.0)
    fit = fit_zernike(zernike_basis(21, x, y) @ coef, x, y, n_terms=21)
    osa = fit.osa_coefficients_nm()
    for j in range(1, 22):
        assert osa[noll_to_osa(j)] == pytest.approx(coef[j - 1], abs=1e-8)


def test_fit_refuses_too_few_points():
    x, y = disk_points(9)
    with pytest.raises(ValueError):
        fit_zernike(np.zeros(x.size), x, y, n_terms=36)
