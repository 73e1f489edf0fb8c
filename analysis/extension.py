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

__all__ = ["KNOWN_RHO", "WORKERS", "bright_radius", "check_cancel", "find_specks",
           "flat_top", "gerchberg_extend"]

WORKERS = max(1, min(4, os.cpu_count() or 1))
# measured pixels end at most this far out (in radii); a soft edge ends them sooner
# (see bright_radius); the local fit carries the phase out to the rim from there
KNOWN_RHO = 0.98


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


def bright_radius(data: np.ndarray, rho: np.ndarray, inframe: np.ndarray | None) -> float:
    """How far out (in aperture radii) the fringes keep their full brightness.

    The mean over a thin ring averages the fringes away and leaves the edge profile: a
    soft aperture edge (a defocused or bevelled rim) dims the fringes over a few
    percent of the radius inside the 50 % point. Measured pixels stop where the ring
    mean has fallen 15 % of the way from the inside level to the surround, and never
    beyond KNOWN_RHO.
    """
    sel = (rho > 0.8) & (rho < 1.2)
    if inframe is not None:
        sel &= np.pad(inframe, ((0, rho.shape[0] - inframe.shape[0]),
                                (0, rho.shape[1] - inframe.shape[1])))
    bins = np.floor((rho[sel] - 0.8) / 0.005).astype(int)
    total = np.bincount(bins, weights=data[sel], minlength=80)
    count = np.bincount(bins, minlength=80)
    with np.errstate(invalid="ignore", divide="ignore"):
        profile = total / count
    centres = 0.8 + 0.005 * (np.arange(profile.size) + 0.5)
    inside = np.nanmedian(profile[(centres > 0.86) & (centres < 0.92)])
    outside = np.nanmedian(profile[(centres > 1.1) & (centres < 1.2)])
    if not (np.isfinite(inside) and np.isfinite(outside)) or inside - outside <= 0:
        return KNOWN_RHO
    level = outside + 0.85 * (inside - outside)
    below = np.flatnonzero((centres > 0.92) & (profile < level))
    if below.size == 0:
        return KNOWN_RHO
    return float(np.clip(centres[below[0]] - 0.01, 0.88, KNOWN_RHO))


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


