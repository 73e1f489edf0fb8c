"""The lit disk by its brightness: the aperture of a photo with too few fringes for a carrier.

``aperture.find_aperture`` tells the disk from its surround by the tilt fringes' local
contrast, which needs a carrier. A photo of three fringes or of closed rings has none;
it is found here by its light against a darker surround instead:

1. the photo is binned to about 512 pixels on its long side;
2. a grey closing (the brightest value within a disk, then the darkest) a sixth of the
   photo's short side across fills the dark fringes with their bright neighbours' level,
   so the disk reads evenly bright while its outline stays where it was;
3. the level halfway between the lit disk and the surround (Otsu's threshold of the
   closed image) is traced with sub-pixel contours, and the longest traced outline
   fitted by a circle with a robust (soft-L1) loss, points far off it dropped and the
   rest refitted by plain least squares.

References
----------
N. Otsu, "A threshold selection method from gray-level histograms", IEEE Trans. SMC 9,
62 (1979) (``skimage.filters.threshold_otsu``).
"""

from __future__ import annotations

import math

import numpy as np
from scipy import ndimage as ndi

from .aperture import Aperture, _refuse, _robust_circle
from .carrier import bin_pixels

__all__ = ["find_lit_disk"]

_WORK_LONG_SIDE = 512


def find_lit_disk(image: np.ndarray, *, photo_name: str = "the photo") -> Aperture:
    """Find a lit circular aperture against a darker surround by brightness alone.

    Parameters
    ----------
    image : (H, W) ndarray
        Grey photo with values in 0..1 (not modified).
    photo_name : str
        Named in the error message.

    Returns
    -------
    Aperture
        Centre and radius in photo pixels (the outline's 50 % level).

    Raises
    ------
    UnanalysablePhotoError
        No lit region that stands out from its surround, or one that is not a circle.
    """
    from skimage.filters import threshold_otsu
    from skimage.measure import find_contours

    img = np.asarray(image, dtype=np.float32)
    factor = max(1, int(math.ceil(max(img.shape) / _WORK_LONG_SIDE)))
    work = bin_pixels(img, factor).astype(np.float64)
    size = max(5, int(min(work.shape) / 6) | 1)
    half_size = size // 2
    yy, xx = np.mgrid[-half_size:half_size + 1, -half_size:half_size + 1]
    foot = np.hypot(xx, yy) <= half_size
    # beyond the photo's border lies the dark surround: a disk nearer the border than the
    # footprint's radius would otherwise be joined to it (a border repeated outward
    # holds the light the closing spreads), and the whole margin read as lit
    pad = half_size + 1
    dark = float(work.min())
    closed = ndi.grey_closing(np.pad(work, pad, constant_values=dark), footprint=foot,
                              mode="constant", cval=dark)[pad:-pad, pad:-pad]
    lo, hi = np.percentile(closed, [5, 95])
    if hi - lo < 0.05 * max(hi, 1e-6) or hi - lo < 0.02:
        _refuse(photo_name, "nothing is lit brighter than its surround")
    level = float(threshold_otsu(closed))
    lit = closed > level
    labels, n = ndi.label(lit)
    if n == 0:
        _refuse(photo_name, "nothing is lit brighter than its surround")
    sizes = ndi.sum_labels(lit, labels, index=np.arange(1, n + 1))
    biggest = 1 + int(np.argmax(sizes))
    region = ndi.binary_fill_holes(labels == biggest)
    inside = float(np.median(closed[region]))
    outside = float(np.median(closed[~ndi.binary_dilation(region, iterations=3)]))
    if not inside > 1.3 * outside + 0.02:
        _refuse(photo_name, "the lit region does not stand out from its surround")
    half = 0.5 * (inside + outside)
    contours = find_contours(np.where(ndi.binary_dilation(region, iterations=3), closed,
                                      min(outside, half - 1e-6)), half)
    if not contours:
        _refuse(photo_name, "the lit region has no outline")
    edge = max(contours, key=len)
    ys, xs = edge[:, 0], edge[:, 1]
    # drop the outline where it runs along the photo's border (a disk cut by the frame)
    h, w = work.shape
    on_frame = (xs < 0.5) | (ys < 0.5) | (xs > w - 1.5) | (ys > h - 1.5)
    xs, ys = xs[~on_frame], ys[~on_frame]
    if xs.size < 20:
        _refuse(photo_name, "the lit region has no outline")
    cx, cy, r = _circle(xs, ys, photo_name)
    raw = ndi.gaussian_filter(work, 1.0)
    ex, ey = _edge_along_rays(raw, cx, cy, r)
    cx, cy, r = _circle(ex, ey, photo_name)
    area = float(region.sum())
    if abs(area / (math.pi * r * r) - 1.0) > 0.15 or r < 8:
        _refuse(photo_name, "the lit region is not a circle")
    # a round part seen at an angle is an ellipse: its edge's distance from the centre
    # swings twice around it by (1 - cos angle) / 2 of the radius, 1.7 % at 15 degrees
    # and 6.7 % at 30; leave anything past 16 degrees or so to the outline finder. A
    # least-squares fit of that swing is blind to the scatter a fringe on the rim adds.
    theta = np.arctan2(ey - cy, ex - cx)
    design = np.stack([np.ones_like(theta), np.cos(2 * theta), np.sin(2 * theta)], axis=1)
    swing, *_ = np.linalg.lstsq(design, np.hypot(ex - cx, ey - cy), rcond=None)
    if math.hypot(swing[1], swing[2]) > 0.02 * r:
        _refuse(photo_name, "the lit region's edge is an ellipse, not a circle")
    # binned pixel centres sit at (factor - 1) / 2 + factor * index in the photo
    off = (factor - 1) / 2.0
    return Aperture(center_x_px=off + factor * cx, center_y_px=off + factor * cy,
                    radius_px=factor * r)


def _edge_along_rays(image: np.ndarray, cx: float, cy: float, r: float):
    """The outline's crossing on 180 rays, each against its own levels.

    Uneven light makes one threshold wrong somewhere on the rim, so each ray has its
    own: half way between the surround just outside and the darkest fringe just inside.
    A dark fringe can lie on the rim (closed rings often do), and a level half way to
    the bright fringes would then cut the disk short; against the dark fringes' level
    the outline of a bright rim moves out by at most half the edge's width.
    """
    t = np.linspace(0.0, 2 * np.pi, 180, endpoint=False)
    s = np.linspace(0.8, 1.2, 81) * r
    xs = cx + np.cos(t)[:, None] * s[None, :]
    ys = cy + np.sin(t)[:, None] * s[None, :]
    h, w = image.shape
    ok = ((xs >= 0) & (xs <= w - 1) & (ys >= 0) & (ys <= h - 1)).all(axis=1)
    prof = ndi.map_coordinates(image, [ys[ok].ravel(), xs[ok].ravel()], order=1)
    prof = prof.reshape(-1, s.size)
    inner = np.percentile(prof[:, 10:34], 10, axis=1)  # 0.85 .. 0.97 r
    outer = np.median(prof[:, 65:], axis=1)  # 1.125 .. 1.2 r
    half = 0.5 * (inner + outer)
    px, py = [], []
    for row, level, tt in zip(prof, half, t[ok], strict=True):
        above = np.flatnonzero(row > level)
        if above.size == 0 or above[-1] == row.size - 1:
            continue
        i = above[-1] + 1  # the last fall below the level, going outward
        f = (row[i - 1] - level) / max(row[i - 1] - row[i], 1e-12)
        rr = s[i - 1] + f * (s[i] - s[i - 1])
        px.append(cx + rr * np.cos(tt))
        py.append(cy + rr * np.sin(tt))
    return np.asarray(px), np.asarray(py)


def _circle(x: np.ndarray, y: np.ndarray, photo_name: str) -> tuple[float, float, float]:
    """Circle through outline points (the contrast finder's robust fit)."""
    if x.size < 20:
        _refuse(photo_name, "the traced outline is not a circle")
    start = (float(x.mean()), float(y.mean()),
             float(np.mean(np.hypot(x - x.mean(), y - y.mean()))))
    return _robust_circle(x, y, start, photo_name)
