"""The expanded uncertainty (k = 2) of every figure, from what the photo shows and the operator states.

For each figure the standard uncertainties below are combined in quadrature and
multiplied by the coverage factor k = 2 (JCGM 100:2008, the GUM, 6.2-6.3):

* **noise**: the map's own noise, measured from its fine-scale roughness (the departure
  of the map from its 45-term fit at scales finer than the resolution), grown where the
  local fit had less to go on (the rim, beside specks), and propagated into every
  figure by Monte Carlo (JCGM 101:2008): the figures are taken again over copies of the
  map with noise of that size and grain added, and their spread (and any shift of their
  mean, the bias a noisy peak-to-valley carries) is the noise's share.
* **method**: what a single photo cannot resolve or sets slightly wrong (detail finer
  than the fringes carry, the rim, the tone curve, the aperture found to a fraction of a
  percent). Its size per figure is a share of the figure plus a floor, set from the
  measured errors on an independent set of reference photos
  (``benchmarks/refset_accuracy.py``; a type B evaluation, GUM 4.3).
* **wavelength**: every height scales with the wavelength; the operator states its
  standard uncertainty (0 by default: the He-Ne, sodium and mercury lines are known far
  better than a fringe photo measures).
* **reference flat**: the reference's own form error is in every measurement against it;
  the operator states its expanded uncertainty (k = 2), which enters each figure.

Averaging N photos divides the noise and method parts by sqrt(N): they change from photo
to photo (noise, speckle, the fringes' direction at the rim). The wavelength and
reference parts do not average away.

References
----------
JCGM 100:2008, Evaluation of measurement data - Guide to the expression of uncertainty
in measurement (GUM). JCGM 101:2008, Supplement 1: propagation of distributions using a
Monte Carlo method.
"""

from __future__ import annotations

import math

import numpy as np
from scipy import ndimage

__all__ = ["COVERAGE_FACTOR", "METHOD", "UNCERTAIN_FIGURES", "expanded_uncertainty"]

COVERAGE_FACTOR = 2.0
UNCERTAIN_FIGURES = ("pv_nm", "rms_nm", "pvr_nm", "power_nm", "irregularity_nm",
                     "symmetric_irregularity_nm", "rms_irregularity_nm",
                     "rms_asymmetric_nm", "astigmatism_nm")
# figure -> (share of the figure, floor in nm, share of the map's noise RMS): the method's
# standard uncertainty, sqrt((share * F)^2 + floor^2 + (k_noise * noise)^2). Set so the
# expanded uncertainty covers the measured errors on the independent reference photos
# (tests/refset, benchmarks/refset_accuracy.py) for a little over 90 % of them.
METHOD = {
    "pv_nm": (0.03, 0.8, 2.0),
    "rms_nm": (0.005, 0.05, 0.3),
    "pvr_nm": (0.025, 0.8, 2.0),
    "power_nm": (0.006, 0.10, 0.3),
    "irregularity_nm": (0.035, 0.8, 2.0),
    "symmetric_irregularity_nm": (0.08, 0.5, 1.0),
    "rms_irregularity_nm": (0.008, 0.05, 0.3),
    "rms_asymmetric_nm": (0.008, 0.05, 0.3),
    "astigmatism_nm": (0.01, 0.10, 0.5),
}
_REALISATIONS = 8


def _noise_fields(shape, disk: np.ndarray, measured: np.ndarray, sigma_px: float,
                  rng: np.random.Generator) -> np.ndarray:
    """Unit-RMS noise with the map's grain over the measured disk pixels, ``(K, Q)``."""
    out = np.empty((_REALISATIONS, int(measured.size)))
    for k in range(_REALISATIONS):
        field = ndimage.gaussian_filter(rng.standard_normal(shape), max(sigma_px, 0.5))
        v = field[disk]
        out[k] = v / (np.std(v[measured]) or 1.0)
    return out


def expanded_uncertainty(prepared, figures, *, removed: tuple[int, ...],
                         report_coefficients: np.ndarray, noise_scale: np.ndarray | None,
                         wavelength_nm: float, wavelength_uncertainty_nm: float = 0.0,
                         reference_uncertainty_nm: float = 0.0, photos: int = 1,
                         seed: int = 0) -> tuple[dict[str, float], dict[str, dict]]:
    """Expanded uncertainty (k = 2) of each figure, and its budget.

    Parameters
    ----------
    prepared : figures.MapFigures
        The map as the figures were taken from it.
    figures : figures.Figures
        The figures.
    removed : tuple of int
        Noll terms taken out.
    report_coefficients : (J,) ndarray
        The reported fit (power and astigmatism are read from it).
    noise_scale : (Q,) ndarray or None
        How much noisier than the interior each disk pixel is (1 in the interior).
    wavelength_nm, wavelength_uncertainty_nm : float
        Test wavelength and its standard uncertainty.
    reference_uncertainty_nm : float
        Expanded uncertainty (k = 2) of the reference flat's form.
    photos : int
        How many photos were averaged into the map.
    seed : int
        Seed of the Monte Carlo draws (the result is repeatable).

    Returns
    -------
    uncertainty : dict
        Figure name -> U in nm (k = 2).
    budget : dict
        Figure name -> standard uncertainties of each part, nm.
    """
    rng = np.random.default_rng(seed)
    noise = float(prepared.noise_nm)
    base = {name: float(getattr(figures, name)) for name in UNCERTAIN_FIGURES}
    spread = {name: 0.0 for name in UNCERTAIN_FIGURES}
    if noise > 0:
        shape = prepared.disk.shape
        fields = _noise_fields(shape, prepared.disk, prepared.measured,
                               0.5 * (prepared.resolution_px or 1.0), rng)
        scale = noise if noise_scale is None else noise * noise_scale
        samples = {name: [] for name in UNCERTAIN_FIGURES}
        for k in range(_REALISATIONS):
            f = prepared.perturbed(fields[k] * scale).figures(
                wavelength_nm=wavelength_nm, diameter_mm=None, removed_terms=removed,
                report_fit=None)
            for name in UNCERTAIN_FIGURES:
                samples[name].append(abs(getattr(f, name)) if name == "power_nm"
                                     else getattr(f, name))
        for name, vals in samples.items():
            v = np.asarray(vals)
            ref = abs(base[name]) if name == "power_nm" else base[name]
            spread[name] = float(math.hypot(np.std(v), np.mean(v) - ref))
    per_photo = 1.0 / math.sqrt(max(photos, 1))
    uncertainty, budget = {}, {}
    for name in UNCERTAIN_FIGURES:
        share, floor, k_noise = METHOD[name]
        value = abs(base[name])
        parts = {
            "noise_nm": spread[name] * per_photo,
            "method_nm": math.sqrt((share * value) ** 2 + floor**2
                                   + (k_noise * noise) ** 2) * per_photo,
            "wavelength_nm": value * wavelength_uncertainty_nm / wavelength_nm,
            "reference_nm": reference_uncertainty_nm / COVERAGE_FACTOR,
        }
        combined = math.sqrt(sum(p * p for p in parts.values()))
        uncertainty[name] = COVERAGE_FACTOR * combined
        budget[name] = parts
    return uncertainty, budget
