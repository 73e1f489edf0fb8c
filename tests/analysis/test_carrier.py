"""The carrier in the spectrum (analysis/carrier.py) against closed forms."""

from __future__ import annotations

import math

import numpy as np
import scipy.fft as sfft
from flatsight.analysis.carrier import find_carrier, sideband_centroid


def _cubic_fringes(n=256, radius=100.0, u0=20.0, v0=50.0, b=20.0):
    # fringes on a disk, the phase a carrier (u0, v0 bins) plus b X^3 (X = x / radius)
    yy, xx = np.indices((n, n), dtype=float)
    x, y = xx - n / 2, yy - n / 2
    disk = np.hypot(x, y) <= radius
    phase = 2 * np.pi * (u0 * yy + v0 * xx) / n + b * (x / radius) ** 3
    return np.where(disk, 0.5 + 0.4 * np.cos(phase), 0.0)


def test_the_centroid_is_the_mean_local_frequency_where_the_peak_is_not():
    # Closed form: the power-weighted mean frequency of a exp(i phi) is the a^2-weighted
    # mean of grad(phi) / 2 pi (Parseval's theorem applied to the gradient). With
    # phi = carrier + b X^3 the local column frequency is v0 + 3 b X^2 n / (2 pi R)
    # bins, and X^2 averages 1/4 over a disk: the centroid lies 3 b n / (8 pi R) bins
    # past v0 (6.1 here), while the peak stays near v0, where X^2 is small over most
    # of the disk's height.
    n, radius, u0, v0, b = 256, 100.0, 20.0, 50.0, 20.0
    image = _cubic_fringes(n, radius, u0, v0, b)
    mag = np.abs(sfft.rfft2(image - image.mean()))
    pu, pv, _, _ = find_carrier(mag, min_radius_bins=8.0, full=False)
    cu, cv = sideband_centroid(mag, pu, pv)
    expected_v = v0 + 3 * b * n / (8 * math.pi * radius)
    assert abs(cu - u0) < 0.3
    assert abs(cv - expected_v) < 0.4
    assert abs(pv - v0) < 2.0  # the peak: fringes away from the mean


def test_straight_fringes_keep_their_carrier():
    # no surface slope: the centroid is the carrier, to a tenth of a bin, whichever
    # half-plane the start is given in (a real image's spectrum is conjugate-symmetric)
    n = 256
    image = _cubic_fringes(n, 100.0, 3.0, 41.5, 0.0)
    mag = np.abs(sfft.rfft2(image - image.mean()))
    for start in ((3.0, 41.0), (-3.0, -41.0)):
        cu, cv = sideband_centroid(mag, *start)
        assert math.hypot(abs(cu) - 3.0, abs(cv) - 41.5) < 0.1
        assert math.copysign(1.0, cv) == math.copysign(1.0, start[1])
