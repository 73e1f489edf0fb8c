"""Where the flat is in the photo: the illuminated circular clear aperture."""

from __future__ import annotations

import functools
from dataclasses import dataclass, field

import numpy as np
from scipy import ndimage as ndi
from scipy.optimize import least_squares
from skimage.filters import threshold_otsu
from skimage.measure import label

from .errors import PartCutByFrameError, SettingsError, UnanalysablePhotoError
from .shapes import Ellipse, Shape

__all__ = ["Aperture", "Exclusion", "find_aperture"]


@dataclass(frozen=True)
class Exclusion:
    """A circle left out of the measurement (a chip, a central obscuration, a fixture).

    Photo pixels: x to the right, y down.
    """

    center_x_px: float
    center_y_px: float
    radius_px: float


@dataclass(frozen=True)
class Aperture:
    """The clear aperture in photo pixels (x right, y down, from pixel centres).

    A circular part is its centre and radius. Any other outline is ``shape`` (see
    ``shapes``); centre and radius are then the outline's bounding circle, which the
    demodulation crops by, and ``inside`` and ``unit_xy`` follow the outline.
    """

    center_x_px: float
    center_y_px: float
    radius_px: float
    exclusions: tuple[Exclusion, ...] = field(default=())
    shape: Shape | None = None

    @classmethod
    def of_shape(cls, shape: Shape, exclusions: tuple[Exclusion, ...] = ()) -> Aperture:
        """The aperture of an outline, centred on it with its bounding radius."""
        return cls(float(shape.center_x_px), float(shape.center_y_px),
                   float(shape.bounding_radius_px), tuple(exclusions), shape)

    @property
    def kind(self) -> str:
        """``circle``, or the outline's kind (``ellipse``, ``rect``, ``poly``, ``annulus``)."""
        return "circle" if self.shape is None else self.shape.kind

    @property
    def maps_to_disk(self) -> bool:
        """Whether ``unit_xy`` fills the unit disk (circle, ellipse): plain Zernike terms."""
        return self.shape is None or self.shape.maps_to_disk

    def moved(self, dx: float = 0.0, dy: float = 0.0, dr: float = 0.0) -> Aperture:
        """A copy shifted by ``(dx, dy)`` pixels and grown by ``dr``."""
        if self.shape is not None:
            grow = max(2.0, self.radius_px + dr) / self.radius_px
            return Aperture.of_shape(self.shape.moved(dx, dy, grow), self.exclusions)
        return Aperture(self.center_x_px + dx, self.center_y_px + dy,
                        max(2.0, self.radius_px + dr), self.exclusions)

    def reshaped(self, turn_deg: float = 0.0, stretch: float = 1.0) -> Aperture:
        """A copy turned counter-clockwise and stretched across; a circle stretched becomes
        an ellipse (a round part seen at an angle), turned it stays as it is."""
        if self.shape is None:
            if stretch >= 1.0:
                return self
            return Aperture.of_shape(Ellipse(self.center_x_px, self.center_y_px,
                                             self.radius_px, self.radius_px * stretch, 0.0),
                                     self.exclusions)
        return Aperture.of_shape(self.shape.moved(turn_deg=turn_deg, stretch=stretch),
                                 self.exclusions)

    def with_exclusions(self, exclusions: tuple[Exclusion, ...]) -> Aperture:
        return Aperture(self.center_x_px, self.center_y_px, self.radius_px, tuple(exclusions),
                        self.shape)

    def region(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        """True for photo points on the part (its outline; exclusions not taken out)."""
        if self.shape is not None:
            return self.shape.inside(x, y)
        x = np.asarray(x, dtype=float)
        y = np.asarray(y, dtype=float)
        return (x - self.center_x_px) ** 2 + (y - self.center_y_px) ** 2 <= self.radius_px**2

    def inside(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        """True for photo points on the part and outside every exclusion."""
        x = np.asarray(x, dtype=float)
        y = np.asarray(y, dtype=float)
        keep = self.region(x, y)
        for e in self.exclusions:
            keep &= (x - e.center_x_px) ** 2 + (y - e.center_y_px) ** 2 > e.radius_px**2
        return keep

    def edge_rho(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        """``1 + d / radius`` with ``d`` the signed distance to the outline (photo px,
        negative inside): for a circle the radius over its radius, and for any outline
        1 on its edge, so the demodulation's edge model follows the outline."""
        if self.shape is None:
            return np.hypot(np.asarray(x, dtype=float) - self.center_x_px,
                            np.asarray(y, dtype=float) - self.center_y_px) / self.radius_px
        return 1.0 + self.shape.edge_distance_px(x, y) / self.radius_px

    def unit_xy(self, x: np.ndarray, y: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Fit coordinates of photo points: x right, y up, over the radius (a circle), the
        part's unit circle (an ellipse), or scaled into the unit disk (other outlines)."""
        if self.shape is not None:
            return self.shape.unit_xy(x, y)
        return ((np.asarray(x, dtype=float) - self.center_x_px) / self.radius_px,
                (self.center_y_px - np.asarray(y, dtype=float)) / self.radius_px)

    def to_text(self) -> str:
        """The command line's form (``X,Y,R`` for a circle)."""
        if self.shape is not None:
            return self.shape.to_text()
        return f"{self.center_x_px:.1f},{self.center_y_px:.1f},{self.radius_px:.1f}"


# --- finding the aperture ---------------------------------------------------------------

_WORK_LONG_SIDE = 512  # the photo is binned to about this many pixels on its long side
_MIN_FRINGES = 5.0  # fewer tilt fringes than this across a disk is not a fringe photo
_PEAK_OVER_FLOOR = 12.0  # carrier peak over the median of the spectrum: noise gives ~4
_MAX_RIM_OUTSIDE = 0.05  # share of the rim allowed to fall outside the photo
_SURROUNDS = (None, "dark", "grey")
# 10 %-90 % widths (binned px) tried for the edge model
_EDGE_WIDTHS = (0.6, 1.0, 1.5, 2.2, 3.2, 4.6, 6.5, 9.5, 13.5)
_MAX_RAYS = 192  # rays cast from the centre to trace the edge
_INNER_SHARE = 0.1  # the edge model looks a fringe inside the rim, at most this share of R
_OUTER_SHARE = 0.05  # and this share of R outside (short of the mount, usually)
_TRIAL_REACH = 2.5  # binned px either side of the pass-1 circle where the edge is sought
# Penalty weights (per sample in the window) of the edge model's amplitudes: outer level
# and slope, inner level and slope, fringe cos and sin (toward the amplitude measured
# inside) and second harmonic. Stronger fringe weights bias the rim where the surface
# bends the fringes, weaker ones let the model drift. Checked on the independent
# reference set (benchmarks/refset_accuracy.py: linear, Gaussian, rolled and hard edges,
# centre and radius found within 0.5 % of the radius on 60 photos).
_PENALTY = (1e-6, 0.05, 1e-6, 0.05, 0.03, 0.03, 0.05)


def find_aperture(image: np.ndarray, *, surround: str | None = None,
                  photo_name: str = "the photo") -> Aperture:
    """Find the illuminated circular clear aperture of a fringe photo.

    The disk is told from its surround by its fringes, not only its brightness, so
    a grey surround as bright as the flat is found as well as a dark one.

    1. The photo is binned to about 512 pixels on its long side.
    2. The tilt carrier is the strongest peak of the binned photo's spectrum
       (weighted by frequency); a photo without a clear peak (blank, noise) is refused.
    3. Demodulating at the carrier (Takeda et al. 1982) with box filters one fringe
       long gives maps of the local fringe amplitude and mean brightness. The region
       above the amplitude halfway between the two levels Otsu's threshold separates
       (joined by the bright region when the surround is dark), its holes filled,
       gives a first circle by a robust fit to its rim.
    4. Along up to 192 rays from that centre, each brightness profile is fitted by a
       model of the edge: a straight line outside, and inside a straight line plus the
       fringe (and its second harmonic, from the camera's tone curve) with the phase
       and amplitude the demodulation measured inside, blended by a logistic soft
       step (seen through the tone curve against a dark surround, see Notes). The
       amplitudes are solved by least squares for each trial edge position; the
       position of least misfit (refined by a parabola) is the step's 50 % point.
       Brightness step and fringe fading are weighed together by that one misfit, so
       the fringe's phase at the rim does not pull the edge as it pulls a threshold on
       a smoothed map. A first pass on fewer rays covers the first guess's
       uncertainty; the second, on all rays, also picks the edge's width.
    5. After each pass a circle is fitted to the edge points with a robust (soft-L1)
       loss, points far off it (dust, a bad pixel on the rim) are dropped, and it is
       fitted again by plain least squares.

    Parameters
    ----------
    image : (H, W) ndarray
        Grey photo with values in 0..1 (not modified).
    surround : {None, "dark", "grey"}
        What lies outside the disk, if known. ``"dark"`` lets brightness join the fringe
        amplitude in the first guess (useful with faint fringes) and measures the tone
        curve (see Notes); ``"grey"`` uses the fringe amplitude only and a linear edge;
        None decides from the photo (dark when the darker part of the photo is under a
        third as bright as the rest).
    photo_name : str
        How error messages name the photo (its path).

    Returns
    -------
    Aperture
        Centre and radius in photo pixels (x right, y down, from pixel centres), the
        radius at the 50 % point of the edge; no exclusions.

    Raises
    ------
    UnanalysablePhotoError
        When no illuminated, fringed circular disk is found (blank or noisy photo, a
        disk badly cut by the frame, too few fringes); the message suggests
        ``--aperture X,Y,R``.
    SettingsError
        For an unknown ``surround``.

    Notes
    -----
    The rim is the 50 % point of the light's soft step. Against a dark surround a
    camera tone curve (photo = light ** gamma, gamma near 0.45 for sRGB) lifts the dim
    part of the edge and would move the photo's halfway point out by about half the
    edge's 10-90 % width; gamma is therefore measured from the fringes' harmonics
    (``h1 / h0`` and ``h2 / h1`` of ``(1 + V cos t) ** gamma`` fix both V and gamma) and
    the edge model is seen through it. A grey surround makes the edge mostly a fading of
    the fringes, which the tone curve hardly moves, and is modelled linearly.

    References
    ----------
    M. Takeda, H. Ina, S. Kobayashi, "Fourier-transform method of fringe-pattern
    analysis for computer-based topography and interferometry", JOSA 72(1), 156 (1982).
    N. Otsu, "A threshold selection method from gray-level histograms", IEEE Trans.
    Syst. Man Cybern. 9(1), 62 (1979).
    I. Kasa, "A circle fitting procedure and its error analysis", IEEE Trans. Instrum.
    Meas. 25(1), 8 (1976) (from memory): the algebraic circle that starts the fits.
    """
    if surround not in _SURROUNDS:
        raise SettingsError(f"surround {surround!r} is unknown; use 'dark', 'grey' or None")
    pixels = np.asarray(image)
    if pixels.ndim != 2 or min(pixels.shape) < 32:
        _refuse(photo_name, f"the image has shape {pixels.shape}, not a photo of at least "
                "32 x 32 px")
    factor = max(1, int(round(max(pixels.shape) / _WORK_LONG_SIDE)))
    work = _bin(pixels, factor)
    if not np.all(np.isfinite(work)):
        _refuse(photo_name, "the image holds NaN or infinite values")

    carrier = _carrier(work, photo_name)
    period = 1.0 / float(np.hypot(*carrier))
    amplitude, brightness, sideband, near_sideband, box = _demodulate(work, carrier, period)
    dark = surround == "dark" or (surround is None and _dark_surround(brightness))
    cx, cy, radius = _first_guess(amplitude, brightness, period, dark, photo_name)
    # against a dark surround the camera's tone curve bends the edge (see Notes)
    tone = 1.0
    if dark:
        tone = _tone_power(work, carrier, sideband, brightness, (cx, cy, radius), factor)
    cx, cy, radius = _refine(work, carrier, near_sideband, (box + 1) // 2, (cx, cy, radius),
                             period, tone, photo_name)
    _check_inside_frame(work.shape, cx, cy, radius, photo_name, _MAX_RIM_OUTSIDE)
    # binned pixel (i, j) is centred on photo pixel (factor * j + (factor - 1) / 2, ...)
    offset = (factor - 1) / 2.0
    return Aperture(factor * cx + offset, factor * cy + offset, factor * radius)


def _refuse(photo_name: str, why: str,
            error: type[UnanalysablePhotoError] = UnanalysablePhotoError) -> None:
    raise error(
        f"no illuminated circular aperture found in {photo_name}: {why}; check the photo, "
        "or give the aperture by hand with --aperture X,Y,R (pixels)")


def _bin(pixels: np.ndarray, factor: int) -> np.ndarray:
    """Mean of ``factor x factor`` blocks as float32 (a ragged last row/column is dropped)."""
    if factor == 1:
        return pixels.astype(np.float32)
    rows, cols = pixels.shape[0] // factor, pixels.shape[1] // factor
    block = pixels[: rows * factor, : cols * factor]
    if block.dtype not in (np.float32, np.float64):
        block = block.astype(np.float32)
    # a matrix product sums along rows far faster than a strided mean
    ones = np.full(factor, 1.0 / (factor * factor), dtype=block.dtype)
    summed = np.ascontiguousarray(block).reshape(-1, factor) @ ones
    return summed.reshape(rows, factor, cols).sum(axis=1).astype(np.float32)


def _carrier(work: np.ndarray, photo_name: str) -> tuple[float, float]:
    """The tilt carrier (cycles per binned pixel along x and y) from the spectrum's peak."""
    rows, cols = work.shape
    taper = np.outer(np.hanning(rows), np.hanning(cols)).astype(np.float32)
    spectrum = np.abs(np.fft.rfft2((work - work.mean()) * taper))
    fy = np.fft.fftfreq(rows)[:, None]
    fx = np.fft.rfftfreq(cols)[None, :]
    f = np.hypot(fx, fy)
    # At least _MIN_FRINGES across a disk no wider than the photo, and 2.5 px a fringe.
    band = (f >= _MIN_FRINGES / min(rows, cols)) & (f <= 0.4)
    if not band.any():
        _refuse(photo_name, "the photo is too small to hold fringes")
    # weighted by frequency: the disk's outline and uneven light fall off faster than
    # that, the carrier is a sharp peak
    values = np.where(band, spectrum * f, 0.0)
    iy, ix = np.unravel_index(int(np.argmax(values)), values.shape)
    floor = float(np.median(values[band][::5]))
    # and a fringe of some 1 % of full scale over a fifth of the frame (peak ~ b/2 * area)
    faint = 0.002 * float(taper.sum()) * f[iy, ix]
    if not values[iy, ix] > max(_PEAK_OVER_FLOOR * floor, faint):
        _refuse(photo_name, "no fringes stand out (the photo looks blank or like noise)")

    def vertex(m1: float, m0: float, p1: float) -> float:
        # parabola through log magnitudes: the peak between bins
        a, b, c = np.log(max(m1, 1e-30)), np.log(max(m0, 1e-30)), np.log(max(p1, 1e-30))
        d = a - 2 * b + c
        return 0.0 if d >= 0 else float(np.clip(0.5 * (a - c) / d, -0.5, 0.5))

    dy = vertex(spectrum[(iy - 1) % rows, ix], spectrum[iy, ix], spectrum[(iy + 1) % rows, ix])
    if 0 < ix < spectrum.shape[1] - 1:
        dx = vertex(spectrum[iy, ix - 1], spectrum[iy, ix], spectrum[iy, ix + 1])
    else:
        dx = 0.0
    return float(fx[0, ix] + dx / cols), float(fy[iy, 0] + dy / rows)


def _box_sizes(carrier: tuple[float, float], period: float) -> tuple[int, int]:
    """Box lengths (rows, columns) that null the carrier's leak into the sideband.

    A box one fringe long along an axis has zeros at the carrier's and its harmonics'
    frequencies along that axis; a near-zero component gets a one-period box instead.
    """

    def box(k: float) -> int:
        own = 1.0 / abs(k) if k else np.inf
        return max(3, int(round(own if own <= 1.5 * period else period)))

    return box(carrier[1]), box(carrier[0])


class _Smoother:
    """Passes of a box (two by default), zeros past the frame, renormalised by the share
    inside. Repeating the edge values instead would make the frame look fringed.
    """

    def __init__(self, shape: tuple[int, int], sizes: tuple[int, int], passes: int = 2):
        self.sizes = sizes
        self.passes = passes
        self.cover = self._boxes(np.ones(shape, dtype=np.float32))

    def _boxes(self, a: np.ndarray) -> np.ndarray:
        for _ in range(self.passes):
            a = ndi.uniform_filter(a, self.sizes, mode="constant")
        return a

    def __call__(self, a: np.ndarray) -> np.ndarray:
        if np.iscomplexobj(a):
            return (self._boxes(a.real) + 1j * self._boxes(a.imag)) / self.cover
        return self._boxes(a) / self.cover


def _demodulate(work: np.ndarray, carrier: tuple[float, float], period: float):
    """Local fringe amplitude, local mean brightness and the complex sideband.

    Returns the amplitude ``b`` and mean ``a`` of ``a + b cos(2 pi k.x + phi)`` and the
    sideband ``(b / 2) exp(i phi)``, each averaged by two passes of a box about a fringe
    long; the sideband again after one pass; and the box's length in pixels.
    """
    rows, cols = work.shape
    kx, ky = carrier
    wave_x = np.exp(-2j * np.pi * kx * np.arange(cols)).astype(np.complex64)
    wave_y = np.exp(-2j * np.pi * ky * np.arange(rows)).astype(np.complex64)
    product = work * wave_y[:, None] * wave_x[None, :]
    sizes = _box_sizes(carrier, period)
    smooth = _Smoother(work.shape, sizes)
    sideband = smooth(product)
    # one pass reaches half as far: its phase holds closer to the rim (for the rays)
    near_sideband = _Smoother(work.shape, sizes, passes=1)(product)
    return 2.0 * np.abs(sideband), smooth(work), sideband, near_sideband, max(sizes)


def _first_guess(amplitude, brightness, period, dark, photo_name):
    """A rough circle (binned pixels) from the region where the fringes are strong."""
    rows, cols = amplitude.shape
    if np.ptp(amplitude) < 1e-6:
        _refuse(photo_name, "the fringes are equally strong everywhere")
    lit = amplitude > threshold_otsu(amplitude)
    if lit.any() and not lit.all():
        # halfway between the two levels Otsu separates: where the edge's smoothed
        # amplitude is at its 50 % point
        lit = amplitude > 0.5 * (np.median(amplitude[lit]) + np.median(amplitude[~lit]))
    if dark:
        # brightness marks the disk too, and carries it where the fringes are faint
        lit |= brightness > threshold_otsu(brightness)
    regions = label(lit, connectivity=1)
    if regions.max() == 0:
        _refuse(photo_name, "no region with fringes")
    sizes = np.bincount(regions.ravel())
    sizes[0] = 0
    disk = _fill_holes(regions == int(np.argmax(sizes)))
    rim = disk & ~ndi.binary_erosion(disk)
    rim[[0, -1], :] = False
    rim[:, [0, -1]] = False
    ys, xs = np.nonzero(rim)
    if xs.size < 12:
        _refuse(photo_name, "the region with fringes has no clear edge")
    xs, ys = xs.astype(float), ys.astype(float)
    start = _kasa_circle(xs, ys)
    # robustly: where the disk nears the frame its smoothed outline bulges toward it
    fit = least_squares(lambda p: np.hypot(xs - p[0], ys - p[1]) - p[2], start,
                        loss="soft_l1", f_scale=max(1.0, 0.02 * start[2]))
    cx, cy, radius = (float(v) for v in fit.x)
    yy, xx = np.ogrid[0:rows, 0:cols]
    dist2 = (xx - cx) ** 2 + (yy - cy) ** 2
    circle = dist2 <= radius**2
    overlap = np.count_nonzero(circle & disk) / max(1, np.count_nonzero(circle | disk))
    if not np.isfinite(radius) or overlap < 0.75:
        _refuse(photo_name, "the region with fringes is not round")
    if 2.0 * radius / period < _MIN_FRINGES:
        _refuse(photo_name, f"the fringed region holds only {2 * radius / period:.1f} fringes")
    _check_inside_frame((rows, cols), cx, cy, radius, photo_name, 0.25)
    ring = (~circle) & (dist2 <= (1.5 * radius) ** 2)
    core = dist2 <= (0.8 * radius) ** 2
    if np.count_nonzero(ring) > 0.05 * np.count_nonzero(circle):
        outside = float(np.median(amplitude[ring]))
        if not np.median(amplitude[core]) > 3.0 * outside:
            _refuse(photo_name, "the fringes are hardly stronger inside the disk than around it")
    return cx, cy, radius


def _dark_surround(brightness: np.ndarray) -> bool:
    """True when the photo's brightness splits into a lit part and one under a third of it."""
    sample = brightness[::3, ::3]
    if np.ptp(sample) < 1e-6:
        return False
    bright = sample > threshold_otsu(sample)
    if bright.all():
        return False
    return float(np.median(sample[~bright])) < 0.35 * float(np.median(sample[bright]))


def _fill_holes(mask: np.ndarray) -> np.ndarray:
    """Fill what the mask encloses (dust specks): background not connected to the border."""
    background = label(~mask, connectivity=1)
    border = np.unique(np.concatenate([background[0], background[-1], background[:, 0],
                                       background[:, -1]]))
    return ~np.isin(background, border[border > 0]) | mask


def _kasa_circle(x: np.ndarray, y: np.ndarray) -> tuple[float, float, float]:
    """Algebraic least-squares circle (Kasa 1976): linear, a good start for the rest."""
    a = np.column_stack([x, y, np.ones_like(x)])
    b = x * x + y * y
    (p, q, r), *_ = np.linalg.lstsq(a, b, rcond=None)
    cx, cy = p / 2.0, q / 2.0
    return float(cx), float(cy), float(np.sqrt(max(r + cx * cx + cy * cy, 0.0)))


def _check_inside_frame(shape, cx, cy, radius, photo_name, most):
    """Refuse when more than the share ``most`` of the circle's rim is off the photo."""
    rows, cols = shape
    t = np.linspace(0.0, 2.0 * np.pi, 720, endpoint=False)
    x = cx + radius * np.cos(t)
    y = cy + radius * np.sin(t)
    out = (x < -0.5) | (x > cols - 0.5) | (y < -0.5) | (y > rows - 0.5)
    if out.mean() > most:
        _refuse(photo_name, f"{100 * out.mean():.0f} % of the disk's rim lies outside the photo "
                "(the flat is cut by the frame)", PartCutByFrameError)


def _refine(work, carrier, sideband, box, guess, period, tone, photo_name):
    """Edge points along rays by least-squares edge models, then a robust circle."""
    cx, cy, radius = guess
    n_rays = int(np.clip(2.0 * np.pi * radius / 3.0, 64, _MAX_RAYS))
    theta = np.arange(n_rays) * (2.0 * np.pi / n_rays)
    nx, ny = np.cos(theta), np.sin(theta)
    step = 0.5
    inner = float(np.clip(period, 8.0, max(8.0, _INNER_SHARE * radius)))
    outer = float(np.clip(_OUTER_SHARE * radius, 6.0, inner))

    # pass 1, twice: fewer rays, coarse trials over the first guess's uncertainty, then
    # over what is left of it (the fringe's phase is then read closer to the edge)
    few = slice(None, None, max(1, n_rays // 72))
    for reach in (max(4.0, 0.06 * radius), max(3.0, 0.02 * radius)):
        d = np.arange(-inner - reach, outer + reach + step / 2, step)
        profile, weight, fringe, amplitude = _rays(work, carrier, sideband, cx, cy, radius,
                                                   nx[few], ny[few], d, period, box + reach)
        moments = _ray_moments(profile, weight, d, fringe)
        trials = np.arange(-reach, reach + 0.5, 1.0)
        width = _edge_width(moments, d, amplitude, trials, _EDGE_WIDTHS[::2], tone, 3)
        sse = _soft_step_misfit(moments, d, amplitude, trials, width=width, tone=tone)
        edge_r, ok = _least_misfit(sse, trials, 1.0)
        if ok.sum() < 0.5 * ok.size:
            _refuse(photo_name, "the disk's edge could not be traced around most of its rim")
        edge_r = radius + edge_r[ok]
        cx, cy, radius = _robust_circle(cx + nx[few][ok] * edge_r, cy + ny[few][ok] * edge_r,
                                        (cx, cy, radius), photo_name)

    # pass 2: all rays, fine trials near that circle, the edge's shape from the data
    d = np.arange(-inner, outer + step / 2, step)
    profile, weight, fringe, amplitude = _rays(work, carrier, sideband, cx, cy, radius, nx,
                                               ny, d, period, box + _TRIAL_REACH)
    moments = _ray_moments(profile, weight, d, fringe)
    trials = np.arange(-_TRIAL_REACH, _TRIAL_REACH + step / 2, step)
    width = _edge_width(moments, d, amplitude, trials, _EDGE_WIDTHS, tone,
                        max(1, n_rays // 64))
    sse = _soft_step_misfit(moments, d, amplitude, trials, width=width, tone=tone)
    edge_r, ok = _least_misfit(sse, trials, step)
    if ok.sum() < 0.5 * n_rays:
        _refuse(photo_name, "the disk's edge could not be traced around most of its rim")
    edge_r = radius + edge_r
    return _robust_circle(cx + nx[ok] * edge_r[ok], cy + ny[ok] * edge_r[ok],
                          (cx, cy, radius), photo_name)


def _edge_width(moments, d, amplitude, trials, widths, tone, every):
    """The edge width whose model fits every ``every``-th ray best."""
    keep = slice(None, None, every)
    some = moments.subset(keep)
    misfit = [np.sum(np.min(_soft_step_misfit(some, d, amplitude[keep], trials, width=w,
                                              tone=tone), axis=1))
              for w in widths]
    return widths[int(np.argmin(misfit))]


def _tone_power(work, carrier, sideband, brightness, circle, factor):
    """The camera's tone-curve power ``gamma`` (photo = light ** gamma) from the fringes.

    Well inside the disk the light is ``A (1 + V cos F)``; a power law adds harmonics,
    and the ratios ``h1 / h0`` and ``h2 / h1`` of the photo's first harmonics to its mean
    fix both ``V`` and ``gamma``. The harmonics are demodulated at the local fringe
    phase ``F`` (so the surface's slope does not weaken them), corrected for the
    binning's box, and matched to a table of the power law's harmonics. Returns 1 when
    the second harmonic would not be resolved or the match is poor.
    """
    rows, cols = work.shape
    kx, ky = carrier
    fx, fy = abs(kx) / factor, abs(ky) / factor  # cycles per photo pixel
    if 2.0 * max(abs(kx), abs(ky)) > 0.4:
        return 1.0
    cx, cy, radius = circle
    # only the disk's core is needed (and the smoothing's reach around it)
    sizes = _box_sizes(carrier, 1.0 / float(np.hypot(kx, ky)))
    reach = 0.7 * radius + 2 * max(sizes)
    y0, y1 = max(0, int(cy - reach)), min(rows, int(cy + reach) + 1)
    x0, x1 = max(0, int(cx - reach)), min(cols, int(cx + reach) + 1)
    if y1 - y0 < 8 or x1 - x0 < 8:
        return 1.0
    work, sideband, brightness = (a[y0:y1, x0:x1] for a in (work, sideband, brightness))
    yy, xx = np.ogrid[y0:y1, x0:x1]
    core = (xx - cx) ** 2 + (yy - cy) ** 2 <= (0.7 * radius) ** 2
    if np.count_nonzero(core) < 50:
        return 1.0
    phase = 2 * np.pi * (kx * xx + ky * yy) + np.angle(sideband)
    turn = np.exp(-1j * phase).astype(np.complex64)
    smooth = _Smoother(work.shape, sizes)
    first = work * turn
    h1 = np.abs(smooth(first))
    h2 = smooth((first * turn).real)  # in phase with cos 2F: signed

    def binning(f: float) -> float:
        # a box of ``factor`` photo pixels multiplies a wave of frequency f by sinc(f factor)
        return float(np.sinc(f * factor)) if factor > 1 else 1.0

    gain1 = binning(fx) * binning(fy)
    gain2 = binning(2 * fx) * binning(2 * fy)
    keep = core & (h1 > 0.25 * np.median(h1[core]))
    ratio1 = float(np.median(2.0 * h1[keep] / brightness[keep])) / gain1
    ratio2 = float(np.median(h2[keep] / h1[keep])) * gain1 / gain2
    gammas, visibilities, table1, table2 = _power_law_harmonics()
    miss = (table1 - ratio1) ** 2 + (4.0 * (table2 - ratio2)) ** 2
    i, j = np.unravel_index(int(np.argmin(miss)), miss.shape)
    if not np.isfinite(miss[i, j]) or miss[i, j] > 0.01 or visibilities[j] < 0.15:
        return 1.0
    return float(gammas[i])


@functools.cache
def _power_law_harmonics():
    """Harmonic ratios of ``(1 + V cos t) ** gamma``: h1/h0 and h2/h1 on a (gamma, V) grid."""
    gammas = np.round(np.arange(0.35, 1.2001, 0.01), 2)
    visibilities = np.arange(0.05, 0.99, 0.01)
    t = np.arange(64) * (2 * np.pi / 64)
    wave = (1.0 + visibilities[None, :, None] * np.cos(t)) ** gammas[:, None, None]
    spectrum = np.fft.rfft(wave, axis=-1).real / 64  # cosine series: real
    h0, h1, h2 = spectrum[..., 0], 2 * spectrum[..., 1], 2 * spectrum[..., 2]
    return gammas, visibilities, h1 / h0, h2 / h1


def _least_misfit(sse, trials, spacing):
    """Per ray, the trial offset of least misfit refined by a parabola, and whether the
    least misfit lies inside the tried range (else the edge is elsewhere: dropped)."""
    best = np.argmin(sse, axis=1)
    rows = np.arange(sse.shape[0])
    last = trials.size - 1
    a = sse[rows, np.clip(best - 1, 0, last)]
    b = sse[rows, best]
    c = sse[rows, np.clip(best + 1, 0, last)]
    curve = a - 2 * b + c
    ok = (best > 0) & (best < last) & np.isfinite(b) & (curve > 0)
    shift = np.where(ok, 0.5 * (a - c) / np.where(ok, curve, 1.0), 0.0)
    return trials[best] + np.clip(shift, -0.5, 0.5) * spacing, ok


def _rays(work, carrier, sideband, cx, cy, radius, nx, ny, d, period, guard):
    """Samples along rays at offsets ``d`` (binned px) from the circle.

    Returns the brightness profiles, which samples lie in the photo, the fringe's
    phase along each ray (all (rays, S)) and the fringe amplitude inside (rays,).

    The phase is the carrier's plus the demodulated sideband's, which follows curved
    fringes. Within ``guard`` of the circle the sideband's smoothing reaches past the
    edge and its phase lags (averaged toward the inside), so there the sideband's
    phase is carried on by a quadratic fitted over the two guard-lengths further in.
    """
    rows, cols = work.shape
    r = radius + d
    px = cx + nx[:, None] * r[None, :]
    py = cy + ny[:, None] * r[None, :]
    weight = ((px >= 0) & (px <= cols - 1) & (py >= 0) & (py <= rows - 1)).astype(float)
    profile = ndi.map_coordinates(work, [py, px], order=1, mode="nearest")

    step = d[1] - d[0]
    cut = -min(guard, 0.4 * radius)
    deep = np.arange(max(3.0 * cut, -0.8 * radius), cut + step / 2, step)
    qx = np.clip(cx + nx[:, None] * (radius + deep)[None, :], 0, cols - 1)
    qy = np.clip(cy + ny[:, None] * (radius + deep)[None, :], 0, rows - 1)
    measured = _sample_complex(sideband, qy, qx)
    # the surface's phase changes by well under half a turn per pixel: unwrap is safe
    psi = np.unwrap(np.angle(measured), axis=1)
    t = (deep - cut) / max(1.0, -cut)
    design = np.stack([np.ones_like(t), t, t * t], axis=1)
    coef = np.linalg.lstsq(design, psi.T, rcond=None)[0]  # (3, rays)
    td = (d - cut) / max(1.0, -cut)
    surface = coef[0][:, None] + coef[1][:, None] * td + coef[2][:, None] * td * td
    kx, ky = carrier
    fringe = 2 * np.pi * (kx * px + ky * py) + surface
    return profile, weight, fringe, 2.0 * np.median(np.abs(measured), axis=1)


@dataclass(frozen=True)
class _RayMoments:
    """Sums over each ray's samples that every trial edge reuses (see _soft_step_misfit)."""

    products: np.ndarray  # (S, R * 25): weight * f_a * f_b for the five functions f
    data: np.ndarray  # (S, R * 5): weight * profile * f_a
    energy: np.ndarray  # (R,): sum of weight * profile ** 2
    count: np.ndarray  # (R,): samples inside the photo
    rays: int

    def subset(self, keep: slice) -> _RayMoments:
        s = self.products.shape[0]
        products = self.products.reshape(s, self.rays, 25)[:, keep].reshape(s, -1)
        data = self.data.reshape(s, self.rays, 5)[:, keep].reshape(s, -1)
        energy = self.energy[keep]
        return _RayMoments(products, data, energy, self.count[keep], energy.size)


def _ray_moments(profile, weight, d, fringe) -> _RayMoments:
    """Functions of the edge model along each ray: 1, u, cos F, sin F, cos 2F."""
    rays, n = profile.shape
    u = np.broadcast_to(d / max(abs(d[0]), abs(d[-1])), (rays, n))
    funcs = np.stack([np.ones((rays, n)), u, np.cos(fringe), np.sin(fringe),
                      np.cos(2 * fringe)], axis=-1)  # (R, S, 5)
    weighted = funcs * weight[..., None]
    products = weighted[..., :, None] * funcs[..., None, :]  # (R, S, 5, 5)
    data = weighted * profile[..., None]
    return _RayMoments(
        products=np.ascontiguousarray(products.transpose(1, 0, 2, 3)).reshape(n, -1),
        data=np.ascontiguousarray(data.transpose(1, 0, 2)).reshape(n, -1),
        energy=np.einsum("rs,rs->r", weight * profile, profile),
        count=weight.sum(axis=1),
        rays=rays,
    )


def _soft_step_misfit(moments, d, amplitude, trials, *, width, tone=1.0):
    """Least-squares misfit of a soft edge at each trial offset, per ray: (rays, trials).

    Model: ``(1 - s) (o0 + o1 u) + s (i0 + i1 u + B cos F + C sin F + H cos 2F)`` with
    ``F`` the fringe phase along the ray expected from inside and ``s`` a logistic
    step, 10 % to 90 % over ``width`` px, centred on the trial offset, seen through the
    camera's tone curve as ``s ** tone``. The amplitudes are solved for each trial, so
    only the edge position is searched. ``B + iC`` is held near the fringe amplitude
    measured inside and the slopes and harmonic near zero by penalties worth a share
    of the window's samples: where the fringes cross the ray quickly the data outweigh
    them (and correct the phase), where they run along it the penalties stop the
    inside model bending down to mimic the edge.

    The normal equations' sums are weighted sums of the per-sample products in
    ``moments``, with weights (1 - s)^2, (1 - s) s and s^2: three matrix products cover
    every ray and trial at once.
    """
    step = 0.5 * (1.0 - np.tanh((d[None, :] - trials[:, None]) * (np.log(9.0) / (2.0 * width))))
    if tone != 1.0:
        step = step**tone
    out = 1.0 - step
    t, rays = trials.size, moments.rays
    shape = (t, rays, 5, 5)
    oo = (out * out @ moments.products).reshape(shape)
    oi = (out * step @ moments.products).reshape(shape)
    ii = (step * step @ moments.products).reshape(shape)
    k = 7
    gram = np.empty((t, rays, k, k))
    gram[..., :2, :2] = oo[..., :2, :2]
    gram[..., :2, 2:] = oi[..., :2, :]
    gram[..., 2:, :2] = oi[..., :, :2]
    gram[..., 2:, 2:] = ii
    cross = np.empty((t, rays, k))
    cross[..., :2] = (out @ moments.data).reshape(t, rays, 5)[..., :2]
    cross[..., 2:] = (step @ moments.data).reshape(t, rays, 5)
    # penalties lambda_k (p_k - prior_k)^2 in the normal equations
    lam = np.array(_PENALTY)[None, :] * (moments.count[:, None] + 1.0)
    prior = np.zeros((rays, k))
    prior[:, 4] = amplitude
    gram += lam[None, :, :, None] * np.eye(k)
    cross += (lam * prior)[None]
    coef = np.linalg.solve(gram, cross[..., None])[..., 0]
    # misfit including the penalties: |y - X p|^2 + sum lam (p - prior)^2
    energy = moments.energy + np.sum(lam * prior * prior, axis=1)
    sse = energy[None, :] - np.einsum("trk,trk->tr", coef, cross)
    return sse.T


def _sample_complex(field_, y, x):
    return (ndi.map_coordinates(field_.real, [y, x], order=1)
            + 1j * ndi.map_coordinates(field_.imag, [y, x], order=1))


def _robust_circle(x, y, start, photo_name):
    """Circle through edge points: soft-L1 fit, points beyond 3 robust sigmas dropped,
    then a plain geometric least-squares fit of the rest."""

    def residual(p, px, py):
        return np.hypot(px - p[0], py - p[1]) - p[2]

    scale = max(0.3, 0.005 * start[2])
    fit = least_squares(residual, np.asarray(start, dtype=float), loss="soft_l1",
                        f_scale=scale, args=(x, y))
    res = residual(fit.x, x, y)
    spread = 1.4826 * np.median(np.abs(res - np.median(res)))
    keep = np.abs(res) <= max(3.0 * spread, scale)
    if keep.sum() < 0.5 * x.size:
        _refuse(photo_name, "the traced edge is not a circle")
    fit = least_squares(residual, fit.x, args=(x[keep], y[keep]))
    cx, cy, radius = (float(v) for v in fit.x)
    if not (np.isfinite(radius) and radius > 0):
        _refuse(photo_name, "the traced edge is not a circle")
    return cx, cy, radius
