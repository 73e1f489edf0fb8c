"""Fringe photos of reference surfaces: rendering with camera faults, and atomic file writing.

Pixel coordinates: ``x`` to the right (columns), ``y`` down (rows), origin at the centre of the
top-left pixel. The part's unit disk has ``y`` toward the top of the photo, so a pixel maps to
``x_unit = (col - cx) / R`` and ``y_unit = (cy - row) / R``.

The fringe phase is ``2 pi (fx (x - cx) + fy (y - cy)) + 4 pi h / lambda`` (double pass); the
carrier ``(fx, fy)`` in cycles per pixel always points down the photo (``fy > 0``, or ``fy == 0``
and ``fx > 0``), so a positive height reads positive relative to it.
"""

from __future__ import annotations

import math
import os
import tempfile
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from PIL import Image
from scipy import ndimage, special

from .surface import RefSurface

__all__ = [
    "EDGES",
    "TONES",
    "RefPhoto",
    "carrier_for",
    "edge_profile",
    "edge_support_px",
    "illumination_field",
    "render",
    "tone_curve",
    "write",
]

EDGES = ("hard", "linear", "gaussian", "rolled")
TONES = ("linear", "srgb", "gamma")
_THREADS = 2
SURROUNDS = {"dark": 0.02, "grey": 0.9}  # surround brightness relative to the flat's mean

# 10-90 % rise of each edge profile, in units of its own scale parameter (closed forms):
# linear ramp of full width L: 0.8 L; erfc step of std s: 2 * 1.28155 s (normal 90 % quantile);
# rolled shoulder/tail of scale W: (1 - sqrt(0.2)) W inside plus ln(5) / 2 W outside.
_GAUSS_1090 = 2.0 * math.sqrt(2.0) * float(special.erfinv(0.8))
_ROLLED_1090 = 1.0 - math.sqrt(0.2) + 0.5 * math.log(5.0)
# illumination shape 0.75 s + 0.25 (1 - 2 rho^2) spans [-1, 0.53125] over the disk (closed form:
# the maximum is at rho = 0.75 along the gradient, the minimum on the rim against it)
_ILLUM_LO, _ILLUM_HI = -1.0, 0.53125


@dataclass(frozen=True)
class RefPhoto:
    """A rendered fringe photo and everything needed to judge a measurement of it.

    Attributes
    ----------
    pixels : numpy.ndarray
        Grey image, ``uint8`` or ``uint16``, shape ``(rows, cols)``.
    center_px : tuple of float
        True aperture centre ``(x, y)`` = (column, row) in pixels.
    radius_px : float
        True aperture radius in pixels (the edge profile's 50 % point).
    wavelength_nm : float
        Test wavelength.
    surface : RefSurface
        The surface in the aperture.
    carrier : tuple of float
        Tilt carrier ``(fx, fy)`` in cycles per pixel (points down the photo).
    fringes : float
        Tilt fringes across the aperture diameter.
    angle_deg : float
        Carrier direction as asked, counter-clockwise from ``x`` as seen (modulo 180).
    params : dict
        Every render setting, plus derived values (``gain``, ``dust_specks``).
    """

    pixels: np.ndarray
    center_px: tuple[float, float]
    radius_px: float
    wavelength_nm: float
    surface: RefSurface
    carrier: tuple[float, float]
    fringes: float
    angle_deg: float
    params: dict = field(default_factory=dict)

    @property
    def bit_depth(self) -> int:
        """8 or 16."""
        return 16 if self.pixels.dtype == np.uint16 else 8

    @property
    def full_scale(self) -> int:
        """Largest pixel value (255 or 65535)."""
        return (1 << self.bit_depth) - 1

    @property
    def shape(self) -> tuple[int, int]:
        """``(rows, cols)``."""
        return self.pixels.shape[0], self.pixels.shape[1]

    def unit_coordinates(self) -> tuple[np.ndarray, np.ndarray]:
        """Unit-disk coordinates of every pixel centre: ``(x_unit, y_unit)``, ``y`` up."""
        rows, cols = self.shape
        cx, cy = self.center_px
        xu = (np.arange(cols) - cx) / self.radius_px
        yu = (cy - np.arange(rows)) / self.radius_px
        return np.broadcast_arrays(xu[None, :], yu[:, None])


def carrier_for(fringes: float, angle_deg: float, radius_px: float) -> tuple[float, float]:
    """Tilt carrier in cycles per pixel for a number of fringes and a direction.

    Parameters
    ----------
    fringes : float
        Tilt fringes across the aperture diameter (``|f| * 2R``).
    angle_deg : float
        Direction across the fringes, counter-clockwise from ``x`` as seen; only its value
        modulo 180 matters.
    radius_px : float
        Aperture radius.

    Returns
    -------
    tuple of float
        ``(fx, fy)`` with ``fy > 0``, or ``fx > 0`` when the carrier lies within 0.2 degrees
        of the x axis: Flatsight's documented sign convention (README, "Sign convention")
        points a carrier that close to horizontal to the right, not down.
    """
    f = float(fringes) / (2.0 * float(radius_px))
    a = float(angle_deg) % 180.0
    if a == 0.0:
        return f, 0.0
    if a == 90.0:
        return 0.0, f
    ar = math.radians(a)
    if min(a, 180.0 - a) <= 0.2:
        fx, fy = f * math.cos(ar), -f * math.sin(ar)
        return (fx, fy) if fx > 0 else (-fx, -fy)
    # as seen, (cos a, sin a) with y up is (cos a, -sin a) in pixels: pointing up, so flip it
    return -f * math.cos(ar), f * math.sin(ar)


def edge_profile(d_px: np.ndarray, kind: str, width_px: float) -> np.ndarray:
    """Brightness profile of the aperture edge, 1 inside, 0 outside, 0.5 at the true radius.

    Parameters
    ----------
    d_px : array_like
        Signed distance from the true edge in pixels (``r - R``, positive outside).
    kind : {'hard', 'linear', 'gaussian', 'rolled'}
        ``hard``: the fraction of a pixel inside the edge (a one-pixel ramp); ``linear``: a
        straight ramp; ``gaussian``: a step blurred by a Gaussian; ``rolled``: a parabolic
        shoulder inside and an exponential tail outside (asymmetric, as a bevel or a rolled
        rim looks).
    width_px : float
        The 10-90 % rise distance (ignored for ``hard``).

    Returns
    -------
    numpy.ndarray
        Values in [0, 1].
    """
    d = np.asarray(d_px, dtype=float)
    if kind == "hard":
        return np.clip(0.5 - d, 0.0, 1.0)
    w = float(width_px)
    if w <= 0:
        raise ValueError("edge_width_px must be positive")
    if kind == "linear":
        return np.clip(0.5 - d / (w / 0.8), 0.0, 1.0)
    if kind == "gaussian":
        s = w / _GAUSS_1090
        return 0.5 * special.erfc(d / (s * math.sqrt(2.0)))
    if kind == "rolled":
        s = w / _ROLLED_1090
        t = np.clip((d + s) / s, 0.0, 1.0)
        inside = 1.0 - 0.5 * t * t
        outside = 0.5 * np.exp(-2.0 * np.maximum(d, 0.0) / s)
        return np.where(d <= 0.0, inside, outside)
    raise ValueError(f"edge must be one of {EDGES}, got {kind!r}")


def edge_support_px(kind: str, width_px: float) -> float:
    """Distance beyond the true radius past which :func:`edge_profile` is below 1e-7."""
    if kind == "hard":
        return 0.5
    w = float(width_px)
    if kind == "linear":
        return 0.5 * w / 0.8
    if kind == "gaussian":
        return 5.3 * w / _GAUSS_1090  # erfc(5.3 / sqrt 2) / 2 = 6e-8
    if kind == "rolled":
        return 0.5 * math.log(0.5e7) * w / _ROLLED_1090
    raise ValueError(f"edge must be one of {EDGES}, got {kind!r}")


def illumination_field(xu: np.ndarray, yu: np.ndarray, amount: float,
                       angle_deg: float) -> np.ndarray:
    """Relative illumination: a tilted gradient (3/4) plus vignetting (1/4), mean 1 on the disk.

    Parameters
    ----------
    xu, yu : array_like
        Unit coordinates (``y`` up); broadcast.
    amount : float
        Peak-to-peak fractional variation across the aperture.
    angle_deg : float
        Direction in which the light grows, counter-clockwise from ``x``.

    Returns
    -------
    numpy.ndarray
        The field (clipped at 0.05 far outside the aperture).
    """
    b = math.radians(angle_deg)
    s = np.asarray(xu) * math.cos(b) + np.asarray(yu) * math.sin(b)
    v = 1.0 - 2.0 * (np.asarray(xu) ** 2 + np.asarray(yu) ** 2)
    shape = (0.75 * s + 0.25 * v) / (_ILLUM_HI - _ILLUM_LO)
    return np.maximum(1.0 + amount * shape, 0.05)


def tone_curve(linear: np.ndarray, tone: str, gamma: float = 1.0) -> np.ndarray:
    """Camera tone curve on linear values in [0, 1].

    Parameters
    ----------
    linear : numpy.ndarray
        Linear values, already clipped to [0, 1].
    tone : {'linear', 'srgb', 'gamma'}
        ``srgb`` is the sRGB transfer curve (IEC 61966-2-1: 12.92 L below 0.0031308, else
        1.055 L^(1/2.4) - 0.055); ``gamma`` is ``L ** gamma``.
    gamma : float
        Exponent for ``gamma``.

    Returns
    -------
    numpy.ndarray
        Encoded values in [0, 1].
    """
    if tone == "linear":
        return linear
    if tone == "srgb":
        lo = linear <= 0.0031308
        out = np.empty_like(linear)
        out[lo] = 12.92 * linear[lo]
        out[~lo] = 1.055 * np.power(linear[~lo], 1.0 / 2.4) - 0.055
        return out
    if tone == "gamma":
        return np.power(linear, gamma)
    raise ValueError(f"tone must be one of {TONES}, got {tone!r}")


def _fringe_block(surface: RefSurface, rows: np.ndarray, cols: np.ndarray, cx: float, cy: float,
                  radius: float, fx: float, fy: float, wavelength: float) -> np.ndarray:
    """Pixel-averaged ``cos(phase)`` on a block of pixels.

    The height is evaluated at pixel centres (with a one-pixel halo for its gradient); the
    average of ``cos`` over a square pixel of a locally linear phase with gradient
    ``(gx, gy)`` rad/px is ``cos(phase) * sinc(gx / 2pi) * sinc(gy / 2pi)`` (closed form).
    """
    xh = (np.arange(cols[0] - 1, cols[-1] + 2) - cx) / radius
    yh = (cy - np.arange(rows[0] - 1, rows[-1] + 2)) / radius
    h = surface.height_grid(xh, yh)
    k = 4.0 * math.pi / wavelength
    dhdx = 0.5 * (h[1:-1, 2:] - h[1:-1, :-2])  # nm per pixel along +x
    dhdy = 0.5 * (h[2:, 1:-1] - h[:-2, 1:-1])  # nm per pixel along +row (down)
    xx = (cols - cx)[None, :]
    yy = (rows - cy)[:, None]
    phase = 2.0 * math.pi * (fx * xx + fy * yy) + k * h[1:-1, 1:-1]
    gx = 2.0 * math.pi * fx + k * dhdx
    gy = 2.0 * math.pi * fy + k * dhdy
    return np.cos(phase) * np.sinc(gx / (2.0 * math.pi)) * np.sinc(gy / (2.0 * math.pi))


def render(surface: RefSurface, *, shape: tuple[int, int] = (768, 1024),
           center_px: tuple[float, float] | None = None, radius_px: float | None = None,
           fringes: float = 20.0, angle_deg: float = 30.0, wavelength_nm: float = 632.8,
           visibility: float = 0.7, level: float = 0.45, noise: float = 0.0,
           illumination: float = 0.0, illumination_angle_deg: float = 0.0,
           tone: str = "linear", gamma: float = 1.0, edge: str = "hard",
           edge_width_px: float = 2.0, surround: str = "dark", speckle: float = 0.0,
           speckle_grain_px: float = 2.0, dust: int = 0, bit_depth: int = 8,
           saturation: float = 0.0, seed: int = 0) -> RefPhoto:
    """Render a fringe photo of a surface.

    Parameters
    ----------
    surface : RefSurface
        Heights over the aperture.
    shape : tuple of int
        ``(rows, cols)``.
    center_px : tuple of float, optional
        Aperture centre ``(x, y)`` in pixels (default: the image centre).
    radius_px : float, optional
        Aperture radius in pixels (default: 0.4 of the short side).
    fringes : float
        Tilt fringes across the aperture diameter.
    angle_deg : float
        Carrier direction as seen, counter-clockwise from ``x`` (see :func:`carrier_for`).
    wavelength_nm : float
        Test wavelength.
    visibility : float
        Fringe visibility ``V`` in ``I = B (1 + V cos phase)``.
    level : float
        Mean linear brightness of the flat as a fraction of full scale.
    noise : float
        Standard deviation of additive Gaussian noise relative to full scale, added after the
        tone curve.
    illumination : float
        Peak-to-peak fractional variation of the light across the aperture.
    illumination_angle_deg : float
        Direction in which the light grows.
    tone : {'linear', 'srgb', 'gamma'}
        Camera tone curve (see :func:`tone_curve`).
    gamma : float
        Exponent for ``tone='gamma'``.
    edge : {'hard', 'linear', 'gaussian', 'rolled'}
        Aperture edge profile, multiplying ``B`` (see :func:`edge_profile`).
    edge_width_px : float
        10-90 % width of the edge.
    surround : {'dark', 'grey'}
        Outside the aperture: dark, or lit at 0.9 of the flat's mean without fringes.
    speckle : float
        Speckle contrast in [0, 1]: the intensity is multiplied by ``1 - c + c S`` with ``S``
        fully developed speckle of mean 1.
    speckle_grain_px : float
        FWHM of the speckle intensity's autocorrelation, in pixels.
    dust : int
        Number of semi-transparent specks (70 % dark, 30 % bright), 3 px to 1 % of the
        radius across (at least 4 px), opacity 0.3-0.8, within 1.1 radii of the centre; they
        are listed in ``params['dust_specks']`` as ``(x, y, radius, opacity, bright)``.
    bit_depth : {8, 16}
        Output depth.
    saturation : float
        0: exposure set by ``level``. Above 0: the exposure is raised so that the brightest
        fringe crests reach ``1 + saturation`` times full scale, and clip.
    seed : int
        Seed for speckle, dust and noise.

    Returns
    -------
    RefPhoto
        The photo and its truth settings.
    """
    rows, cols = (int(shape[0]), int(shape[1]))
    if bit_depth not in (8, 16):
        raise ValueError("bit_depth must be 8 or 16")
    if surround not in SURROUNDS:
        raise ValueError(f"surround must be one of {tuple(SURROUNDS)}")
    if tone not in TONES:
        raise ValueError(f"tone must be one of {TONES}")
    if edge not in EDGES:
        raise ValueError(f"edge must be one of {EDGES}")
    if center_px is None:
        center_px = ((cols - 1) / 2.0, (rows - 1) / 2.0)
    cx, cy = float(center_px[0]), float(center_px[1])
    radius = float(radius_px) if radius_px is not None else 0.4 * min(rows, cols)
    fx, fy = carrier_for(fringes, angle_deg, radius)
    s_level = SURROUNDS[surround]
    seq = np.random.SeedSequence(seed)
    rng_speckle, rng_dust, rng_noise = (np.random.default_rng(s) for s in seq.spawn(3))

    # -- linear irradiance, row chunks ---------------------------------------------------------
    img = np.empty((rows, cols), dtype=np.float32)
    reach = radius + edge_support_px(edge, edge_width_px) + 1.0
    c_lo, c_hi = max(0, math.floor(cx - reach)), min(cols - 1, math.ceil(cx + reach))
    r_lo, r_hi = max(0, math.floor(cy - reach)), min(rows - 1, math.ceil(cy + reach))
    if c_lo > c_hi or r_lo > r_hi:
        r_lo, r_hi = 1, 0  # the aperture is wholly outside the frame
    all_cols = np.arange(cols, dtype=float)
    xu = (all_cols - cx) / radius
    step = max(16, (1 << 19) // max(cols, 1))

    def do_rows(r0: int) -> None:
        rr = np.arange(r0, min(r0 + step, rows), dtype=float)
        yu = (cy - rr) / radius
        light = illumination_field(xu[None, :], yu[:, None], illumination,
                                   illumination_angle_deg)
        out = np.full((rr.size, cols), s_level)
        lo, hi = max(r0, r_lo), min(r0 + rr.size - 1, r_hi)
        if lo <= hi and c_lo <= c_hi:
            sub_r = np.arange(lo, hi + 1, dtype=float)
            sub_c = np.arange(c_lo, c_hi + 1, dtype=float)
            d = np.hypot((sub_c - cx)[None, :], (sub_r - cy)[:, None]) - radius
            e = edge_profile(d, edge, edge_width_px)
            e[d > reach - radius] = 0.0
            cos_avg = _fringe_block(surface, sub_r, sub_c, cx, cy, radius, fx, fy, wavelength_nm)
            block = e * (1.0 + visibility * cos_avg) + (1.0 - e) * s_level
            out[lo - r0:hi + 1 - r0, c_lo:c_hi + 1] = block
        img[r0:r0 + rr.size] = (level * light * out).astype(np.float32)

    # numpy releases the GIL in its array loops, so two threads use both cores; each chunk
    # writes its own rows and draws no random numbers, so the result does not depend on order
    with ThreadPoolExecutor(max_workers=_THREADS) as pool:
        list(pool.map(do_rows, range(0, rows, step)))

    # -- exposure ------------------------------------------------------------------------------
    gain = 1.0
    if saturation > 0.0:
        peak = level * (1.0 + visibility) * (1.0 + illumination * _ILLUM_HI
                                             / (_ILLUM_HI - _ILLUM_LO))
        gain = (1.0 + saturation) / peak
        img *= np.float32(gain)

    # -- laser speckle: complex Gaussian field low-passed to the grain size --------------------
    if speckle > 0.0:
        # a Gaussian filter of std s on white complex noise gives an intensity autocorrelation
        # |mu|^2 that is Gaussian of std s (closed form), so FWHM = 2 sqrt(2 ln 2) s
        s = float(speckle_grain_px) / (2.0 * math.sqrt(2.0 * math.log(2.0)))
        white = [rng_speckle.standard_normal((rows, cols), np.float32) for _ in range(2)]
        with ThreadPoolExecutor(max_workers=_THREADS) as pool:
            re, im = pool.map(lambda a: ndimage.gaussian_filter(a, s), white)
        del white
        inten = re * re + im * im
        inten *= np.float32(1.0 / float(inten.mean(dtype=np.float64)))
        img *= np.float32(1.0 - speckle) + np.float32(speckle) * inten
        del re, im, inten

    # -- dust: semi-transparent soft discs, dark or bright ---------------------------------------
    specks = []
    for _ in range(int(dust)):
        rad = 0.5 * float(rng_dust.uniform(3.0, max(4.0, 0.01 * radius)))  # diameter in px
        where = 1.1 * radius * math.sqrt(rng_dust.uniform())
        phi = rng_dust.uniform(0.0, 2.0 * math.pi)
        sx, sy = cx + where * math.cos(phi), cy + where * math.sin(phi)
        opacity = float(rng_dust.uniform(0.3, 0.8))
        bright = bool(rng_dust.uniform() < 0.3)
        specks.append((sx, sy, rad, opacity, bright))
        y0, y1 = max(0, int(sy - rad - 2)), min(rows, int(sy + rad + 3))
        x0, x1 = max(0, int(sx - rad - 2)), min(cols, int(sx + rad + 3))
        if y0 >= y1 or x0 >= x1:
            continue
        dist = np.hypot(np.arange(x0, x1)[None, :] - sx, np.arange(y0, y1)[:, None] - sy)
        cover = np.clip(rad + 0.5 - dist, 0.0, 1.0) * opacity
        target = 0.9 if bright else 0.0
        patch = img[y0:y1, x0:x1]
        img[y0:y1, x0:x1] = (patch * (1.0 - cover) + target * cover).astype(np.float32)

    # -- sensor: clip, tone curve, noise, quantise ---------------------------------------------
    np.clip(img, 0.0, 1.0, out=img)
    img = tone_curve(img, tone, gamma).astype(np.float32, copy=False)
    if noise > 0.0:
        img += np.float32(noise) * rng_noise.standard_normal((rows, cols), np.float32)
        np.clip(img, 0.0, 1.0, out=img)
    top = (1 << bit_depth) - 1
    img *= np.float32(top)
    np.rint(img, out=img)
    pixels = img.astype(np.uint16 if bit_depth == 16 else np.uint8)

    params = dict(shape=(rows, cols), center_px=(cx, cy), radius_px=radius, fringes=fringes,
                  angle_deg=angle_deg, wavelength_nm=wavelength_nm, visibility=visibility,
                  level=level, noise=noise, illumination=illumination,
                  illumination_angle_deg=illumination_angle_deg, tone=tone, gamma=gamma,
                  edge=edge, edge_width_px=edge_width_px, surround=surround, speckle=speckle,
                  speckle_grain_px=speckle_grain_px, dust=int(dust), bit_depth=bit_depth,
                  saturation=saturation, seed=seed, gain=gain, dust_specks=tuple(specks))
    return RefPhoto(pixels=pixels, center_px=(cx, cy), radius_px=radius,
                    wavelength_nm=float(wavelength_nm), surface=surface, carrier=(fx, fy),
                    fringes=float(fringes), angle_deg=float(angle_deg), params=params)


# ---------------------------------------------------------------------------------------------
# Files
# ---------------------------------------------------------------------------------------------

_FORMATS = {"png": "PNG", "tiff": "TIFF", "jpeg": "JPEG"}
_SUFFIXES = {".png": "png", ".tif": "tiff", ".tiff": "tiff", ".jpg": "jpeg", ".jpeg": "jpeg"}


def _to_depth(pixels: np.ndarray, depth: int) -> np.ndarray:
    if depth == 16:
        return pixels.astype(np.uint16) * np.uint16(257) if pixels.dtype == np.uint8 else pixels
    if pixels.dtype == np.uint16:
        return np.rint(pixels / 257.0).astype(np.uint8)
    return pixels


def write(photo: RefPhoto | np.ndarray, path: str | os.PathLike, fmt: str | None = None, *,
          quality: int = 85, bit_depth: int | None = None, rgb: bool = False,
          color_cast: tuple[float, float, float] | None = None) -> Path:
    """Write a photo to disk atomically (a temporary file in the same folder, then a rename).

    Parameters
    ----------
    photo : RefPhoto or numpy.ndarray
        The photo, or a ``uint8``/``uint16`` grey array.
    path : str or path-like
        Destination.
    fmt : {'png', 'tiff', 'jpeg'}, optional
        File format (default: from the suffix).
    quality : int
        JPEG quality (libjpeg scale, 1-95).
    bit_depth : {8, 16}, optional
        Depth in the file (default: the photo's; JPEG and RGB are always 8 bit).
    rgb : bool
        Write three channels (the grey replicated).
    color_cast : tuple of float, optional
        Per-channel gains for a mild colour cast (implies ``rgb``).

    Returns
    -------
    pathlib.Path
        The written path.
    """
    path = Path(path)
    if fmt is None:
        try:
            fmt = _SUFFIXES[path.suffix.lower()]
        except KeyError:
            raise ValueError(f"cannot tell the format of {path.name!r}; pass fmt") from None
    fmt = {"jpg": "jpeg", "tif": "tiff"}.get(fmt.lower(), fmt.lower())
    if fmt not in _FORMATS:
        raise ValueError(f"fmt must be one of {tuple(_FORMATS)}, got {fmt!r}")
    pixels = photo.pixels if isinstance(photo, RefPhoto) else np.asarray(photo)
    if pixels.dtype not in (np.uint8, np.uint16) or pixels.ndim != 2:
        raise ValueError("pixels must be a 2-D uint8 or uint16 array")
    rgb = rgb or color_cast is not None
    depth = bit_depth or (16 if pixels.dtype == np.uint16 else 8)
    if fmt == "jpeg" or rgb:
        depth = 8
    data = _to_depth(pixels, depth)
    if rgb:
        gains = color_cast or (1.0, 1.0, 1.0)
        data = np.stack([np.clip(np.rint(data * float(g)), 0, 255) for g in gains],
                        axis=-1).astype(np.uint8)
    image = Image.fromarray(data)
    options: dict = {}
    if fmt == "jpeg":
        options = {"quality": int(quality)}
    elif fmt == "png":
        options = {"compress_level": 1}

    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "wb") as fh:
            image.save(fh, format=_FORMATS[fmt], **options)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise
    return path
