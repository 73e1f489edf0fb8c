"""Phase unwrapping and the conversion of phase to surface height."""

from __future__ import annotations

import numpy as np
from skimage.restoration import unwrap_phase

__all__ = ["unwrap", "phase_to_height_nm"]


def unwrap(wrapped: np.ndarray, valid: np.ndarray) -> np.ndarray:
    """Unwrap a phase map over ``valid`` pixels; NaN elsewhere.

    Uses scikit-image's reliability-sorted unwrapper (Herraez et al., Appl. Opt. 41,
    7437 (2002)); pixels outside ``valid`` never guide the path. Islands that the mask
    cuts off get independent 2 pi offsets from the unwrapper, so each one is brought to
    the offset that best continues the largest region.

    Parameters
    ----------
    wrapped : (M, N) ndarray
        Phase in radians, wrapped to (-pi, pi].
    valid : (M, N) bool ndarray
        Pixels that carry phase.
    """
    from scipy import ndimage

    wrapped = np.asarray(wrapped, dtype=float)
    out = unwrap_phase(np.ma.masked_array(wrapped, mask=~valid), rng=0)
    phase = np.ma.filled(out.astype(float), np.nan)
    labels, n = ndimage.label(valid)
    if n > 1:
        sizes = ndimage.sum_labels(valid, labels, index=np.arange(1, n + 1))
        main = int(np.argmax(sizes)) + 1
        # a quadratic fitted to the largest region carries it across the masks; each
        # island takes the 2 pi offset that best continues that surface
        rows, cols = np.indices(wrapped.shape)
        scale = float(max(wrapped.shape))
        y, x = rows / scale, cols / scale

        def design(sel):
            return np.stack([np.ones(sel.sum()), x[sel], y[sel], x[sel] ** 2,
                             x[sel] * y[sel], y[sel] ** 2], axis=1)

        sel_main = labels == main
        coef, *_ = np.linalg.lstsq(design(sel_main), phase[sel_main], rcond=None)
        for lab in range(1, n + 1):
            if lab == main:
                continue
            sel = labels == lab
            expected = design(sel) @ coef
            phase[sel] -= 2 * np.pi * np.round(np.mean(phase[sel] - expected) / (2 * np.pi))
    return phase


def phase_to_height_nm(
    phase: np.ndarray, wavelength_nm: float, *, invert: bool = False
) -> np.ndarray:
    """Surface height from interferometric phase in double pass: ``h = phi * lambda / (4 pi)``.

    One fringe (2 pi of phase) is half a wavelength of height, because the light
    crosses the gap twice (common practice).
    """
    sign = -1.0 if invert else 1.0
    return sign * np.asarray(phase, dtype=float) * (wavelength_nm / (4.0 * np.pi))
