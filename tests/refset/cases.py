"""Seeded random reference cases and a set of hand-made hard ones, each a photo plus its truth."""

from __future__ import annotations

import math
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .photo import RefPhoto, edge_support_px, render, write
from .surface import Bump, Edge, RefSurface, Ring, Ripple, noll_to_nm, polar_grid, truth

__all__ = [
    "FORMATS",
    "NAMED_CASES",
    "WAVELENGTHS_NM",
    "RefCase",
    "draw_settings",
    "named_case",
    "named_cases",
    "random_case",
    "random_surface",
]

WAVELENGTHS_NM = (632.8, 589.3, 546.07, 532.0)

#: File kinds drawn for random cases: (format, bit depth) and probability.
FORMATS = {("png", 8): 0.30, ("png", 16): 0.15, ("tiff", 8): 0.10, ("tiff", 16): 0.10,
           ("jpeg", 8): 0.35}

#: Largest height slope allowed, as a fraction of the carrier's fringe density: the local
#: fringe frequency then stays within 50-150 % of the carrier, which the fringes can resolve.
SLOPE_LIMIT = 0.5

_SUFFIX = {"png": ".png", "tiff": ".tif", "jpeg": ".jpg"}


@dataclass(frozen=True)
class RefCase:
    """A reference photo with its file format and truth figures.

    Attributes
    ----------
    name : str
        File stem, e.g. ``random-0042`` or ``z37_f20``.
    photo : RefPhoto
        The rendered photo.
    fmt : {'png', 'tiff', 'jpeg'}
        File format to write it in.
    quality : int or None
        JPEG quality (None for lossless formats).
    truth : dict
        Figures from :func:`refset.surface.truth`.
    seed : int or None
        Seed the case was drawn from (None for a named case).
    """

    name: str
    photo: RefPhoto
    fmt: str
    quality: int | None
    truth: dict
    seed: int | None = None

    @property
    def file_bit_depth(self) -> int:
        """Bit depth in the file (JPEG is always 8)."""
        return 8 if self.fmt == "jpeg" else self.photo.bit_depth

    @property
    def filename(self) -> str:
        """Suggested file name."""
        return self.name + _SUFFIX[self.fmt]

    def save(self, folder: str | os.PathLike) -> Path:
        """Write the photo into ``folder`` (atomically) and return its path."""
        return write(self.photo, Path(folder) / self.filename, self.fmt,
                     quality=self.quality or 85)


# ---------------------------------------------------------------------------------------------
# Random surfaces
# ---------------------------------------------------------------------------------------------


def _tilt_removed_pv_and_slope(surface: RefSurface) -> tuple[float, float]:
    """Cheap PV (piston and tilt removed, on a grid) and largest slope (nm per radius)."""
    g = polar_grid(nodes_per_panel=12, panels=8, n_theta=360)
    rho = np.append(g.rho, 1.0)
    x = rho[:, None] * np.cos(g.theta)[None, :]
    y = rho[:, None] * np.sin(g.theta)[None, :]
    h = surface.height_nm(x, y)
    w = np.append(g.ring_weight, 0.0)[:, None] * np.ones_like(h)
    a = np.stack([np.ones(h.size), x.ravel(), y.ravel()], axis=1) * np.sqrt(w.ravel())[:, None]
    c, *_ = np.linalg.lstsq(a, h.ravel() * np.sqrt(w.ravel()), rcond=None)
    r = h - c[0] - c[1] * x - c[2] * y
    step = 1e-5
    gx = (surface.height_nm(x + step, y) - surface.height_nm(x - step, y)) / (2 * step)
    gy = (surface.height_nm(x, y + step) - surface.height_nm(x, y - step)) / (2 * step)
    return float(r.max() - r.min()), float(np.hypot(gx, gy).max())


def random_surface(rng: np.random.Generator, *, wavelength_nm: float,
                   fringes: float) -> RefSurface:
    """Draw a surface: power and astigmatism always, often higher orders, sometimes features.

    Parameters
    ----------
    rng : numpy.random.Generator
        Random source.
    wavelength_nm : float
        Test wavelength (sets the PV range, lambda/40 to 1 wave, log-uniform).
    fringes : float
        Tilt fringes of the photo: ripples keep a period of at least 3 fringe periods and the
        largest slope stays within :data:`SLOPE_LIMIT` of the carrier's fringe density (which
        may pull the PV below its drawn target).

    Returns
    -------
    RefSurface
        The surface, scaled to its PV target.
    """
    coeffs: dict[int, float] = {}
    coeffs[4] = float(rng.choice([-1.0, 1.0]) * rng.uniform(0.3, 1.0))
    astig = rng.uniform(0.15, 0.6)
    axis = rng.uniform(0.0, math.pi)
    coeffs[5], coeffs[6] = float(astig * math.sin(2 * axis)), float(astig * math.cos(2 * axis))
    if rng.uniform() < 0.7:  # higher orders up to Noll 45
        for j in rng.choice(np.arange(7, 46), size=int(rng.integers(1, 9)), replace=False):
            n = noll_to_nm(int(j))[0]
            coeffs[int(j)] = float(rng.normal(0.0, 0.4 / n))
    if rng.uniform() < 0.2:  # now and then beyond any 45-term fit
        for j in rng.choice(np.arange(46, 67), size=int(rng.integers(1, 3)), replace=False):
            coeffs[int(j)] = float(rng.normal(0.0, 0.05))

    bumps: list[Bump] = []
    rings: list[Ring] = []
    ripples: list[Ripple] = []
    edge = None
    if rng.uniform() < 0.5:
        kinds = rng.choice(["bump", "ring", "edge", "ripple"], size=int(rng.integers(1, 4)),
                           replace=False)
        for kind in kinds:
            if kind == "bump":
                for _ in range(int(rng.integers(1, 3))):
                    r, t = 0.75 * math.sqrt(rng.uniform()), rng.uniform(0.0, 2 * math.pi)
                    bumps.append(Bump(x=r * math.cos(t), y=r * math.sin(t),
                                      sigma=float(rng.uniform(0.06, 0.18)),
                                      height_nm=float(rng.choice([-1.0, 1.0])
                                                      * rng.uniform(0.15, 0.5))))
            elif kind == "ring":
                rings.append(Ring(rho0=float(rng.uniform(0.25, 0.8)),
                                  width=float(rng.uniform(0.06, 0.12)),
                                  height_nm=float(rng.choice([-1.0, 1.0])
                                                  * rng.uniform(0.1, 0.3))))
            elif kind == "edge":
                sign = -1.0 if rng.uniform() < 0.75 else 1.0
                edge = Edge(rho0=float(rng.uniform(0.8, 0.92)),
                            height_nm=float(sign * rng.uniform(0.2, 0.6)),
                            power=float(rng.uniform(2.0, 3.0)))
            else:
                if rng.uniform() < 0.7:  # straight: cycles per diameter <= fringes / 3
                    ripples.append(Ripple(amplitude_nm=float(rng.uniform(0.03, 0.1)),
                                          cycles=float(rng.uniform(2.0, fringes / 3.0)),
                                          direction_deg=float(rng.uniform(0.0, 180.0)),
                                          phase_deg=float(rng.uniform(0.0, 360.0))))
                else:  # circular: cycles per radius <= fringes / 6
                    ripples.append(Ripple(amplitude_nm=float(rng.uniform(0.03, 0.1)),
                                          cycles=float(rng.uniform(1.0, fringes / 6.0)),
                                          phase_deg=float(rng.uniform(0.0, 360.0)),
                                          circular=True))
    shape = RefSurface(zernike_nm=coeffs, bumps=tuple(bumps), rings=tuple(rings), edge=edge,
                       ripples=tuple(ripples))
    target = wavelength_nm * math.exp(rng.uniform(math.log(1 / 40), 0.0))
    pv, slope = _tilt_removed_pv_and_slope(shape)
    scale = target / pv
    # fringes per radius from the slope: 2 |grad h| / lambda; the carrier gives fringes / 2
    max_slope = SLOPE_LIMIT * (fringes / 2.0) * wavelength_nm / 2.0
    scale = min(scale, max_slope / slope)
    return shape.scaled(scale)


# ---------------------------------------------------------------------------------------------
# Random photo settings
# ---------------------------------------------------------------------------------------------


def _megapixels(rng: np.random.Generator, lo: float, hi: float) -> float:
    split = min(max(3.0, lo), hi)
    if hi <= lo:
        return lo
    if split > lo and (split >= hi or rng.uniform() < 0.85):
        return float(rng.uniform(lo, split))
    return float(math.exp(rng.uniform(math.log(split), math.log(hi))))


def draw_settings(seed: int, *, megapixels: tuple[float, float] = (0.3, 12.0)) -> dict:
    """Everything a random case is made of, without rendering it.

    Parameters
    ----------
    seed : int
        Case seed.
    megapixels : tuple of float
        Range of photo sizes (85 % of draws fall below 3 MP when the range allows).

    Returns
    -------
    dict
        ``surface`` (RefSurface), ``render`` (keyword arguments of
        :func:`refset.photo.render`), ``fmt`` and ``quality``.
    """
    rng = np.random.default_rng([0x5EF5E7, int(seed)])
    mp = _megapixels(rng, float(megapixels[0]), float(megapixels[1]))
    aspect = float(rng.choice([4 / 3, 3 / 2, 1.0]))
    short = max(64, round(math.sqrt(mp * 1e6 / aspect)))
    long = max(64, round(short * aspect))
    rows, cols = (long, short) if aspect > 1 and rng.uniform() < 0.2 else (short, long)
    radius = float(rng.uniform(0.30, 0.45) * short)

    edge = str(rng.choice(["hard", "linear", "gaussian", "rolled"]))
    edge_width = float(rng.uniform(0.01, 0.04) * radius)
    margin = edge_support_px(edge, edge_width) + 0.02 * short
    off, phi = rng.uniform(0.0, 0.10) * short, rng.uniform(0.0, 2 * math.pi)
    cx = (cols - 1) / 2.0 + off * math.cos(phi)
    cy = (rows - 1) / 2.0 + off * math.sin(phi)
    cx = float(np.clip(cx, radius + margin, cols - 1 - radius - margin))
    cy = float(np.clip(cy, radius + margin, rows - 1 - radius - margin))

    fringes = float(rng.uniform(12.0, 40.0))
    wavelength = float(rng.choice(WAVELENGTHS_NM))
    tone = str(rng.choice(["linear", "srgb", "gamma"]))
    period = 2.0 * radius / fringes
    speckle = float(rng.uniform(0.15, 0.6)) if rng.uniform() < 0.25 else 0.0
    grain = float(rng.uniform(1.5, max(1.6, min(4.0, 0.35 * period))))
    kinds = list(FORMATS)
    fmt, depth = kinds[int(rng.choice(len(kinds), p=list(FORMATS.values())))]
    quality = int(rng.integers(70, 91)) if fmt == "jpeg" else None
    settings = dict(
        shape=(rows, cols), center_px=(cx, cy), radius_px=radius, fringes=fringes,
        angle_deg=float(rng.uniform(0.0, 180.0)), wavelength_nm=wavelength,
        visibility=float(rng.uniform(0.35, 0.95)), level=float(rng.uniform(0.3, 0.55)),
        noise=float(rng.uniform(0.0, 0.03)), illumination=float(rng.uniform(0.0, 0.3)),
        illumination_angle_deg=float(rng.uniform(0.0, 360.0)), tone=tone,
        gamma=float(rng.uniform(0.6, 1.0)) if tone == "gamma" else 1.0,
        edge=edge, edge_width_px=edge_width,
        surround="dark" if rng.uniform() < 0.6 else "grey",
        speckle=speckle, speckle_grain_px=grain,
        dust=int(rng.integers(1, 26)) if rng.uniform() < 0.5 else 0,
        bit_depth=depth,
        saturation=float(rng.uniform(0.05, 0.3)) if rng.uniform() < 0.1 else 0.0,
        seed=int(rng.integers(0, 2**31)),
    )
    surface = random_surface(rng, wavelength_nm=wavelength, fringes=fringes)
    return {"surface": surface, "render": settings, "fmt": fmt, "quality": quality}


def random_case(seed: int, *, megapixels: tuple[float, float] = (0.3, 12.0)) -> RefCase:
    """A seeded random reference case (same seed, same case).

    Parameters
    ----------
    seed : int
        Case seed.
    megapixels : tuple of float
        Range of photo sizes.

    Returns
    -------
    RefCase
        The photo, its file format and JPEG quality, and its truth.
    """
    s = draw_settings(seed, megapixels=megapixels)
    photo = render(s["surface"], **s["render"])
    return RefCase(name=f"random-{int(seed):04d}", photo=photo, fmt=s["fmt"],
                   quality=s["quality"], truth=truth(s["surface"], photo.wavelength_nm),
                   seed=int(seed))


# ---------------------------------------------------------------------------------------------
# Hand-made hard cases
# ---------------------------------------------------------------------------------------------

_NAMED_SURFACES: dict[str, RefSurface] = {
    "z22_6nm": RefSurface({22: 6.0}),
    "z16": RefSurface({16: 10.0}),
    "z37": RefSurface({37: 8.0}),
    "z22_z37": RefSurface({22: 6.0, 37: 8.0}),
    "rolled_edge": RefSurface(edge=Edge(rho0=0.85, height_nm=-50.0, power=2.0)),
    "speckle": RefSurface({4: 40.0, 6: 12.0}),
    "zonal_ring": RefSurface(rings=(Ring(rho0=0.6, width=0.07, height_nm=12.0),)),
    "local_dig": RefSurface(bumps=(Bump(x=0.35, y=-0.25, sigma=0.08, height_nm=-15.0),)),
}
_NAMED_FRINGES = (20, 32)

#: Names of the hand-made cases: each surface under 20 and 32 fringes.
NAMED_CASES: tuple[str, ...] = tuple(f"{k}_f{f}" for k in _NAMED_SURFACES
                                     for f in _NAMED_FRINGES)


def _named_settings(key: str, fringes: int) -> dict:
    rows, cols = 866, 1155  # 1.0 MP, 4:3
    radius = 0.40 * rows
    settings = dict(shape=(rows, cols), center_px=((cols - 1) / 2 + 11.3, (rows - 1) / 2 - 6.8),
                    radius_px=radius, fringes=float(fringes), angle_deg=30.0,
                    wavelength_nm=632.8, visibility=0.75, level=0.45, noise=0.008,
                    illumination=0.1, illumination_angle_deg=40.0, tone="srgb",
                    edge="gaussian", edge_width_px=0.02 * radius, surround="dark",
                    bit_depth=8, seed=1000 + fringes)
    if key == "rolled_edge":
        settings.update(edge="rolled", edge_width_px=0.03 * radius)
    if key == "speckle":
        settings.update(speckle=0.5, speckle_grain_px=3.0)
    return settings


def _build_named(key: str, fringes: int, figures: dict | None) -> RefCase:
    surface = _NAMED_SURFACES[key]
    photo = render(surface, **_named_settings(key, fringes))
    if figures is None:
        figures = truth(surface, photo.wavelength_nm)
    return RefCase(name=f"{key}_f{fringes}", photo=photo, fmt="png", quality=None,
                   truth=figures)


def named_case(name: str) -> RefCase:
    """One hand-made hard case by name (see :data:`NAMED_CASES`).

    Parameters
    ----------
    name : str
        E.g. ``'z37_f20'``.

    Returns
    -------
    RefCase
        The case, as an 8-bit PNG.
    """
    key, _, f = name.rpartition("_f")
    if key not in _NAMED_SURFACES or not f.isdigit() or int(f) not in _NAMED_FRINGES:
        raise KeyError(f"no named case {name!r}; known: {', '.join(NAMED_CASES)}")
    return _build_named(key, int(f), None)


def named_cases() -> dict[str, RefCase]:
    """All hand-made hard cases, keyed by :data:`NAMED_CASES`.

    Noll 22 at 6 nm alone, Noll 16 alone, Noll 37 alone, 22 and 37 together, a rolled
    (turned-down) edge, laser speckle, a zonal ring and a local dig, each under 20 and 32
    fringes, 1 MP, 8-bit PNG.

    Returns
    -------
    dict of str to RefCase
        The cases (about a second each to make).
    """
    out: dict[str, RefCase] = {}
    for key, surface in _NAMED_SURFACES.items():
        figures = truth(surface, 632.8)
        for f in _NAMED_FRINGES:
            out[f"{key}_f{f}"] = _build_named(key, f, figures)
    return out


# ---------------------------------------------------------------------------------------------
# Few, bent and closed fringes (issue 10): the photos an optician takes against a test plate
# ---------------------------------------------------------------------------------------------

#: Kinds of low-fringe photo: tilt fringes across the diameter, power as a PV in fringes
#: (edge to centre, either sign), astigmatism's PV in fringes at most.
FEW_FRINGE_KINDS: dict[str, dict] = {
    "few": {"tilt": (3.0, 9.0), "power": (0.1, 1.0), "astig": 0.5},
    "bent": {"tilt": (5.0, 8.0), "power": (1.5, 3.0), "astig": 0.5},
    "closed": {"tilt": (0.0, 0.3), "power": (2.0, 6.0), "astig": 0.3},
}

# PV over the disk of a unit-RMS Noll term (closed forms: 2 sqrt 3, 2 sqrt 6, 4 sqrt 2,
# 4 sqrt 2, and sqrt 5 * 1.5 for spherical's 6r^4 - 6r^2 + 1 from -1/2 to 1)
_PV_PER_RMS = {4: 2 * math.sqrt(3.0), 5: 2 * math.sqrt(6.0), 7: 4 * math.sqrt(2.0),
               9: 4 * math.sqrt(2.0), 11: 1.5 * math.sqrt(5.0)}


def few_fringe_surface(rng: np.random.Generator, kind: str, wavelength_nm: float) -> RefSurface:
    """A low-order surface for one of :data:`FEW_FRINGE_KINDS`: power, astigmatism, and a
    little coma, trefoil and spherical (each under a tenth of a fringe PV)."""
    spec = FEW_FRINGE_KINDS[kind]
    fringe_nm = wavelength_nm / 2.0
    coeffs: dict[int, float] = {}
    power_pv = float(rng.choice([-1.0, 1.0]) * rng.uniform(*spec["power"]))
    # a positive Noll 4 raises the edge: power (centre high) is minus it
    coeffs[4] = -power_pv * fringe_nm / _PV_PER_RMS[4]
    astig = rng.uniform(0.0, spec["astig"]) * fringe_nm / _PV_PER_RMS[5]
    axis = rng.uniform(0.0, math.pi)
    coeffs[5], coeffs[6] = astig * math.sin(2 * axis), astig * math.cos(2 * axis)
    for j, pv_j in ((7, 9), (8, 9), (9, 9), (10, 9), (11, 11)):
        coeffs[j] = float(rng.uniform(-0.1, 0.1)) * fringe_nm / _PV_PER_RMS[pv_j]
    return RefSurface(zernike_nm=coeffs)


def few_fringe_case(kind: str, seed: int, *,
                    megapixels: tuple[float, float] = (0.3, 3.0)) -> RefCase:
    """A seeded photo of few straight, bent or closed fringes (``kind``), with its truth.

    8-bit PNG or JPEG, a dark surround, any of the four edges at 1-4 % of the radius,
    noise to 3 % of full scale, uneven light to 30 %, the camera's tone curve; a lamp's
    light, so no speckle. Closed fringes have at most 0.3 fringe of tilt (a test plate).
    """
    rng = np.random.default_rng([0x10F1, ["few", "bent", "closed"].index(kind), int(seed)])
    mp = float(rng.uniform(*megapixels))
    aspect = float(rng.choice([4 / 3, 3 / 2, 1.0]))
    short = max(64, round(math.sqrt(mp * 1e6 / aspect)))
    rows, cols = short, max(64, round(short * aspect))
    radius = float(rng.uniform(0.30, 0.45) * short)
    edge = str(rng.choice(["hard", "linear", "gaussian", "rolled"]))
    edge_width = float(rng.uniform(0.01, 0.04) * radius)
    margin = edge_support_px(edge, edge_width) + 0.02 * short
    off, phi = rng.uniform(0.0, 0.08) * short, rng.uniform(0.0, 2 * math.pi)
    cx = float(np.clip((cols - 1) / 2.0 + off * math.cos(phi), radius + margin,
                       cols - 1 - radius - margin))
    cy = float(np.clip((rows - 1) / 2.0 + off * math.sin(phi), radius + margin,
                       rows - 1 - radius - margin))
    wavelength = float(rng.choice(WAVELENGTHS_NM))
    tone = str(rng.choice(["linear", "srgb", "gamma"]))
    fmt = "jpeg" if rng.uniform() < 0.5 else "png"
    quality = int(rng.integers(75, 93)) if fmt == "jpeg" else None
    spec = FEW_FRINGE_KINDS[kind]
    settings = dict(
        shape=(rows, cols), center_px=(cx, cy), radius_px=radius,
        fringes=float(rng.uniform(*spec["tilt"])), angle_deg=float(rng.uniform(0.0, 180.0)),
        wavelength_nm=wavelength, visibility=float(rng.uniform(0.4, 0.95)),
        level=float(rng.uniform(0.3, 0.55)), noise=float(rng.uniform(0.0, 0.03)),
        illumination=float(rng.uniform(0.0, 0.3)),
        illumination_angle_deg=float(rng.uniform(0.0, 360.0)), tone=tone,
        gamma=float(rng.uniform(0.6, 1.0)) if tone == "gamma" else 1.0,
        edge=edge, edge_width_px=edge_width, surround="dark", bit_depth=8,
        seed=int(rng.integers(0, 2**31)),
    )
    surface = few_fringe_surface(rng, kind, wavelength)
    photo = render(surface, **settings)
    return RefCase(name=f"{kind}-{int(seed):04d}", photo=photo, fmt=fmt, quality=quality,
                   truth=truth(surface, wavelength), seed=int(seed))
