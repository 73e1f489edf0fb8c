"""The expanded uncertainty (k = 2) of every figure, from the photo and the operator.

For each figure the standard uncertainties below are combined in quadrature and
multiplied by the coverage factor k = 2 (JCGM 100:2008, the GUM, 6.2-6.3):

* **noise**: the map's own noise, measured from its fine-scale roughness (the departure
  of the map from its 66-term fit at scales finer than the resolution) but never more
  than the demodulation reads from the photo's spectrum beside the fringes (roughness
  alone would take a surface's own fine detail, a ripple, for noise), grown where the
  local fit had less to go on (the rim, beside specks), and propagated into every
  figure by Monte Carlo (JCGM 101:2008): the figures are taken again over copies of the
  map with noise of that size and grain added, and their spread is the noise's share.
  The same draws, at two sizes of added noise, show how far the noise inflates the
  peak-to-valley and RMS figures; that bias is taken out of the figures by
  simulation-extrapolation (SIMEX, Cook & Stefanski 1994) and half of it kept in U.
* **method**: what a single photo cannot resolve or sets slightly wrong (detail finer
  than the fringes carry, the rim, the tone curve, the aperture found to a fraction of a
  percent). Its size per figure is a share of the figure, a floor and a share of the
  map's roughness (noise and fine detail alike), set from the measured errors on an
  independent set of reference photos
  (``benchmarks/refset_accuracy.py``; a type B evaluation, GUM 4.3).
* **wavelength**: every height scales with the wavelength; the operator states its
  standard uncertainty (0 by default: the He-Ne, sodium and mercury lines are known far
  better than a fringe photo measures).
* **reference flat**: the reference's own form error is in every measurement against it;
  the operator states its expanded uncertainty (k = 2), which enters each figure.

Averaging N photos shrinks U where it should and nowhere else: the noise part is taken
on the averaged map, whose own noise is what the averaging left (about 1/sqrt(N) of one
photo's, GUM 4.2.3), so it is not divided again; the method part (what one photo cannot
resolve, the rim) is a bias that photos of one part share, and is not divided; the
wavelength and reference parts do not average away either.

References
----------
J. R. Cook, L. A. Stefanski, "Simulation-extrapolation estimation in parametric
measurement error models", J. Am. Stat. Assoc. 89(428), 1314-1328 (1994).
JCGM 100:2008, Evaluation of measurement data - Guide to the expression of uncertainty
in measurement (GUM). JCGM 101:2008, Supplement 1: propagation of distributions using a
Monte Carlo method.
"""

from __future__ import annotations

import hashlib
import math

import numpy as np
from scipy import ndimage

__all__ = ["COVERAGE_FACTOR", "INTENSITY_FIT_SCALE", "METHOD", "OUTLINE_METHOD",
           "UNCERTAIN_FIGURES", "expanded_uncertainty", "noise_effects"]

COVERAGE_FACTOR = 2.0
UNCERTAIN_FIGURES = ("pv_nm", "rms_nm", "pvr_nm", "power_nm", "irregularity_nm",
                     "symmetric_irregularity_nm", "rms_irregularity_nm",
                     "rms_asymmetric_nm", "astigmatism_nm")
# figure -> (share of the figure, floor in nm, share of the map's noise RMS): the method's
# standard uncertainty, sqrt((share * F)^2 + floor^2 + (k_noise * noise)^2). Set so the
# expanded uncertainty covers the measured errors on the independent reference photos
# (tests/refset, benchmarks/refset_accuracy.py) for a little over 90 % of them. Power's
# floor also holds a rolled edge's detail, finer than 20 fringes carry, that leaks into
# it (tests/refset's rolled_edge_f20: 0.85 nm, 3.4 %, on a photo with 0.6 nm of noise).
METHOD = {
    "pv_nm": (0.03, 0.8, 2.0),
    "rms_nm": (0.005, 0.15, 0.3),
    "pvr_nm": (0.025, 0.8, 2.0),
    "power_nm": (0.006, 0.35, 0.3),
    "irregularity_nm": (0.035, 0.8, 2.0),
    "symmetric_irregularity_nm": (0.08, 0.5, 1.0),
    "rms_irregularity_nm": (0.008, 0.15, 0.3),
    "rms_asymmetric_nm": (0.008, 0.12, 0.3),
    "astigmatism_nm": (0.01, 0.10, 0.5),
}
#: The relative standard uncertainty of the height scale of a photo measured by the
#: intensity fit (few, bent or closed fringes). Its aperture is found by the fringes'
#: contrast or the lit disk alone, to about half a per cent of the radius, and power and
#: every figure it dominates scale with the radius squared. Set from the relative errors
#: of RMS, power, RMSi and astigmatism on 90 photos of tests/refset's few_fringe_case
#: (seeds 200-229, kinds few, bent and closed): standard deviation 0.85-1.3 %, mean
#: 0.3-0.5 %. With a carrier the aperture is found ten times closer, within METHOD.
INTENSITY_FIT_SCALE = 0.011
#: outline kind -> figure -> a further share of the figure (relative standard uncertainty)
#: in the method part of a single photo's figures on a part that is not a circle seen
#: square-on. ``METHOD`` was set on round parts; a rectangle's or polygon's corners, a
#: ring's inner edge and the ends of a round part's flats meet the demodulation window
#: with part of it outside, where detail finer than the fringes carry is left
#: unresolved, and a peak-to-valley that lands there can be off by a tenth of itself or
#: more (an ellipse's, mapped back to the part's circle, somewhat less). Set from the
#: errors on dev seeds 0-59 of tests/refset/shaped.py (an independent generator; truth
#: by quadrature or a direct sum over the part) so that U covers a little over 90 % of
#: them, and checked on held-out seeds (benchmarks/shape_accuracy.py: the truth within U
#: on 95 % of pairs, seeds 200-229). PVr takes PV's share (its truth within U on 27-30
#: of 30 per outline there); RMS and RMSi need none. Astigmatism takes 1.2 % on an ellipse
#: (a view angle found a little off would stretch some of the power into it), a polygon and a
#: circle with flats (their truth, the PV over the part of what the best quadratic holds
#: beyond {1, x, y, rho^2}, within U on 54-56 of 60 dev photos before, 56-58 after).
#: A phase-shifted stack resolves the
#: corners and takes none of these (its B within U on 26-30 of 30).
OUTLINE_METHOD = {
    "rect": {"pv_nm": 0.06, "pvr_nm": 0.06, "irregularity_nm": 0.15},
    "poly": {"pv_nm": 0.085, "pvr_nm": 0.085, "irregularity_nm": 0.10, "power_nm": 0.025,
             "astigmatism_nm": 0.012},
    "annulus": {"pv_nm": 0.035, "pvr_nm": 0.035, "irregularity_nm": 0.10},
    "ellipse": {"pv_nm": 0.03, "pvr_nm": 0.03, "irregularity_nm": 0.08,
                "astigmatism_nm": 0.012},
    "cut": {"irregularity_nm": 0.04, "astigmatism_nm": 0.012},
}
_REALISATIONS = 8
# noise added in the Monte Carlo, in units of the map's own: the map then carries sqrt(1 + a^2)
# times its noise (sqrt 2 and 2), the two points beyond the measurement SIMEX extrapolates from
_ADDED = (1.0, math.sqrt(3.0))
#: figures whose noise bias SIMEX removes: the peak-to-valley and RMS ones
BIASED_FIGURES = ("pv_nm", "irregularity_nm", "symmetric_irregularity_nm", "pvr_nm",
                  "rms_nm", "rms_irregularity_nm", "rms_asymmetric_nm")


def _noise_fields(shape, disk: np.ndarray, measured: np.ndarray, sigma_px: float,
                  rng: np.random.Generator) -> np.ndarray:
    """Unit-RMS noise with the map's grain over the measured disk pixels, ``(K, Q)``."""
    out = np.empty((_REALISATIONS, int(measured.size)))
    for k in range(_REALISATIONS):
        field = ndimage.gaussian_filter(rng.standard_normal(shape), sigma_px)
        v = field[disk]
        out[k] = v / (np.std(v[measured]) or 1.0)
    return out


def _extrapolate(observed: float, means: list[float]) -> float:
    """SIMEX: the figure extrapolated back to a map without noise.

    ``means`` are the figure's means with noise added at :data:`_ADDED`; the map then
    carries ``s = sqrt(1 + a^2)`` times its noise. Noise adds to a peak-to-valley or an
    RMS roughly in quadrature, so ``F^2`` is fitted as a straight line in ``s^2`` (the
    noise's variance) and read at ``s = 0``. Noise only ever inflates these figures on
    average, so the correction is never upward; and it takes out at most half of the
    figure: beyond that the photo is too noisy to say more (the pipeline warns, and
    half the correction counts in U).
    """
    s2 = np.array([1.0] + [1.0 + a * a for a in _ADDED])
    m2 = np.square(np.array([observed] + list(means)))
    _, icpt = np.polyfit(s2, m2, 1)
    return min(max(math.sqrt(max(float(icpt), 0.0)), 0.5 * observed), observed)


def _noisy_copies(prepared, noise_scale: np.ndarray | None, seed: int) -> list[list]:
    """The map with noise added at each level of :data:`_ADDED`, kept on ``prepared``.

    Each copy knows its own noise (``sqrt(1 + a^2)`` times the map's), which PVr takes
    out of its residual as the map's PVr takes out the map's: with the map's noise in
    the copies, their PVr rose with the noise added and SIMEX took it out a second time
    (tests/refset seed 621: PVr 16.1 nm for 28.5).

    The copies depend only on the map and its noise, not on which terms a figure
    removes, so the station's term toggles figure them again without new noise, new
    smoothing or new fits (the same draws, so the figures do not flicker either).
    """
    key = (seed, None if noise_scale is None else
           hashlib.sha1(np.ascontiguousarray(noise_scale, dtype=float)).hexdigest())
    memo = prepared.__dict__.get("_noisy_copies")
    if memo is not None and memo[0] == key:
        return memo[1]
    rng = np.random.default_rng(seed)
    fields = _noise_fields(prepared.disk.shape, prepared.disk, prepared.measured,
                           prepared.noise_grain_px, rng)
    scale = prepared.noise_nm if noise_scale is None else prepared.noise_nm * noise_scale
    copies = [[prepared.perturbed(fields[k] * scale * added, math.hypot(1.0, added))
               for k in range(_REALISATIONS)] for added in _ADDED]
    # one noise model per map, replaced whole (a toggle in another thread reads either)
    prepared.__dict__["_noisy_copies"] = (key, copies)
    return copies


def noise_effects(prepared, figures, *, removed: tuple[int, ...],
                  noise_scale: np.ndarray | None, wavelength_nm: float,
                  seed: int = 0) -> tuple[dict[str, float], dict[str, float]]:
    """How the map's noise moves each figure: its spread, and the noise-free value.

    The figures are taken again over copies of the map with noise of the map's own size
    and grain added (JCGM 101:2008, Monte Carlo), once and three times its variance.
    The spread at the first level is the noise's standard uncertainty; the mean shift
    over both levels is the bias a noisy peak-to-valley or RMS carries, which
    simulation-extrapolation (SIMEX; J. R. Cook, L. A. Stefanski, J. Am. Stat. Assoc.
    89(428), 1314 (1994)) takes back to zero noise.

    Returns
    -------
    spread : dict
        Figure name -> standard deviation under one unit of added noise, nm.
    corrected : dict
        Figure name -> the figure with its noise bias removed (peak and RMS figures).
    """
    noise = float(prepared.noise_nm)
    base = {name: float(getattr(figures, name)) for name in UNCERTAIN_FIGURES}
    spread = {name: 0.0 for name in UNCERTAIN_FIGURES}
    corrected: dict[str, float] = {}
    if noise <= 0:
        return spread, corrected
    copies = _noisy_copies(prepared, noise_scale, seed)
    means: dict[str, list[float]] = {name: [] for name in UNCERTAIN_FIGURES}
    for level, level_copies in enumerate(copies):
        samples = {name: [] for name in UNCERTAIN_FIGURES}
        for copy in level_copies:
            f = copy.figures(wavelength_nm=wavelength_nm, diameter_mm=None,
                             removed_terms=removed, report_fit=None, raw_pv=False)
            for name in UNCERTAIN_FIGURES:
                samples[name].append(abs(getattr(f, name)) if name == "power_nm"
                                     else getattr(f, name))
        for name, vals in samples.items():
            v = np.asarray(vals)
            means[name].append(float(np.mean(v)))
            if level == 0:
                ref = abs(base[name]) if name == "power_nm" else base[name]
                spread[name] = float(math.hypot(np.std(v), np.mean(v) - ref))
    for name in BIASED_FIGURES:
        corrected[name] = _extrapolate(base[name], means[name])
    return spread, corrected


def expanded_uncertainty(figures, *, spread: dict[str, float], noise_nm: float,
                         wavelength_nm: float, roughness_nm: float = 0.0,
                         wavelength_uncertainty_nm: float = 0.0,
                         reference_uncertainty_nm: float = 0.0, photos: int = 1,
                         corrections: dict[str, float] | None = None,
                         scale_uncertainty: float = 0.0, outline: str | None = None,
                         ) -> tuple[dict[str, float], dict[str, dict]]:
    """Expanded uncertainty (k = 2) of each figure, and its budget.

    Parameters
    ----------
    figures : figures.Figures
        The figures (noise bias already removed).
    spread : dict
        Figure name -> its standard deviation under the map's noise
        (:func:`noise_effects`).
    noise_nm : float
        The map's noise RMS.
    roughness_nm : float
        The map's fine-scale roughness (``figures.MapFigures.roughness_nm``): its noise
        and the surface's detail finer than the fit. The method's part grows with the
        larger of the two.
    wavelength_nm, wavelength_uncertainty_nm : float
        Test wavelength and its standard uncertainty.
    reference_uncertainty_nm : float
        Expanded uncertainty (k = 2) of the reference flat's form.
    photos : int
        How many photos were averaged into the map: recorded with the budget, but no
        divisor (the averaged map's own noise already says what averaging gained).
    corrections : dict, optional
        Figure name -> the noise bias removed from it, nm; half of it counts as the
        correction's own standard uncertainty.
    scale_uncertainty : float
        Relative standard uncertainty of the whole height scale beyond what ``METHOD``
        holds (:data:`INTENSITY_FIT_SCALE` for the intensity fit's aperture); it counts
        in the method part, as a share of every figure.

    Returns
    -------
    uncertainty : dict
        Figure name -> U in nm (k = 2).
    budget : dict
        Figure name -> standard uncertainties of each part, nm.
    """
    # the method's part grows with the map's roughness: its noise, and the surface's own
    # detail finer than the fit, which the method resolves only in part
    noise = max(float(noise_nm), float(roughness_nm))
    base = {name: float(getattr(figures, name)) for name in UNCERTAIN_FIGURES}
    corrections = corrections or {}
    outline_shares = OUTLINE_METHOD.get(outline or "", {})
    uncertainty, budget = {}, {}
    for name in UNCERTAIN_FIGURES:
        share, floor, k_noise = METHOD[name]
        value = abs(base[name])
        relative = math.hypot(scale_uncertainty, outline_shares.get(name, 0.0))
        parts = {
            # the noise's spread, and half the SIMEX correction: how far off it may be
            "noise_nm": math.hypot(spread[name], 0.5 * corrections.get(name, 0.0)),
            "method_nm": math.sqrt((share * value) ** 2 + floor**2
                                   + (k_noise * noise) ** 2
                                   + (relative * value) ** 2),
            "wavelength_nm": value * wavelength_uncertainty_nm / wavelength_nm,
            "reference_nm": reference_uncertainty_nm / COVERAGE_FACTOR,
        }
        combined = math.sqrt(sum(p * p for p in parts.values()))
        uncertainty[name] = COVERAGE_FACTOR * combined
        budget[name] = parts
    return uncertainty, budget
