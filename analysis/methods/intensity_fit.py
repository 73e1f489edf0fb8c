"""Few, bent and closed fringes: a Zernike phase fitted directly to the fringe intensity.

The photo is modelled as ``I = a(x, y) + b(x, y) cos(phi) + c cos(2 phi)``: a background
``a`` and a fringe modulation ``b`` that are smooth (quadratic in x and y plus a steep
radial term for a soft rim), a second harmonic ``c`` for the camera's tone curve, and a
phase ``phi`` that is a sum of Noll Zernike terms. Every coefficient is found together by
non-linear least squares (``scipy.optimize.least_squares``) on the binned photo; no
carrier, no sideband and no unwrapping are needed, so three straight fringes, fringes
bent past closing, and closed rings are all one model.

Such a fit converges only from a phase within a fraction of a fringe of the truth, so it
starts small: a search over tilt and power on the central third of the aperture (where
power bends the fringes least), then fits on disks that grow outward to the rim, each
started from the last, as regularized phase tracking grows its solution from a seed.
A fit is right when its misfit is what the photo's noise leaves (measured from the
pixels, not from the fit). The search then runs again on a disk of 0.8 of the radius,
where a few tilt fringes cross often enough that the background and modulation
polynomials cannot mimic them, its seeds are fitted from there out, and the lower
misfit wins: grown from the centre, a wrong phase can fit within the noise's
allowance. A fit that still misses the noise by far is reported with a warning.
Given another method's phase (the carrier method's, on few tilt fringes), the fit also
grows from it, and reports the misfit that phase leaves in the same model (its piston
and tilt fitted, the rest held), so the pipeline can let the photo judge between them.

A photo with few fringes carries few Zernike terms: the fit goes to radial order
``fringes + 2`` (at most 6, at least 4), where ``fringes`` is the number of fringes the
phase spans over the aperture; the count is reported and limits the fit.

``cos`` is even, so ``phi`` and ``-phi`` fit equally. With tilt fringes the sign follows
the tilt, as in the carrier method (the tilt points down the photo; DEVELOPERS.md,
"Sign"). With closed fringes (under two fringes of tilt) the photo cannot tell convex
from concave: the operator states it.

References
----------
D. Malacara, M. Servín, Z. Malacara, *Interferogram Analysis for Optical Testing*, 2nd ed.,
CRC Press (2005): fitting a phase model to fringe photos (from memory).
M. Servín, J. L. Marroquín, F. J. Cuevas, "Demodulation of a single interferogram by use
of a two-dimensional regularized phase-tracking technique", Appl. Opt. 36, 4540 (1997):
a solution grown outward from a seed region (from memory).
"""

from __future__ import annotations

import math
import threading
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from scipy.optimize import least_squares

from ..aperture import Aperture
from ..carrier import Spectrum, crop_aperture, radius_grid, spectrum_view
from ..errors import RingSignNeededError, UnanalysablePhotoError
from ..extension import check_cancel
from ..zernike import solve_least_squares, zernike_basis

__all__ = ["IntensityFit", "fit_intensity", "terms_for_fringes"]

Progress = Callable[[str, float], None]

MAP_DIAMETER = 128  # binned pixels across the aperture the fit works on
FIT_RADIUS = 0.96  # the fit stays this far in (a soft rim dims the fringes beyond it)
SEED_RADII = (0.35, 0.6)  # the first search's disks
# disks the fit grows through (radii) and the Noll terms fitted on each: to primary
# spherical, which rings at the rim already show
GROWTH = ((0.35, 6), (0.5, 11), (0.65, 11), (0.8, 11), (FIT_RADIUS, 11))
SEEDS_PER_DISK = 3
# where no seed grown from the centre fits as well as the photo's noise allows, the search
# runs again on this wider disk and its seeds are fitted from there out: tilt fringes
# that cross a small central disk only once or twice leave the background and
# modulation polynomials room to mimic them, and a fit grown from there can keep a
# wrong phase all the way to the rim
WIDE_SEED_RADIUS = 0.8
_SEARCH_BLOCK = 4096  # seed-search candidates evaluated at once (memory)
# a camera's tone curve puts a second harmonic of a fifth of the fringe or less; far more
# means the fit found half the phase and let the harmonic draw the fringes
MAX_HARMONIC = 0.4
CLOSED_TILT_FRINGES = 2.0  # under this much tilt the fringes close: the sign is stated
MAX_ORDER = 6


@dataclass(frozen=True)
class IntensityFit:
    """Output of :func:`fit_intensity`, all maps on the binned grid.

    Attributes
    ----------
    phase : (M, N) ndarray
        The fitted phase (radians), piston and tilt included, NaN outside the disk.
    modulation : (M, N) ndarray
        Fitted fringe visibility ``b / a``, NaN outside the disk.
    phase_sigma : (M, N) ndarray
        Standard deviation of the phase the photo's noise leaves (radians), from the
        fit's covariance; NaN outside the disk.
    disk, masked : (M, N) bool ndarray
        Map pixels inside the aperture; those left out (exclusions, outside the frame).
    origin_px : tuple of float
        Photo coordinates (x, y) of map pixel (0, 0); ``step_px`` apart.
    coefficients : ndarray
        Noll coefficients of the phase (radians), ``n_terms`` of them.
    fringes : float
        Fringes the phase spans over the aperture (its PV over 2 pi).
    tilt_fringes : float
        Tilt fringes across the diameter (Noll 2 and 3).
    closed : bool
        Closed fringes: under two fringes of tilt, rings of power about a centre.
    sign : {"measured", "stated"}
        Whether the surface's sign came from the tilt or from the operator.
    residual_rms : float
        RMS misfit of the intensity model over the fitted disk, in units of the fringe
        modulation (0 for a perfect fit; noise alone gives its own share).
    prior_misfit : float
        The same misfit for the other method's phase given as ``prior`` (its projection
        on the fitted terms, with its own best background and modulation); NaN without.
    """

    phase: np.ndarray
    modulation: np.ndarray
    phase_sigma: np.ndarray
    disk: np.ndarray
    masked: np.ndarray
    origin_px: tuple[float, float]
    step_px: float
    binning: int
    coefficients: np.ndarray
    n_terms: int
    max_order: int
    fringes: float
    tilt_fringes: float
    closed: bool
    sign: str
    residual_rms: float
    spectrum: Spectrum
    warnings: tuple[str, ...]
    prior_misfit: float = float("nan")


def terms_for_fringes(fringes: float) -> tuple[int, int]:
    """Radial order and Noll term count a photo of ``fringes`` fringes resolves.

    One more radial order per fringe the phase spans, from order 4 (15 terms, through
    primary spherical) for two fringes or fewer, to order 6 (28 terms).
    """
    order = int(min(MAX_ORDER, max(4, math.floor(fringes + 2.0))))
    return order, (order + 1) * (order + 2) // 2


# --- the model --------------------------------------------------------------------------


def _envelope_basis(x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Smooth terms for background and modulation: quadratic, and rho^8 for the rim."""
    r2 = x * x + y * y
    return np.stack([np.ones_like(x), x, y, x * x, x * y, y * y, r2**4], axis=1)


class _Model:
    """Intensity model on a set of pixels; parameters are Zernike phase coefficients."""

    def __init__(self, data: np.ndarray, x: np.ndarray, y: np.ndarray, n_terms: int):
        self.data = data
        self.z = zernike_basis(n_terms, x, y)
        self.e = _envelope_basis(x, y)
        self._last: tuple[bytes, tuple] | None = None

    def linear(self, c: np.ndarray):
        """The best background, modulation and harmonic for phase coefficients ``c``."""
        key = c.tobytes()
        if self._last is None or self._last[0] != key:  # residual and Jacobian share it
            self._last = (key, self._solve(c))
        return self._last[1]

    def _solve(self, c: np.ndarray):
        phi = self.z @ c
        cos1 = np.cos(phi)
        cols = np.concatenate([self.e, self.e * cos1[:, None], np.cos(2 * phi)[:, None]], axis=1)
        # normal equations, lightly damped (columns can be nearly dependent when the
        # phase is nearly flat over a small disk)
        gram = cols.T @ cols
        gram[np.diag_indices_from(gram)] += 1e-9 * np.trace(gram)
        lin = np.linalg.solve(gram, cols.T @ self.data)
        return phi, cols, lin

    def residual(self, c: np.ndarray) -> np.ndarray:
        _, cols, lin = self.linear(c)
        return cols @ lin - self.data

    def jacobian(self, c: np.ndarray) -> np.ndarray:
        # variable projection with the linear part held at its optimum (Kaufman's
        # simplification): d r / d c_j = -(b sin phi + 2 h sin 2 phi) Z_j
        phi, _, lin = self.linear(c)
        ne = self.e.shape[1]
        b = self.e @ lin[ne:2 * ne]
        slope = -(b * np.sin(phi) + 2.0 * lin[-1] * np.sin(2 * phi))
        return self.z * slope[:, None]


def _fit(data, x, y, start: np.ndarray, n_terms: int, cancel) -> tuple[np.ndarray, float]:
    check_cancel(cancel)
    c0 = np.zeros(n_terms)
    c0[:min(n_terms, start.size)] = start[:n_terms]
    model = _Model(data, x, y, n_terms)
    out = least_squares(model.residual, c0, jac=model.jacobian, method="lm",
                        xtol=1e-8, ftol=1e-9, max_nfev=80)
    return out.x, float(np.sqrt(np.mean(out.fun**2)))


def _seed_search(data, x, y, radius: float) -> list[np.ndarray]:
    """Tilt and power that best explain a central disk: a few distinct candidates.

    The grid's steps move the phase over the disk by at most about a tenth of a fringe
    (tilt in fringes per diameter, power in fringes edge to centre, both scaled to the
    disk's radius), so the best point of the grid lies in the fit's basin.
    """
    bg = np.stack([np.ones_like(x), x, y], axis=1)
    q, _ = np.linalg.qr(bg)
    d = data - q @ (q.T @ data)
    tilt_step, power_step = 0.35 / radius, 0.2 / radius**2
    tilts = np.arange(-10.0, 10.0 + 1e-9, tilt_step)  # fringes across the diameter
    powers = np.arange(-9.0, 9.0 + 1e-9, power_step)  # fringes of power, edge to centre
    tx, ty, pw = np.meshgrid(tilts, tilts[tilts >= 0], powers, indexing="ij")
    tx, ty, pw = tx.ravel(), ty.ravel(), pw.ravel()
    q = q.astype(np.float32)
    d = d.astype(np.float32)
    r2 = (x * x + y * y)[None, :]
    explained = np.empty(tx.size)
    # in blocks of candidates: a wide disk's grid holds tens of thousands of them
    for lo in range(0, tx.size, _SEARCH_BLOCK):
        sl = slice(lo, lo + _SEARCH_BLOCK)
        # phase in radians: tilt T fringes across the diameter is pi T x; power P is
        # 2 pi P rho^2
        phi = (np.pi * (tx[sl, None] * x[None, :] + ty[sl, None] * y[None, :])
               + 2.0 * np.pi * pw[sl, None] * r2).astype(np.float32)
        cos_, sin_ = np.cos(phi), np.sin(phi)
        cos_ -= (cos_ @ q) @ q.T
        sin_ -= (sin_ @ q) @ q.T
        g11 = np.einsum("ij,ij->i", cos_, cos_)
        g22 = np.einsum("ij,ij->i", sin_, sin_)
        g12 = np.einsum("ij,ij->i", cos_, sin_)
        p1, p2 = cos_ @ d, sin_ @ d
        det = np.maximum(g11 * g22 - g12 * g12, 1e-12)
        explained[sl] = (g22 * p1 * p1 - 2 * g12 * p1 * p2 + g11 * p2 * p2) / det
    order = np.argsort(-explained)
    picks: list[np.ndarray] = []
    for i in order[:200]:
        cand = np.array([tx[i], ty[i], pw[i]])
        steps = (1.01 * tilt_step, 1.01 * tilt_step, 1.01 * power_step)
        if all(np.max(np.abs(cand - p) / steps) > 1.0 for p in picks):
            picks.append(cand)
        if len(picks) == SEEDS_PER_DISK:
            break
    seeds = []
    for t_x, t_y, p in picks:
        c = np.zeros(4)
        c[1], c[2] = np.pi * t_x / 2.0, np.pi * t_y / 2.0  # Z2 = 2x, Z3 = 2y
        c[3] = 2.0 * np.pi * p / (2.0 * math.sqrt(3.0))  # Z4 = sqrt3 (2 rho^2 - 1)
        seeds.append(c)
    return seeds


def _ring_seed(data: np.ndarray, rho: np.ndarray) -> np.ndarray:
    """Power from centred rings: the azimuthal mean brightness against rho squared.

    Rings of power have evenly spaced squared radii (the ring-radius method of
    Newton's rings), so about the aperture's centre the mean brightness is a cosine in
    ``rho^2`` whose frequency is the power in fringes; it is found on a grid of 0.05
    fringe steps, the cosine's amplitude allowed to vary linearly (uneven light).
    """
    s = rho * rho
    bins = np.minimum((s * 200).astype(int), 199)
    counts = np.bincount(bins, minlength=200)
    prof = np.bincount(bins, weights=data, minlength=200)
    have = counts > 0
    sc = (np.arange(200) + 0.5)[have] / 200.0
    prof = prof[have] / counts[have]
    w = np.sqrt(counts[have])
    best_p, best = 0.0, -1.0
    base = np.stack([np.ones_like(sc), sc], axis=1)
    for p in np.arange(0.5, 10.0, 0.05):
        c, sn = np.cos(2 * np.pi * p * sc), np.sin(2 * np.pi * p * sc)
        cols = np.concatenate([base, base * c[:, None], base * sn[:, None]], axis=1) * w[:, None]
        coef, *_ = np.linalg.lstsq(cols, prof * w, rcond=None)
        explained = float(np.sum((cols @ coef) ** 2))
        if explained > best:
            best_p, best = float(p), explained
    seed = np.zeros(4)
    seed[3] = 2.0 * np.pi * best_p / (2.0 * math.sqrt(3.0))
    return seed


def fit_intensity(
    image: np.ndarray,
    aperture: Aperture,
    *,
    ring_sign: str | None = None,
    invert: bool = False,
    photo_name: str = "the photo",
    prior: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None,
    progress: Progress | None = None,
    cancel: threading.Event | None = None,
) -> IntensityFit:
    """Fit a Zernike phase directly to a photo of few, bent or closed fringes.

    Parameters
    ----------
    image : (H, W) ndarray
        The photo, values in 0..1.
    aperture : Aperture
        The clear aperture in photo pixels; its exclusions are left out.
    ring_sign : {"convex", "concave"} or None
        The part's form as the operator's push test showed it, needed for closed fringes.
    invert : bool
        The pipeline flips the sign of the height after this; a stated sign must survive it.
    prior : (phase, x, y) of 1-D ndarrays, optional
        Another method's phase (radians) at points in the fit's unit coordinates (x
        right, y up, the aperture's radius 1): the fit is also grown from it, the lower
        misfit wins, and its own misfit is reported (``prior_misfit``).

    Returns
    -------
    IntensityFit

    Raises
    ------
    UnanalysablePhotoError
        Too small an aperture, too little contrast, a fit that does not converge, or
        closed fringes without a stated sign.
    """
    def report(stage: str, frac: float) -> None:
        if progress is not None:
            progress(stage, frac)

    if aperture.radius_px < 16:
        raise UnanalysablePhotoError(
            f"the aperture is only {aperture.radius_px:.0f} px in radius; fringes cannot be "
            "resolved (photograph the flat larger in the frame)")
    report("intensity fit", 0.0)
    img = np.asarray(image, dtype=np.float32)
    k = max(1, int(2.0 * aperture.radius_px // MAP_DIAMETER))
    data, inframe, origin = crop_aperture(img, aperture, k)
    n = data.shape[0]
    r_b = aperture.radius_px / k
    center_rc = ((aperture.center_y_px - origin[1]) / k, (aperture.center_x_px - origin[0]) / k)
    rho = radius_grid(data.shape, center_rc, r_b)
    cols = np.arange(n, dtype=float)
    px = origin[0] + k * cols
    py = origin[1] + k * cols
    xu = np.broadcast_to(((px - aperture.center_x_px) / aperture.radius_px)[None, :], (n, n))
    yu = np.broadcast_to(((aperture.center_y_px - py) / aperture.radius_px)[:, None], (n, n))
    disk = rho <= 1.0
    masked = np.zeros_like(disk)
    if aperture.exclusions:
        masked |= disk & ~aperture.inside(np.broadcast_to(px[None, :], (n, n)),
                                          np.broadcast_to(py[:, None], (n, n)))
    if inframe is not None:
        masked |= disk & ~inframe
    usable = disk & ~masked
    if usable.sum() < 2000:
        raise UnanalysablePhotoError("too little of the aperture is left to measure")
    fit_px = usable & (rho <= FIT_RADIUS)
    values = data[fit_px].astype(np.float64)
    mean, spread = float(values.mean()), float(values.std())
    if spread < 1e-3:
        raise UnanalysablePhotoError(
            f"no fringes in {photo_name}: the aperture is evenly lit; check the lamp and "
            "the contact between the flats")
    values = (values - mean) / spread
    x_all, y_all, r_all = xu[fit_px], yu[fit_px], rho[fit_px]

    noise = _noise_level(data, usable) / spread

    def grow(seed: np.ndarray, growth) -> tuple[np.ndarray | None, float]:
        c, cost = seed, math.inf
        for radius, terms in growth:
            sel = _sample(r_all, radius)
            c, cost = _fit(values[sel], x_all[sel], y_all[sel], c, terms, cancel)
        if _harmonic_share(values[sel], x_all[sel], y_all[sel], c) > MAX_HARMONIC:
            return None, math.inf  # half the phase, its second harmonic drawing the fringes
        return c, cost

    def fits_to_noise(c: np.ndarray | None, cost: float) -> bool:
        return c is not None and cost < _expected_misfit(noise, values, x_all, y_all, c)

    # 1. seeds: tilt and power on central disks, a subsample of their pixels
    seeds = [_ring_seed(values, r_all)]
    for radius in SEED_RADII:
        sub = _sample(r_all, radius, 700)
        seeds += _seed_search(values[sub], x_all[sub], y_all[sub], radius)
    report("intensity fit", 0.2)

    # 2. each seed grown to the rim with tilt, power and astigmatism; keep the best
    best, best_cost = None, math.inf
    for i, seed in enumerate(seeds):
        c, cost = grow(seed, GROWTH)
        if cost < best_cost:
            best, best_cost = c, cost
        report("intensity fit", 0.2 + 0.4 * (i + 1) / len(seeds))
        if fits_to_noise(best, best_cost):
            break  # as good as the photo's noise allows: no other seed can do better
    # the wider disk's search, its seeds fitted from there out, whatever the centre's
    # seeds found: a fit of three straight fringes grown from the centre can lose half a
    # fringe of tilt to the background and modulation polynomials and still fit within
    # the noise's allowance (tests/refset/shaped.py seeds 201 and 211, drawn square-on
    # with 3 tilt fringes: misfit 0.93 and 0.66 of the allowance, power read 81 and 24 nm
    # for -16 and 7.5 nm), where the wide search's first seed finds the right fit (0.28
    # and 0.37). It costs about a second; the lower misfit wins.
    sub = _sample(r_all, WIDE_SEED_RADIUS, 700)
    wide = tuple(g for g in GROWTH if g[0] >= WIDE_SEED_RADIUS)
    for seed in _seed_search(values[sub], x_all[sub], y_all[sub], WIDE_SEED_RADIUS):
        c, cost = grow(seed, wide)
        if cost < best_cost:
            best, best_cost = c, cost
        if fits_to_noise(best, best_cost):
            break
    # another method's phase (the carrier method's, on few tilt fringes) as one more seed
    radius, terms = GROWTH[-1]
    prior_coef = (_projected(prior, terms)
                  if prior is not None and not fits_to_noise(best, best_cost) else None)
    if prior_coef is not None:
        sel = _sample(r_all, radius)
        c, cost = _fit(values[sel], x_all[sel], y_all[sel], prior_coef, terms, cancel)
        if cost < best_cost and _harmonic_share(values[sel], x_all[sel], y_all[sel],
                                                c) <= MAX_HARMONIC:
            best, best_cost = c, cost
    report("intensity fit", 0.7)

    if best is not None and not fits_to_noise(best, best_cost):
        # a fit that lost or gained a ring at the rim is a local minimum one fringe of
        # power away (the outer rings crowd there): try either side and keep the better
        radius, terms = GROWTH[-1]
        sel = _sample(r_all, radius)
        for fringe in (1.0, -1.0):
            c = np.array(best, dtype=float)
            c[3] += 2.0 * np.pi * fringe / (2.0 * math.sqrt(3.0))
            c, cost = _fit(values[sel], x_all[sel], y_all[sel], c, terms, cancel)
            if cost < best_cost and _harmonic_share(values[sel], x_all[sel], y_all[sel],
                                                    c) <= MAX_HARMONIC:
                best, best_cost = c, cost
    if best is None:
        raise UnanalysablePhotoError(
            f"no fringe pattern found in {photo_name}: check the lamp, the focus and the "
            "contact between the flats, or give the aperture with --aperture X,Y,R")
    # 3. as many terms as the fringes carry, on every fitted pixel
    fringes = _fringes_spanned(best, xu[usable], yu[usable])
    order, n_terms = terms_for_fringes(fringes)
    coef, _ = _fit(values, x_all, y_all, best, n_terms, cancel)
    model = _Model(values, x_all, y_all, n_terms)
    phi, cols_fit, lin = model.linear(coef)
    resid = cols_fit @ lin - values
    ne = model.e.shape[1]
    b_fit = model.e @ lin[ne:2 * ne]
    modulation_rms = max(_modulation_rms(values, x_all, y_all, coef, model), 1e-9)
    residual_rms = float(np.sqrt(np.mean(resid**2)) / modulation_rms)
    prior_misfit = math.nan
    pc = _projected(prior, n_terms) if prior is not None else None
    if pc is not None:
        pc = _piston_and_tilt(model, pc)
        prior_misfit = float(np.sqrt(np.mean(model.residual(pc) ** 2))
                             / max(_modulation_rms(values, x_all, y_all, pc, model), 1e-9))
    report("intensity fit", 0.9)

    # 4. contrast, sign, maps
    level = model.e @ lin[:ne] * spread + mean
    visibility = float(np.median(np.abs(b_fit) * spread / np.maximum(level, 1e-6)))
    if visibility < 0.04:
        raise UnanalysablePhotoError(
            f"too little fringe contrast (visibility {visibility:.2f}): check the lamp, the "
            "focus and the contact between the flats")
    tilt_fringes = 2.0 * math.hypot(coef[1], coef[2]) / math.pi
    fringes = _fringes_spanned(coef, xu[usable], yu[usable])
    closed = tilt_fringes < CLOSED_TILT_FRINGES
    warnings: list[str] = []
    if tilt_fringes >= CLOSED_TILT_FRINGES:
        sign = "measured"
        along_x = abs(coef[2]) <= 0.0035 * math.hypot(coef[1], coef[2])
        # the tilt points down the photo (y up in Zernike terms: Noll 3 negative), or right
        if (coef[1] < 0) if along_x else (coef[2] > 0):
            coef = -coef
    else:
        if ring_sign not in ("convex", "concave"):
            raise RingSignNeededError(
                f"closed fringes in {photo_name}: one photo cannot tell convex from concave; "
                "state it with --ring-sign convex or --ring-sign concave (the push test: see "
                "flatsight measure --help)")
        sign = "stated"
        # convex means a high centre: Noll 4 (which raises the edge) negative in height;
        # the pipeline flips the height afterwards when asked to invert
        want_negative = (ring_sign == "convex") != bool(invert)
        if (coef[3] < 0) != want_negative:
            coef = -coef
    expected = _expected_misfit(noise, values, x_all, y_all, coef, model)
    if float(np.sqrt(np.mean(resid**2))) > 1.5 * expected:
        allowed = 1.5 * expected / modulation_rms
        warnings.append(
            f"the fringe model fits the photo loosely (misfit {residual_rms:.2f} of the "
            f"fringe modulation, the noise allows {allowed:.2f}): the phase found may be "
            "wrong; check the figures against another photo")
    if fringes < 2.5 and tilt_fringes >= CLOSED_TILT_FRINGES:
        warnings.append(f"only {fringes:.1f} fringes over the aperture: terms beyond radial "
                        f"order {order} are not measured")

    basis = zernike_basis(n_terms, xu[disk], yu[disk])
    phase = np.full((n, n), np.nan)
    phase[disk] = basis @ coef
    # the fit's covariance: residual variance times (J^T J)^-1, carried to each pixel
    jac = model.jacobian(coef)
    try:
        cov = np.linalg.inv(jac.T @ jac) * float(np.mean(resid**2))
        sig = np.sqrt(np.maximum(np.einsum("ij,jk,ik->i", basis, cov, basis), 0.0))
    except np.linalg.LinAlgError:
        sig = np.full(basis.shape[0], np.nan)
    phase_sigma = np.full((n, n), np.nan)
    phase_sigma[disk] = sig
    modulation = np.full((n, n), np.nan)
    env = _envelope_basis(xu[disk], yu[disk])
    a_map = env @ lin[:ne] * spread + mean
    b_map = env @ lin[ne:2 * ne] * spread
    modulation[disk] = np.clip(np.abs(b_map) / np.maximum(a_map, 1e-6), 0.0, 1.0)
    # the binned photo's spectrum for the station, the tilt marked where there is one
    mag = np.abs(np.fft.fft2(np.where(usable, data - float(data[usable].mean()), 0.0)))
    bins = n / (2.0 * r_b)  # FFT bins per fringe across the diameter
    tilt_rc = (-coef[2] * 2.0 / np.pi * bins, coef[1] * 2.0 / np.pi * bins)
    spectrum = spectrum_view(mag, tilt_rc, 0.0, 0.0)
    report("intensity fit", 1.0)
    return IntensityFit(
        phase=phase, modulation=modulation.astype(np.float32),
        phase_sigma=phase_sigma.astype(np.float32), disk=disk, masked=masked & disk,
        origin_px=(float(origin[0]), float(origin[1])), step_px=float(k), binning=k,
        coefficients=coef, n_terms=n_terms, max_order=order, fringes=fringes,
        tilt_fringes=tilt_fringes, closed=closed, sign=sign, residual_rms=residual_rms,
        spectrum=spectrum, warnings=tuple(warnings), prior_misfit=prior_misfit,
    )


def _projected(prior: tuple[np.ndarray, np.ndarray, np.ndarray], n_terms: int
               ) -> np.ndarray | None:
    """Noll coefficients (``n_terms``) of another method's phase over the fitted disk,
    by least squares (None where it has too few points there)."""
    phase, x, y = (np.asarray(v, dtype=float).ravel() for v in prior)
    use = np.isfinite(phase) & (np.hypot(x, y) <= FIT_RADIUS)
    if use.sum() < 10 * n_terms:
        return None
    return solve_least_squares(zernike_basis(n_terms, x[use], y[use]), phase[use])


def _sample(rho: np.ndarray, radius: float, count: int = 6000) -> np.ndarray:
    """Indices of about ``count`` fitted pixels evenly spread over the disk ``rho <= radius``."""
    sel = np.flatnonzero(rho <= radius)
    return sel[::max(1, sel.size // count)]


def _harmonic_share(data, x, y, c) -> float:
    """The second harmonic's amplitude over the fringe's (RMS over the pixels)."""
    model = _Model(data, x, y, c.size)
    _, _, lin = model.linear(c)
    ne = model.e.shape[1]
    b_rms = float(np.sqrt(np.mean((model.e @ lin[ne:2 * ne]) ** 2)))
    return abs(float(lin[-1])) / max(b_rms, 1e-12)


def _noise_level(data: np.ndarray, inside: np.ndarray) -> float:
    """Standard deviation of the binned photo's pixel noise (robust).

    A pixel minus the mean of its eight neighbours keeps white noise at sqrt(9/8) of
    its level and all but removes fringes a few pixels wide or wider.
    """
    from scipy import ndimage

    d = data.astype(np.float64)
    lap = d - (ndimage.uniform_filter(d, 3, mode="nearest") * 9.0 - d) / 8.0
    core = ndimage.binary_erosion(inside, iterations=2)
    vals = lap[core] if core.sum() > 100 else lap[inside]
    return float(1.4826 * np.median(np.abs(vals - np.median(vals))) / math.sqrt(9.0 / 8.0))


def _expected_misfit(noise: float, data, x, y, c, model: _Model | None = None) -> float:
    """The misfit a right fit leaves: the noise, and 2 % of the modulation for the
    camera's tone curve and terms beyond the fit.

    The modulation is the fit's own, but never more than twice the data's spread: a fit
    on a wrong phase can swell its modulation and background until they cancel, and its
    misfit must not then pass for noise.
    """
    return 1.5 * math.hypot(noise, 0.02 * _modulation_rms(data, x, y, c, model))


def _modulation_rms(data, x, y, c, model: _Model | None = None) -> float:
    """RMS of the fitted fringe modulation ``b``, at most twice the data's spread (an
    even modulation ``b`` alone gives the data a spread of ``b / sqrt 2``). ``model``:
    the intensity model over those pixels with ``c.size`` terms, if already made."""
    if model is None:
        model = _Model(data, x, y, c.size)
    _, _, lin = model.linear(c)
    ne = model.e.shape[1]
    b_rms = float(np.sqrt(np.mean((model.e @ lin[ne:2 * ne]) ** 2)))
    return min(b_rms, 2.0 * float(np.std(data)))


def _fringes_spanned(coef: np.ndarray, x: np.ndarray, y: np.ndarray) -> float:
    """Fringes the phase spans over the aperture: its PV over 2 pi (piston aside)."""
    phi = zernike_basis(coef.size, x, y)[:, 1:] @ coef[1:]
    return float((phi.max() - phi.min()) / (2.0 * np.pi))


def run(
    image: np.ndarray,
    aperture: Aperture,
    *,
    reason: str | None,
    ring_sign: str | None = None,
    invert: bool = False,
    photo_name: str = "the photo",
    prior=None,
    progress: Progress | None = None,
    cancel: threading.Event | None = None,
):
    """The intensity fit as a pipeline method: a ``PhaseResult`` on the binned grid.

    ``reason`` says why the method runs; None lets the fit say it from what it found
    (closed fringes, or too few for the carrier method). ``prior``, another method's
    ``PhaseResult`` on the same aperture, is one more seed for the fit, and its misfit
    is reported beside the fit's own (``PhaseResult.misfit``, ``prior_misfit``).
    """
    from ..demodulation import MapGeometry
    from . import PhaseResult

    if aperture.shape is not None:
        raise UnanalysablePhotoError(
            f"{photo_name}: the intensity fit for few or closed fringes measures round "
            "parts seen square-on only; photograph this outline with ten or more tilt "
            "fringes")
    points = None
    if prior is not None:
        points = _whole_phase(prior, aperture)
    fit = fit_intensity(image, aperture, ring_sign=ring_sign, invert=invert,
                        photo_name=photo_name, prior=points, progress=progress,
                        cancel=cancel)
    if reason is None:
        reason = "closed fringes" if fit.closed else "too few fringes"
    n = fit.phase.shape[0]
    geometry = MapGeometry(origin_x_px=fit.origin_px[0], origin_y_px=fit.origin_px[1],
                           step_px=fit.step_px, shape=(n, n))
    # the tilt as the carrier method reports it: direction from x toward y down, and the
    # period of the tilt fringes alone (NaN when there is no tilt to speak of)
    tilt_x, tilt_down = fit.coefficients[1], -fit.coefficients[2]
    has_tilt = fit.tilt_fringes >= CLOSED_TILT_FRINGES
    quality = {
        "carrier_fringes": fit.tilt_fringes if has_tilt else float("nan"),
        "carrier_angle_deg": (math.degrees(math.atan2(tilt_down, tilt_x)) % 180.0
                              if has_tilt else float("nan")),
        "fringe_period_px": (2.0 * aperture.radius_px / fit.tilt_fringes
                             if has_tilt else float("nan")),
        # the highest radial order fitted, as cycles across the diameter
        "resolution_cycles_per_aperture": fit.max_order / 2.0,
        "binning": fit.binning,
        "fringes": fit.fringes,
        "terms_fitted": fit.n_terms,
        "radial_order": fit.max_order,
    }
    return PhaseResult(
        phase=fit.phase, valid=fit.disk & ~fit.masked, disk=fit.disk, geometry=geometry,
        modulation=fit.modulation, phase_sigma=fit.phase_sigma, quality=quality,
        spectrum=fit.spectrum, method="intensity-fit", reason=reason, sign=fit.sign,
        warnings=fit.warnings, misfit=fit.residual_rms, prior_misfit=fit.prior_misfit,
    )


def _piston_and_tilt(model: _Model, c: np.ndarray) -> np.ndarray:
    """``c`` with its piston and tilt (Noll 1-3) fitted to the photo, the rest held: the
    figures do not see them, and another method's phase has a piston of its own."""
    rest = np.array(c, dtype=float)

    def residual(p):
        rest[:3] = p
        return model.residual(rest)

    def jacobian(p):
        rest[:3] = p
        return model.jacobian(rest)[:, :3]

    out = least_squares(residual, rest[:3].copy(), jac=jacobian, method="lm",
                        xtol=1e-8, ftol=1e-9, max_nfev=60)
    rest[:3] = out.x
    return rest


def _whole_phase(prior, aperture: Aperture):
    """A carrier result's phase with its whole tilt, as ``(phase, x, y)`` in unit
    coordinates (None without a tilt carrier).

    The carrier method's phase holds the tilt its model fitted about the spectrum's
    whole-bin carrier, not the carrier itself; its tilt is replaced by the carrier's
    (fringes across the diameter, the fringe normal's angle from x toward y down), which
    has the phase's sign.
    """
    fringes = float(prior.quality.get("carrier_fringes", math.nan))
    angle = math.radians(float(prior.quality.get("carrier_angle_deg", math.nan)))
    ok = prior.valid & np.isfinite(prior.phase)
    if not (np.isfinite(fringes) and np.isfinite(angle)) or ok.sum() < 100:
        return None
    x, y = prior.geometry.unit_xy(aperture)
    x, y, phase = x[ok], y[ok], prior.phase[ok]
    plane = solve_least_squares(np.column_stack([np.ones_like(x), x, y]), phase)
    # T fringes across the diameter (x from -1 to 1) is a phase of pi T x; y runs up
    tilt_x, tilt_up = fringes * math.cos(angle), -fringes * math.sin(angle)
    phase = phase - plane[1] * x - plane[2] * y + np.pi * (tilt_x * x + tilt_up * y)
    return phase, x, y
