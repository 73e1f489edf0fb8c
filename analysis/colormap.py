"""A diverging colour map for height maps: even lightness steps, safe for red-green deficiency.

Design ("slate-amber"): built in CIELAB. Zero height is a light neutral grey; lows run
to a dark slate blue and highs to a dark amber-brown. Both sides share the same
lightness profile, falling linearly with distance from zero, so a hill and a valley of
equal height look equally strong and lightness alone orders the values on each side.
Chroma grows linearly with distance from zero. The two hues sit near the blue-yellow
axis (CIELAB b*), the axis that protanopes and deuteranopes keep, so the sides stay
apart for them (checked in the tests with Machado et al.'s simulation).

References
----------
CIE 15:2004, Colorimetry (CIELAB, D65 white point).
IEC 61966-2-1:1999, the sRGB colour space (transfer curve and primaries).
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "LAB_TABLE",
    "NO_DATA_RGB",
    "RGB_TABLE",
    "sequential_rgb",
    "diverging_rgb",
    "lab_to_srgb",
]

# Light neutral at zero, dark at both ends; equal on both sides by construction.
L_CENTRE = 94.0
L_END = 34.0
CHROMA_END = 44.0
# Hue angles (degrees in the a*b* plane): slate blue for lows, amber for highs; the
# chroma is the largest that keeps both sides inside the sRGB gamut at every lightness.
HUE_LOW_DEG = 282.0
HUE_HIGH_DEG = 68.0
TABLE_SIZE = 257  # odd, so the middle entry is exactly zero

# A mid-dark grey with a faint violet cast that the map itself never uses: "no data".
NO_DATA_RGB = (58, 54, 66)

# D65 reference white (CIE 15:2004), Y normalised to 1.
_WHITE_D65 = np.array([0.95047, 1.00000, 1.08883])
# XYZ -> linear sRGB (IEC 61966-2-1).
_XYZ_TO_RGB = np.array(
    [
        [3.2404542, -1.5371385, -0.4985314],
        [-0.9692660, 1.8760108, 0.0415560],
        [0.0556434, -0.2040259, 1.0572252],
    ]
)


def lab_to_srgb(lab: np.ndarray) -> np.ndarray:
    """CIELAB (D65) to gamma-encoded sRGB in 0..1 (unclipped).

    Parameters
    ----------
    lab : (..., 3) ndarray
        L* in 0..100, a*, b*.

    Returns
    -------
    (..., 3) ndarray
        sRGB components; values outside 0..1 mean the colour is out of gamut.
    """
    lab = np.asarray(lab, dtype=float)
    L, a, b = lab[..., 0], lab[..., 1], lab[..., 2]
    fy = (L + 16.0) / 116.0
    fx = fy + a / 500.0
    fz = fy - b / 200.0
    eps = 6.0 / 29.0

    def finv(f: np.ndarray) -> np.ndarray:
        return np.where(f > eps, f**3, 3.0 * eps**2 * (f - 4.0 / 29.0))

    xyz = np.stack([finv(fx), finv(fy), finv(fz)], axis=-1) * _WHITE_D65
    linear = xyz @ _XYZ_TO_RGB.T
    # sRGB transfer curve; negative (out-of-gamut) values keep their sign for the check
    mag = np.abs(linear)
    enc = np.where(mag <= 0.0031308, 12.92 * mag, 1.055 * mag ** (1.0 / 2.4) - 0.055)
    return np.sign(linear) * enc


def _build_lab_table(size: int) -> np.ndarray:
    t = np.linspace(-1.0, 1.0, size)
    s = np.abs(t)
    lightness = L_CENTRE - (L_CENTRE - L_END) * s
    chroma = CHROMA_END * s
    hue = np.radians(np.where(t < 0, HUE_LOW_DEG, HUE_HIGH_DEG))
    return np.stack([lightness, chroma * np.cos(hue), chroma * np.sin(hue)], axis=-1)


LAB_TABLE = _build_lab_table(TABLE_SIZE)
LAB_TABLE.setflags(write=False)
RGB_TABLE = np.round(np.clip(lab_to_srgb(LAB_TABLE), 0.0, 1.0) * 255.0).astype(np.uint8)
RGB_TABLE.setflags(write=False)


def diverging_rgb(values: np.ndarray, vmin: float, vmax: float) -> np.ndarray:
    """Colours of ``values`` on the diverging map, zero at the middle of ``[vmin, vmax]``.

    The map is symmetric: the middle of the range gets the light neutral, ``vmin`` the
    darkest blue and ``vmax`` the darkest amber. Values beyond the range are clipped.

    Parameters
    ----------
    values : ndarray
        Any shape; NaN marks pixels without data.
    vmin, vmax : float
        Range of the colour scale, ``vmin < vmax``.

    Returns
    -------
    (..., 3) uint8 ndarray
        sRGB colours; NaN gives :data:`NO_DATA_RGB`.
    """
    if not vmax > vmin:
        raise ValueError(f"colour range needs vmin < vmax, got {vmin} and {vmax}")
    v = np.asarray(values, dtype=float)
    t = (v - vmin) / (vmax - vmin)
    missing = ~np.isfinite(t)
    idx = np.rint(np.clip(np.where(missing, 0.5, t), 0.0, 1.0) * (TABLE_SIZE - 1)).astype(int)
    out = RGB_TABLE[idx]
    out[missing] = NO_DATA_RGB
    return out


def sequential_rgb(values: np.ndarray, vmin: float, vmax: float) -> np.ndarray:
    """Colours of ``values`` on a sequential map: light at ``vmin``, darkest at ``vmax``.

    For magnitudes that are never negative (a spread, an RMS): the amber half of the
    diverging map, whose CIELAB lightness falls steadily from its light neutral, so the
    scale has no middle that reads as zero. Arguments, clipping and the NaN colour as in
    :func:`diverging_rgb`.
    """
    t, missing = _fraction(values, vmin, vmax)
    half = (TABLE_SIZE - 1) // 2
    out = RGB_TABLE[half + np.rint(np.where(missing, 0.0, t) * half).astype(int)]
    out[missing] = NO_DATA_RGB
    return out


def _fraction(values, vmin: float, vmax: float) -> tuple[np.ndarray, np.ndarray]:
    """``values`` as fractions of ``[vmin, vmax]`` clipped to 0..1, and where they are NaN."""
    if not vmax > vmin:
        raise ValueError(f"colour range needs vmin < vmax, got {vmin} and {vmax}")
    t = (np.asarray(values, dtype=float) - vmin) / (vmax - vmin)
    missing = ~np.isfinite(t)
    return np.clip(np.where(missing, 0.0, t), 0.0, 1.0), missing
