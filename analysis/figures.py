"""Flatness figures from a height map and its Zernike fit: PV, RMS, PVr, power, irregularity.

Every figure is taken over the measured pixels of the full clear aperture with
piston and tilt removed (and whatever other terms the caller removes).

References
----------
C. J. Evans, "PVr - a robust amplitude parameter for optical surface specification",
Opt. Eng. 48(4), 043605 (2009).
ISO 10110-5 (surface form tolerances) and ISO 14999-4 (their interpretation): power is
the sag of the best-fit sphere, irregularity the PV left after it is removed.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .zernike import ZernikeFit, noll_to_nm

__all__ = [
    "Figures",
    "compute_figures",
    "radius_of_curvature_m",
    "to_fringes",
    "to_waves",
    "PISTON_TILT",
]

PISTON_TILT = (1, 2, 3)
PVR_TERMS = 36
SQRT3 = float(np.sqrt(3.0))
SQRT6 = float(np.sqrt(6.0))


@dataclass(frozen=True)
class Figures:
    """Flatness figures, all heights in nanometres.

    Attributes
    ----------
    pv_nm, rms_nm : float
        Peak-to-valley and RMS of the map with the removed terms taken out.
    pvr_nm : float
        Evans's robust PV: PV of the 36-term fit plus 3 x RMS of the fit residual.
    power_nm : float
        Sag of the best-fit sphere from edge to centre, ``-2 sqrt(3) a4``: positive
        when the centre stands high (convex), negative when it is low (concave).
    power_fringes : float
        The same in fringes (one fringe is half a wavelength of height).
    radius_of_curvature_m : float or None
        Radius of the best-fit sphere, signed like the power (None without a diameter
        or with no measurable power).
    irregularity_nm : float
        PV of the map after piston, tilt and power are removed.
    astigmatism_nm : float
        PV of the astigmatism terms (Noll 5 and 6) together, ``2 sqrt(6) sqrt(a5^2 + a6^2)``.
    astigmatism_axis_deg : float
        Direction of the high axis of the astigmatism, degrees counter-clockwise
        from the photo's x axis, in [0, 180).
    symmetric_irregularity_nm : float
        PV of the rotationally symmetric terms beyond power (ISO 10110-5's C).
    rms_irregularity_nm : float
        RMS after piston, tilt and power are removed (ISO 10110-5's RMSi).
    rms_asymmetric_nm : float
        RMS of the non-rotationally-symmetric part (ISO 10110-5's RMSa).
    removed_terms : tuple of int
        Noll terms taken out of the map before PV and RMS.
    """

    pv_nm: float
    rms_nm: float
    pvr_nm: float
    power_nm: float
    power_fringes: float
    radius_of_curvature_m: float | None
    irregularity_nm: float
    astigmatism_nm: float
    astigmatism_axis_deg: float
    symmetric_irregularity_nm: float
    rms_irregularity_nm: float
    rms_asymmetric_nm: float
    removed_terms: tuple[int, ...] = PISTON_TILT


def to_waves(height_nm: float, wavelength_nm: float) -> float:
    """Height in waves of the given wavelength."""
    return height_nm / wavelength_nm


def to_fringes(height_nm: float, wavelength_nm: float) -> float:
    """Height in fringes: one fringe is half a wavelength of height (double pass)."""
    return height_nm / (wavelength_nm / 2.0)


def radius_of_curvature_m(sag_nm: float, diameter_mm: float) -> float | None:
    """Radius of the sphere with sag ``s`` over a chord of ``diameter_mm``: ``(r^2 + s^2)/(2s)``.

    Signed like the sag; None when the sag is zero.
    """
    if sag_nm == 0 or not np.isfinite(sag_nm):
        return None
    r_m = diameter_mm * 1e-3 / 2.0
    s_m = sag_nm * 1e-9
    return float((r_m**2 + s_m**2) / (2.0 * s_m))


def _peak_to_valley(v: np.ndarray) -> float:
    return float(np.max(v) - np.min(v)) if v.size else float("nan")


def _rms(v: np.ndarray) -> float:
    return float(np.sqrt(np.mean((v - np.mean(v)) ** 2))) if v.size else float("nan")


def compute_figures(
    height_nm: np.ndarray,
    basis: np.ndarray,
    fit: ZernikeFit,
    *,
    wavelength_nm: float,
    diameter_mm: float | None = None,
    removed_terms: tuple[int, ...] = PISTON_TILT,
    disk_basis: np.ndarray | None = None,
    measured: np.ndarray | None = None,
) -> Figures:
    """Figures of a surface measured at ``P`` pixels.

    With ``disk_basis`` (and ``measured``) every figure is taken over the whole clear
    aperture: PV and irregularity over the measured heights together with the fit at
    the pixels that could not be measured (specks, a rim the fringes fade at); the
    RMS figures as the fit's RMS over the disk with the residual, which the fit leaves
    orthogonal to it, added in quadrature; PVr from the fit over the disk. Without
    them, everything is taken over the measured pixels.

    Parameters
    ----------
    height_nm : (P,) ndarray
        Measured heights at the valid pixels (piston and tilt may still be in).
    basis : (P, J) ndarray
        Noll terms ``1..J`` evaluated at those pixels (normalised by the full radius).
    fit : ZernikeFit
        The fit of ``height_nm`` on ``basis``.
    wavelength_nm : float
        Test wavelength, for the power in fringes.
    diameter_mm : float, optional
        Physical clear aperture, for the radius of curvature.
    removed_terms : tuple of int
        Noll terms to take out before PV and RMS (always at least piston and tilt).
    disk_basis : (Q, J) ndarray, optional
        The same terms at every pixel of the full aperture (measured or not).
    measured : (Q,) bool ndarray, optional
        Which of those ``Q`` pixels are the ``P`` measured ones, in the same order.
    """
    h = np.ravel(np.asarray(height_nm, dtype=float))
    a = np.asarray(fit.coefficients_nm, dtype=float)
    n_terms = a.size
    removed = tuple(sorted(set(PISTON_TILT) | {j for j in removed_terms if 1 <= j <= n_terms}))

    def terms(js, on: np.ndarray = basis) -> np.ndarray:
        idx = [j - 1 for j in js if j <= n_terms]
        return on[:, idx] @ a[idx] if idx else np.zeros(on.shape[0])

    full_fit = basis @ a
    residual = h - full_fit
    surface = h - terms(removed)
    resid_rms = _rms(residual)

    def rms_without(js) -> float:
        """RMS with terms ``js`` removed, over the disk when it is known."""
        if disk_basis is None:
            return _rms(h - terms(js))
        kept = [j for j in range(1, n_terms + 1) if j not in set(js)]
        return float(np.hypot(_rms(terms(kept, disk_basis)), resid_rms))

    kept_fit_terms = [j for j in range(1, min(n_terms, PVR_TERMS) + 1) if j not in removed]
    fit_surface = terms(kept_fit_terms, basis if disk_basis is None else disk_basis)
    pvr = _peak_to_valley(fit_surface) + 3.0 * resid_rms

    a4 = a[3] if n_terms >= 4 else 0.0
    power = -2.0 * SQRT3 * a4
    def whole_disk(js) -> np.ndarray:
        """Heights with terms ``js`` removed: measured where measured, else the fit."""
        part = h - terms(js)
        if disk_basis is None or measured is None:
            return part
        out = terms([j for j in range(1, n_terms + 1) if j not in set(js)], disk_basis)
        out[measured] = part
        return out

    surface = whole_disk(removed)
    without_power = whole_disk(sorted(set(removed) | {4}))
    symmetric = [j for j in range(5, n_terms + 1) if noll_to_nm(j)[1] == 0]
    a5 = a[4] if n_terms >= 6 else 0.0
    a6 = a[5] if n_terms >= 6 else 0.0
    # a6 cos 2t + a5 sin 2t = A cos 2(t - t0) with t0 = atan2(a5, a6) / 2
    axis = float(np.degrees(0.5 * np.arctan2(a5, a6))) % 180.0 % 180.0  # -1e-17 % 180 == 180.0

    return Figures(
        pv_nm=_peak_to_valley(surface),
        rms_nm=rms_without(removed),
        pvr_nm=float(pvr),
        power_nm=float(power),
        power_fringes=to_fringes(float(power), wavelength_nm),
        radius_of_curvature_m=(radius_of_curvature_m(power, diameter_mm)
                               if diameter_mm else None),
        irregularity_nm=_peak_to_valley(without_power),
        astigmatism_nm=float(2.0 * SQRT6 * np.hypot(a5, a6)),
        astigmatism_axis_deg=axis,
        symmetric_irregularity_nm=_peak_to_valley(
            terms(symmetric, basis if disk_basis is None else disk_basis)),
        rms_irregularity_nm=rms_without(sorted(set(removed) | {4})),
        rms_asymmetric_nm=rms_without([1, 2, 3, 4, *symmetric]),
        removed_terms=removed,
    )
