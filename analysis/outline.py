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
4. A straight side is then placed on the full photo (``_refine_sides``): where fringes
   run along a side, the smoothed brightness' halfway point sits up to a fringe's
   ``V P / 2 pi`` off, the same on the whole side, and the demodulation's edge model
   would bend the fringes there. The photo's mean profile across the side (pixels
   binned by their distance from it, away from the corners) is fitted by a soft step
   (an error function) times the light and the fringes as they run across the side
   (``a + b d + c cos k d + s sin k d``, ``k`` from the fringes' period and direction),
   and the side moved to the step's 50 % point.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace

import numpy as np
from scipy import ndimage as ndi
from scipy.optimize import least_squares

from .aperture import Aperture, Exclusion, _kasa_circle, find_aperture
from .errors import UnanalysablePhotoError
from .shapes import Annulus, CutCircle, Ellipse, Polygon, Rectangle, Shape

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
    frame = np.shape(image)[:2]
    try:
        circle = find_aperture(image, photo_name=photo_name)
    except UnanalysablePhotoError as refusal:
        try:
            found = _outline(image)
        except UnanalysablePhotoError:
            raise refusal from None
        # round after all, or a round part whose only "flats" are the photo's frame
        # cutting it: the circle finder's refusal (too much of the rim outside) stands
        if found.shape is None or _cut_only_by_frame(found.shape, frame):
            raise
        return _with_hole(Aperture.of_shape(found.shape), found.hole)
    try:
        found = _outline(image)
    except UnanalysablePhotoError:
        return circle
    if _cut_only_by_frame(found.shape, frame):
        found = replace(found, shape=None)  # the frame cuts the rim; the part is round
    if found.shape is None:
        return _with_bites(_with_hole(circle, found.hole), found, image)
    if isinstance(found.shape, CutCircle):
        # flats are straight runs well inside the circle, which the circle finder's
        # robust fit passes over: its circle, placed on the full photo, with the flats
        return _with_hole(Aperture.of_shape(_on_circle(found.shape, circle)), found.hole)
    # the circle finder's circle stands unless the outline leaves it clearly
    off = np.abs(np.hypot(found.x - circle.center_x_px, found.y - circle.center_y_px)
                 - circle.radius_px)
    if float(np.median(off)) <= 2.0 * found.miss_px:
        return _with_bites(_with_hole(circle, found.hole), found, image)
    return _with_hole(Aperture.of_shape(found.shape), found.hole)


# A flat this close (px) to the photo's border, and this close (degrees) to square with
# it, is the frame cutting the part, not a flat ground on it: the two cannot be told
# apart, and a round part photographed past the frame is far the likelier.
_FRAME_PX = 2.0
_FRAME_DEG = 1.0


def _cut_only_by_frame(shape: Shape | None, frame: tuple[int, int]) -> bool:
    """Whether ``shape`` is a cut circle whose every flat lies along the photo's frame
    (``frame``: rows, columns): a round part the frame cuts, not flats on the part."""
    if not isinstance(shape, CutCircle):
        return False
    rows, cols = frame
    # the frame's four sides, each as an outward normal (degrees, y up) and its distance
    # from the circle's centre (pixel centres from 0, the frame's edge half a pixel out)
    sides = ((0.0, cols - 0.5 - shape.center_x_px), (180.0, shape.center_x_px + 0.5),
             (90.0, shape.center_y_px + 0.5), (270.0, rows - 0.5 - shape.center_y_px))
    return all(
        any(abs((angle - side + 180.0) % 360.0 - 180.0) <= _FRAME_DEG
            and abs(dist - place) <= _FRAME_PX for side, place in sides)
        for angle, dist in shape.flats)


def _on_circle(cut: CutCircle, circle: Aperture) -> CutCircle:
    """The cut circle on the circle finder's circle where the two agree (within 1.5 % of
    the radius), its flats' lines left where they are; else the cut circle as found."""
    cx, cy, r = circle.center_x_px, circle.center_y_px, circle.radius_px
    if (math.hypot(cx - cut.center_x_px, cy - cut.center_y_px) > 0.015 * r
            or abs(r - cut.radius_px) > 0.015 * r):
        return cut
    flats = []
    for angle, dist in cut.flats:
        a = math.radians(angle)
        # the same line about the new centre (normal (cos a, sin a), y up)
        flats.append((angle, dist + math.cos(a) * (cut.center_x_px - cx)
                      + math.sin(a) * (cy - cut.center_y_px)))
    if not all(0.0 < d < r for _, d in flats):
        return cut
    return CutCircle(cx, cy, r, tuple(flats))


def _with_hole(aperture: Aperture, hole: tuple[float, float, float] | None) -> Aperture:
    """The aperture with a dark hole found in it: an annulus when the part is a circle
    and the hole sits on its centre, else the hole left out as an exclusion."""
    if hole is None:
        return aperture
    hx, hy, hr = hole
    off = math.hypot(hx - aperture.center_x_px, hy - aperture.center_y_px)
    if aperture.shape is None and off <= 0.02 * aperture.radius_px + 2.0 \
            and hr < 0.9 * aperture.radius_px:
        return Aperture.of_shape(Annulus(aperture.center_x_px, aperture.center_y_px,
                                         aperture.radius_px, hr), aperture.exclusions)
    return replace(aperture, exclusions=aperture.exclusions + (Exclusion(hx, hy, hr),))


# A chip: a dark bite into a round part's rim, reaching at least this share of the
# radius inside the rim band (the outer 2 %, where a soft edge and fringes running
# along it move the edge's 50 % point) and at least this share of the disk's area.
# On the 60 dev photos of tests/refset (dark surrounds, hard to rolled edges, 12 to 40
# fringes) nothing but 1- and 2-pixel specks of the binned image lay beyond the band.
_RIM_BAND = 0.02
_BITE_DEPTH = 0.03
_BITE_AREA = 2e-4


def _with_bites(aperture: Aperture, found: _Found, image: np.ndarray) -> Aperture:
    """The round aperture with each chip in its rim left out as an exclusion.

    A chip is a dark bite into the lit disk from its rim, inside the circle the circle
    finder fitted over the rest of the rim (its robust fit passes over a bite as over a
    flat), where the photo is about as dark as the surround: under a tenth of the way
    to the part's light. A broad dark fringe reaching the rim keeps more: 0.32 to 0.43
    of the way on the refset's photos of few, bent and closed fringes (tests/refset,
    seeds 200-214 of each), where chips painted as dark as the surround read 0.00.
    Left in, the demodulation reads the dark bite as fringes gone flat, and the error
    spreads a window's width into the part around it: on refset seed 4 a chip 8 % of
    the radius deep read B 115 nm on a surface whose B is 38 nm. Each bite, out to the
    rim, is covered by a circle centred on the rim at the bite's middle, one binned
    pixel and a tenth of its own radius wider than the bite. Against a grey surround
    (lit, without fringes) none is looked for: the fringes' strength marks the part
    there, and speckle makes it dip at the rim too.
    """
    from skimage.measure import label

    if found.lit is None or aperture.shape is not None:
        return aperture
    f = found.factor
    off = (f - 1) / 2.0
    cx, cy = (aperture.center_x_px - off) / f, (aperture.center_y_px - off) / f
    r = aperture.radius_px / f
    rows, cols = found.lit.shape
    yy, xx = np.mgrid[0:rows, 0:cols].astype(np.float64)
    rho = np.hypot(xx - cx, yy - cy) / r
    pieces = label((rho < 1.0 - _RIM_BAND) & ~found.lit)
    if pieces.max() == 0:
        return aperture
    dark, light = found.levels
    area = np.bincount(pieces.ravel())
    reach = ndi.minimum(rho, pieces, index=np.arange(1, area.size))
    touch = ndi.maximum(rho, pieces, index=np.arange(1, area.size))
    bites = []
    for n in range(1, area.size):
        if (area[n] < _BITE_AREA * math.pi * r * r or 1.0 - reach[n - 1] < _BITE_DEPTH
                or touch[n - 1] < 1.0 - _RIM_BAND - 1.5 / r):  # a hole inside, not a bite
            continue
        sel = pieces == n
        core = ndi.binary_erosion(sel, iterations=2)
        if core.sum() < 4:
            continue
        if _core_level(image, core, f) - dark > 0.1 * (light - dark):
            continue
        px, py = xx[sel] - cx, yy[sel] - cy
        angle = math.atan2(float(py.mean()), float(px.mean()))
        ex, ey = r * math.cos(angle), r * math.sin(angle)
        # the bite runs on out to the rim along each of its pixels' rays
        t = np.arctan2(py, px)
        span = max(float(np.hypot(px - ex, py - ey).max()),
                   float(np.hypot(r * np.cos(t) - ex, r * np.sin(t) - ey).max()))
        radius = 1.1 * span + 1.0
        bites.append(Exclusion(f * (cx + ex) + off, f * (cy + ey) + off, f * radius))
    if not bites:
        return aperture
    return aperture.with_exclusions(tuple(aperture.exclusions) + tuple(bites))


@dataclass(frozen=True)
class _Found:
    shape: Shape | None  # None: the outline is round
    miss_px: float  # median distance of the outline's points from the shape (photo px)
    x: np.ndarray  # the outline's points, photo px
    y: np.ndarray
    hole: tuple[float, float, float] | None = None  # a dark round hole: x, y, r (photo px)
    lit: np.ndarray | None = None  # where the part is lit, on the binned work image
    factor: int = 1  # the work image's binning
    levels: tuple[float, float] = (0.0, 1.0)  # the surround's light and the part's


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
    period, wave = _fringe_period(work)
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
    hole = None
    if outside < inside / 3.0:
        hole = _dark_hole(pixels, factor, labels == biggest.label, mask, local, sigma,
                          inside, outside, (factor * period, wave))
    near = ndi.binary_dilation(mask, iterations=int(3 * sigma) + 2)
    field = np.where(near, feature, np.minimum(feature, level))
    # against a grey surround the fringes' strength, not the light, marks the part, and
    # it dips with speckle too: a chip is looked for against a dark one only
    lit = field > level if outside < inside / 3.0 else None
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
    fitted: list = []

    def polygon_fit() -> tuple[Polygon, float] | None:
        # fitted only when asked: a round part, the common case, never needs it
        if not fitted:
            fitted.append(_polygon_fit(x, y, tolerance))
        return fitted[0]

    def beaten(shape: Shape, miss: float) -> bool:
        # a smooth curve's outline hugs its shape to a fraction of a pixel; a polygon's
        # straight sides fitted by an ellipse (a near-round octagon) or a rectangle (a
        # pentagon) leave a pixel or more, which the polygon's own fit does not
        if miss <= 0.5:
            return False
        polygon = polygon_fit()
        if polygon is None or polygon[1] >= 0.5 * miss:
            return False
        return not (isinstance(shape, Rectangle) and len(polygon[0].corners_px) == 4)

    cut = _cut_fit(x, y, tolerance)
    if cut is not None and cut[1] <= 0.5 * tolerance and not _polygon_instead(
            polygon_fit(), cut[1]):
        shape = _scaled(cut[0], factor, offset)
        if outside < inside / 3.0:
            shape = _refine_flats(pixels, shape, factor * period, wave,
                                  max_move_px=factor * (tolerance + 1.0))
        return _Found(shape, factor * cut[1], x_photo, y_photo, hole, lit, factor,
                      (outside, inside))
    if (miss_e <= tolerance and fitted_ellipse.b_px / fitted_ellipse.a_px >= _ROUND
            and not beaten(fitted_ellipse, miss_e)):
        return _Found(None, factor * miss_e, x_photo, y_photo, hole, lit, factor,
                      (outside, inside))
    candidates = [(fitted_ellipse, miss_e)]
    # and a uniform W x H rectangle W^2 / 12 along its width (common practice)
    rect_start = Rectangle(cx, cy, math.sqrt(12.0) * major, math.sqrt(12.0) * minor, angle)
    candidates.append(_fit(rect_start, x, y, tolerance))
    # the median may hide a side the shape does not have (a pentagon's fifth side along
    # a rectangle's corner): most of the outline must lie near the shape too
    best = next((c for c in candidates
                 if c[1] <= tolerance and _far_share(c[0], x, y, tolerance) <= 0.05
                 and not beaten(*c)), None) or polygon_fit()
    if best is None:
        raise UnanalysablePhotoError("the lit region's outline is no circle, ellipse, "
                                     "rectangle or polygon")
    # binned pixel (i, j) is centred on photo pixel (factor j + (factor - 1) / 2, ...)
    shape = _scaled(best[0], factor, offset)
    if outside < inside / 3.0 and isinstance(shape, (Rectangle, Polygon)):
        shape = _refine_sides(pixels, shape, factor * period, wave,
                              max_move_px=factor * (tolerance + 1.0))
    return _Found(shape, factor * best[1], x_photo, y_photo, hole, lit, factor,
                  (outside, inside))


def _dark_hole(pixels, factor, region, mask, local, sigma, inside, outside, fringes):
    """A round hole in the lit region, dark as the surround: ``(x, y, r)`` in photo px
    (its 50 % edge, from its area), or None.

    A hole must be as dark as the photo outside the part: the dark middle of a broad
    fringe (closed rings) keeps a tenth or more of the light and is not taken for one.
    """
    from skimage.measure import label, regionprops

    holes = label(mask & ~region)
    if holes.max() == 0:
        return None
    biggest = max(regionprops(holes), key=lambda r: r.area)
    if biggest.area < 0.003 * mask.sum():
        return None
    # the hole's 50 % edge: where the brightness (smoothed over half a fringe) is under
    # halfway between the surround and the light around the hole
    found = holes == biggest.label
    reach = int(3 * sigma) + 3
    grown = ndi.binary_dilation(found, iterations=reach)
    band = ndi.binary_dilation(found, iterations=2 * reach) & ~grown & region
    if band.sum() < 10:
        return None
    around = float(np.median(local[band]))
    dark = ndi.binary_fill_holes(grown & (local < outside + 0.5 * (around - outside)))
    pieces = label(dark)
    if pieces.max() == 0:
        return None
    dark = pieces == max(regionprops(pieces), key=lambda r: r.area).label
    core = ndi.binary_erosion(dark, iterations=2)
    if core.sum() < 10:
        return None
    if _core_level(pixels, core, factor) - outside > 0.05 * (inside - outside):
        return None
    yy, xx = np.nonzero(dark)
    r = math.sqrt(dark.sum() / math.pi)
    cx, cy = float(xx.mean()), float(yy.mean())
    # round: the circle of that area holds the region (common practice: area ratio)
    if np.mean(np.hypot(xx - cx, yy - cy) <= r + 1.0) < 0.95:
        return None
    offset = (factor - 1) / 2.0
    return _hole_edge(pixels, factor * cx + offset, factor * cy + offset, factor * r,
                      reach=factor * sigma * 3.0 + 4.0, fringes=fringes)


def _core_level(pixels, core: np.ndarray, factor: int) -> float:
    """The photo's median over a region of the binned work image (each binned pixel's
    middle photo pixel): how dark a hole or a chip is, unsmoothed."""
    rows, cols = np.nonzero(core)
    return float(np.median(np.asarray(pixels, dtype=np.float64)[
        rows * factor + factor // 2, cols * factor + factor // 2]))


def _hole_edge(pixels, cx: float, cy: float, r: float, *, reach: float, fringes):
    """A round hole's 50 % edge on the full photo: in each of 24 sectors the mean
    profile across the edge (a quarter pixel a bin) is fitted by a soft step times the
    light and the fringes as they run across it (as ``_side_step`` does), and the circle
    fitted to the 24 edge points by linear least squares; the starting circle where
    that fails."""
    from scipy.special import erfc

    span = int(r + reach) + 2
    x0, y0 = max(int(cx) - span, 0), max(int(cy) - span, 0)
    near = np.asarray(pixels[y0:int(cy) + span + 1, x0:int(cx) + span + 1], dtype=np.float64)
    gy, gx = np.mgrid[0:near.shape[0], 0:near.shape[1]]
    dx, dy = gx + x0 - cx, gy + y0 - cy
    dist = np.hypot(dx, dy) - r
    sector = ((np.arctan2(dy, dx) + np.pi) / (2 * np.pi) * 24).astype(int) % 24
    keep = np.abs(dist) <= reach
    angles, edges = [], []
    for k in range(24):
        sel = keep & (sector == k)
        if sel.sum() < 50:
            continue
        bins = np.floor((dist[sel] + reach) * 4.0).astype(int)
        count = np.bincount(bins)
        total = np.bincount(bins, weights=near[sel])
        ok = count > 0
        d = (np.flatnonzero(ok) + 0.5) / 4.0 - reach
        prof = total[ok] / count[ok]
        theta = (k + 0.5) / 24 * 2 * np.pi - np.pi
        period, wave = fringes
        kf = 2 * np.pi * abs(wave[0] * math.cos(theta) + wave[1] * math.sin(theta)) / period

        def residual(p, d=d, prof=prof, kf=kf):
            step = 0.5 * erfc((p[0] - d) / (p[1] * math.sqrt(2.0)))
            cols = [np.ones_like(d), step, step * d]
            if kf * reach > np.pi:
                cols += [step * np.cos(kf * d), step * np.sin(kf * d)]
            m = np.stack(cols, axis=1)
            coef = np.linalg.lstsq(m, prof, rcond=None)[0]
            return m @ coef - prof

        try:
            fit = least_squares(residual, [0.0, 1.5],
                                bounds=([-0.8 * reach, 0.3], [0.8 * reach, 8.0]))
        except (ValueError, np.linalg.LinAlgError):
            continue
        if fit.success and abs(fit.x[0]) < 0.75 * reach:
            angles.append((k + 0.5) / 24 * 2 * np.pi - np.pi)
            edges.append(r + fit.x[0])
    if len(angles) < 12:
        return cx, cy, r
    t, e = np.asarray(angles), np.asarray(edges)
    design = np.stack([np.ones_like(t), np.cos(t), np.sin(t)], axis=1)
    radius, ddx, ddy = np.linalg.lstsq(design, e, rcond=None)[0]
    return cx + float(ddx), cy + float(ddy), float(radius)


def _fringe_period(work: np.ndarray) -> tuple[float, tuple[float, float]]:
    """The tilt fringes' period in binned pixels from the spectrum's strongest peak, and
    the unit vector ``(x, y)`` (photo axes) across the fringes."""
    spectrum = np.abs(np.fft.rfft2(work - work.mean()))
    fy = np.fft.fftfreq(work.shape[0])[:, None]
    fx = np.fft.rfftfreq(work.shape[1])[None, :]
    f = np.hypot(fx, fy)
    band = (f >= 4.0 / min(work.shape)) & (f <= 0.4)
    if not band.any():
        return 4.0, (1.0, 0.0)
    weighted = np.where(band, spectrum * f, 0.0)
    peak = np.unravel_index(int(np.argmax(weighted)), weighted.shape)
    wx, wy = float(fx[0, peak[1]]), float(fy[peak[0], 0])
    norm = math.hypot(wx, wy)
    return (float(np.clip(1.0 / f[peak], 2.5, min(work.shape) / 4.0)),
            (wx / norm, wy / norm))


def _sides(shape: Shape) -> np.ndarray:
    """The outline's corners in order, photo ``(x, y)``, as an (n, 2) array."""
    if isinstance(shape, Rectangle):
        return shape.corners()
    return np.asarray(shape.corners_px, dtype=float)


def _side_step(pixels: np.ndarray, a: np.ndarray, b: np.ndarray, inward: np.ndarray,
               period: float, wave: tuple[float, float], reach: float,
               part: tuple[float, float] = (0.1, 0.9)) -> float | None:
    """How far (px, positive outward) the photo's 50 % edge lies from the side ``a``-``b``.

    The pixels near the side, between the shares ``part`` of its length (away from the
    corners), are binned by their signed distance from it (a quarter pixel), and the mean
    profile fitted by ``bg + (p + q d + c cos k d + s sin k d) E(d)``, ``E`` a soft step
    ``erfc((d - d0) / (w sqrt 2)) / 2``. ``None`` when the side is too short or the fit
    does not settle on an edge.
    """
    from scipy.special import erfc

    along = b - a
    length = float(np.hypot(*along))
    lo, hi = part
    if (hi - lo) * length < 16.0:
        return None
    t = along / length
    n = -inward  # outward
    inner, outer = 3.0 * period + 6.0, 10.0
    ends = np.array([a + s * length * t + dd * n for s in (lo, hi) for dd in (-inner, outer)])
    x0, y0 = np.floor(ends.min(axis=0)).astype(int)
    x1, y1 = np.ceil(ends.max(axis=0)).astype(int) + 1
    x0, y0 = max(x0, 0), max(y0, 0)
    x1, y1 = min(x1, pixels.shape[1]), min(y1, pixels.shape[0])
    if x1 - x0 < 3 or y1 - y0 < 3:
        return None
    yy, xx = np.mgrid[y0:y1, x0:x1].astype(np.float64)
    rel_x, rel_y = xx - a[0], yy - a[1]
    s_along = rel_x * t[0] + rel_y * t[1]
    d = rel_x * n[0] + rel_y * n[1]
    sel = ((s_along >= lo * length) & (s_along <= hi * length)
           & (d >= -inner) & (d <= outer))
    if sel.sum() < 200:
        return None
    bins = np.floor(d[sel] * 4.0).astype(np.int64)
    bins -= bins.min()
    count = np.bincount(bins)
    total = np.bincount(bins, weights=pixels[y0:y1, x0:x1][sel].astype(np.float64))
    keep = count > 0
    dist = (np.flatnonzero(keep) + 0.5) / 4.0 + float(np.floor(d[sel].min() * 4.0)) / 4.0
    profile = total[keep] / count[keep]
    weight = np.sqrt(count[keep].astype(np.float64))
    # the fringes' frequency across the side: none where they cross it square-on
    k = 2.0 * math.pi * abs(wave[0] * n[0] + wave[1] * n[1]) / period
    wavy = k * inner > math.pi

    def design(d0, w):
        step = 0.5 * erfc((dist - d0) / (w * math.sqrt(2.0)))
        cols = [np.ones_like(dist), step, (dist - d0) * step]
        if wavy:
            cols += [np.cos(k * dist) * step, np.sin(k * dist) * step]
        return np.stack(cols, axis=1)

    def residual(p):
        m = design(*p)
        coef = np.linalg.lstsq(m * weight[:, None], profile * weight, rcond=None)[0]
        return (m @ coef - profile) * weight

    try:
        fit = least_squares(residual, [0.0, 1.5], bounds=([-reach, 0.3], [reach, 8.0]),
                            max_nfev=100)
    except (ValueError, np.linalg.LinAlgError):
        return None
    d0, w = (float(v) for v in fit.x)
    m = design(d0, w)
    coef = np.linalg.lstsq(m * weight[:, None], profile * weight, rcond=None)[0]
    if not fit.success or coef[1] <= 0 or abs(d0) >= 0.95 * reach:
        return None  # no dark surround beyond the side, or no settled edge
    return d0


def _side_move(pixels: np.ndarray, a: np.ndarray, b: np.ndarray, inward: np.ndarray,
               period: float, wave: tuple[float, float], reach: float,
               part: tuple[float, float] = (0.1, 0.9)) -> tuple[float, float]:
    """How far (px, outward) the middle of side ``a``-``b`` lies from the photo's 50 %
    edge, and its turn (outward move per px along it), from each half of ``part``
    alone; the turn NaN when a half is not found (the whole side then), the move 0 when
    no edge is."""
    lo, hi = part
    mid = 0.5 * (lo + hi)
    first = _side_step(pixels, a, b, inward, period, wave, reach, (lo, mid))
    second = _side_step(pixels, a, b, inward, period, wave, reach, (mid, hi))
    if first is not None and second is not None:
        length = float(np.hypot(*(b - a)))
        return 0.5 * (first + second), (second - first) / (0.5 * (hi - lo) * length)
    whole = _side_step(pixels, a, b, inward, period, wave, reach, part)
    return (0.0 if whole is None else whole), math.nan


def _refine_sides(pixels: np.ndarray, shape: Shape, period: float,
                  wave: tuple[float, float], *, max_move_px: float) -> Shape:
    """The rectangle or polygon with each straight side moved to the photo's 50 % edge
    (step 4 of the module doc); a side whose edge is not found stays where it was."""
    corners = _sides(shape)
    count = len(corners)
    centre = corners.mean(axis=0)
    moves = np.zeros(count)  # the outward move of each side's middle
    slopes = np.full(count, np.nan)  # and its turn (outward move per px along it)
    normals = np.zeros((count, 2))
    lengths = np.zeros(count)
    for i in range(count):
        a, b = corners[i], corners[(i + 1) % count]
        lengths[i] = max(float(np.hypot(*(b - a))), 1e-9)
        t = (b - a) / lengths[i]
        inward = np.array([-t[1], t[0]])
        if np.dot(centre - a, inward) < 0:
            inward = -inward
        normals[i] = -inward
        moves[i], slopes[i] = _side_move(pixels, a, b, inward, period, wave, max_move_px)
    if not np.any(moves) and not np.any(np.isfinite(slopes)):
        return shape
    if isinstance(shape, Rectangle):
        # corners run (+w,+h), (-w,+h), (-w,-h), (+w,-h): sides +v, -u, -v, +u. Going
        # round the corners that way, a side whose far end stands further out has
        # turned the part clockwise as seen
        found = np.isfinite(slopes)
        turn = 0.0
        if found.any():
            w = lengths[found] ** 2
            turn = -math.degrees(math.atan(float(np.sum(w * slopes[found]) / np.sum(w))))
        grow_h, grow_w = moves[0] + moves[2], moves[1] + moves[3]
        shift = 0.5 * ((moves[0] - moves[2]) * normals[0] + (moves[3] - moves[1]) * normals[3])
        return Rectangle(shape.center_x_px + float(shift[0]),
                         shape.center_y_px + float(shift[1]),
                         shape.width_px + float(grow_w), shape.height_px + float(grow_h),
                         shape.angle_deg + turn)
    # a polygon: each side turned about its middle, each corner where two sides meet
    for i in range(count):
        if np.isfinite(slopes[i]):
            direction = (corners[(i + 1) % count] - corners[i]) / lengths[i]
            normals[i] = normals[i] - slopes[i] * direction
            normals[i] /= np.hypot(*normals[i])
    mids = np.array([0.5 * (corners[i] + corners[(i + 1) % count]) for i in range(count)])
    offsets = np.einsum("ij,ij->i", normals, mids) + moves
    new = []
    for i in range(count):
        j = (i - 1) % count  # the side ending at corner i
        m = np.array([normals[j], normals[i]])
        if abs(float(np.linalg.det(m))) < 0.2:  # sides within ~12 deg of one line
            new.append(corners[i] + 0.5 * (moves[i] * normals[i] + moves[j] * normals[j]))
        else:
            new.append(np.linalg.solve(m, [offsets[j], offsets[i]]))
    if np.max(np.hypot(*(np.asarray(new) - corners).T)) > 3.0 * max_move_px:
        return shape  # the sides' moves do not make a polygon near the outline
    return Polygon(tuple((float(x), float(y)) for x, y in new))


def _refine_flats(pixels: np.ndarray, shape: CutCircle, period: float,
                  wave: tuple[float, float], *, max_move_px: float) -> CutCircle:
    """The circle with each flat moved to the photo's 50 % edge and turned to it, as
    ``_refine_sides`` does a polygon's sides; a flat whose edge is not found stays."""
    flats = []
    for angle, dist in shape.flats:
        a = math.radians(angle)
        n = np.array([math.cos(a), -math.sin(a)])  # outward, photo axes (y down)
        t = np.array([n[1], -n[0]])
        half = math.sqrt(max(shape.radius_px ** 2 - dist ** 2, 0.0))
        mid = np.array([shape.center_x_px, shape.center_y_px]) + dist * n
        p, q = mid - half * t, mid + half * t
        move, slope = _side_move(pixels, p, q, -n, period, wave, max_move_px, (0.15, 0.85))
        if np.isfinite(slope):
            # the far end (toward q) further out: the normal turns toward -t
            turned = n - slope * t
            turned /= np.hypot(*turned)
            angle = math.degrees(math.atan2(-turned[1], turned[0]))
            dist = float(np.dot(mid + move * n - [shape.center_x_px, shape.center_y_px],
                                turned))
        else:
            dist += move
        flats.append((angle, dist))
    return replace(shape, flats=tuple(flats))


def _params(shape: Shape) -> np.ndarray:
    if isinstance(shape, Polygon):
        return np.asarray(shape.corners_px, dtype=float).ravel()
    if isinstance(shape, CutCircle):
        return np.array([shape.center_x_px, shape.center_y_px, shape.radius_px]
                        + [v for flat in shape.flats for v in flat], dtype=float)
    return np.array(list(shape.params().values()), dtype=float)


def _rebuild(like: Shape, p: np.ndarray) -> Shape:
    if isinstance(like, Polygon):
        return Polygon(tuple((float(a), float(b)) for a, b in p.reshape(-1, 2)))
    if isinstance(like, CutCircle):
        return CutCircle(float(p[0]), float(p[1]), float(p[2]),
                         tuple((float(a), float(d)) for a, d in p[3:].reshape(-1, 2)))
    return type(like)(*(float(v) for v in p))


def _polygon_instead(polygon: tuple[Polygon, float] | None, cut_miss: float) -> bool:
    """Is the outline a polygon whose deepest sides passed for flats? A circle's arcs
    and a flat's line hug the outline to a fraction of a pixel, and a polygon traced
    along the arcs needs 11 or 12 corners to come near that (every such fit on 60
    reference photos of round parts with flats, tests/refset); a polygon of up to 10
    corners that fits clearly closer (within 0.8 of the cut circle's miss) is a polygon
    (a hexagon once read as a circle with three flats)."""
    if polygon is None:
        return False
    shape, miss = polygon
    return len(shape.corners_px) <= 10 and miss < 0.8 * cut_miss


def _cut_fit(x: np.ndarray, y: np.ndarray, tolerance: float) -> tuple[CutCircle, float] | None:
    """A round outline with straight flats (or a straight cut-off), and its median miss;
    None when the outline has no flat.

    A circle is fitted to the outline by least squares, the points lying well inside it
    (a flat's) dropped and the fit repeated. Each run of consecutive outline points more
    than two tolerances inside the circle, long enough to be a flat (its chord at
    least 0.3 of the radius), is fitted by a straight line (total least squares); it is a
    flat when the run hugs that line as the outline hugs a side. Most of the outline must
    still lie on the circle, so a polygon is not read as a circle with flats, and an
    ellipse's arcs inside the circle are curved, not straight.
    """
    if x.size < 40:
        return None
    keep = np.ones(x.size, dtype=bool)
    for _ in range(3):
        cx, cy, r = _kasa_circle(x[keep], y[keep])
        e = np.hypot(x - cx, y - cy) - r
        keep = e > -2.0 * tolerance
        if keep.sum() < 0.4 * x.size:
            return None
    cx, cy, r = _kasa_circle(x[keep], y[keep])
    e = np.hypot(x - cx, y - cy) - r
    if float(np.mean(np.abs(e) <= 1.5 * tolerance)) < 0.4:
        return None
    deep = e < -2.0 * tolerance
    if not deep.any() or deep.all():
        return None
    # a flat's run is not broken by a point or two that noise lifts above the threshold
    tiled = ndi.binary_closing(np.tile(deep, 3), structure=np.ones(7, dtype=bool))
    deep = tiled[x.size:2 * x.size]
    if deep.all():
        return None
    # runs of deep points around the closed outline, starting where one ends
    start = int(np.flatnonzero(~deep)[0])
    order = np.roll(np.arange(x.size), -start)
    flats = []
    run: list[int] = []
    for i in np.append(order, order[0]):
        if deep[i]:
            run.append(int(i))
            continue
        if run:
            if math.hypot(x[run[-1]] - x[run[0]], y[run[-1]] - y[run[0]]) >= 0.3 * r:
                flat = _flat_of_run(x[run], y[run], cx, cy, r, tolerance)
                if flat is None:
                    return None  # a long dent that is no flat: not this shape
                flats.append(flat)
            run = []
    if not flats or len(flats) > 4:
        return None
    start_shape = CutCircle(cx, cy, r, tuple(flats))
    shape, miss = _fit(start_shape, x, y, tolerance)
    if (not isinstance(shape, CutCircle) or miss > tolerance
            or _far_share(shape, x, y, tolerance) > 0.05
            or not all(0.3 * shape.radius_px < d < shape.radius_px - 2.0 * tolerance
                       for _, d in shape.flats)):
        return None
    return shape, miss


def _flat_of_run(x: np.ndarray, y: np.ndarray, cx: float, cy: float, r: float,
                 tolerance: float) -> tuple[float, float] | None:
    """A flat's ``(angle_deg, distance)`` (outward normal, y up) from a run of outline
    points inside the circle, or None when the run is too short or not straight."""
    if x.size < 8:
        return None
    px, py = x - cx, cy - y  # y up
    mx, my = float(px.mean()), float(py.mean())
    _, _, vt = np.linalg.svd(np.column_stack([px - mx, py - my]), full_matrices=False)
    n = vt[1]  # the line's normal: the direction of least spread
    if n[0] * mx + n[1] * my < 0:
        n = -n  # outward, away from the centre
    off = (px - mx) * n[0] + (py - my) * n[1]
    if float(np.median(np.abs(off))) > tolerance or float(np.percentile(np.abs(off), 95)) \
            > 3.0 * tolerance:
        return None
    return math.degrees(math.atan2(n[1], n[0])), float(n[0] * mx + n[1] * my)



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


def _polygon_fit(x: np.ndarray, y: np.ndarray, tolerance: float) -> tuple[Polygon, float] | None:
    """The polygon that fits the outline, and its median miss; None when no polygon of 3
    to 12 corners does."""
    corners = _polygon_corners(x, y, tolerance)
    if corners is None:
        return None

    def reach(shape: Polygon) -> np.ndarray:
        """How far each corner lies from the outline's nearest point (binned px)."""
        return np.array([np.min(np.hypot(x - px, y - py)) for px, py in shape.corners_px])

    def without(shape: Polygon, i: int) -> Polygon:
        return Polygon(tuple(map(tuple, np.delete(np.asarray(shape.corners_px), i, axis=0))))

    while True:
        poly, miss = _fit(corners, x, y, tolerance)
        if not isinstance(poly, Polygon) or miss > tolerance:
            return None
        far = reach(poly)
        if np.all(far <= 4.0 * tolerance):
            break
        # a corner the fit flung far off along its side: the approximation put one too
        # many there (two along one rounded corner); the start goes on without it
        if len(corners.corners_px) <= 3:
            return None
        corners = without(corners, int(np.argmax(far)))
    # a fitted corner where the sides hardly turn (under 20 deg) is the approximation's:
    # left in, it bends a side a few pixels out of the part, where the map is not the
    # part's. It goes, and the rest are fitted again, while the fit stays about as close.
    while len(poly.corners_px) > 3:
        turns = _turns(np.asarray(poly.corners_px, dtype=float))
        i = int(np.argmin(turns))
        if turns[i] >= math.radians(20.0):
            break
        fewer, fewer_miss = _fit(without(poly, i), x, y, tolerance)
        if (not isinstance(fewer, Polygon) or fewer_miss > 1.3 * miss + 0.02 * tolerance
                or np.any(reach(fewer) > 4.0 * tolerance)):
            break
        poly, miss = fewer, fewer_miss
    return poly, miss


def _turns(points: np.ndarray) -> np.ndarray:
    """How far the outline turns at each corner of a closed polygon (radians)."""
    a = points - np.roll(points, 1, axis=0)
    b = np.roll(points, -1, axis=0) - points
    return np.abs(np.arctan2(a[:, 0] * b[:, 1] - a[:, 1] * b[:, 0],
                             np.einsum("ij,ij->i", a, b)))


def _far_share(shape: Shape, x: np.ndarray, y: np.ndarray, tolerance: float) -> float:
    """The share of the outline's points more than four tolerances from ``shape``."""
    return float(np.mean(np.abs(shape.edge_distance_px(x, y)) > 4.0 * tolerance))


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
    # the smoothing rounds a corner, and the approximation cuts it by a short side:
    # the corner is where the sides either side of that one meet
    perimeter = float(np.sum(np.hypot(*(np.roll(points, -1, axis=0) - points).T)))
    while len(points) > 3:
        nxt = np.roll(points, -1, axis=0)
        lengths = np.hypot(*(nxt - points).T)
        i = int(np.argmin(lengths))
        if lengths[i] >= max(6.0 * tolerance, 0.03 * perimeter):
            break
        k = len(points)
        p0, p1 = points[(i - 1) % k], points[i]
        q0, q1 = points[(i + 1) % k], points[(i + 2) % k]
        d1, d2 = p1 - p0, q1 - q0
        det = d1[0] * (-d2[1]) - d1[1] * (-d2[0])
        if abs(det) > 1e-9 * np.hypot(*d1) * np.hypot(*d2):
            t = ((q0 - p0)[0] * (-d2[1]) - (q0 - p0)[1] * (-d2[0])) / det
            meet = p0 + t * d1
        else:
            meet = 0.5 * (p1 + q0)
        if np.hypot(*(meet - 0.5 * (p1 + q0))) > 2.0 * lengths[i] + 2.0 * tolerance:
            meet = 0.5 * (p1 + q0)
        points = np.delete(points, (i + 1) % k, axis=0)
        points[i if (i + 1) % k else i - 1] = meet
    # a corner where the outline hardly turns is the approximation's, not the part's:
    # the fit below would fling it far off
    while len(points) > 3:
        sides = np.hypot(*(np.roll(points, -1, axis=0) - points).T)  # side i: i to i + 1
        short = np.minimum(sides, np.roll(sides, 1))  # the shorter side at each corner
        turn = _turns(points)
        weak = np.where(short < 4.0 * tolerance, 0.0, turn)
        i = int(np.argmin(weak))
        if weak[i] >= math.radians(10.0):
            break
        points = np.delete(points, i, axis=0)
    if not 3 <= len(points) <= 12:
        return None
    return Polygon(tuple((float(a), float(b)) for a, b in points))


def _scaled(shape: Shape, factor: int, offset: float) -> Shape:
    """A shape found on the binned image, in photo pixels."""
    if isinstance(shape, CutCircle):
        return CutCircle(factor * shape.center_x_px + offset,
                         factor * shape.center_y_px + offset, factor * shape.radius_px,
                         tuple((a, factor * d) for a, d in shape.flats))
    if isinstance(shape, Polygon):
        return Polygon(tuple((factor * a + offset, factor * b + offset)
                             for a, b in shape.corners_px))
    p = shape.params()
    keys = list(p)
    values = [factor * p[k] + (offset if k in ("center_x_px", "center_y_px") else 0.0)
              if k != "angle_deg" else p[k] for k in keys]
    return type(shape)(*values)
