"""Flatness figures from a height map: PV, RMS, PVr, power, irregularity and ISO 10110-5's C.

How the figures are taken (the text the README, ``--help`` and certificates repeat)
---------------------------------------------------------------------------------
Every figure is taken over the whole clear aperture with piston and tilt removed. Where
the photo could not be measured (specks, exclusions) a Zernike fit of the measured
pixels stands in (66 terms; 45 off a disk).

* **PV, irregularity (B), C** are peak-to-valley figures, and a PV is decided by a
  handful of pixels: one noisy pixel at the rim would decide a verdict. They are
  therefore taken over the *filtered map*: that Zernike fit plus what the
  measured map departs from it, smoothed (Gaussian) at the method's resolution,
  the finest detail the fringes can carry. Noise finer than that resolution cannot be
  told from the surface, so nothing real is lost. Each fitted term beyond power is
  shrunk at the noise its coefficient carries (non-negative garrote, Breiman 1995): a
  noisy high-order term peaks at the rim. The raw PV is kept as ``pv_raw_nm``.
* **Irregularity (B)** is the PV after piston, tilt and power are removed, astigmatism
  included (ISO 10110-5, read as ISO 14999-4 describes, from memory).
* **C** is the PV of the rotationally symmetric part beyond power: the filtered map's
  mean around each circle about the centre, less its best fit by ``a + b rho^2``. On an
  outline other than the disk the circles may be cut by it; the best-fit sphere, the
  plane and the astigmatism are then taken out first, so a rectangle's astigmatism is
  not read as symmetric, and only what they leave is averaged around the circles.
* **RMS (RMSt), RMSi, RMSa**: RMS over the filtered map (its terms not shrunk) with
  piston and tilt, then power too, removed; RMSa is the RMS of what is left after the
  mean around each circle is taken out (the non-rotationally-symmetric part).
* **PVr** (Evans 2009): the PV of a fit by the 36 terms of the Fringe set (shrunk
  alike), plus three times the RMS of what it leaves, less in quadrature the map's
  noise (its fine roughness, at most what the photo's spectrum shows).
* **Power** is the sag of the best-fit sphere from edge to centre, ``-2 sqrt(3) a4``,
  positive when the centre stands high; **astigmatism** the PV of Noll 5 and 6.
* **Noise bias.** What noise the filtered map still carries can only raise a PV or an
  RMS. The uncertainty module measures by how much (Monte Carlo at two added noise
  levels) and takes it out by simulation-extrapolation (SIMEX, Cook & Stefanski 1994);
  the amount removed is recorded with each figure.

References
----------
L. Breiman, "Better subset regression using the nonnegative garrote", Technometrics
37(4), 373-384 (1995); for terms orthogonal over the map the garrote is the shrinkage
above (H.-Y. Gao, J. Comput. Graph. Stat. 7(4), 469-488 (1998), from memory).
C. J. Evans, "PVr - a robust amplitude parameter for optical surface specification",
Opt. Eng. 48(4), 043605 (2009).
ISO 10110-5:2015 (surface form tolerances) and ISO 14999-4:2015 (their
interpretation), from memory: power is the sag of the best-fit sphere, irregularity the
PV left after it is removed, C its rotationally symmetric part.
J. C. Wyant, K. Creath, "Basic wavefront aberration theory for optical metrology",
Applied Optics and Optical Engineering XI (1992): the Fringe Zernike ordering.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from functools import cached_property

import numpy as np
import scipy.fft as sfft
from scipy import ndimage

from .extension import WORKERS
from .zernike import (
    ZernikeFit,
    aperture_basis,
    fringe_to_nm,
    nm_basis,
    noll_to_nm,
    orthonormalized,
)

__all__ = [
    "FIGURE_TERMS",
    "SHAPED_FIGURE_TERMS",
    "Figures",
    "MapFigures",
    "PISTON_TILT",
    "compute_figures",
    "prepare_map",
    "radius_of_curvature_m",
    "to_fringes",
    "to_waves",
]

PISTON_TILT = (1, 2, 3)
PVR_TERMS = 36  # Evans's PVr: the first 36 terms of the Fringe set
# the fit that stands in for unmeasured pixels and carries the peak map: on the disk
# Noll 1..66, radial order n <= 10. Detail past the fit reaches the peak map only smoothed
# at the resolution, and a surface's terms of order 10 peak in a band at the rim that
# smoothing flattens: with n <= 8, B read 138 nm for 219 (tests/refset seed 633, Noll 63
# and 64). The garrote drops the terms the photo's noise carries. On other outlines the
# terms are made orthonormal over the part, and past order 8 they swing at its corners:
# there B lost 2 of 30 rectangles and 2 of 30 polygons (tests/refset/shaped.py), so those
# keep Noll 1..45.
FIGURE_TERMS = 66
SHAPED_FIGURE_TERMS = 45
_SECTORS = 16
# the peak map's terms shrunk at their noise: those beyond piston, tilt and power (index
# from 0: Noll 5 on)
_SHRUNK_FROM = 4
_TERMS_PER_TRANSFORM = 9  # bounds the memory the coefficients' noise takes
SQRT3 = float(np.sqrt(3.0))
SQRT6 = float(np.sqrt(6.0))


@dataclass(frozen=True)
class Figures:
    """Flatness figures, all heights in nanometres (see the module docstring for how).

    Attributes
    ----------
    pv_nm : float
        PV of the filtered map (the fit's noisy terms shrunk) with the removed terms
        taken out.
    rms_nm : float
        RMS of the filtered map with the removed terms taken out (RMSt).
    pvr_nm : float
        Evans's robust PV.
    power_nm : float
        Sag of the best-fit sphere from edge to centre, ``-2 sqrt(3) a4``: positive
        when the centre stands high (convex), negative when it is low (concave).
    power_fringes : float
        The same in fringes (one fringe is half a wavelength of height).
    radius_of_curvature_m : float or None
        Radius of the best-fit sphere, signed like the power (None without a diameter
        or with no measurable power).
    irregularity_nm : float
        PV of the filtered map (the fit's noisy terms shrunk) after piston, tilt and
        power are removed (ISO 10110-5 B).
    astigmatism_nm : float
        PV of the astigmatism terms (Noll 5 and 6) together, ``2 sqrt(6) sqrt(a5^2 + a6^2)``.
    astigmatism_axis_deg : float
        Direction of the high axis of the astigmatism, degrees counter-clockwise
        from the photo's x axis, in [0, 180).
    symmetric_irregularity_nm : float
        PV of the rotationally symmetric part beyond power (ISO 10110-5's C).
    rms_irregularity_nm : float
        RMS after piston, tilt and power are removed (ISO 10110-5's RMSi).
    rms_asymmetric_nm : float
        RMS of the non-rotationally-symmetric part (ISO 10110-5's RMSa).
    removed_terms : tuple of int
        Noll terms taken out of the map before PV and RMS.
    pv_raw_nm : float
        PV of the unfiltered map (measured pixels, the fit elsewhere).
    noise_nm : float
        The map's noise: RMS of its departures from the fit finer than the resolution.
    uncertainty_nm : dict
        Figure name -> expanded uncertainty U (k = 2), nm (see ``uncertainty``).
    uncertainty_budget : dict
        Figure name -> the standard uncertainty of each part, nm.
    noise_bias_removed_nm : dict
        Figure name -> how much the map's noise had inflated it, taken out (SIMEX).
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
    pv_raw_nm: float = float("nan")
    noise_nm: float = 0.0
    uncertainty_nm: dict = field(default_factory=dict)
    uncertainty_budget: dict = field(default_factory=dict)
    noise_bias_removed_nm: dict = field(default_factory=dict)


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


def _ptp(v: np.ndarray) -> float:
    return float(np.max(v) - np.min(v)) if v.size else float("nan")


def _rms(v: np.ndarray) -> float:
    return float(np.sqrt(np.mean((v - np.mean(v)) ** 2))) if v.size else float("nan")


def _smooth(values: np.ndarray, weight: np.ndarray, sigma_px: float,
            den: np.ndarray | None = None) -> np.ndarray:
    """Normalised Gaussian smoothing of ``values`` where ``weight`` is 1 (0 elsewhere)."""
    num = ndimage.gaussian_filter(values * weight, sigma_px, mode="constant", truncate=3.0)
    if den is None:
        den = ndimage.gaussian_filter(weight, sigma_px, mode="constant", truncate=3.0)
    return np.where(den > 1e-3, num / np.maximum(den, 1e-3), 0.0)


def _noise_shape(height_sigma_nm: np.ndarray | None, disk: np.ndarray, measured: np.ndarray,
                rho: np.ndarray) -> tuple[np.ndarray | None, float | None]:
    """The noise at each disk pixel relative to the interior's, from the demodulation's
    per-pixel estimate: 1 in the interior, up to 5 where the fit had less to go on; and
    the interior's noise itself (nm). None, None without an estimate."""
    if height_sigma_nm is None:
        return None, None
    sig = np.asarray(height_sigma_nm, dtype=float)[disk]
    inner = measured & (rho <= 0.8) & np.isfinite(sig)
    if inner.sum() <= 50:
        return None, None
    ref = float(np.median(sig[inner]))
    if not ref > 0:
        return None, None
    return np.clip(np.nan_to_num(sig / ref, nan=1.0, posinf=5.0), 1.0, 5.0), ref


def _garrote(coefficients: np.ndarray, noise: np.ndarray) -> np.ndarray:
    """Each term beyond power (Noll or Fringe 5 on) shrunk by the non-negative garrote at
    its own noise, ``a max(0, 1 - s^2 / a^2)``."""
    a = np.array(coefficients, dtype=float)
    s = noise[_SHRUNK_FROM:]
    b = a[_SHRUNK_FROM:]
    a[_SHRUNK_FROM:] = b * np.maximum(0.0, 1.0 - s * s / np.maximum(b * b, 1e-300))
    return a


def _sum_of_columns(basis: np.ndarray, coefficients: np.ndarray, idx: list[int]) -> np.ndarray:
    """``basis[:, idx] @ coefficients[idx]`` without copying many columns: a run of
    columns is a view, and beyond a few columns all of them are summed with the rest
    weighted 0."""
    idx = sorted(set(idx))
    if not idx:
        return np.zeros(basis.shape[0])
    if idx[-1] - idx[0] + 1 == len(idx):
        return basis[:, idx[0]:idx[-1] + 1] @ coefficients[idx[0]:idx[-1] + 1]
    if len(idx) <= 4:
        return basis[:, idx] @ coefficients[idx]
    weights = np.zeros(basis.shape[1])
    weights[idx] = coefficients[idx]
    return basis @ weights


def _least_squares_inverse(basis: np.ndarray) -> np.ndarray:
    """``(B^T B)^-1 B^T``: Zernike terms over a disk are close to orthonormal, so the
    normal equations are well conditioned (a badly masked disk falls back to the SVD)."""
    gram = basis.T @ basis
    if np.linalg.cond(gram) < 1e8:
        return np.linalg.solve(gram, basis.T)
    return np.linalg.pinv(basis)


@dataclass(frozen=True)
class MapFigures:
    """A height map prepared for figures: its fits and its filtered form over the disk.

    Built once per measurement by :meth:`of`; :meth:`figures` then gives the figures
    with any set of terms removed, and the uncertainty module re-evaluates
    :meth:`peak_figures` on perturbed maps.
    """

    disk: np.ndarray  # (M, N) bool
    measured: np.ndarray  # (Q,) bool: measured pixels among the disk's
    rho: np.ndarray  # (Q,) radius of each disk pixel
    basis: np.ndarray  # (Q, J) Noll terms 1..J over the disk
    fit_inverse: np.ndarray  # (J, P) least-squares solution over the measured pixels
    fringe_basis: np.ndarray  # (Q, 36) the Fringe set, for PVr
    fringe_inverse: np.ndarray  # (36, P)
    measured_nm: np.ndarray  # (P,) the measured heights
    noise_nm: float
    resolution_px: float | None
    radial_bins: np.ndarray  # (Q,) ring index of each disk pixel, for the C figure
    sectors: np.ndarray  # (Q,) angular sector of each disk pixel
    # an outline other than the unit disk: the terms are orthonormal over it, and the
    # best-fit sphere's sag (power) is this many times the fourth term's coefficient
    # (on the disk -2 sqrt 3: Noll 4 is sqrt 3 (2 rho^2 - 1), from centre to rim)
    orthonormal: bool = False
    power_per_a4: float = -2.0 * SQRT3
    # (Q,) the noise at each disk pixel relative to the interior's (at least 1: larger at
    # the rim and beside specks, where the demodulation had less to go on), or None
    noise_shape: np.ndarray | None = None
    # the interior's noise as the demodulation estimates it from the photo (nm), or None:
    # the most the map's roughness may count as noise (``with_noise_measured``)
    noise_ceiling_nm: float | None = None
    # the map's fine-scale roughness (nm): its noise plus the surface's own detail finer
    # than the fit, which the method resolves only in part (``with_noise_measured``)
    roughness_nm: float = 0.0

    @classmethod
    def of(cls, height_nm: np.ndarray, valid: np.ndarray, xu: np.ndarray, yu: np.ndarray, *,
           resolution_px: float | None = None, n_terms: int = 0,
           region: np.ndarray | None = None,
           height_sigma_nm: np.ndarray | None = None) -> MapFigures:
        """Prepare a map.

        Parameters
        ----------
        height_nm : (M, N) ndarray
            Heights (NaN or anything where not ``valid``).
        valid : (M, N) bool ndarray
            Measured pixels.
        xu, yu : (M, N) ndarray
            Zernike coordinates of every map pixel (x right, y up, over the radius).
        resolution_px : float, optional
            The method's resolution as a length in map pixels (a Gaussian sigma):
            detail finer than this is noise. None takes the raw map as it is.
        n_terms : int
            Terms of the stand-in fit, at least ``FIGURE_TERMS`` on the disk and
            ``SHAPED_FIGURE_TERMS`` on another outline.
        region : (M, N) bool ndarray, optional
            The part's pixels when its outline is not the unit disk of ``xu, yu`` (a
            rectangle, a polygon, an annulus): every figure is taken over them, and the
            terms are made orthonormal over them (:func:`zernike.orthonormalized`).
        height_sigma_nm : (M, N) ndarray, optional
            The demodulation's noise estimate per pixel: its shape grows the noise where
            the fit had less to go on (:func:`_noise_shape`), and its interior level
            caps the noise the map's roughness reads (:meth:`with_noise_measured`).
        """
        orthonormal = region is not None
        disk = np.hypot(xu, yu) <= 1.0 if region is None else np.asarray(region, bool)
        measured = np.asarray(valid, bool)[disk]
        x, y = xu[disk], yu[disk]
        least = SHAPED_FIGURE_TERMS if orthonormal else FIGURE_TERMS
        basis = aperture_basis(max(n_terms, least), x, y, orthonormal=orthonormal)
        fringe = nm_basis([fringe_to_nm(j) for j in range(1, PVR_TERMS + 1)], x, y)
        rho = np.hypot(x, y)
        power_per_a4 = -2.0 * SQRT3
        if orthonormal:
            # Fringe 1..3 are piston and the tilts too: PVr's terms then leave the plane out
            fringe = orthonormalized(fringe)
            power_per_a4 = _sphere_sag_per_coefficient(basis[:, 3], x, y)
        step = float(np.max(np.abs(np.diff(xu, axis=1)))) if xu.shape[1] > 1 else 0.01
        # rings two map pixels wide; the last partial ring joins the one inside it
        width = 2.0 * max(step, 1e-3)
        rings = np.minimum((rho / width).astype(int), max(int(1.0 / width) - 1, 0))
        sectors = ((np.arctan2(y, x) + np.pi) / (2 * np.pi) * _SECTORS).astype(int) % _SECTORS
        shape, ceiling = _noise_shape(height_sigma_nm, disk, measured, rho)
        prepared = cls(
            disk=disk, measured=measured, rho=rho, basis=basis,
            fit_inverse=_least_squares_inverse(basis[measured]),
            fringe_basis=fringe, fringe_inverse=_least_squares_inverse(fringe[measured]),
            measured_nm=np.asarray(height_nm, dtype=float)[disk][measured],
            noise_nm=0.0, resolution_px=resolution_px, radial_bins=rings, sectors=sectors,
            orthonormal=orthonormal, power_per_a4=power_per_a4,
            noise_shape=shape, noise_ceiling_nm=ceiling)
        return prepared.with_noise_measured()

    def perturbed(self, delta_nm: np.ndarray, noise_factor: float = 1.0) -> MapFigures:
        """The same map with ``delta_nm`` (over the disk's pixels) added where measured,
        its noise then ``noise_factor`` times the map's (PVr's residual takes out the
        copy's own noise, as the map's takes out the map's)."""
        copy = replace(self, measured_nm=self.measured_nm + delta_nm[self.measured],
                       noise_nm=self.noise_nm * noise_factor)
        copy.__dict__["smoothed_weight"] = self.smoothed_weight  # the same pixels
        for shared in ("_radial_fit", "_ring_of_pixel", "_sphere_fit"):  # the same pixels
            copy.__dict__[shared] = getattr(self, shared)
        for shared in ("coefficient_noise_nm", "fringe_noise_nm"):  # the same noise
            copy.__dict__[shared] = getattr(self, shared)
        return copy

    @cached_property
    def coefficients_nm(self) -> np.ndarray:
        """The stand-in fit's Noll coefficients."""
        return self.fit_inverse @ self.measured_nm

    @property
    def noise_grain_px(self) -> float:
        """The width (Gaussian sigma, map pixels) of the grain the map's noise is given
        wherever it is modelled: half the resolution."""
        return max(0.5 * (self.resolution_px or 1.0), 0.5)

    @cached_property
    def coefficient_noise_nm(self) -> np.ndarray:
        """Standard deviation of each of the stand-in fit's coefficients under the map's
        noise, as the Monte Carlo copies carry it (``uncertainty._noise_fields``)."""
        return self._fit_noise_nm(self.fit_inverse)

    @cached_property
    def fringe_noise_nm(self) -> np.ndarray:
        """The same for PVr's Fringe-36 fit."""
        return self._fit_noise_nm(self.fringe_inverse)

    @cached_property
    def _noise_gain(self) -> tuple[tuple[int, int], np.ndarray]:
        """The padded grid the fits' noise is summed over, and ``|G^|^2`` on it (the
        noise grain's kernel in the half spectrum, its columns that stand for two
        counted twice): by Parseval, ``|G * f|^2 = sum |f^|^2 |G^|^2 / size`` over a
        grid padded beyond the kernel's reach, so nothing wraps."""
        sigma = self.noise_grain_px
        reach = int(4.0 * sigma + 0.5) + 1
        shape = tuple(sfft.next_fast_len(d + 2 * reach, real=True) for d in self.disk.shape)
        delta = np.zeros(shape)
        delta[0, 0] = 1.0
        gain = np.abs(sfft.rfft2(ndimage.gaussian_filter(delta, sigma, mode="wrap"))) ** 2
        gain[:, 1:(shape[1] + 1) // 2] *= 2.0
        return shape, gain

    def _fit_noise_nm(self, inverse: np.ndarray) -> np.ndarray:
        """Standard deviation of each coefficient of the fit ``a = F h`` (``inverse``)
        under the map's noise.

        Noise ``s_x (G * w)_x / sqrt(sum G^2)`` (white noise ``w`` given the map's grain
        by a Gaussian kernel ``G``, of unit variance, times the noise at each pixel)
        gives ``var a_j = |G * (F_j s)|^2 / sum G^2``, summed over the plane (generalised
        least squares: ``F C F^T`` with ``C`` the noise's covariance, written as one
        smoothing per term).
        """
        n = inverse.shape[0]
        if self.noise_nm <= 0:
            return np.zeros(n)
        s = np.full(int(self.measured.sum()), self.noise_nm)
        if self.noise_shape is not None:
            s = s * self.noise_shape[self.measured]
        shape, gain = self._noise_gain
        rows, cols = np.nonzero(self.disk)
        rows, cols = rows[self.measured], cols[self.measured]
        power = np.empty(n)
        for j0 in range(0, n, _TERMS_PER_TRANSFORM):
            j1 = min(j0 + _TERMS_PER_TRANSFORM, n)
            images = np.zeros((j1 - j0, *shape), np.float32)
            images[:, rows, cols] = inverse[j0:j1] * s
            spectra = sfft.rfft2(images, workers=WORKERS)
            power[j0:j1] = np.einsum("jab,ab->j", spectra.real**2 + spectra.imag**2, gain)
        return np.sqrt(power / np.sum(gain))

    @cached_property
    def map_coefficients_nm(self) -> np.ndarray:
        """The coefficients the filtered map is built from: the fit's, each term beyond
        power shrunk by the non-negative garrote at its own noise (see the module
        docstring)."""
        return _garrote(self.coefficients_nm, self.coefficient_noise_nm)

    @cached_property
    def raw_nm(self) -> np.ndarray:
        """Measured heights where measured, the fit elsewhere, over the disk."""
        out = self.basis @ self.coefficients_nm
        out[self.measured] = self.measured_nm
        return out

    def _residual_map(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        fit = self.basis @ self.coefficients_nm
        resid = np.zeros(self.disk.shape)
        resid[self.disk] = np.where(self.measured, self.raw_nm - fit, 0.0)
        weight = np.zeros(self.disk.shape)
        weight[self.disk] = self.measured
        return fit, resid, weight

    @cached_property
    def filtered_nm(self) -> np.ndarray:
        """The fit plus the departures from it, smoothed at the resolution."""
        fit, resid, weight = self._residual_map()
        if self.resolution_px and self.resolution_px > 0:
            return fit + _smooth(resid, weight, self.resolution_px,
                                 self.smoothed_weight)[self.disk]
        return fit + resid[self.disk]

    @cached_property
    def peak_map_nm(self) -> np.ndarray:
        """The filtered map with the fit's noisy terms shrunk (``map_coefficients_nm``):
        what the peak-to-valley figures are taken over."""
        return self.filtered_nm + self.basis @ (self.map_coefficients_nm
                                                - self.coefficients_nm)

    @cached_property
    def smoothed_weight(self) -> np.ndarray | None:
        """The measured pixels smoothed at the resolution (shared by perturbed copies)."""
        if not (self.resolution_px and self.resolution_px > 0):
            return None
        weight = np.zeros(self.disk.shape)
        weight[self.disk] = self.measured
        return ndimage.gaussian_filter(weight, self.resolution_px, mode="constant",
                                       truncate=3.0)

    def with_noise_measured(self) -> MapFigures:
        """A copy whose ``noise_nm`` is the map's fine-scale roughness (robust RMS), at
        most the demodulation's own estimate of the noise (``noise_ceiling_nm``).

        Roughness cannot tell noise from a surface's own detail finer than the fit (a
        ripple, a turned edge): on such a surface it reads that detail as noise, and the
        figures would then be corrected for noise the photo does not have. The
        demodulation reads the photo's noise from the spectrum beside the fringes, where
        the surface puts no power, so it is blind to that detail; it is the larger of
        the two on a noisy photo (it also counts noise the roughness's band leaves out).
        """
        _, resid, weight = self._residual_map()
        scale = 1.5 * self.resolution_px if self.resolution_px else 2.0
        fine = (resid - _smooth(resid, weight, scale))[self.disk]
        rough = fine[self.measured & (self.rho <= 0.9)]
        noise = (float(1.4826 * np.median(np.abs(rough - np.median(rough))))
                 if rough.size > 50 else 0.0)
        ceiling = self.noise_ceiling_nm
        return replace(self, noise_nm=noise if ceiling is None else min(noise, ceiling),
                       roughness_nm=noise)

    @property
    def symmetric_terms(self) -> list[int]:
        """The fit's rotationally symmetric Noll terms (m = 0), piston and power included.

        None on an outline other than the disk: made orthonormal over it, no term is
        exactly radial (the radial part is then fitted afresh, ``_radial_part``).
        """
        if self.orthonormal:
            return []
        return [j for j in range(1, self.coefficients_nm.size + 1) if noll_to_nm(j)[1] == 0]

    @cached_property
    def _radial_fit(self) -> tuple[np.ndarray, np.ndarray] | None:
        """On an outline other than the disk: ``1, rho^2 .. rho^8`` and the plane (the
        fit's own terms 2 and 3) over its pixels, and their least-squares inverse (None
        on the disk)."""
        if not self.orthonormal:
            return None
        design = np.concatenate([self.rho[:, None] ** (2 * np.arange(5)),
                                 self.basis[:, 1:3]], axis=1)
        return design, np.linalg.pinv(design)

    def _radial_part(self, values: np.ndarray, coefficients: np.ndarray | None = None
                     ) -> tuple[np.ndarray, np.ndarray | float]:
        """The exactly radial part of ``values`` the symmetric figures start from.

        On the disk, the fit's own m = 0 terms (with ``coefficients`` in place of the
        fit's own when given). On any other outline the terms are orthonormal over the
        part and none is radial: there it is what ``1, rho^2 ..
        rho^8`` (the powers of Noll 1, 4, 11, 22, 37) take in a fit with a plane once the
        astigmatism (terms 5 and 6, orthonormal over the part after 1-4) is out, so that
        a ring two map pixels wide leaves hardly a step of them; the plane and the
        astigmatism are kept from the mean around each ring. A rectangle's astigmatism is
        then not read as symmetric, as the mean around rings the outline cuts would read
        it; on whole rings (an annulus) the two agree. Terms of order 4 and up that are
        not radial are not fitted with them: over a narrow part they are nearly alike
        the radial ones, and fitted together the two split at random (on a 3:1 rectangle
        C read 27 nm, and RMSa more than the RMS).

        Returns the radial part and the part of ``values`` the mean around rings must not
        see (0 on the disk, whose rings are whole).
        """
        if self._radial_fit is None:
            return self.terms(self.symmetric_terms, coefficients), 0.0
        design, inverse = self._radial_fit
        terms = self.basis[:, 4:6]  # orthonormal over the part: unit mean square
        astig = terms @ (terms.T @ values / values.size)
        coef = inverse @ (values - astig)
        return design[:, :5] @ coef[:5], design[:, 5:] @ coef[5:] + astig

    def terms(self, js, coefficients: np.ndarray | None = None) -> np.ndarray:
        """Sum of the fitted Noll terms ``js`` over the disk (with ``coefficients`` in
        place of the fit's own when given)."""
        a = self.coefficients_nm if coefficients is None else coefficients
        return _sum_of_columns(self.basis, a, [j - 1 for j in js if j <= a.size])

    def symmetric_profile(self, values: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """The mean of ``values`` around each ring one map pixel wide.

        Returns the rings' means, their mean ``rho^2`` and their pixel counts (rings
        with no pixel are left out).
        """
        # a thin ring of pixels samples its circle unevenly: average within angular
        # sectors first, then the sectors with equal weight
        n_rings = int(self.radial_bins.max()) + 1
        cell = self.radial_bins * _SECTORS + self.sectors
        size = n_rings * _SECTORS
        c_n = np.bincount(cell, minlength=size).reshape(n_rings, _SECTORS)
        c_v = np.bincount(cell, weights=values, minlength=size).reshape(n_rings, _SECTORS)
        filled = c_n > 0
        sector_mean = np.where(filled, c_v / np.maximum(c_n, 1), 0.0)
        counts = c_n.sum(axis=1)
        keep = counts > 0
        mean = sector_mean.sum(axis=1)[keep] / filled.sum(axis=1)[keep]
        rho2 = np.bincount(self.radial_bins, weights=self.rho**2, minlength=n_rings)[keep]
        n = counts[keep].astype(float)
        return mean, rho2 / n, n

    def peak_figures(self, removed: tuple[int, ...]) -> dict[str, float]:
        """PV, B, C, RMSt, RMSi and RMSa over the disk: the peak-to-valley ones over
        the peak map (the fit's noisy terms shrunk), the RMS ones over the filtered map
        (noise adds to an RMS in quadrature, and SIMEX takes that out exactly)."""
        with_power = sorted(set(removed) | {4})
        shrunk, peak = self.map_coefficients_nm, self.peak_map_nm
        symmetric_px = self._symmetric_part(peak - self.terms(PISTON_TILT, shrunk), shrunk)
        # C: that profile less its best a + b rho^2 (pixels weigh by their area)
        design, inverse = self._sphere_fit
        symmetric = symmetric_px - design @ (inverse @ symmetric_px)
        plain = self.filtered_nm
        tilted = plain - self.terms(PISTON_TILT)
        return {
            "pv_nm": _ptp(peak - self.terms(removed, shrunk)),
            "rms_nm": _rms(plain - self.terms(removed)),
            "irregularity_nm": _ptp(peak - self.terms(with_power, shrunk)),
            "rms_irregularity_nm": _rms(plain - self.terms(with_power)),
            "symmetric_irregularity_nm": _ptp(symmetric),
            "rms_asymmetric_nm": _rms(tilted - self._symmetric_part(tilted)),
        }

    def _symmetric_part(self, tilted: np.ndarray, coefficients: np.ndarray | None = None
                        ) -> np.ndarray:
        """The rotationally symmetric part of ``tilted`` (a map with piston and tilt out)
        at each pixel: an exactly radial part (``coefficients`` in place of the fit's own
        on the disk) plus the mean around each ring of what it leaves (small, so a ring
        of pixels that samples its circle unevenly, or spans a little of the radius,
        hardly matters: on a ring the power left in a ring two pixels wide once read C
        12 nm on a surface with none)."""
        m0, not_radial = self._radial_part(tilted, coefficients)
        mean, _, _ = self.symmetric_profile(tilted - m0 - not_radial)
        return m0 + mean[self._ring_of_pixel]

    @cached_property
    def _ring_of_pixel(self) -> np.ndarray:
        """Each disk pixel's index among the rings that hold pixels."""
        return (np.cumsum(np.bincount(self.radial_bins) > 0) - 1)[self.radial_bins]

    @cached_property
    def _sphere_fit(self) -> tuple[np.ndarray, np.ndarray]:
        """``a + b rho^2`` over the disk's pixels and its least-squares inverse."""
        design = np.stack([np.ones_like(self.rho), self.rho**2], axis=1)
        return design, np.linalg.pinv(design)

    @cached_property
    def _fringe_fit(self) -> tuple[np.ndarray, float]:
        """The Fringe-36 coefficients and the RMS of what they leave."""
        coef = self.fringe_inverse @ self.measured_nm
        resid = self.measured_nm - self.fringe_basis[self.measured] @ coef
        return coef, _rms(resid)

    def pvr(self, removed: tuple[int, ...]) -> float:
        """Evans's PVr of the measured heights (Fringe-36 fit, its terms beyond power
        shrunk at their noise as the peak map's are, and the noise-corrected residual)."""
        coef, resid_rms = self._fringe_fit
        coef = _garrote(coef, self.fringe_noise_nm)
        # Fringe 1..3 are piston and tilt, 4 is power: drop what the caller removes
        keep = [i for i in range(PVR_TERMS) if not _fringe_removed(i + 1, removed)]
        fit_pv = _ptp(_sum_of_columns(self.fringe_basis, coef, keep))
        return fit_pv + 3.0 * np.sqrt(max(resid_rms**2 - self.noise_nm**2, 0.0))

    def figures(self, *, wavelength_nm: float, diameter_mm: float | None,
                removed_terms: tuple[int, ...] = PISTON_TILT,
                report_fit: ZernikeFit | None = None, raw_pv: bool = True) -> Figures:
        """Every figure with ``removed_terms`` (always at least piston and tilt) taken out.

        ``raw_pv=False`` leaves the unfiltered map's PV out (NaN), as the Monte Carlo
        copies need none.
        """
        a = (np.asarray(report_fit.coefficients_nm, float) if report_fit is not None
             else self.coefficients_nm)
        removed = tuple(sorted(set(PISTON_TILT) | set(removed_terms)))
        peaks = self.peak_figures(removed)
        a4 = a[3] if a.size >= 4 else 0.0
        power = self.power_per_a4 * a4 if 4 not in removed else 0.0
        a5 = a[4] if a.size >= 6 and 5 not in removed else 0.0
        a6 = a[5] if a.size >= 6 and 6 not in removed else 0.0
        # a6 cos 2t + a5 sin 2t = A cos 2(t - t0) with t0 = atan2(a5, a6) / 2
        axis = float(np.degrees(0.5 * np.arctan2(a5, a6))) % 180.0 % 180.0
        astigmatism = float(2.0 * SQRT6 * np.hypot(a5, a6))
        if self.orthonormal:  # the two terms' PV over the part itself
            astigmatism = _ptp(self.basis[:, 4:6] @ np.array([a5, a6]))
        return Figures(
            pv_nm=peaks["pv_nm"],
            rms_nm=peaks["rms_nm"],
            pvr_nm=float(self.pvr(removed)),
            power_nm=float(power),
            power_fringes=to_fringes(float(power), wavelength_nm),
            radius_of_curvature_m=(radius_of_curvature_m(power, diameter_mm)
                                   if diameter_mm else None),
            irregularity_nm=peaks["irregularity_nm"],
            astigmatism_nm=astigmatism,
            astigmatism_axis_deg=axis,
            symmetric_irregularity_nm=peaks["symmetric_irregularity_nm"],
            rms_irregularity_nm=peaks["rms_irregularity_nm"],
            rms_asymmetric_nm=peaks["rms_asymmetric_nm"],
            removed_terms=removed,
            pv_raw_nm=_ptp(self.raw_nm - self.terms(removed)) if raw_pv else float("nan"),
            noise_nm=self.noise_nm,
        )


def _sphere_sag_per_coefficient(term: np.ndarray, x: np.ndarray, y: np.ndarray) -> float:
    """Sag from the centre to the farthest point of the part of the sphere a unit
    coefficient of ``term`` (the orthonormal fourth term: ``k rho^2`` plus a plane) makes;
    signed so that a centre standing high is positive, as for the disk.

    The farthest point is the outline's own, at unit radius: every outline other than the
    disk is scaled by its bounding radius (a rectangle's or polygon's farthest corner, a
    ring's or cut circle's circle). The map's pixel centres stop short of a sharp corner
    (by 1.5 % of rho^2 on a binned polygon), which would read power that much low."""
    design = np.column_stack([np.ones_like(x), x, y, x * x + y * y])
    k = np.linalg.lstsq(design, term, rcond=None)[0][3]
    return float(-k)


def _fringe_removed(j_fringe: int, removed: tuple[int, ...]) -> bool:
    """Is Fringe term ``j_fringe`` one of the Noll terms in ``removed``?"""
    n, m = fringe_to_nm(j_fringe)
    return any(noll_to_nm(j) == (n, m) for j in removed)


def prepare_map(height_nm: np.ndarray, valid: np.ndarray, xu: np.ndarray, yu: np.ndarray,
                fit: ZernikeFit, *, resolution_px: float | None = None,
                region: np.ndarray | None = None,
                height_sigma_nm: np.ndarray | None = None) -> MapFigures:
    """The map prepared for :func:`compute_figures` (keep it to figure the map again);
    ``region``, ``height_sigma_nm``: see :meth:`MapFigures.of`."""
    return MapFigures.of(height_nm, valid, xu, yu, resolution_px=resolution_px,
                         n_terms=fit.n_terms, region=region,
                         height_sigma_nm=height_sigma_nm)


def compute_figures(height_nm: np.ndarray, valid: np.ndarray, xu: np.ndarray, yu: np.ndarray,
                    fit: ZernikeFit, *, wavelength_nm: float, diameter_mm: float | None = None,
                    removed_terms: tuple[int, ...] = PISTON_TILT,
                    resolution_px: float | None = None,
                    height_sigma_nm: np.ndarray | None = None,
                    wavelength_uncertainty_nm: float = 0.0,
                    reference_uncertainty_nm: float = 0.0, photos: int = 1,
                    prepared: MapFigures | None = None,
                    region: np.ndarray | None = None,
                    scale_uncertainty: float = 0.0, outline: str | None = None) -> Figures:
    """Figures of a height map with their expanded uncertainties (see the module docstring).

    Parameters
    ----------
    height_nm : (M, N) ndarray
        Heights in nm; only ``valid`` pixels are read.
    valid : (M, N) bool ndarray
        Measured pixels.
    xu, yu : (M, N) ndarray
        Zernike coordinates (x right, y up, divided by the aperture radius).
    fit : ZernikeFit
        The reported Noll fit (power and astigmatism are read from it).
    wavelength_nm : float
        Test wavelength, for the power in fringes.
    diameter_mm : float, optional
        Physical clear aperture, for the radius of curvature.
    removed_terms : tuple of int
        Noll terms to take out (always at least piston and tilt).
    resolution_px : float, optional
        The method's resolution in map pixels (see :meth:`MapFigures.of`).
    height_sigma_nm : (M, N) ndarray, optional
        The demodulation's noise estimate per pixel: its shape grows the noise where
        the fit had less to go on (the rim, beside specks), its interior level caps the
        noise read from the map. With ``prepared`` given, its own (:func:`prepare_map`)
        counts instead.
    wavelength_uncertainty_nm, reference_uncertainty_nm : float
        What the operator states (see ``uncertainty``).
    photos : int
        How many photos were averaged into the map.
    region : (M, N) bool ndarray, optional
        The part's pixels when its outline is not the unit disk (see :meth:`MapFigures.of`).
    prepared : MapFigures, optional
        The same map already prepared (:func:`prepare_map`): figures with other terms
        removed then reuse its fits and its Monte Carlo copies instead of redoing them.
    scale_uncertainty : float
        Relative standard uncertainty of the height scale the method's aperture carries
        (``uncertainty.INTENSITY_FIT_SCALE`` for the intensity fit; 0 with a carrier).
    outline : str, optional
        The part's outline kind when the map is one photo's demodulation (its corners'
        share of the method part, ``uncertainty.OUTLINE_METHOD``); None otherwise.
    """
    from .uncertainty import expanded_uncertainty, noise_effects

    if prepared is None:
        prepared = prepare_map(height_nm, valid, xu, yu, fit, resolution_px=resolution_px,
                               region=region, height_sigma_nm=height_sigma_nm)
    figures = prepared.figures(wavelength_nm=wavelength_nm, diameter_mm=diameter_mm,
                               removed_terms=removed_terms, report_fit=fit)
    spread, corrected = noise_effects(prepared, figures, removed=figures.removed_terms,
                                      noise_scale=prepared.noise_shape,
                                      wavelength_nm=wavelength_nm)
    corrections = {name: getattr(figures, name) - value for name, value in corrected.items()}
    figures = replace(figures, **corrected)
    uncertainty, budget = expanded_uncertainty(
        figures, spread=spread, noise_nm=prepared.noise_nm,
        roughness_nm=prepared.roughness_nm, wavelength_nm=wavelength_nm,
        wavelength_uncertainty_nm=wavelength_uncertainty_nm,
        reference_uncertainty_nm=reference_uncertainty_nm, photos=photos,
        corrections=corrections, scale_uncertainty=scale_uncertainty, outline=outline)
    return replace(figures, uncertainty_nm=uncertainty, uncertainty_budget=budget,
                   noise_bias_removed_nm=corrections)
