"""The fringe photo and its spectrum as half-block grey cells, with the aperture drawn over them."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from rich.text import Text

from ...analysis.aperture import Aperture
from .heatmap import _StyleCache, fit_cells, resample_nanmean

__all__ = ["CellGrid", "GREY_RAMP", "aperture_region", "crop_region", "downsample_photo",
           "photo_layers", "render_photo", "render_spectrum"]

# Dark to light, for terminals without colour.
GREY_RAMP = " .:-=+*#%@"
# Overlay colours (our own choice): the aperture edge, the edge being edited, exclusions.
OUTLINE_RGB = (255, 196, 64)
SELECTED_RGB = (96, 232, 255)
EXCLUDED_RGB = (214, 64, 110)
CARRIER_RGB = (255, 196, 64)
DC_RGB = (96, 160, 255)
OUTSIDE_DIM = 0.45
# the blur before a photo is drawn in fewer cells, in grid steps: fringes of 2.5 steps a
# period (slanted ones then read as a checkerboard) keep under a tenth of their contrast,
# fringes of 5 steps about 45 %, of 8 steps over 70 % (measured on tilted test fringes);
# `z` gives the fringes themselves the cells
BLUR_STEPS = 1.0


@dataclass(frozen=True)
class CellGrid:
    """How a rendered image's pixel grid sits on the source image.

    Grid pixel ``(row, col)`` (two per terminal cell, one above the other) covers source
    pixels around ``(x, y) = (x0 + (col + 0.5) * step_px - 0.5, y0 + (row + 0.5) * step_px
    - 0.5)``, where ``(x0, y0)`` is the corner of the region drawn.
    """

    rows: int
    cols: int
    step_px: float
    origin_x_px: float = 0.0
    origin_y_px: float = 0.0

    def source_xy(self) -> tuple[np.ndarray, np.ndarray]:
        x = self.origin_x_px + (np.arange(self.cols) + 0.5) * self.step_px - 0.5
        y = self.origin_y_px + (np.arange(self.rows) + 0.5) * self.step_px - 0.5
        return np.meshgrid(x, y)

    def cell_of(self, x: float, y: float) -> tuple[int, int]:
        """Terminal cell ``(line, column)`` holding source point ``(x, y)``."""
        col = int((x - self.origin_x_px + 0.5) / self.step_px)
        row = int((y - self.origin_y_px + 0.5) / self.step_px)
        return row // 2, col


def _stretch(grey: np.ndarray) -> np.ndarray:
    # spread the 1st..99th percentile over the full grey range: dim photos stay readable
    finite = grey[np.isfinite(grey)]
    if finite.size == 0:
        return np.zeros_like(grey)
    lo, hi = np.percentile(finite, [1.0, 99.0])
    if hi - lo < 1e-6:
        hi = lo + 1e-6
    return np.clip((grey - lo) / (hi - lo), 0.0, 1.0)


def downsample_photo(pixels: np.ndarray, shape: tuple[int, int]) -> np.ndarray:
    """The photo on a coarser ``shape`` grid, anti-aliased: blurred, then area-averaged.

    Fringes finer than two grid pixels a period cannot be shown (the sampling theorem),
    and those of little more than two come out as a checkerboard when they run at a slant;
    a plain block mean lets them through (more so once the grey range is stretched). A
    Gaussian of :data:`BLUR_STEPS` grid steps first takes them down toward an even grey,
    while fringes of five or more grid pixels a period stay visible (zoom in for finer).
    The photo is first block-averaged by a whole factor, so a large photo stays quick.
    """
    from scipy.ndimage import gaussian_filter

    p = np.asarray(pixels, dtype=float)
    step = max(p.shape[0] / shape[0], p.shape[1] / shape[1])
    if step <= 1.5:
        return resample_nanmean(p, shape)
    k = max(1, int(step // 4))  # a quarter step per pixel: cheap, and far finer than the blur
    if k > 1:
        p = resample_nanmean(p, (p.shape[0] // k, p.shape[1] // k))
    return resample_nanmean(gaussian_filter(p, BLUR_STEPS * step / k, mode="nearest"), shape)


def _grid_for(shape: tuple[int, int], width: int, height: int, origin=(0, 0)) -> CellGrid:
    rows, cols = fit_cells(shape, width, height)
    step = max(shape[0] / rows, shape[1] / cols) if rows and cols else 1.0
    return CellGrid(rows, cols, step, float(origin[0]), float(origin[1]))


def aperture_region(
    aperture: Aperture, shape: tuple[int, int], *, margin: float = 0.15
) -> tuple[int, int, int, int]:
    """``(x0, y0, x1, y1)``: the aperture's bounding box grown by ``margin`` radii, in the photo."""
    r = aperture.radius_px * (1.0 + margin)
    x0 = max(0, int(np.floor(aperture.center_x_px - r)))
    y0 = max(0, int(np.floor(aperture.center_y_px - r)))
    x1 = min(shape[1], int(np.ceil(aperture.center_x_px + r)) + 1)
    y1 = min(shape[0], int(np.ceil(aperture.center_y_px + r)) + 1)
    if x1 - x0 < 2 or y1 - y0 < 2:
        return (0, 0, shape[1], shape[0])
    return (x0, y0, x1, y1)


def crop_region(
    pixels: np.ndarray, region: tuple[int, int, int, int] | None
) -> tuple[np.ndarray, tuple[int, int]]:
    """The part of the photo ``region`` bounds (all of it for None), as floats, and its corner."""
    p = np.asarray(pixels, dtype=float)
    if region is None:
        return p, (0, 0)
    x0, y0, x1, y1 = region
    return p[y0:y1, x0:x1], (x0, y0)


def _ring(x, y, cx, cy, r, half_width):
    d = np.hypot(x - cx, y - cy)
    return np.abs(d - r) <= half_width


def _cells_to_lines(rgb: np.ndarray, mode: str, grey: np.ndarray, marks: dict) -> list[Text]:
    """Pairs of grid rows to terminal lines; ``marks`` maps ``(row, col)`` to ``(glyph, rgb)``."""
    rows, cols = rgb.shape[:2]
    lines = []
    styles = _StyleCache(mode)
    ramp = np.array(list(GREY_RAMP))
    for r in range(rows // 2):
        text = Text()
        for c in range(cols):
            if (r, c) in marks:
                glyph, colour = marks[(r, c)]
                text.append(glyph, styles.get(colour if mode != "mono" else None, None, bold=True))
                continue
            if mode == "mono":
                g = 0.5 * (grey[2 * r, c] + grey[2 * r + 1, c])
                text.append(str(ramp[int(round(g * (len(GREY_RAMP) - 1)))]))
                continue
            top = tuple(int(v) for v in rgb[2 * r, c])
            bot = tuple(int(v) for v in rgb[2 * r + 1, c])
            text.append("▀", styles.get(top, bot))
        lines.append(text)
    return lines


def photo_layers(
    pixels: np.ndarray,
    grid: CellGrid,
    aperture: Aperture | None,
    selected: int | None,
    *,
    line_steps: float = 0.5,
) -> tuple[np.ndarray, np.ndarray, list]:
    """The photo on ``grid`` with the aperture drawn over it, as colours and as grey shades.

    Returns ``(rgb, shade, outlines)``: ``(rows, cols, 3)`` colours in 0..255 with the photo
    dimmed outside the aperture, the exclusions tinted and the outlines drawn
    ``line_steps`` grid steps either side of their circles; the grey shades the
    character mode draws; and ``(k, ring, colour, cx, cy)`` for each outline drawn
    (``k`` -1 for the aperture, else the exclusion's index; ``ring`` its grid pixels).
    """
    grey = _stretch(downsample_photo(pixels, (grid.rows, grid.cols)))
    shade = grey.copy()
    rgb = np.repeat((grey * 255.0)[..., None], 3, axis=-1)
    outlines = []
    if aperture is None:
        return rgb, shade, outlines
    x, y = grid.source_xy()
    half = line_steps * grid.step_px
    if aperture.shape is None:
        inside_disk = (np.hypot(x - aperture.center_x_px, y - aperture.center_y_px)
                       <= aperture.radius_px)
    else:  # an ellipse, a rectangle, a polygon, an annulus: its own outline
        inside_disk = aperture.region(x, y)
    rgb[~inside_disk] *= OUTSIDE_DIM
    shade[~inside_disk] *= OUTSIDE_DIM
    circles = [(-1, aperture.center_x_px, aperture.center_y_px, aperture.radius_px)]
    for k, e in enumerate(aperture.exclusions):
        hole = np.hypot(x - e.center_x_px, y - e.center_y_px) <= e.radius_px
        rgb[hole] = 0.5 * rgb[hole] + 0.5 * np.array(EXCLUDED_RGB)
        shade[hole] = 0.0
        circles.append((k, e.center_x_px, e.center_y_px, e.radius_px))
    for k, cx, cy, r in circles:
        if k < 0 and aperture.shape is not None:
            ring = np.abs(aperture.shape.edge_distance_px(x, y)) <= half
        else:
            ring = _ring(x, y, cx, cy, r, half)
        colour = SELECTED_RGB if k == selected else (OUTLINE_RGB if k < 0 else EXCLUDED_RGB)
        rgb[ring] = colour
        shade[ring] = 1.0
        outlines.append((k, ring, colour, cx, cy))
    return rgb, shade, outlines


def render_photo(
    pixels: np.ndarray,
    *,
    width: int,
    height: int,
    aperture: Aperture | None = None,
    selected: int | None = None,
    mode: str = "truecolor",
    region: tuple[int, int, int, int] | None = None,
) -> tuple[list[Text], CellGrid]:
    """Draw a fringe photo in grey half-block cells with the aperture over it.

    Parameters
    ----------
    pixels : (H, W) ndarray
        The photo's grey levels (any range; stretched between its 1st and 99th percentiles).
    width, height : int
        Room in terminal cells.
    aperture : Aperture, optional
        Drawn as an outline; outside it the photo is dimmed and its exclusions are tinted.
    selected : int, optional
        Which outline the operator is editing: ``-1`` the aperture, ``k >= 0`` exclusion ``k``.
        Drawn in a distinct colour (in mono mode with ``@`` instead of ``o``).
    mode : {"truecolor", "256", "mono"}
    region : (x0, y0, x1, y1), optional
        Draw only this part of the photo (pixel bounds, end exclusive), e.g. the
        aperture's surroundings from :func:`aperture_region`, so the fringes get
        more terminal cells than the whole frame would leave them.
    """
    p, origin = crop_region(pixels, region)
    grid = _grid_for(p.shape, width, height, origin)
    if grid.rows == 0:
        return [], grid
    rgb, shade, outlines = photo_layers(p, grid, aperture, selected)
    marks: dict[tuple[int, int], tuple[str, tuple[int, int, int]]] = {}
    for k, ring, colour, cx, cy in outlines:
        if mode == "mono":
            for rr, cc in zip(*np.nonzero(ring), strict=True):
                marks[(rr // 2, cc)] = ("@" if k == selected else "o", colour)
        cr, cc = grid.cell_of(cx, cy)
        if 0 <= cr < grid.rows // 2 and 0 <= cc < grid.cols and (k == selected or k < 0):
            marks[(cr, cc)] = ("+", colour)
    return _cells_to_lines(rgb, mode, shade, marks), grid


def render_spectrum(
    log_magnitude: np.ndarray,
    *,
    carrier_rc: tuple[float, float],
    window_radius: float,
    dc_radius: float,
    width: int,
    height: int,
    mode: str = "truecolor",
    zoom: bool = True,
) -> tuple[list[Text], CellGrid]:
    """Draw a log-magnitude spectrum (zero frequency at its centre) with the sideband window.

    The window around the carrier is outlined in amber with an ``×`` on the carrier,
    the zero-frequency (background) region in blue with ``o`` at its centre, and the
    mirror sideband's window dotted, so the operator sees whether the sideband stands
    clear of the background and of the edge (aliasing). With ``zoom`` only the part of
    the spectrum around both sidebands is drawn, so a small window still gets cells.
    """
    full = np.asarray(log_magnitude, dtype=float)
    dc_r, dc_c = (full.shape[0] - 1) / 2.0, (full.shape[1] - 1) / 2.0
    car_r, car_c = carrier_rc
    origin = (0, 0)
    s = full
    if zoom:
        reach = max(
            np.hypot(car_r - dc_r, car_c - dc_c) + 2.0 * window_radius, 3.0 * dc_radius, 8.0
        )
        r0, r1 = max(0, int(dc_r - reach)), min(full.shape[0], int(np.ceil(dc_r + reach)) + 1)
        c0, c1 = max(0, int(dc_c - reach)), min(full.shape[1], int(np.ceil(dc_c + reach)) + 1)
        s = full[r0:r1, c0:c1]
        origin = (c0, r0)
    grid = _grid_for(s.shape, width, height, origin)
    if grid.rows == 0:
        return [], grid
    grey = _stretch(resample_nanmean(s, (grid.rows, grid.cols)))
    rgb = np.repeat((grey * 255.0)[..., None], 3, axis=-1)
    x, y = grid.source_xy()
    half = 0.5 * grid.step_px
    mirror = (2 * dc_r - car_r, 2 * dc_c - car_c)
    marks: dict[tuple[int, int], tuple[str, tuple[int, int, int]]] = {}
    rings = [
        ((car_c, car_r), window_radius, CARRIER_RGB, "×"),
        ((dc_c, dc_r), dc_radius, DC_RGB, "o"),
        ((mirror[1], mirror[0]), window_radius, (150, 150, 150), None),
    ]
    for (cx, cy), radius, colour, glyph in rings:
        ring = _ring(x, y, cx, cy, radius, half)
        if glyph is None:
            ring &= ((np.arange(grid.cols)[None, :] + np.arange(grid.rows)[:, None]) % 2) == 0
        rgb[ring] = colour
        grey[ring] = 1.0
        if mode == "mono":
            for rr, cc in zip(*np.nonzero(ring), strict=True):
                marks.setdefault((rr // 2, cc), ("o" if glyph else ".", colour))
        if glyph:
            cr, cc = grid.cell_of(cx, cy)
            if 0 <= cr < grid.rows // 2 and 0 <= cc < grid.cols:
                marks[(cr, cc)] = (glyph, colour)
    return _cells_to_lines(rgb, mode, grey, marks), grid
