"""Realistic synthetic fringe photos made from a known surface, with the figures they should give.

The samples, the tests and the benchmarks all draw their photos from here, so a
photo made for a test is exactly as hard as one made for the accuracy table.

Model (before the camera), at photo pixel ``r = (x, y)`` (x right, y down)::

    I = s * A * (1 + V cos(2 pi f0 . r + 4 pi h / lambda)) + (1 - s) * B

``h`` is the surface height in nm (double pass: one fringe is ``lambda / 2`` of
height), ``f0`` the tilt carrier pointing down the photo (``angle_deg`` in
``[0, 180)`` from the x axis toward +y), ``A`` the lamp with uneven light, ``s`` a
soft step that is 50 % at the true radius, and ``B`` the surround. The camera then
applies a tone curve, dust, a few bad pixels, noise, clipping and quantisation.

With the carrier pointing down the photo, Flatsight's sign convention
(DEVELOPERS.md, "Sign") gives back ``+h``.

References
----------
M. Takeda, H. Ina, S. Kobayashi, "Fourier-transform method of fringe-pattern analysis
for computer-based topography and interferometry", JOSA 72(1), 156 (1982): the
intensity model ``a + b cos(2 pi f0 . r + phi)``.
C. J. Evans, "PVr - a robust amplitude parameter for optical surface specification",
Opt. Eng. 48(4), 043605 (2009): the true PVr.
R. J. Noll, "Zernike polynomials and atmospheric turbulence", JOSA 66(3), 207 (1976).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
from PIL import Image

from .aperture import Aperture
from .atomic import atomic_path
from .errors import SettingsError
from .shapes import Shape
from .zernike import aperture_basis, fit_zernike, zernike

__all__ = [
    "SyntheticPhoto",
    "SyntheticSurface",
    "AccuracyCheck",
    "Truth",
    "check_accuracy",
    "make_fringe_photo",
    "random_photo",
    "random_surface",
    "write_photo",
]

# Trade wavelengths in air: mercury e, helium d, sodium D (ISO 7944:1998, Reference
# wavelengths, from memory) and He-Ne (common practice).
TRADE_WAVELENGTHS_NM = (546.07, 587.56, 589.3, 632.8)

_DARK_SURROUND = 0.02
_BAND_PIXELS = 1 << 20  # rows are generated in bands of about this many pixels to bound memory
_LN9 = float(np.log(9.0))


@dataclass(frozen=True)
class SyntheticSurface:
    """A known surface: Noll Zernike terms plus a faint mid-spatial ripple.

    Coordinates are Zernike coordinates: x right, y toward the top of the photo, both
    divided by the aperture radius.

    Attributes
    ----------
    zernike_nm : dict of int to float
        Noll index -> coefficient in nm of height (each coefficient is that term's RMS).
    ripple_nm : float
        Amplitude of the ripple (polishing zones), nm.
    ripple_cycles : float
        Ripple cycles per aperture radius.
    ripple_linear : float
        Share (0..1) of the ripple in straight zones rather than concentric ones.
    ripple_angle_deg : float
        Direction across the straight zones, degrees counter-clockwise from x.
    """

    zernike_nm: dict[int, float]
    ripple_nm: float = 0.0
    ripple_cycles: float = 12.0
    ripple_linear: float = 0.0
    ripple_angle_deg: float = 0.0

    def height_nm(self, x_unit: np.ndarray, y_unit: np.ndarray) -> np.ndarray:
        """Height in nm at Zernike coordinates (the polynomials also hold past the rim)."""
        x, y = np.broadcast_arrays(np.asarray(x_unit, dtype=float), np.asarray(y_unit, dtype=float))
        rho = np.hypot(x, y)
        theta = np.arctan2(y, x)
        h = np.zeros(x.shape)
        for j, c in sorted(self.zernike_nm.items()):
            if c:
                h += c * zernike(j, rho, theta)
        if self.ripple_nm:
            k = 2.0 * np.pi * self.ripple_cycles
            # cos of rho (not sin) so the zones stay smooth at the centre
            zones = np.cos(k * rho)
            if self.ripple_linear:
                a = np.radians(self.ripple_angle_deg)
                straight = np.cos(k * (x * np.cos(a) + y * np.sin(a)) + 0.7)
                zones = (1.0 - self.ripple_linear) * zones + self.ripple_linear * straight
            h += self.ripple_nm * zones
        return h


@dataclass(frozen=True)
class Truth:
    """What a perfect measurement over a given disk would report.

    Attributes
    ----------
    rms_nm, pv_nm : float
        RMS and PV of the true surface over the disk, piston and tilt removed.
    pvr_nm : float
        Evans's PVr: PV of the 36-term fit (piston and tilt left out) + 3 x RMS of the
        fit residual.
    zernike_nm : (n_terms,) ndarray
        Noll coefficients 1..n_terms fitted over the disk (x right, y up, divided by its
        radius), nm.
    aperture : Aperture
        The disk the figures are taken over.
    n_samples : int
        Number of points the figures were sampled at.
    """

    rms_nm: float
    pv_nm: float
    pvr_nm: float
    zernike_nm: np.ndarray
    aperture: Aperture
    n_samples: int


@dataclass(frozen=True)
class SyntheticPhoto:
    """A fringe photo made from a known surface.

    Attributes
    ----------
    image : (M, N) ndarray
        float64 in 0..1, quantised exactly as a reader gets it back (8 or 16 bit).
    aperture : Aperture
        The true aperture in photo pixels (x right, y down).
    surface : SyntheticSurface
        The surface the fringes were made from.
    wavelength_nm : float
        Test wavelength.
    params : dict
        Every parameter used to make the photo (JSON-friendly), for test ids and tables.
    """

    image: np.ndarray
    aperture: Aperture
    surface: SyntheticSurface
    wavelength_nm: float
    params: dict = field(default_factory=dict)

    def true_height_nm(self, x_px: np.ndarray, y_px: np.ndarray) -> np.ndarray:
        """True surface height (nm) at photo pixel coordinates (x right, y down)."""
        return self.surface.height_nm(*self.aperture.unit_xy(x_px, y_px))

    def truth(self, reported: Aperture | None = None, n_terms: int = 36) -> Truth:
        """True figures over the ``reported`` disk (the true aperture when None).

        The surface is sampled on a grid aligned with the photo's pixels, one sample per
        pixel for disks up to 200 px radius and about 400 samples across larger ones.
        A part of another outline is sampled over that outline, in its fit coordinates,
        with the terms orthonormal over it when it is not a (foreshortened) circle.
        """
        ap = self.aperture if reported is None else reported
        r = float(ap.radius_px)
        step = max(1.0, r / 200.0)
        xs = np.arange(
            np.ceil((ap.center_x_px - r) / step), np.floor((ap.center_x_px + r) / step) + 1
        )
        ys = np.arange(
            np.ceil((ap.center_y_px - r) / step), np.floor((ap.center_y_px + r) / step) + 1
        )
        x, y = np.meshgrid(xs * step, ys * step)
        keep = ap.inside(x, y)
        x, y = x[keep], y[keep]
        h = self.true_height_nm(x, y)
        xu, yu = ap.unit_xy(x, y)
        basis = aperture_basis(n_terms, xu, yu, orthonormal=not ap.maps_to_disk)
        fit = fit_zernike(h, xu, yu, n_terms=n_terms, basis=basis)
        a = fit.coefficients_nm
        surface = h - basis[:, :3] @ a[:3]
        fitted = basis[:, 3:] @ a[3:]
        residual = h - basis @ a
        return Truth(
            rms_nm=float(np.sqrt(np.mean((surface - surface.mean()) ** 2))),
            pv_nm=float(np.ptp(surface)),
            pvr_nm=float(
                np.ptp(fitted) + 3.0 * np.sqrt(np.mean((residual - residual.mean()) ** 2))
            ),
            zernike_nm=a.copy(),
            aperture=ap,
            n_samples=int(h.size),
        )


def _smooth_step(distance_px: np.ndarray, width_px: float) -> np.ndarray:
    """1 inside, 0 outside, 50 % at distance 0, rising from 10 % to 90 % over ``width_px``."""
    w = max(float(width_px), 1e-6) / _LN9
    return 0.5 * (1.0 - np.tanh(distance_px / (2.0 * w)))


@dataclass(frozen=True)
class _Speck:
    x: float
    y: float
    radius: float
    opacity: float
    halo: float


def make_fringe_photo(
    surface: SyntheticSurface,
    *,
    shape: tuple[int, int] = (960, 1280),
    center_xy: tuple[float, float] | None = None,
    radius_px: float | None = None,
    edge_px: float = 4.0,
    wavelength_nm: float = 632.8,
    fringes: float = 20.0,
    angle_deg: float = 30.0,
    visibility: float = 0.7,
    level: float = 0.55,
    illumination: float = 0.3,
    surround: str = "dark",
    gamma: float = 0.75,
    s_curve: float = 0.0,
    noise: float = 0.02,
    dust: int = 4,
    bad_pixels: int = 4,
    mount_ring: bool = True,
    bit_depth: int = 8,
    seed: int = 0,
    outline: Shape | None = None,
    finesse: float = 0.0,
) -> SyntheticPhoto:
    """A fringe photo of ``surface`` with the imperfections real photos have.

    Parameters
    ----------
    surface : SyntheticSurface
        The surface under test.
    shape : (rows, columns)
        Photo size in pixels.
    center_xy, radius_px : optional
        True aperture centre (x right, y down) and radius; default: centred, 40 % of the
        short side.
    edge_px : float
        Width (10 % to 90 %) of the soft aperture edge.
    wavelength_nm : float
        Test wavelength; one fringe is half of it in height.
    fringes : float
        Tilt fringes across the aperture diameter (``|f0| * 2R``).
    angle_deg : float
        Carrier direction in ``[0, 180)``, from the photo x axis toward +y (down);
        0 points right (vertical fringes).
    visibility : float
        Fringe visibility ``V`` (0..1).
    level : float
        Mean lamp level over the aperture, fraction of full scale before the tone curve.
    illumination : float
        Fractional amplitude of the uneven light (a gradient of +-illumination/2 and a
        vignetting of +-illumination/4).
    surround : {"dark", "grey"}
        Outside the aperture: about 2 % (dark) or a flat grey of 30-40 % (grey).
    gamma, s_curve : float
        Camera tone curve: ``out = in ** gamma``, then blended by ``s_curve`` (0..1)
        with a smooth S-curve.
    noise : float
        Gaussian noise, sigma as a fraction of full scale.
    dust : int
        Number of dust specks on the flat (dark blobs 3-15 px across; some
        semi-transparent, some with a bright halo).
    bad_pixels : int
        Number of dead (0) and hot (1) pixels.
    mount_ring : bool
        A faint ring of the mount just outside the aperture.
    bit_depth : {8, 16}
        Quantisation of the result.
    seed : int
        Seed for everything random (light direction, dust, noise, bad pixels).
    outline : Shape, optional
        A part that is not a circle (``shapes``): its outline replaces the centre and
        radius, and the surface is laid over its fit coordinates. An ellipse is a round
        part seen at an angle: the surface is on the part's circle, and a fringe is
        ``lambda / (2 cos angle)`` of height.
    finesse : float
        0 (default) for two-beam fringes ``1 + V cos(phase)``. Above 0, the coefficient
        of finesse ``F`` of a high-reflectance pair seen in reflection: thin dark fringes
        on a bright field, ``1 + V (2 A - 1)`` with the Airy function
        ``A = F sin^2(phase / 2) / (1 + F sin^2(phase / 2))`` (Born & Wolf, *Principles of
        Optics*, multiple-beam fringes, from memory).

    Returns
    -------
    SyntheticPhoto
    """
    rows, cols = (int(shape[0]), int(shape[1]))
    if rows < 32 or cols < 32:
        raise SettingsError(f"synthetic photo shape {shape} is too small; use at least 32 x 32 px")
    radius = 0.4 * min(rows, cols) if radius_px is None else float(radius_px)
    cx, cy = ((cols - 1) / 2.0, (rows - 1) / 2.0) if center_xy is None else map(float, center_xy)
    oblique = 1.0
    if outline is not None:
        cx, cy, radius = outline.center_x_px, outline.center_y_px, outline.bounding_radius_px
        oblique = np.cos(np.radians(outline.view_angle_deg or 0.0))
    if outline is not None:
        edge = np.vstack(outline.outline(64))
        if not (edge.min() >= 0 and edge[:, 0].max() <= cols - 1
                and edge[:, 1].max() <= rows - 1):
            raise SettingsError(f"outline {outline.to_text()} does not fit in a {cols} x "
                                f"{rows} photo")
    elif not (
        cx - radius >= 0
        and cy - radius >= 0
        and cx + radius <= cols - 1
        and cy + radius <= rows - 1
        and radius >= 8
    ):
        raise SettingsError(
            f"aperture centre ({cx:.1f}, {cy:.1f}) radius {radius:.1f} px does not fit in a "
            f"{cols} x {rows} photo; move the centre or shrink the radius"
        )
    if not 0.0 <= angle_deg < 180.0:
        raise SettingsError(
            f"carrier angle {angle_deg} deg must be in [0, 180) (pointing down the photo)"
        )
    if bit_depth not in (8, 16):
        raise SettingsError(f"bit depth {bit_depth} is not supported; use 8 or 16")
    if surround not in ("dark", "grey"):
        raise SettingsError(f"surround {surround!r} is unknown; use 'dark' or 'grey'")
    if wavelength_nm <= 0 or fringes <= 0 or not 0.0 <= visibility <= 1.0:
        raise SettingsError("wavelength and fringes must be positive and visibility within 0..1")
    if not 0.0 <= finesse <= 1e4:
        raise SettingsError(f"coefficient of finesse {finesse} must be within 0..10000")

    rng = np.random.default_rng(seed)
    light_dir = rng.uniform(0.0, 2.0 * np.pi)
    grey = float(rng.uniform(0.30, 0.40)) if surround == "grey" else _DARK_SURROUND
    ring_r = radius * rng.uniform(1.06, 1.14)
    ring_w = max(2.0, radius * rng.uniform(0.01, 0.03))
    ring_amp = (
        rng.uniform(0.03, 0.06) if surround == "grey" else rng.uniform(0.01, 0.03)
    ) * mount_ring
    specks = []
    for _ in range(int(dust)):
        rr = radius * np.sqrt(rng.uniform(0.0, 0.9))
        t = rng.uniform(0.0, 2.0 * np.pi)
        specks.append(
            _Speck(
                x=cx + rr * np.cos(t),
                y=cy + rr * np.sin(t),
                radius=float(rng.uniform(1.5, 7.5)),
                opacity=float(
                    rng.uniform(0.9, 1.0) if rng.uniform() < 0.5 else rng.uniform(0.3, 0.8)
                ),
                halo=float(rng.uniform(0.08, 0.2) if rng.uniform() < 0.4 else 0.0),
            )
        )

    f = fringes / (2.0 * radius)
    a = np.radians(angle_deg)
    fx, fy = f * np.cos(a), f * np.sin(a)
    gx, gy = np.cos(light_dir), np.sin(light_dir)

    intensity = np.empty((rows, cols))
    band = max(1, _BAND_PIXELS // cols)
    x = np.arange(cols, dtype=float)
    for r0 in range(0, rows, band):
        y = np.arange(r0, min(rows, r0 + band), dtype=float)[:, None]
        u = (x[None, :] - cx) / radius
        v = (y - cy) / radius  # photo orientation (down) for the light only
        if outline is None:
            d = np.hypot(u, v) * radius - radius
        else:
            d = outline.edge_distance_px(*np.broadcast_arrays(x[None, :], y))
        step = _smooth_step(d, edge_px)
        lamp = (
            level
            * (1.0 + 0.5 * illumination * (gx * u + gy * v))
            * (1.0 - 0.5 * illumination * (u * u + v * v - 0.5))
        )
        back = np.full(step.shape, grey)
        if ring_amp:
            back += ring_amp * np.exp(-0.5 * ((d + radius - ring_r) / ring_w) ** 2)
        out = back * (1.0 - step)
        # fringes only where the lamp reaches (the soft step is negligible 8 widths out)
        near = d < 8.0 * max(edge_px, 1.0)
        if near.any():
            xx = np.broadcast_to(x[None, :], d.shape)[near]
            yy = np.broadcast_to(y, d.shape)[near]
            if outline is None:
                h = surface.height_nm(
                    np.broadcast_to(u, d.shape)[near], -np.broadcast_to(v, d.shape)[near]
                )
            else:  # the fringes of an obliquely seen part are further apart in height
                h = surface.height_nm(*outline.unit_xy(xx, yy)) * oblique
            phase = 2.0 * np.pi * (fx * xx + fy * yy) + 4.0 * np.pi * h / wavelength_nm
            if finesse > 0.0:
                s2 = np.sin(0.5 * phase) ** 2
                fringe = 1.0 + visibility * (2.0 * finesse * s2 / (1.0 + finesse * s2) - 1.0)
            else:
                fringe = 1.0 + visibility * np.cos(phase)
            out[near] += step[near] * lamp[near] * fringe
        intensity[r0 : r0 + band] = out

    for sp in specks:
        reach = sp.radius * 3.5 + 4.0
        x0, x1 = max(0, int(sp.x - reach)), min(cols, int(sp.x + reach) + 2)
        y0, y1 = max(0, int(sp.y - reach)), min(rows, int(sp.y + reach) + 2)
        xx, yy = np.meshgrid(np.arange(x0, x1, dtype=float), np.arange(y0, y1, dtype=float))
        dd = np.hypot(xx - sp.x, yy - sp.y)
        blob = _smooth_step(dd - sp.radius, 1.5)
        factor = 1.0 - sp.opacity * blob
        if sp.halo:
            factor *= 1.0 + sp.halo * np.exp(
                -0.5 * ((dd - 1.8 * sp.radius) / (0.5 * sp.radius)) ** 2
            )
        intensity[y0:y1, x0:x1] *= factor

    full = 2**bit_depth - 1
    for r0 in range(0, rows, band):
        part = intensity[r0 : r0 + band]
        np.clip(part, 0.0, 1.0, out=part)
        part **= gamma
        if s_curve:
            part[...] = (1.0 - s_curve) * part + s_curve * part * part * (3.0 - 2.0 * part)
        if noise:
            part += rng.normal(0.0, noise, part.shape)
        np.clip(part, 0.0, 1.0, out=part)
    n_bad = int(bad_pixels)
    if n_bad:
        flat = intensity.reshape(-1)
        where = rng.choice(flat.size, size=n_bad, replace=False)
        flat[where] = np.arange(n_bad) % 2  # alternately dead and hot
    for r0 in range(0, rows, band):
        part = intensity[r0 : r0 + band]
        part *= full
        np.round(part, out=part)
        part /= full

    params = dict(
        shape=[rows, cols],
        megapixels=rows * cols / 1e6,
        center_xy=[cx, cy],
        radius_px=radius,
        edge_px=float(edge_px),
        wavelength_nm=float(wavelength_nm),
        fringes=float(fringes),
        angle_deg=float(angle_deg),
        visibility=float(visibility),
        level=float(level),
        illumination=float(illumination),
        surround=surround,
        gamma=float(gamma),
        s_curve=float(s_curve),
        noise=float(noise),
        dust=int(dust),
        bad_pixels=n_bad,
        mount_ring=bool(mount_ring),
        bit_depth=int(bit_depth),
        seed=int(seed),
        zernike_nm={int(j): float(c) for j, c in sorted(surface.zernike_nm.items())},
        ripple_nm=float(surface.ripple_nm),
        ripple_cycles=float(surface.ripple_cycles),
    )
    if outline is not None:
        params["outline"] = outline.to_text()
    if finesse > 0.0:
        params["finesse"] = float(finesse)
    return SyntheticPhoto(
        image=intensity,
        aperture=Aperture(cx, cy, radius) if outline is None else Aperture.of_shape(outline),
        surface=surface,
        wavelength_nm=float(wavelength_nm),
        params=params,
    )


def _unit_grid(n: int = 201) -> tuple[np.ndarray, np.ndarray, float, np.ndarray]:
    g = np.linspace(-1.0, 1.0, n)
    x, y = np.meshgrid(g, g)
    inside = x * x + y * y <= 1.0
    return x, y, float(g[1] - g[0]), inside


def _pv_and_max_slope(surface: SyntheticSurface) -> tuple[float, float]:
    """PV over the unit disk (nm) and the largest slope (nm per radius) on it."""
    x, y, dx, inside = _unit_grid()
    h = surface.height_nm(x, y)
    gy, gx = np.gradient(h, dx)
    return float(np.ptp(h[inside])), float(np.max(np.hypot(gx, gy)[inside]))


def random_surface(
    rng: np.random.Generator, *, wavelength_nm: float, pv_waves: tuple[float, float] = (1 / 20, 1.0)
) -> SyntheticSurface:
    """Noll terms 4-15 mixed at random, PV log-uniform in ``pv_waves`` waves, plus a ripple."""
    n_terms = int(rng.integers(1, 7))
    js = rng.choice(np.arange(4, 16), size=n_terms, replace=False)
    coef = {}
    for j in js:
        # higher orders are usually weaker on a polished flat
        order = 2 if j <= 6 else 3 if j <= 10 else 4
        coef[int(j)] = float(rng.normal(0.0, 1.0) / (order - 1))
    base = SyntheticSurface(coef)
    pv, _ = _pv_and_max_slope(base)
    target = wavelength_nm * float(np.exp(rng.uniform(*np.log(pv_waves))))
    scale = target / pv
    zern = {j: c * scale for j, c in coef.items()}
    ripple = max(0.5, float(rng.uniform(0.01, 0.03)) * target)
    return SyntheticSurface(
        zern,
        ripple_nm=ripple,
        ripple_cycles=float(rng.uniform(4.0, 12.0)),
        ripple_linear=float(rng.uniform(0.0, 0.3)),
        ripple_angle_deg=float(rng.uniform(0, 180)),
    )


def random_photo(seed: int, *, megapixels: tuple[float, float] = (0.3, 2.0)) -> SyntheticPhoto:
    """A photo with every parameter drawn across the full hard range.

    Visibility 0.35-0.9, 12-35 fringes at any angle, trade wavelengths from 546 to
    633 nm, surfaces from lambda/20 to 1 wave PV of Noll terms 4-15 with a faint
    ripple, 0-3 % noise, 0-12 dust specks, 8 or 16 bit, dark or grey surround, an
    aperture of 30-48 % of the short side placed anywhere in frame.

    The surface is scaled down (and the tilt raised first, within 35 fringes) when its
    slope would otherwise close the fringes or push them past a 5-pixel period: an
    operator adds tilt until the fringes are open, as the Fourier-transform method
    needs (Takeda et al. 1982).
    """
    rng = np.random.default_rng(seed)
    lo, hi = megapixels
    mp = float(np.exp(rng.uniform(np.log(lo), np.log(hi))))
    aspect = float(rng.choice([1.0, 5 / 4, 4 / 3, 3 / 2, 16 / 9]))
    rows = int(round(np.sqrt(mp * 1e6 / aspect)))
    cols = int(round(rows * aspect))
    if rng.uniform() < 0.2:
        rows, cols = cols, rows
    short = min(rows, cols)
    radius = float(rng.uniform(0.30, 0.48)) * short
    edge = float(rng.uniform(1.5, 10.0))
    margin = 1.0
    cx = float(rng.uniform(radius + margin, cols - 1 - radius - margin))
    cy = float(rng.uniform(radius + margin, rows - 1 - radius - margin))
    wavelength = float(rng.choice(TRADE_WAVELENGTHS_NM))
    surface = random_surface(rng, wavelength_nm=wavelength)
    fringes = float(rng.uniform(12.0, 35.0))

    # Slope in cycles per radius is 2 |grad h| / lambda (double pass); keep it under half
    # the carrier (fringes / 2 per radius) and the highest local frequency under 1/5 px.
    _, slope = _pv_and_max_slope(surface)
    surf_cycles = 2.0 * slope / wavelength
    if surf_cycles > 0.25 * fringes:
        fringes = min(35.0, 4.0 * surf_cycles)
    limit = min(0.25 * fringes, 0.2 * radius - fringes / 2.0)
    if surf_cycles > limit:
        k = limit / surf_cycles
        surface = SyntheticSurface(
            {j: c * k for j, c in surface.zernike_nm.items()},
            ripple_nm=max(0.5, surface.ripple_nm * k),
            ripple_cycles=surface.ripple_cycles,
            ripple_linear=surface.ripple_linear,
            ripple_angle_deg=surface.ripple_angle_deg,
        )

    visibility = float(rng.uniform(0.35, 0.9))
    illumination = float(rng.uniform(0.0, 0.4))
    # mostly unsaturated; a bright fringe may just touch full scale
    level = min(
        float(rng.uniform(0.35, 0.6)), 1.05 / ((1 + visibility) * (1 + 0.75 * illumination))
    )
    return make_fringe_photo(
        surface,
        shape=(rows, cols),
        center_xy=(cx, cy),
        radius_px=radius,
        edge_px=edge,
        wavelength_nm=wavelength,
        fringes=fringes,
        angle_deg=float(rng.uniform(0.0, 180.0)),
        visibility=visibility,
        level=level,
        illumination=illumination,
        surround=str(rng.choice(["dark", "grey"])),
        gamma=float(rng.uniform(0.45, 1.0)),
        s_curve=float(rng.uniform(0.0, 0.6)) if rng.uniform() < 0.3 else 0.0,
        noise=float(rng.uniform(0.002, 0.03)),
        dust=int(rng.integers(0, 13)),
        bad_pixels=int(rng.integers(0, 9)),
        mount_ring=bool(rng.uniform() < 0.6),
        bit_depth=8 if rng.uniform() < 0.7 else 16,
        seed=int(rng.integers(0, 2**31)),
    )


_FORMATS = {".png": "PNG", ".jpg": "JPEG", ".jpeg": "JPEG", ".tif": "TIFF", ".tiff": "TIFF"}


def write_photo(
    photo_or_image: SyntheticPhoto | np.ndarray, path: str | Path, *, bit_depth: int | None = None
) -> None:
    """Write a photo (values 0..1) as PNG, JPEG (8-bit, quality 92) or TIFF, by suffix.

    ``bit_depth`` defaults to the synthetic photo's own (8 for a bare array). The file
    is written to a temporary file in the same folder and renamed into place.
    """
    if isinstance(photo_or_image, SyntheticPhoto):
        image = photo_or_image.image
        depth = photo_or_image.params.get("bit_depth", 8) if bit_depth is None else bit_depth
    else:
        image = np.asarray(photo_or_image, dtype=float)
        depth = 8 if bit_depth is None else bit_depth
    path = Path(path)
    fmt = _FORMATS.get(path.suffix.lower())
    if fmt is None:
        raise SettingsError(f"{path}: unknown photo type {path.suffix!r}; use .png, .jpg or .tif")
    if image.ndim != 2:
        raise SettingsError(f"{path}: only grey photos (2-D arrays) can be written")
    if depth not in (8, 16) or (fmt == "JPEG" and depth != 8):
        raise SettingsError(
            f"{path}: {fmt} cannot hold {depth}-bit grey; use 8-bit, or PNG/TIFF for 16-bit"
        )
    scale = 2**depth - 1
    counts = np.round(np.clip(image, 0.0, 1.0) * scale).astype(
        np.uint8 if depth == 8 else np.uint16
    )
    img = Image.fromarray(counts)
    options = {
        "PNG": {"compress_level": 6},
        "JPEG": {"quality": 92},
        "TIFF": {"compression": "tiff_adobe_deflate"},
    }[fmt]
    with atomic_path(path) as tmp:
        img.save(tmp, format=fmt, **options)


# Accuracy targets of the issue: (floor in nm, fraction of the true value).
RMS_TOLERANCE = (1.5, 0.02)
PVR_TOLERANCE = (5.0, 0.05)
ZERNIKE_TOLERANCE = (1.5, 0.03)  # RMS over Noll 4-15 of the difference vs the true terms' RMS
APERTURE_TOLERANCE = 0.015  # centre offset and radius error, fraction of the true radius
_CHECKED_TERMS = slice(3, 15)  # Noll 4..15


@dataclass(frozen=True)
class AccuracyCheck:
    """How far one measurement is from the truth, against the accuracy targets.

    Errors are absolute differences; the truth is taken over the reported aperture.
    """

    truth: Truth
    true_aperture: Aperture
    measured_rms_nm: float
    measured_pvr_nm: float
    rms_error_nm: float
    rms_limit_nm: float
    pvr_error_nm: float
    pvr_limit_nm: float
    zernike_error_nm: float
    zernike_limit_nm: float
    center_error_px: float
    radius_error_px: float
    aperture_limit_px: float

    @property
    def passed(self) -> dict[str, bool]:
        """Each criterion's verdict: rms, pvr, zernike, aperture."""
        return {
            "rms": self.rms_error_nm <= self.rms_limit_nm,
            "pvr": self.pvr_error_nm <= self.pvr_limit_nm,
            "zernike": self.zernike_error_nm <= self.zernike_limit_nm,
            "aperture": max(self.center_error_px, self.radius_error_px) <= self.aperture_limit_px,
        }

    @property
    def ok(self) -> bool:
        return all(self.passed.values())

    @property
    def worst_ratio(self) -> float:
        """The largest error as a multiple of its limit (1.0 is just on target)."""
        return max(
            self.rms_error_nm / self.rms_limit_nm,
            self.pvr_error_nm / self.pvr_limit_nm,
            self.zernike_error_nm / self.zernike_limit_nm,
            max(self.center_error_px, self.radius_error_px) / self.aperture_limit_px,
        )

    def describe(self) -> str:
        """One line per criterion, measured against truth, for assertion messages."""
        t = self.truth
        ta, ra = self.true_aperture, t.aperture
        return (
            f"RMS {self.measured_rms_nm:.2f} vs true {t.rms_nm:.2f} nm "
            f"(error {self.rms_error_nm:.2f}, limit {self.rms_limit_nm:.2f}); "
            f"PVr {self.measured_pvr_nm:.2f} vs true {t.pvr_nm:.2f} nm "
            f"(error {self.pvr_error_nm:.2f}, limit {self.pvr_limit_nm:.2f}); "
            f"Zernike 4-15 RMS difference {self.zernike_error_nm:.2f} nm "
            f"(limit {self.zernike_limit_nm:.2f}); aperture ({ra.center_x_px:.1f}, "
            f"{ra.center_y_px:.1f}, r {ra.radius_px:.1f}) vs true ({ta.center_x_px:.1f}, "
            f"{ta.center_y_px:.1f}, r {ta.radius_px:.1f}) px (limit {self.aperture_limit_px:.1f})"
        )


def check_accuracy(
    photo: SyntheticPhoto,
    *,
    aperture: Aperture,
    rms_nm: float,
    pvr_nm: float,
    zernike_nm: np.ndarray,
) -> AccuracyCheck:
    """Compare a measurement's figures with the truth over the aperture it reported.

    Parameters
    ----------
    photo : SyntheticPhoto
        The photo that was measured.
    aperture : Aperture
        The aperture the measurement reported.
    rms_nm, pvr_nm : float
        Measured RMS and PVr (piston and tilt removed).
    zernike_nm : (J,) ndarray
        Measured Noll coefficients from j = 1, J >= 15, nm.
    """
    truth = photo.truth(aperture)
    true_ap = photo.aperture
    measured = np.asarray(zernike_nm, dtype=float)[_CHECKED_TERMS]
    true_terms = truth.zernike_nm[_CHECKED_TERMS]
    if measured.size != true_terms.size:
        raise ValueError(f"need Noll terms 1..15 at least, got {np.size(zernike_nm)}")

    def limit(tol: tuple[float, float], value: float) -> float:
        return max(tol[0], tol[1] * abs(value))

    return AccuracyCheck(
        truth=truth,
        true_aperture=true_ap,
        measured_rms_nm=float(rms_nm),
        measured_pvr_nm=float(pvr_nm),
        rms_error_nm=abs(float(rms_nm) - truth.rms_nm),
        rms_limit_nm=limit(RMS_TOLERANCE, truth.rms_nm),
        pvr_error_nm=abs(float(pvr_nm) - truth.pvr_nm),
        pvr_limit_nm=limit(PVR_TOLERANCE, truth.pvr_nm),
        zernike_error_nm=float(np.sqrt(np.mean((measured - true_terms) ** 2))),
        zernike_limit_nm=limit(ZERNIKE_TOLERANCE, float(np.sqrt(np.mean(true_terms**2)))),
        center_error_px=float(
            np.hypot(
                aperture.center_x_px - true_ap.center_x_px,
                aperture.center_y_px - true_ap.center_y_px,
            )
        ),
        radius_error_px=abs(aperture.radius_px - true_ap.radius_px),
        aperture_limit_px=APERTURE_TOLERANCE * true_ap.radius_px,
    )
