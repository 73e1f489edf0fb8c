"""The fringe envelope (analysis/extension.py) against a slow, obvious reference."""

from __future__ import annotations

import numpy as np
from flatsight.analysis.extension import fringe_envelope


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
