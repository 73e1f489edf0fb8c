"""The fringes extended past the aperture's rim and into specks, and the specks found.

References
----------
R. W. Gerchberg, "Super-resolution through error energy reduction", Optica Acta 21,
709 (1974); C. Roddier, F. Roddier, "Interferogram analysis using Fourier transform
techniques", Appl. Opt. 26(9), 1668 (1987).
"""

from __future__ import annotations

import os
import threading

import numpy as np
import scipy.fft as sfft
from scipy import ndimage

from .errors import MeasurementCancelled

__all__ = ["WORKERS", "check_cancel", "find_specks", "flat_top", "fringe_envelope",
           "gerchberg_extend"]



def _fft_threads() -> int:
    """Threads for each FFT: ``FLATSIGHT_FFT_THREADS`` when set (a batch measured in
    several processes gives each its share of the cores), else the cores, at most 4."""
    try:
        given = int(os.environ.get("FLATSIGHT_FFT_THREADS", "0"))
    except ValueError:
        given = 0
    return given if 1 <= given <= 64 else max(1, min(4, os.cpu_count() or 1))


WORKERS = _fft_threads()


def check_cancel(cancel: threading.Event | None) -> None:
    if cancel is not None and cancel.is_set():
        raise MeasurementCancelled("measurement cancelled")


def flat_top(dist: np.ndarray, radius: float, flat: float = 0.75) -> np.ndarray:
    """1 inside ``flat * radius``, a raised-cosine fall to 0 at ``radius``."""
    t = np.clip((dist - flat * radius) / ((1 - flat) * radius), 0.0, 1.0)
    return (0.5 * (1 + np.cos(np.pi * t))).astype(np.float32)


def gerchberg_extend(
    data: np.ndarray, known: np.ndarray, band: np.ndarray, n_iter: int,
    cancel: threading.Event | None, start: np.ndarray | None = None,
) -> np.ndarray:
    """Extend ``data`` beyond ``known`` as a signal limited to the spectral ``band``.

    Alternately keeps only the band's frequencies and restores the measured values
    where they are known (Gerchberg 1974; Roddier & Roddier 1987).
    """
    x = start.copy() if start is not None else np.where(known, data, data[known].mean())
    x = x.astype(np.float32, copy=False)
    for _ in range(n_iter):
        check_cancel(cancel)
        f = sfft.rfft2(x, workers=WORKERS)
        f *= band
        y = sfft.irfft2(f, s=x.shape, workers=WORKERS)
        x = np.where(known, data, y).astype(np.float32, copy=False)
    return x


def find_specks(data: np.ndarray, filled: np.ndarray, band: np.ndarray, known: np.ndarray,
                 rho: np.ndarray, pupil: np.ndarray, k: int) -> np.ndarray:
    """Dust specks, scratches and dead pixels: where the photo departs from its fringe model.

    The band-limited (Gerchberg) model holds the fringes, their background and a
    harmonic; a speck is broadband and stands out of the residual. A lightly smoothed
    residual also catches faint, semi-transparent specks a few pixels across.
    """
    model = sfft.irfft2(sfft.rfft2(filled, workers=WORKERS) * band, s=filled.shape,
                        workers=WORKERS)
    resid = data - model
    inner = known & (rho <= 1.0)
    specks = np.zeros_like(known)
    # the band-limited model rings where the aperture edge cuts the fringes, so the
    # residual's spread is judged ring by ring near the rim, not once for the disk
    edges = np.array([0.0, 0.8, 0.86, 0.9, 0.93, 0.95, 0.97, 0.985, 1.0 + 1e-9])
    zone = np.digitize(rho, edges) - 1
    for smooth, level in ((0.0, 6.0), (1.2, 5.0)):
        r = ndimage.gaussian_filter(resid, smooth) if smooth else resid
        dev = np.zeros_like(r)
        for z in range(edges.size - 1):
            sel = inner & (zone == z)
            if sel.sum() < 50:
                continue
            med = float(np.median(r[sel]))
            sigma = 1.4826 * float(np.median(np.abs(r[sel] - med))) + 1e-6
            dev[sel] = np.abs(r[sel] - med) / sigma
        specks |= inner & (dev > level)
    if specks.any():
        # drop lone noise pixels, keep anything with a neighbour or far out of the noise
        neighbours = ndimage.uniform_filter(specks.astype(np.float32), size=3) * 9 - 1
        specks &= neighbours >= 1
        grow = max(2, int(round(3.0 / k)) + 1)
        specks = ndimage.binary_dilation(specks, iterations=grow) & pupil
    return specks




def fringe_envelope(data: np.ndarray, rho: np.ndarray, known: np.ndarray,
                    *, inner: float = 0.85, ring_width: float = 0.01,
                    phase: np.ndarray | None = None, half_by_phase: bool = True
                    ) -> tuple[np.ndarray, np.ndarray]:
    """The fringes' local mean and half-amplitude, following the aperture's soft edge.

    The light is a smooth illumination (a quadratic fitted over the inner disk, where
    the fringes average out) times an edge profile that depends on the radius only.
    The profile of the mean and of the half-amplitude are read ring by ring from the
    upper and lower envelope of the photo divided by the illumination (its 95th and
    5th percentiles, which the fringes reach on every ring whatever their direction).
    Dividing the photo by them leaves fringes of constant mean and amplitude out to
    the rim, so the local fit no longer rings against a fading edge. ``ring_width``
    (in units of the radius) should be under a pixel.

    Given the fringes' ``phase`` (the carrier plus a first phase model, radians), each
    ring is also fitted by least squares with ``m + p cos(phase) + q sin(phase)``, and
    the mean is ``m``, the fringes' own mean (their zero-order term), whatever share of
    the ring crosses the fringes. The percentiles' midpoint is that mean only for a
    fringe symmetric about it: through a camera's tone curve (sRGB, gamma) it is not,
    and its offset from the mean changes where the light fades at the edge (by a
    quarter of the fringe's half-amplitude over the last 3 % of the radius on a 16-bit
    sRGB photo, tests/refset seed 620). Where the fringes run along the rim that
    offset is a slope across them, which the local fit takes for phase. With
    ``half_by_phase`` the half-amplitude is ``hypot(p, q)`` too: needed where fringes
    run along a long straight stretch of the outline (a rectangle's side parallel to
    them), whose rings' pixels all sit at one phase, so their percentiles follow the
    fringes rather than the light. Otherwise it stays the percentiles', which under
    laser speckle also hold the speckle's spread, so the normalised fringe fades
    where the fringes do and the local fit leans on the pixels that carry them.

    Returns
    -------
    mean, half : (S, S) ndarrays
        Local mean and half peak-to-peak of the fringes; outside the data, the rim's.
    """
    yy, xx = np.indices(data.shape, dtype=np.float64)
    sel = known & (rho <= inner)
    scale = float(max(data.shape))
    y0, x0 = yy / scale, xx / scale

    def design(ix):
        y, x = y0[ix], x0[ix]
        return np.stack([np.ones_like(x), x, y, x * x, x * y, y * y], axis=1)

    coef, *_ = np.linalg.lstsq(design(sel), data[sel].astype(np.float64), rcond=None)
    illum = (np.stack([np.ones_like(x0), x0, y0, x0 * x0, x0 * y0, y0 * y0], axis=-1)
             @ coef)
    illum = np.maximum(illum, 1e-6 * max(float(np.max(illum)), 1e-12))
    q = data / illum
    # rings as thin as the edge's detail: a soft edge fades over a few pixels, and a
    # ring wider than that averages its profile, which bends the fringes where they run
    # along the rim
    width = ring_width
    lo_r = inner - 0.1
    sel_r = known & (rho >= lo_r) & (rho < 1.0 + width)
    ring_of = ((rho[sel_r] - lo_r) / width).astype(np.int64)
    values = q[sel_r]
    by_phase = None
    if phase is not None:
        by_phase = _envelope_by_phase(q, rho, sel, sel_r, ring_of, phase[sel_r], illum,
                                      inner=inner, lo_r=lo_r, width=width)
        if half_by_phase:
            return by_phase
    order = np.lexsort((values, ring_of))
    ring_sorted, v_sorted = ring_of[order], values[order]
    rings, starts, counts = np.unique(ring_sorted, return_index=True, return_counts=True)
    full = counts >= 64
    rings, starts, counts = rings[full], starts[full], counts[full]
    centres = list(lo_r + (rings + 0.5) * width)

    def percentile(p: float) -> list[float]:  # linear interpolation, as numpy's default
        pos = starts + (counts - 1) * (p / 100.0)
        i0 = np.floor(pos).astype(np.int64)
        i1 = np.minimum(i0 + 1, starts + counts - 1)
        return list(v_sorted[i0] + (pos - i0) * (v_sorted[i1] - v_sorted[i0]))

    upper, lower = percentile(95), percentile(5)
    if len(centres) < 4:
        mean = illum * np.median(q[sel]) if by_phase is None else by_phase[0]
        return mean, 0.5 * (np.percentile(q[sel], 95) - np.percentile(q[sel], 5)) * illum
    centres = np.asarray(centres)
    upper, lower = np.asarray(upper), np.asarray(lower)
    # below `inner` the profile is flat: use the inner rings' median there
    flat = centres < inner
    up0, lo0 = np.median(upper[flat]), np.median(lower[flat])
    upper[flat], lower[flat] = up0, lo0
    r = np.clip(rho, centres[0], centres[-1])
    up = np.interp(r, centres, upper)
    lo = np.interp(r, centres, lower)
    up = np.where(rho < inner, up0, up)
    lo = np.where(rho < inner, lo0, lo)
    mean = 0.5 * (up + lo) * illum if by_phase is None else by_phase[0]
    half = np.maximum(0.5 * (up - lo), 1e-3 * (up0 - lo0)) * illum
    return mean, half


def _envelope_by_phase(q, rho, sel, sel_r, ring_of, phase, illum, *, inner, lo_r, width):
    """``fringe_envelope``'s rings fitted by ``m + p cos + q sin`` of the known phase."""
    values = q[sel_r].astype(np.float64)
    c, s = np.cos(phase).astype(np.float64), np.sin(phase).astype(np.float64)
    n_rings = int(ring_of.max()) + 1 if ring_of.size else 0
    terms = (np.ones_like(c), c, s)

    def sums(w):
        return np.bincount(ring_of, weights=w, minlength=n_rings)

    normal = np.empty((n_rings, 3, 3))
    for i in range(3):
        for j in range(i, 3):
            normal[:, i, j] = normal[:, j, i] = sums(terms[i] * terms[j])
    rhs = np.stack([sums(t * values) for t in terms], axis=1)
    counts = normal[:, 0, 0]
    # a ring must hold enough pixels and cross enough of a fringe to fix p and q
    det = np.linalg.det(normal) / np.maximum(counts, 1.0) ** 3
    good = (counts >= 64) & (det > 1e-3)
    if good.sum() < 4:
        mean = illum * np.median(q[sel])
        return mean, 0.5 * (np.percentile(q[sel], 95) - np.percentile(q[sel], 5)) * illum
    coef = np.linalg.solve(normal[good], rhs[good][..., None])[..., 0]
    centres = lo_r + (np.flatnonzero(good) + 0.5) * width
    m_ring, a_ring = coef[:, 0], np.hypot(coef[:, 1], coef[:, 2])
    flat = centres < inner
    m0 = float(np.median(m_ring[flat])) if flat.any() else float(m_ring[0])
    a0 = float(np.median(a_ring[flat])) if flat.any() else float(a_ring[0])
    m_ring, a_ring = np.where(flat, m0, m_ring), np.where(flat, a0, a_ring)
    r = np.clip(rho, centres[0], centres[-1])
    mean = np.where(rho < inner, m0, np.interp(r, centres, m_ring)) * illum
    half = np.maximum(np.where(rho < inner, a0, np.interp(r, centres, a_ring)),
                      1e-3 * a0) * illum
    return mean, half
