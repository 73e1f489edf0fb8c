"""The fringe envelope (analysis/extension.py) against slow, obvious references."""

from __future__ import annotations

import math

import numpy as np
from flatsight.analysis.extension import fringe_envelope
from scipy import integrate


def _photo(n=240, radius=100.0, edge_px=2.5, seed=3):
    rng = np.random.default_rng(seed)
    yy, xx = np.indices((n, n), dtype=float)
    r = np.hypot(yy - n / 2, xx - n / 2)
    # a soft edge a few pixels wide (a logistic step), fringes at 30 degrees, a little noise
    edge = 1.0 / (1.0 + np.exp((r - radius) / edge_px))
    fringes = 0.5 + 0.4 * np.cos(2 * np.pi * (xx * np.cos(0.5) + yy * np.sin(0.5)) / 13.0)
    data = edge * fringes + rng.normal(0.0, 0.005, (n, n))
    return data, r / radius


def test_rings_match_numpys_percentiles_ring_by_ring():
    # reference: a loop over rings with numpy.percentile (linear interpolation), the
    # same 95th/5th percentiles the envelope is defined by
    data, rho = _photo()
    known = rho <= 1.0 + 0.05
    width = 0.5 / 100.0
    mean, half = fringe_envelope(data, rho, known, ring_width=width)
    lo_r = 0.75
    for lo in (0.9, 0.97, 0.99):
        ring = known & (rho >= lo_r + np.floor((lo - lo_r) / width) * width)
        ring &= rho < lo_r + (np.floor((lo - lo_r) / width) + 1) * width
        assert ring.sum() >= 64
        # at the ring's centre the envelope is exactly the ring's percentiles (times the
        # fitted illumination, which is flat here to well under 1 %)
        centre = lo_r + (np.floor((lo - lo_r) / width) + 0.5) * width
        at = np.argmin(np.abs(rho - centre) + 10 * ~known)
        up, dn = np.percentile(data[ring], 95), np.percentile(data[ring], 5)
        assert abs(mean.flat[at] - 0.5 * (up + dn)) < 0.02 * (up - dn) + 0.01
        assert abs(half.flat[at] - 0.5 * (up - dn)) < 0.02 * (up - dn) + 0.01


def test_thin_rings_follow_a_soft_edge():
    # the fringes' amplitude falls with the edge: a thin-ring envelope follows the
    # logistic step to within a few percent where wide rings average it away
    data, rho = _photo()
    known = rho <= 1.0
    _, thin = fringe_envelope(data, rho, known, ring_width=0.5 / 100.0)
    _, wide = fringe_envelope(data, rho, known, ring_width=0.03)
    sel = known & (rho > 0.975)
    expected = 0.4 / (1.0 + np.exp((rho[sel] - 1.0) * 100.0 / 2.5))
    thin_err = np.median(np.abs(thin[sel] / expected - 1.0))
    wide_err = np.median(np.abs(wide[sel] / expected - 1.0))
    assert thin_err < 0.06
    assert thin_err < 0.5 * wide_err


def _srgb(light):
    # IEC 61966-2-1's encoding (from memory): 12.92 L up to L = 0.0031308, then
    # 1.055 L ** (1 / 2.4) - 0.055
    light = np.asarray(light, dtype=float)
    return np.where(light <= 0.0031308, 12.92 * light,
                    1.055 * np.abs(light) ** (1 / 2.4) - 0.055)


def _zero_order(light, visibility):
    # the fringe's own mean: the zero-order Fourier coefficient of the tone-curved
    # fringe over one period, by quadrature (scipy.integrate.quad)
    return integrate.quad(lambda t: float(_srgb(light * (1 + visibility * math.cos(t)))),
                          0.0, 2 * math.pi)[0] / (2 * math.pi)


def test_given_the_phase_the_mean_is_a_tone_curved_fringes_own_mean():
    # fringes of visibility 0.8 through the sRGB tone curve, the light fading over the
    # last ten pixels: given the fringes' phase, each ring's mean is the fringe's
    # zero-order term (to 1 %) out to the rim. The percentiles' midpoint is not: an
    # sRGB fringe is not symmetric about its mean, and the midpoint reads about 6 % low
    n, radius, width = 300, 130.0, 4.0
    yy, xx = np.indices((n, n), dtype=float)
    r = np.hypot(yy - n / 2, xx - n / 2)
    rho = r / radius
    light = 0.6 / (1.0 + np.exp((r - radius + 6.0) / width))
    phase = 2 * np.pi * (xx * math.cos(0.4) + yy * math.sin(0.4)) / 11.0
    data = _srgb(light * (1 + 0.8 * np.cos(phase)))
    known = rho <= 1.0
    by_phase, _ = fringe_envelope(data, rho, known, ring_width=0.5 / radius, phase=phase,
                                  half_by_phase=False)
    midpoint, _ = fringe_envelope(data, rho, known, ring_width=0.5 / radius)
    for at_rho in (0.5, 0.95, 0.97, 0.985, 0.995):
        i = np.flatnonzero((known & (np.abs(rho - at_rho) < 0.25 / radius)).ravel())[0]
        truth = _zero_order(float(light.ravel()[i]), 0.8)
        assert abs(by_phase.ravel()[i] / truth - 1.0) < 0.01, at_rho
        assert midpoint.ravel()[i] / truth - 1.0 < -0.04, at_rho


def test_without_half_by_phase_the_half_amplitude_stays_the_percentiles():
    # the round part's envelope: the mean by phase, the half-amplitude from the rings'
    # percentiles exactly as without a phase
    data, rho = _photo()
    known = rho <= 1.0
    yy, xx = np.indices(data.shape, dtype=float)
    phase = 2 * np.pi * (xx * np.cos(0.5) + yy * np.sin(0.5)) / 13.0
    _, half = fringe_envelope(data, rho, known, ring_width=0.005, phase=phase,
                              half_by_phase=False)
    _, plain = fringe_envelope(data, rho, known, ring_width=0.005)
    assert np.array_equal(half, plain)
