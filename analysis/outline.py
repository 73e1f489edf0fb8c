"""The part's outline when it is not a circle seen square-on: found from where the fringes are.

``find_part_aperture`` is the pipeline's aperture finder. It asks the circle finder
(``aperture.find_aperture``) first, and keeps its answer whenever the lit region's
outline is a circle; only when the circle finder refuses, or the outline is clearly
something else (an ellipse, a rectangle, a polygon), does it fit that shape instead.

1. The photo is binned to about 512 pixels on its long side, and the fringes' local
   strength is taken as the RMS of the photo about its local mean (both Gaussian, about
   half a fringe wide). The lit region is where that strength is above halfway between
   the two levels Otsu's threshold separates, its largest piece, holes filled. Against
   a dark surround the edge is then drawn on the brightness (smoothed over half a
   fringe, which keeps a straight edge's 50 % point where it is), halfway between the
   surround's level and the light just inside the edge (the region's brightness
   smoothed widely, so uneven light does not move the edge); against a grey one, on
   the strength.
2. That edge (``skimage.measure.find_contours``) is fitted by each shape in turn by
   least squares on the signed distance of its points to the shape's edge, with a
   robust (soft-L1) loss so the corners the smoothing rounds weigh little: an ellipse
   and a rectangle start from the region's centroid and second moments, a polygon from
   ``skimage.measure.approximate_polygon``.
3. The simplest shape whose median distance from the outline is within a pixel or half a
   percent of the part's size, plus a tenth of a fringe period (where fringes run along
   the edge, the smoothed brightness' halfway point wavers with them), wins: circle,
   ellipse, rectangle, polygon. An ellipse within 2 % of round is a circle.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import ndimage as ndi
from scipy.optimize import least_squares

from .aperture import Aperture, find_aperture
from .errors import UnanalysablePhotoError
from .shapes import Ellipse, Polygon, Rectangle, Shape

__all__ = ["find_outline", "find_part_aperture"]

_WORK_LONG_SIDE = 512
_ROUND = 0.98  # an ellipse with b / a above this is a circle seen square-on


def find_part_aperture(image: np.ndarray, *, photo_name: str = "the photo") -> Aperture:
    """The part's aperture: the circle finder's circle, or the outline that fits better.

    Raises
    ------
    UnanalysablePhotoError
        When neither the circle finder nor the outline finds the part (the circle
        finder's message, which says how to give the aperture by hand).
    """
    try:
        circle = find_aperture(image, photo_name=photo_name)
    except UnanalysablePhotoError as refusal:
        try:
            found = _outline(image)
        except UnanalysablePhotoError:
            raise refusal from None
        if found.shape is None:  # round after all: the circle finder's refusal stands
            raise
        return Aperture.of_shape(found.shape)
    try:
        found = _outline(image)
    except UnanalysablePhotoError:
        return circle
    if found.shape is None:
        return circle
    # the circle finder's circle stands unless the outline leaves it clearly
    off = np.abs(np.hypot(found.x - circle.center_x_px, found.y - circle.center_y_px)
                 - circle.radius_px)
    if float(np.median(off)) <= 2.0 * found.miss_px:
        return circle
    return Aperture.of_shape(found.shape)


@dataclass(frozen=True)
class _Found:
    shape: Shape | None  # None: the outline is round
    miss_px: float  # median distance of the outline's points from the shape (photo px)
    x: np.ndarray  # the outline's points, photo px
    y: np.ndarray


def find_outline(image: np.ndarray) -> Shape | None:
    """The lit region's outline as a shape, or None when it is a circle (see module doc).

    Raises
    ------
    UnanalysablePhotoError
        When no lit region with a clear outline is found.
    """
    return _outline(image).shape


def _outline(image: np.ndarray) -> _Found:
    from skimage.filters import threshold_otsu
    from skimage.measure import find_contours, label, regionprops

    pixels = np.asarray(image, dtype=np.float32)
    if pixels.ndim != 2 or min(pixels.shape) < 32:
        raise UnanalysablePhotoError("the image is too small to hold a part")
    factor = max(1, int(round(max(pixels.shape) / _WORK_LONG_SIDE)))
    rows, cols = pixels.shape[0] // factor, pixels.shape[1] // factor
    work = pixels[:rows * factor, :cols * factor].reshape(rows, factor, cols, factor).mean(
        axis=(1, 3))
    if not np.all(np.isfinite(work)) or np.ptp(work) < 1e-6:
        raise UnanalysablePhotoError("the photo is blank")
    period = _fringe_period(work)
    sigma = max(1.5, 0.5 * period)
    local = ndi.gaussian_filter(work, sigma)
    strength = np.sqrt(np.maximum(ndi.gaussian_filter((work - local) ** 2, sigma), 0.0))
    t = threshold_otsu(strength)
    hi, lo = strength > t, strength <= t
    if not hi.any() or not lo.any():
        raise UnanalysablePhotoError("no lit region stands out")
    level = 0.5 * (float(np.median(strength[hi])) + float(np.median(strength[lo])))
    labels = label(strength > level)
    regions = regionprops(labels)
    if not regions:
        raise UnanalysablePhotoError("no lit region stands out")
    biggest = max(regions, key=lambda r: r.area)
    if biggest.area < 0.02 * rows * cols:
        raise UnanalysablePhotoError("the lit region is too small")
    mask = ndi.binary_fill_holes(labels == biggest.label)
    inside, outside = float(np.median(local[mask])), float(np.median(local[~mask]))
    if outside < inside / 3.0:  # a dark surround: the brightness's own 50 % point
        # over the light as it falls just inside the edge, so uneven light does not
        # move the edge toward the bright side
        wide = 0.15 * math.sqrt(float(mask.sum()))
        core = ndi.binary_erosion(mask, iterations=int(4 * sigma) + 2)
        if core.sum() < 0.1 * mask.sum():
            core = mask
        light = (ndi.gaussian_filter(np.where(core, local, 0.0), wide)
                 / np.maximum(ndi.gaussian_filter(core.astype(float), wide), 1e-6))
        feature = (local - outside) / np.maximum(light - outside, 1e-6)
        level = 0.5
    else:
        feature = strength
    near = ndi.binary_dilation(mask, iterations=int(3 * sigma) + 2)
    field = np.where(near, feature, np.minimum(feature, level))
    contours = find_contours(np.pad(field, 1, constant_values=float(field.min())), level)
    outline = max(contours, key=len) - 1.0  # (row, col) of the binned work image
    y, x = outline[:, 0], outline[:, 1]
    size = math.sqrt(float(mask.sum()) / math.pi)
    # the smoothed brightness' 50 % point wavers by about V P / 2 pi where fringes run
    # along the edge (a half-fringe cut off by the edge is averaged in): allow for it
    tolerance = max(1.0, 0.005 * size) + 0.1 * period

    cx, cy, major, minor, angle = _moments(mask)
    # a uniform ellipse has variance a^2 / 4 along its axis (common practice)
    start = Ellipse(cx, cy, 2.0 * major, 2.0 * minor, angle)
    fitted_ellipse, miss_e = _fit(start, x, y, tolerance)
    offset = (factor - 1) / 2.0
    x_photo, y_photo = factor * x + offset, factor * y + offset
    if miss_e <= tolerance and fitted_ellipse.b_px / fitted_ellipse.a_px >= _ROUND:
        return _Found(None, factor * miss_e, x_photo, y_photo)
    candidates = [(fitted_ellipse, miss_e)]
    # and a uniform W x H rectangle W^2 / 12 along its width (common practice)
    rect_start = Rectangle(cx, cy, math.sqrt(12.0) * major, math.sqrt(12.0) * minor, angle)
    candidates.append(_fit(rect_start, x, y, tolerance))
    best = next((c for c in candidates if c[1] <= tolerance), None)
    if best is None:
        corners = _polygon_corners(x, y, tolerance)
        if corners is not None:
            poly, miss_p = _fit(corners, x, y, tolerance)
            if miss_p <= tolerance:
                best = (poly, miss_p)
    if best is None:
        raise UnanalysablePhotoError("the lit region's outline is no circle, ellipse, "
                                     "rectangle or polygon")
    # binned pixel (i, j) is centred on photo pixel (factor j + (factor - 1) / 2, ...)
    return _Found(_scaled(best[0], factor, offset), factor * best[1], x_photo, y_photo)


def _fringe_period(work: np.ndarray) -> float:
    """The tilt fringes' period in binned pixels from the spectrum's strongest peak."""
    spectrum = np.abs(np.fft.rfft2(work - work.mean()))
    fy = np.fft.fftfreq(work.shape[0])[:, None]
    fx = np.fft.rfftfreq(work.shape[1])[None, :]
    f = np.hypot(fx, fy)
    band = (f >= 4.0 / min(work.shape)) & (f <= 0.4)
    if not band.any():
        return 4.0
    weighted = np.where(band, spectrum * f, 0.0)
    peak = np.unravel_index(int(np.argmax(weighted)), weighted.shape)
    return float(np.clip(1.0 / f[peak], 2.5, min(work.shape) / 4.0))


def _params(shape: Shape) -> np.ndarray:
    if isinstance(shape, Polygon):
        return np.asarray(shape.corners_px, dtype=float).ravel()
    return np.array(list(shape.params().values()), dtype=float)


def _rebuild(like: Shape, p: np.ndarray) -> Shape:
    if isinstance(like, Polygon):
        return Polygon(tuple((float(a), float(b)) for a, b in p.reshape(-1, 2)))
    return type(like)(*(float(v) for v in p))


def _fit(start: Shape, x: np.ndarray, y: np.ndarray, tolerance: float) -> tuple[Shape, float]:
    """The shape that fits the outline points best (soft-L1 on the signed distance), and
    the median distance of the points from it."""

    def residual(p):
        return _rebuild(start, p).edge_distance_px(x, y)

    try:
        fit = least_squares(residual, _params(start), loss="soft_l1", f_scale=tolerance,
                            max_nfev=200)
        shape = _rebuild(start, fit.x)
    except (ValueError, ZeroDivisionError, np.linalg.LinAlgError):
        return start, math.inf
    return shape, float(np.median(np.abs(shape.edge_distance_px(x, y))))


def _moments(mask: np.ndarray) -> tuple[float, float, float, float, float]:
    """The region's centroid, the standard deviations along its major and minor axes,
    and the major axis' angle counter-clockwise as seen."""
    yy, xx = np.nonzero(mask)
    cx, cy = float(xx.mean()), float(yy.mean())
    cov = np.cov(np.vstack([xx - cx, cy - yy]))  # y up
    values, vectors = np.linalg.eigh(cov)
    angle = math.degrees(math.atan2(vectors[1, 1], vectors[0, 1]))
    return cx, cy, math.sqrt(values[1]), math.sqrt(max(values[0], 1e-9)), angle


def _polygon_corners(x: np.ndarray, y: np.ndarray, tolerance: float) -> Polygon | None:
    from skimage.measure import approximate_polygon

    points = approximate_polygon(np.column_stack([x, y]), tolerance=2.0 * tolerance)
    if len(points) > 2 and np.allclose(points[0], points[-1]):
        points = points[:-1]
    if not 3 <= len(points) <= 12:
        return None
    return Polygon(tuple((float(a), float(b)) for a, b in points))


def _scaled(shape: Shape, factor: int, offset: float) -> Shape:
    """A shape found on the binned image, in photo pixels."""
    if isinstance(shape, Polygon):
        return Polygon(tuple((factor * a + offset, factor * b + offset)
                             for a, b in shape.corners_px))
    p = shape.params()
    keys = list(p)
    values = [factor * p[k] + (offset if k in ("center_x_px", "center_y_px") else 0.0)
              if k != "angle_deg" else p[k] for k in keys]
    return type(shape)(*values)
