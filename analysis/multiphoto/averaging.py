"""Several measurements of one part: aligned on the aperture, sign-checked, averaged, spread.

Each height map is resampled onto one square grid in aperture-normalised
coordinates (x right, y up, divided by the radius: the Zernike coordinates), so photos
taken at different positions or magnifications line up. The averaged map sits on the
first photo's aperture. The spread between photos is the repeatability a certificate
can quote; the standard error of the mean falls as ``1 / sqrt(N)`` for independent
errors such as air turbulence (the experimental standard deviation of the mean, JCGM
100:2008, 4.2.3, from memory).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np
from scipy import ndimage

from ..aperture import Aperture
from ..errors import SettingsError, UnanalysablePhotoError
from ..zernike import fit_zernike

__all__ = [
    "FIGURE_NAMES",
    "AveragedMeasurement",
    "average_measurements",
    "check_signs",
    "grid_geometry",
    "resample_to_unit_disk",
    "unit_grid",
]

# the figures whose spread is reported, by their Figures field names
FIGURE_NAMES = (
    "pv_nm",
    "rms_nm",
    "pvr_nm",
    "power_nm",
    "irregularity_nm",
    "astigmatism_nm",
    "rms_irregularity_nm",
)
SIGN_TERMS = tuple(range(4, 16))  # power up to radial order 4: stable between photos
_MAX_GRID = 501


def unit_grid(size: int) -> tuple[np.ndarray, np.ndarray]:
    """Zernike coordinates of a ``size x size`` grid spanning the unit disk's square.

    Row 0 is the top (``y = +1``), column 0 the left (``x = -1``); the grid is symmetric,
    so turning a map over about the vertical axis (``x -> -x``) is a column reversal.
    """
    if size < 16:
        raise SettingsError(f"a common grid of {size} pixels is too coarse; use at least 16")
    t = np.linspace(-1.0, 1.0, size)
    x, y = np.meshgrid(t, -t)
    return x, y


def grid_geometry(aperture: Aperture, size: int):
    """The :class:`MapGeometry` that places :func:`unit_grid` on a photo's aperture."""
    from ..pipeline import MapGeometry

    step = 2.0 * aperture.radius_px / (size - 1)
    return MapGeometry(
        origin_x_px=aperture.center_x_px - aperture.radius_px,
        origin_y_px=aperture.center_y_px - aperture.radius_px,
        step_px=step,
        shape=(size, size),
    )


def resample_to_unit_disk(measurement, *, size: int, values: np.ndarray | None = None
                          ) -> tuple[np.ndarray, np.ndarray]:
    """A measurement's height map on :func:`unit_grid` of its own aperture.

    Bilinear interpolation (``scipy.ndimage.map_coordinates``) of the heights and of
    the valid mask separately, then divided (normalised interpolation), so pixels next
    to a hole or the rim keep the heights of their measured neighbours only. A grid
    pixel counts as measured when at least half its interpolation weight fell on
    measured pixels and it lies in the unit disk.

    ``values``: another map on the measurement's grid to carry the same way instead of
    its heights (its height standard deviation, for one).

    Returns
    -------
    height_nm : (size, size) ndarray
        NaN where not measured.
    valid : (size, size) bool ndarray
    """
    ap = measurement.aperture
    geo = measurement.geometry
    xu, yu = unit_grid(size)
    cols = (ap.center_x_px + xu * ap.radius_px - geo.origin_x_px) / geo.step_px
    rows = (ap.center_y_px - yu * ap.radius_px - geo.origin_y_px) / geo.step_px
    source = measurement.height_nm if values is None else values
    valid_src = (np.asarray(measurement.valid, bool) & np.isfinite(measurement.height_nm)
                 & np.isfinite(source))
    filled = np.where(valid_src, source, 0.0)
    coords = np.stack([rows, cols])
    num = ndimage.map_coordinates(filled, coords, order=1, mode="constant", cval=0.0)
    weight = ndimage.map_coordinates(
        valid_src.astype(float), coords, order=1, mode="constant", cval=0.0
    )
    valid = (weight >= 0.5) & (np.hypot(xu, yu) <= 1.0)
    height = np.full((size, size), np.nan)
    height[valid] = num[valid] / weight[valid]
    return height, valid


def _mean_sigma(ms, stack, count, enough) -> np.ndarray | None:
    """The averaged map's standard deviation from each photo's own: the root sum of
    squares of those that measured a pixel over their count (their noise independent,
    as speckle and camera noise are between photos). None when a photo has none."""
    if any(m.height_sigma_nm is None for m in ms):
        return None
    size = stack.shape[1]
    total = np.zeros(stack.shape[1:])
    for m, heights in zip(ms, stack, strict=True):
        sigma, ok = resample_to_unit_disk(m, size=size, values=m.height_sigma_nm)
        used = np.isfinite(heights)
        if np.any(used & ~ok):  # measured but without a sigma: nothing honest to say
            return None
        total += np.where(used, sigma, 0.0) ** 2
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(enough, np.sqrt(total) / np.maximum(count, 1), np.nan)


def _remove_piston_tilt(
    height: np.ndarray, valid: np.ndarray, region: np.ndarray, xu: np.ndarray, yu: np.ndarray
) -> np.ndarray:
    """Take out the plane fitted over ``region`` (a common region keeps photos comparable)."""
    use = region & valid
    design = np.stack([np.ones(use.sum()), xu[use], yu[use]], axis=1)
    coef, *_ = np.linalg.lstsq(design, height[use], rcond=None)
    out = height - (coef[0] + coef[1] * xu + coef[2] * yu)
    out[~valid] = np.nan
    return out


def check_signs(
    coefficients_nm: Sequence[np.ndarray], names: Sequence[str], *, min_rms_nm: float = 2.0
) -> tuple[tuple[float, ...], tuple[str, ...]]:
    """Check that every photo reads the part with the same sign.

    Each photo's low-order Zernike terms (Noll 4 to 15: power, astigmatism, coma,
    trefoil, spherical) are compared with the mean of the other photos' by their
    normalised inner product (cosine similarity).

    Returns
    -------
    correlations : tuple of float
        One per photo, in -1..1 (NaN when the others' low-order terms are too small).
    warnings : tuple of str

    Raises
    ------
    UnanalysablePhotoError
        When a photo correlates below -0.5 with the others: it reads inverted.
    """
    c = np.array([np.asarray(v, dtype=float)[[j - 1 for j in SIGN_TERMS]] for v in coefficients_nm])
    n = len(c)
    corr = []
    warnings: list[str] = []
    for i in range(n):
        others = np.delete(c, i, axis=0).mean(axis=0)
        scale = np.linalg.norm(others) * np.linalg.norm(c[i])
        if np.linalg.norm(others) < min_rms_nm or scale == 0:
            corr.append(float("nan"))
            continue
        corr.append(float(np.dot(others, c[i]) / scale))
    bad = [i for i, r in enumerate(corr) if r < -0.5]
    if bad:
        if n == 2:
            raise UnanalysablePhotoError(
                f"{names[0]} and {names[1]} read the part with opposite signs (low-order "
                f"terms correlate at {corr[0]:+.2f}); check --invert and the push test, "
                "then measure again"
            )
        which = bad[0]
        raise UnanalysablePhotoError(
            f"{names[which]}: reads the part with the opposite sign to the other photos "
            f"(low-order terms correlate at {corr[which]:+.2f}); check --invert and the push "
            "test for that photo, or leave it out"
        )
    if all(math.isnan(r) for r in corr):
        warnings.append(
            f"the low-order terms are below {min_rms_nm:g} nm, too small to check "
            "that all photos have the same sign"
        )
    else:
        for i, r in enumerate(corr):
            if not math.isnan(r) and r < 0.5:
                warnings.append(
                    f"{names[i]}: its low-order terms agree poorly with the other "
                    f"photos (correlation {r:+.2f}); check it is the same part, "
                    "the same way up"
                )
    return tuple(corr), tuple(warnings)


@dataclass(frozen=True)
class AveragedMeasurement:
    """The average of several measurements of one part, and their spread.

    Attributes
    ----------
    measurement : Measurement
        The averaged map with its Zernike fit and figures, on the first photo's aperture.
    photos : tuple of str
        The photos averaged, in order.
    spread_nm : (G, G) ndarray
        Per-pixel standard deviation between photos (ddof 1), NaN where fewer than two
        photos measured the pixel. Same grid as ``measurement.height_nm``.
    standard_error_nm : (G, G) ndarray
        ``spread_nm / sqrt(count)``: the uncertainty of the averaged map itself.
    count : (G, G) int ndarray
        How many photos measured each pixel.
    figure_spread_nm : dict of str to float
        Standard deviation (ddof 1) of each figure across the photos, by
        :data:`FIGURE_NAMES`.
    figure_standard_error_nm : dict of str to float
        The same divided by ``sqrt(N)``.
    sign_correlations : tuple of float
        Each photo's low-order correlation with the others (see :func:`check_signs`).
    warnings : tuple of str
    """

    measurement: object
    photos: tuple[str, ...]
    spread_nm: np.ndarray
    standard_error_nm: np.ndarray
    count: np.ndarray
    figure_spread_nm: dict[str, float]
    figure_standard_error_nm: dict[str, float]
    sign_correlations: tuple[float, ...]
    warnings: tuple[str, ...] = field(default=())

    @property
    def n_photos(self) -> int:
        return len(self.photos)

    @property
    def rms_spread_nm(self) -> float:
        """RMS over the aperture of the per-pixel spread."""
        s = self.spread_nm[np.isfinite(self.spread_nm)]
        return float(np.sqrt(np.mean(s**2))) if s.size else float("nan")

    @property
    def rms_standard_error_nm(self) -> float:
        s = self.standard_error_nm[np.isfinite(self.standard_error_nm)]
        return float(np.sqrt(np.mean(s**2))) if s.size else float("nan")


def average_measurements(
    measurements: Sequence, *, size: int | None = None, settings=None
) -> AveragedMeasurement:
    """Align, sign-check and average measurements of one part.

    Parameters
    ----------
    measurements : sequence of Measurement
        At least two, of the same part, the same way up (rotation is not corrected).
    size : int, optional
        Common grid size; by default the median map diameter of the inputs (at most 501).
    settings : MeasureSettings, optional
        For the averaged fit and figures; by default the first measurement's.

    Returns
    -------
    AveragedMeasurement

    Raises
    ------
    SettingsError
        Fewer than two measurements.
    UnanalysablePhotoError
        A photo reads with the opposite sign, or too little of the aperture is common.
    """
    from ..pipeline import measurement_from_height

    ms = list(measurements)
    if len(ms) < 2:
        raise SettingsError("--average needs at least two photos of the same part")
    names = tuple(m.photo for m in ms)
    settings = settings or ms[0].settings
    if size is None:
        diam = [2.0 * m.aperture.radius_px / m.geometry.step_px + 1 for m in ms]
        size = int(min(_MAX_GRID, max(33, round(float(np.median(diam))))))
    xu, yu = unit_grid(size)
    maps = [resample_to_unit_disk(m, size=size) for m in ms]
    n_terms = min(15, settings.n_terms)
    coefs = []
    for (h, v), name in zip(maps, names, strict=True):
        if v.sum() < 3 * n_terms:
            raise UnanalysablePhotoError(
                f"{name}: too little of the aperture was measured to average it with the others"
            )
        coefs.append(fit_zernike(h[v], xu[v], yu[v], n_terms=n_terms).coefficients_nm)
    corr, warnings = check_signs(coefs, names)

    common = np.logical_and.reduce([v for _, v in maps])
    if common.sum() < 0.5 * (np.hypot(xu, yu) <= 1).sum():
        raise UnanalysablePhotoError(
            "the photos have less than half of the aperture measured in common; check that "
            "they show the same part and that the apertures were found correctly"
        )
    stack = np.stack([_remove_piston_tilt(h, v, common, xu, yu) for h, v in maps])
    count = np.sum(np.isfinite(stack), axis=0)
    enough = count >= max(1, (len(ms) + 1) // 2)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(enough, np.nanmean(np.where(enough, stack, 0.0), axis=0), np.nan)
    two = count >= 2
    spread = np.full((size, size), np.nan)
    if np.any(two):
        spread[two] = np.nanstd(stack[:, two], axis=0, ddof=1)
    standard_error = np.where(two, spread / np.sqrt(np.maximum(count, 1)), np.nan)

    first = ms[0].aperture
    # each photo had its own carrier and visibility; the average has none of its own
    quality_fields = {"per_photo": tuple(m.quality for m in ms), "photos": len(ms)}
    # it resolves what the coarsest photo's window passed: its figures are taken over the
    # map smoothed at that resolution, as each photo's were (unsmoothed, the noise left
    # in the average's finest detail would lift its PV and B above every photo's own)
    windows = [m.quality.resolution_cycles_per_aperture for m in ms]
    windows = [w for w in windows if math.isfinite(w) and w > 0]
    if windows:
        quality_fields["resolution_cycles_per_aperture"] = min(windows)
    averaged = measurement_from_height(
        mean,
        enough,
        np.hypot(xu, yu) <= 1.0,
        aperture=first,
        geometry=grid_geometry(first, size),
        settings=settings,
        photo=f"average of {len(ms)}: " + ", ".join(names),
        quality_fields=quality_fields,
        warnings=warnings,
        height_sigma_nm=_mean_sigma(ms, stack, count, enough),
    )
    fig_spread = {}
    fig_se = {}
    for f in FIGURE_NAMES:
        values = np.array([getattr(m.figures, f) for m in ms], dtype=float)
        fig_spread[f] = float(np.std(values, ddof=1))
        fig_se[f] = fig_spread[f] / math.sqrt(len(ms))
    return AveragedMeasurement(
        measurement=averaged,
        photos=names,
        spread_nm=spread,
        standard_error_nm=standard_error,
        count=count,
        figure_spread_nm=fig_spread,
        figure_standard_error_nm=fig_se,
        sign_correlations=corr,
        warnings=warnings,
    )
