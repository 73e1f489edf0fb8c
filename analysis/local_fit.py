"""The fringe fitted by local least squares under a window, against a carrier-plus-model phase.

At every pixel of a decimated grid the photo around it is fitted, by least squares
weighted with a window, by a background and a fringe whose phase is a known reference
``Phi`` (the carrier plus a smooth phase model) plus a small unknown residual:
``a + p cos Phi + q sin Phi``. The residual phase is the fringe's argument. Only
measured pixels enter the sums, so nothing from outside the aperture or from a speck
leaks in. In the interior of the disk this is Takeda's sideband filter with the window
as its passband: the window is flat-topped in frequency, so it passes the surface's
detail up to its flat part unattenuated.

All window sums are convolutions, done as products of spectra evaluated only on the
decimated grid.

References
----------
M. Takeda, H. Ina, S. Kobayashi, "Fourier-transform method of fringe-pattern analysis
for computer-based topography and interferometry", JOSA 72(1), 156 (1982).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.fft as sfft

from .extension import WORKERS, flat_top

__all__ = ["LocalFit", "fit_fringe_locally"]


@dataclass(frozen=True)
class LocalFit:
    """The local fit at each pixel of the decimated grid.

    Attributes
    ----------
    fringe : (m, m) complex ndarray
        Half the fringe's complex amplitude ``(p - i q) / 2``; its argument is the
        residual phase.
    level : (m, m) ndarray
        The background (the fringes' local mean).
    support : (m, m) ndarray
        Share of the window that holds measured pixels (1 in the interior).
    phase_gain : (m, m) ndarray
        Variance of the residual phase per unit variance of white noise on the photo
        (``inf`` where there was too little support to fit).
    """

    fringe: np.ndarray
    level: np.ndarray
    support: np.ndarray
    phase_gain: np.ndarray


def _block_sum(spectrum: np.ndarray, window: np.ndarray, m: int) -> np.ndarray:
    """``sum_s x(s) K(r - s)`` on the grid decimated to ``m x m``, from ``x``'s spectrum."""
    ny, nx = spectrum.shape
    idx_y = np.fft.ifftshift(np.arange(m) - m // 2) % ny
    idx_x = np.fft.ifftshift(np.arange(m) - m // 2) % nx
    block = spectrum[np.ix_(idx_y, idx_x)] * window
    return sfft.ifft2(block, workers=WORKERS) * (m * m) / (ny * nx)


def fit_fringe_locally(
    data: np.ndarray,
    weight: np.ndarray,
    reference_phase: np.ndarray,
    *,
    radius_bins: float,
    flat: float,
    m: int,
    inside: np.ndarray | None = None,
) -> LocalFit:
    """Fit background and fringe by weighted local least squares at every decimated pixel.

    Parameters
    ----------
    data : (S, S) ndarray
        The (binned, padded) photo, or the photo divided by its fringe envelope.
    weight : (S, S) ndarray
        1 where the photo is measured, 0 where not (outside the aperture, specks).
    reference_phase : (S, S) ndarray
        ``Phi``: the carrier plus the phase model, radians.
    radius_bins, flat : float
        The window: flat-topped in frequency, radius in FFT bins, flat over ``flat``
        of it.
    m : int
        Size of the decimated grid (``S`` a multiple of it).
    inside : (m, m) bool ndarray, optional
        Where an estimate is wanted; elsewhere the output is zero.

    Returns
    -------
    LocalFit

    Notes
    -----
    The sums ``t_n = sum w e^{i n Phi}`` (n = 0, 1, 2) and ``g_n = sum w g e^{-i n Phi}``
    (n = 0, 1) give the 3 x 3 normal equations at each pixel. For white noise of
    variance ``s^2`` the solution's covariance is about ``s^2 (sum K^2 / sum K) N^-1``,
    from which the phase's variance follows (``phase_gain``).
    """
    size = data.shape[0]
    dm = np.fft.ifftshift(np.arange(m) - m // 2)
    window = flat_top(np.hypot(dm[:, None], dm[None, :]), radius_bins, flat).astype(np.float64)
    e1 = np.exp(1j * np.asarray(reference_phase, dtype=np.float32)).astype(np.complex64)
    w = np.asarray(weight, dtype=np.float32)
    wg = np.asarray(data, dtype=np.float32) * w
    t = [_block_sum(sfft.fft2(x, workers=WORKERS), window, m)
         for x in (w, w * e1, w * (e1 * e1))]
    g = [_block_sum(sfft.fft2(x, workers=WORKERS), window, m) for x in (wg, wg * np.conj(e1))]
    del e1

    sel = np.ones((m, m), bool) if inside is None else np.asarray(inside, bool)
    peak = float(np.max(t[0].real)) or 1.0
    support = np.where(sel, t[0].real / peak, 0.0)

    def cos_sum(n: int) -> np.ndarray:  # sum of w cos(n Phi) at the selected pixels
        return t[abs(n)][sel].real

    def sin_sum(n: int) -> np.ndarray:  # sum of w sin(n Phi)
        return np.sign(n) * t[abs(n)][sel].imag

    # unknowns: background, cos, sin; cos A cos B = (cos(A-B) + cos(A+B)) / 2 and so on
    normal = np.empty((int(sel.sum()), 3, 3))
    normal[:, 0, 0] = cos_sum(0)
    normal[:, 0, 1] = normal[:, 1, 0] = cos_sum(1)
    normal[:, 0, 2] = normal[:, 2, 0] = sin_sum(1)
    normal[:, 1, 1] = 0.5 * (cos_sum(0) + cos_sum(2))
    normal[:, 2, 2] = 0.5 * (cos_sum(0) - cos_sum(2))
    normal[:, 1, 2] = normal[:, 2, 1] = 0.5 * sin_sum(2)
    rhs = np.stack([g[0][sel].real, g[1][sel].real, -g[1][sel].imag], axis=-1)
    usable = support[sel] > 0.2
    normal[~usable] = np.eye(3)
    rhs[~usable] = 0.0
    inv = np.linalg.inv(normal)
    sol = np.einsum("pij,pj->pi", inv, rhs)
    p, q = sol[:, 1], sol[:, 2]
    # kernel K with sum K = 1 (the block sums are normalised so): sum K^2 by Parseval
    kernel_sq = float(np.sum(window**2)) / (size * size)
    inv_n = inv * peak
    amp2 = np.maximum(p * p + q * q, 1e-30)
    gain = kernel_sq * (q * q * inv_n[:, 1, 1] + p * p * inv_n[:, 2, 2]
                        - 2.0 * p * q * inv_n[:, 1, 2]) / (amp2 * amp2)

    fringe = np.zeros((m, m), np.complex128)
    level = np.zeros((m, m))
    phase_gain = np.zeros((m, m))
    fringe[sel] = 0.5 * (p - 1j * q)
    level[sel] = sol[:, 0]
    phase_gain[sel] = np.where(usable, np.maximum(gain, 0.0), np.inf)
    return LocalFit(fringe=fringe, level=level, support=support, phase_gain=phase_gain)
