"""Where the fringes are: the aperture cropped and binned, and the tilt carrier in its spectrum.

References
----------
M. Takeda, H. Ina, S. Kobayashi, JOSA 72(1), 156 (1982): the carrier is the peak of the
spectrum away from zero frequency, and one sideband around it holds the surface.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import scipy.fft as sfft

from .aperture import Aperture
from .errors import UnanalysablePhotoError

__all__ = ["CROP_MARGIN", "Carrier", "Spectrum", "bin_pixels", "crop_aperture", "find_carrier",
           "radius_grid", "sideband_centroid", "spectrum_view"]

CROP_MARGIN = 0.32  # crop half-size beyond the radius, as a fraction of it


@dataclass(frozen=True)
class Spectrum:
    """A small log-magnitude view of the photo's spectrum, centred on zero frequency.

    ``carrier_rc`` (row, column) and the radii are in this image's own pixels, so a
    view can draw the carrier and the sideband window over it directly.
    """

    log_magnitude: np.ndarray
    carrier_rc: tuple[float, float]
    window_radius: float
    dc_radius: float


@dataclass(frozen=True)
class Carrier:
    """The tilt carrier: spatial frequency of the straight fringes the wedge puts in.

    Frequencies in cycles per photo pixel, x right and y down. By Flatsight's sign
    convention the carrier points down the photo (``fy > 0``, or ``fy == 0`` and ``fx > 0``).
    """

    fx_cpp: float
    fy_cpp: float
    concentration: float  # share of the fringe energy near the sidebands (1 = clean fringes)

    @property
    def frequency_cpp(self) -> float:
        return float(math.hypot(self.fx_cpp, self.fy_cpp))

    @property
    def period_px(self) -> float:
        return 1.0 / self.frequency_cpp

    @property
    def angle_deg(self) -> float:
        """Direction of the carrier from the photo's x axis toward +y (down), in [0, 180).

        A carrier within about 0.2 degrees of the x axis points right and may read just
        under 180 when it leans a hair upward.
        """
        return math.degrees(math.atan2(self.fy_cpp, self.fx_cpp)) % 180.0

    def fringes_across(self, diameter_px: float) -> float:
        return self.frequency_cpp * diameter_px


def bin_pixels(image: np.ndarray, k: int, *, stride: bool = False) -> np.ndarray:
    """Mean of each k x k block (or, with ``stride``, one pixel of each: a quick look)."""
    if k == 1:
        return image
    if stride:
        return np.ascontiguousarray(image[k // 2::k, k // 2::k])
    h, w = (image.shape[0] // k) * k, (image.shape[1] // k) * k
    blocks = image[:h, :w].reshape(h // k, k, w // k, k)
    return blocks.sum(axis=3, dtype=np.float32).sum(axis=1) * np.float32(1.0 / (k * k))


def crop_aperture(image: np.ndarray, aperture: Aperture, k: int, *, stride: bool = False):
    """Square crop around the aperture with a margin, padded where it leaves the frame.

    Returns the binned crop, a mask of pixels that came from the photo, and the photo
    coordinates of the binned pixel (0, 0)'s centre.
    """
    half = aperture.radius_px * (1.0 + CROP_MARGIN)
    n = int(math.ceil(2 * half / k)) * k
    x0 = int(math.floor(aperture.center_x_px - n / 2 + 0.5))
    y0 = int(math.floor(aperture.center_y_px - n / 2 + 0.5))
    H, W = image.shape
    xa, xb = max(0, x0), min(W, x0 + n)
    ya, yb = max(0, y0), min(H, y0 + n)
    if xa >= xb or ya >= yb:
        raise UnanalysablePhotoError("the aperture lies outside the photo")
    if (xa, ya, xb, yb) == (x0, y0, x0 + n, y0 + n):
        crop = image[ya:yb, xa:xb]
        inframe = None
    else:
        crop = np.zeros((n, n), dtype=np.float32)
        crop[ya - y0:yb - y0, xa - x0:xb - x0] = image[ya:yb, xa:xb]
        inframe = np.zeros((n, n), dtype=bool)
        inframe[ya - y0:yb - y0, xa - x0:xb - x0] = True
    binned = bin_pixels(np.asarray(crop, dtype=np.float32), k, stride=stride)
    inframe_b = None if inframe is None else bin_pixels(inframe.astype(np.float32), k) > 0.99
    origin = (x0 + (k - 1) / 2.0, y0 + (k - 1) / 2.0)
    if stride:
        origin = (x0 + k // 2, y0 + k // 2)
    return binned, inframe_b, origin


def radius_grid(shape, center_rc, radius) -> np.ndarray:
    yy = np.arange(shape[0], dtype=np.float32)[:, None] - np.float32(center_rc[0])
    xx = np.arange(shape[1], dtype=np.float32)[None, :] - np.float32(center_rc[1])
    return np.sqrt(yy * yy + xx * xx) / np.float32(radius)


def find_carrier(
    spectrum_mag: np.ndarray, *, min_radius_bins: float, full: bool
) -> tuple[float, float, float]:
    """Peak of a magnitude spectrum away from zero frequency, with sub-bin refinement.

    Parameters
    ----------
    spectrum_mag : (Ny, Nx) or (Ny, Nx//2+1) ndarray
        ``|fft2|`` (``full=True``) or ``|rfft2|`` of a real image, unshifted.
    min_radius_bins : float
        Zero-order region to ignore, in bins.

    Returns
    -------
    (u, v, concentration, prominence)
        Peak position in bins (row frequency ``u``, column frequency ``v``; signed) with
        the half-plane convention ``u > 0`` or ``u == 0, v > 0``; the share of the
        spectrum's energy (outside the zero-order region) within half the carrier
        frequency of either sideband; and the peak's power over the median power at
        the same spatial frequency.
    """
    ny = spectrum_mag.shape[0]
    nx = spectrum_mag.shape[1] if full else (spectrum_mag.shape[1] - 1) * 2
    u = sfft.fftfreq(ny, 1.0 / ny)[:, None]
    v = (sfft.fftfreq(nx, 1.0 / nx) if full else sfft.rfftfreq(nx, 1.0 / nx))[None, :]
    r = np.hypot(u, v)
    power = spectrum_mag.astype(np.float64) ** 2
    power = np.where(r > min_radius_bins, power, 0.0)
    idx = np.unravel_index(int(np.argmax(power)), power.shape)
    pu, pv = float(u[idx[0], 0]), float(v[0, idx[1]])

    def refine(line: np.ndarray, i: int) -> float:
        if 0 < i < line.size - 1:
            a, b, c = (np.log(line[j] + 1e-30) for j in (i - 1, i, i + 1))
            den = a - 2 * b + c
            if den < 0:
                return float(np.clip(0.5 * (a - c) / den, -0.5, 0.5))
        return 0.0

    du = refine(np.roll(power[:, idx[1]], ny // 2 - idx[0])[ny // 2 - 1:ny // 2 + 2], 1)
    dv = refine(power[idx[0], max(0, idx[1] - 1):idx[1] + 2], 1 if idx[1] > 0 else 0)
    # the half-plane is decided on the whole-bin peak, so a sub-bin shift of a carrier
    # lying along the x axis (fringes within about a degree of vertical) cannot flip it
    flip = pu < 0 or (pu == 0 and pv < 0)
    pu, pv = pu + du, pv + dv
    f0 = math.hypot(pu, pv)
    # share of the energy (zero order aside) within half the carrier of either sideband
    near = (np.hypot(u - pu, v - pv) <= 0.5 * f0) | (np.hypot(u + pu, v + pv) <= 0.5 * f0)
    total = float(power.sum())
    concentration = float(power[near].sum() / total) if total > 0 else 0.0
    # peak over the typical power at the same spatial frequency: straight fringes stand
    # thousands of times above it, noise or closed (ring-spectrum) fringes a few tens
    ring = (r > 0.8 * f0) & (r < 1.2 * f0)
    typical = float(np.median(power[ring])) if ring.any() else 0.0
    prominence = float(power[idx] / typical) if typical > 0 else float("inf")
    if flip:
        pu, pv = -pu, -pv
    return pu, pv, concentration, prominence


def sideband_centroid(spectrum_mag: np.ndarray, u: float, v: float, *,
                      iterations: int = 6) -> tuple[float, float]:
    """The power centroid of the sideband around a peak ``(u, v)`` of an ``|rfft2|``.

    Fringes ``a exp(i phi)`` put their power around the carrier, spread by the
    surface's slopes. The power-weighted mean frequency of the sideband is the mean of
    the local fringe frequency ``grad phi / 2 pi`` over the photo, weighted by ``a ** 2``
    (Parseval's theorem applied to the gradient), which is the tilt. A surface whose
    slope varies by several fringes across the part spreads the sideband that wide, and
    its highest bin can lie fringes away from that mean (seen with 12 tilt fringes, a
    quarter-micrometre of power and astigmatism and light falling off across the part:
    the peak at 9.3 fringes, the tilt at 12.1). The centroid is taken over a disk of half
    the carrier frequency around the estimate, which keeps the zero order out, and the
    disk moved to it until it settles (a mean shift).

    Parameters
    ----------
    spectrum_mag : (Ny, Nx//2+1) ndarray
        ``|rfft2|`` of a real image, unshifted.
    u, v : float
        Starting estimate in bins (row and column frequency), e.g. ``find_carrier``'s.

    Returns
    -------
    (u, v)
        The centroid in bins, on the same side of zero as the start.
    """
    ny = spectrum_mag.shape[0]
    nx = (spectrum_mag.shape[1] - 1) * 2
    power = spectrum_mag.astype(np.float64) ** 2
    fu = sfft.fftfreq(ny, 1.0 / ny)[:, None]
    fv = sfft.rfftfreq(nx, 1.0 / nx)[None, :]
    power_u, power_v = power * fu, power * fv  # the centroid's moments, bin by bin
    cu, cv = float(u), float(v)
    for _ in range(iterations):
        radius = 0.5 * math.hypot(cu, cv)
        # a stored bin (fu, fv) stands for its mirror (-fu, -fv) too (a real image's
        # spectrum is conjugate-symmetric): at most one of the two lies within half the
        # carrier of the centre, and the column fv = 0 holds both already
        near = np.hypot(fu - cu, fv - cv) <= radius
        mirror = (np.hypot(fu + cu, fv + cv) <= radius) & (fv > 0)
        total = float(power[near].sum() + power[mirror].sum())
        if not total > 0:
            break
        nu = (float(power_u[near].sum()) - float(power_u[mirror].sum())) / total
        nv = (float(power_v[near].sum()) - float(power_v[mirror].sum())) / total
        moved = math.hypot(nu - cu, nv - cv)
        cu, cv = nu, nv
        if moved < 0.05:
            break
    return cu, cv


def spectrum_view(mag: np.ndarray, carrier_bins: tuple[float, float], window_bins: float,
                   dc_bins: float, size: int = 160) -> Spectrum:
    """A centred, shrunk log-magnitude spectrum with the carrier in its own pixel units."""
    ny, nx = mag.shape
    shifted = np.fft.fftshift(np.log1p(mag.astype(np.float64)))
    k = max(1, int(math.ceil(max(ny, nx) / size)))
    h, w = (ny // k) * k, (nx // k) * k
    small = shifted[:h, :w].reshape(h // k, k, w // k, k).max(axis=(1, 3))
    cy, cx = (ny // 2) / k, (nx // 2) / k
    return Spectrum(
        log_magnitude=small.astype(np.float32),
        carrier_rc=(cy + carrier_bins[0] / k, cx + carrier_bins[1] / k),
        window_radius=window_bins / k,
        dc_radius=dc_bins / k,
    )


