"""The fringe photo and the surface map as pictures, for terminals that draw images.

Each picture is made exactly as many terminal cells wide and tall as it will fill, in
the terminal's own pixels per cell, so the terminal never stretches it. The photo gets
the same stretch, dimming and outlines as the half-block cells (:func:`photo_layers`),
the map the same colours (:func:`diverging_rgb`, as the certificate's map), only finer.
Pillow only: no Textual here, so the pictures are tested as plain images.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from PIL import Image, ImageDraw

from ...analysis.aperture import Aperture
from ...analysis.colormap import NO_DATA_RGB, diverging_rgb
from .heatmap import _ink_on, symmetric_range
from .photo import CellGrid, crop_region, photo_layers

__all__ = ["MapPicture", "PhotoPicture", "fit_picture", "map_picture", "photo_picture"]

# outlines drawn this many picture pixels either side of their circle, and the centre
# cross's arm: thick enough to see at a glance at any cell size
LINE_HALF_PX = 1.5
CROSS_ARM_PX = 5
# the colour bar beside the map: one blank cell, then two cells of colour
BAR_GAP_CELLS = 1
BAR_CELLS = 2


def fit_picture(
    shape: tuple[int, int], width: int, height: int, cell_px: tuple[int, int]
) -> tuple[int, int, int, int]:
    """``(cols_px, rows_px, cells_w, cells_h)``: an image of ``shape`` fitted in the cells.

    ``cell_px`` is one cell's ``(width, height)`` in the terminal's pixels. The image keeps
    its aspect ratio and fills at most ``width x height`` cells; the cells are the whole
    ones it reaches into.
    """
    m, n = shape
    cw, ch = cell_px
    if width < 1 or height < 1 or m < 1 or n < 1:
        return (0, 0, 0, 0)
    scale = min(width * cw / n, height * ch / m)
    cols, rows = max(1, int(n * scale)), max(1, int(m * scale))
    return cols, rows, min(width, math.ceil(cols / cw)), min(height, math.ceil(rows / ch))


def _canvas(cells_w: int, cells_h: int, cell_px: tuple[int, int]) -> Image.Image:
    # what the image does not cover is see-through: the terminal's own background
    return Image.new("RGBA", (cells_w * cell_px[0], cells_h * cell_px[1]), (0, 0, 0, 0))


@dataclass(frozen=True)
class PhotoPicture:
    """The fringe photo as a picture: the image, the cells it fills, where it sits on the photo.

    ``grid`` maps the picture's pixels onto the photo as :class:`CellGrid` maps cells.
    """

    image: Image.Image
    cells_w: int
    cells_h: int
    grid: CellGrid

    def photo_xy(self, cell_x: float, cell_y: float, cell_px: tuple[int, int]) -> tuple:
        """The photo pixel under terminal cell ``(cell_x, cell_y)`` (cell centres at +0.5)."""
        g = self.grid
        return (g.origin_x_px + cell_x * cell_px[0] * g.step_px - 0.5,
                g.origin_y_px + cell_y * cell_px[1] * g.step_px - 0.5)


def photo_picture(
    pixels: np.ndarray,
    *,
    width: int,
    height: int,
    cell_px: tuple[int, int],
    aperture: Aperture | None = None,
    selected: int | None = None,
    region: tuple[int, int, int, int] | None = None,
) -> PhotoPicture | None:
    """The photo with its aperture, exclusions and the outline being edited, as a picture.

    Arguments as :func:`render_photo`'s, with ``cell_px`` the terminal's cell size in
    pixels; None when there is no room.
    """
    p, origin = crop_region(pixels, region)
    cols, rows, cells_w, cells_h = fit_picture(p.shape, width, height, cell_px)
    if cols == 0:
        return None
    step = max(p.shape[0] / rows, p.shape[1] / cols)
    grid = CellGrid(rows, cols, step, float(origin[0]), float(origin[1]))
    rgb, _, outlines = photo_layers(p, grid, aperture, selected, line_steps=LINE_HALF_PX)
    canvas = _canvas(cells_w, cells_h, cell_px)
    canvas.paste(Image.fromarray(np.round(rgb).astype(np.uint8), "RGB"), (0, 0))
    draw = ImageDraw.Draw(canvas)
    for k, _, colour, cx, cy in outlines:
        if k == selected or k < 0:  # the centre of the aperture and of the edited outline
            x = (cx - grid.origin_x_px + 0.5) / step - 0.5
            y = (cy - grid.origin_y_px + 0.5) / step - 0.5
            draw.line((x - CROSS_ARM_PX, y, x + CROSS_ARM_PX, y), fill=colour, width=2)
            draw.line((x, y - CROSS_ARM_PX, x, y + CROSS_ARM_PX), fill=colour, width=2)
    return PhotoPicture(canvas, cells_w, cells_h, grid)


@dataclass(frozen=True)
class MapPicture:
    """The surface map and its colour bar as a picture, and the scale the legend states.

    ``map_cells_w`` of the ``cells_w`` hold the map; the colour bar fills the last
    :data:`BAR_CELLS`, its rows level with the legend's lines (``vmax_nm`` on the first).
    """

    image: Image.Image
    cells_w: int
    cells_h: int
    map_cells_w: int
    vmin_nm: float
    vmax_nm: float
    high_nm: float
    low_nm: float


def map_cells(shape: tuple[int, int], width: int, height: int,
              cell_px: tuple[int, int]) -> tuple[int, int]:
    """``(cells_w, cells_h)`` that :func:`map_picture` fills, colour bar included."""
    _, _, w, h = fit_picture(shape, max(1, width - BAR_GAP_CELLS - BAR_CELLS), height, cell_px)
    return (w + BAR_GAP_CELLS + BAR_CELLS if w else 0), h


def map_picture(
    height_nm: np.ndarray,
    *,
    width: int,
    height: int,
    cell_px: tuple[int, int],
    n_ticks: int,
    inside: np.ndarray | None = None,
) -> MapPicture | None:
    """The height map in the station's colours, its extremes marked, with a colour bar.

    Parameters
    ----------
    height_nm : (M, N) ndarray
        Heights in nm, NaN where nothing was measured.
    width, height : int
        Room in terminal cells, colour bar included.
    cell_px : (int, int)
        One cell's width and height in the terminal's pixels.
    n_ticks : int
        The legend's values beside the bar, ``vmax`` down to ``vmin``, one a line from the
        picture's first line (:func:`legend_lines`); the next line's "no data" swatch too.
    inside : (M, N) bool ndarray, optional
        The clear aperture: NaN inside it is drawn in the no-data colour, as the cells do.
    """
    h = np.asarray(height_nm, dtype=float)
    if not np.isfinite(h).any():
        return None
    cw, ch = cell_px
    cols, rows, map_w, cells_h = fit_picture(h.shape, max(1, width - BAR_GAP_CELLS - BAR_CELLS),
                                             height, cell_px)
    if cols == 0:
        return None
    vmin, vmax = symmetric_range(h)
    # nearest map pixel, not a blend: each picture pixel shows a measured height
    r_idx = np.minimum((np.arange(rows) + 0.5) * h.shape[0] / rows, h.shape[0] - 1).astype(int)
    c_idx = np.minimum((np.arange(cols) + 0.5) * h.shape[1] / cols, h.shape[1] - 1).astype(int)
    grid = h[np.ix_(r_idx, c_idx)]
    rgba = np.zeros((rows, cols, 4), dtype=np.uint8)
    rgba[..., :3] = diverging_rgb(grid, vmin, vmax)
    shown = np.isfinite(grid)
    if inside is not None:
        shown |= np.asarray(inside, dtype=bool)[np.ix_(r_idx, c_idx)]
    rgba[..., 3] = np.where(shown, 255, 0)
    cells_w = map_w + BAR_GAP_CELLS + BAR_CELLS
    canvas = _canvas(cells_w, cells_h, cell_px)
    canvas.paste(Image.fromarray(rgba, "RGBA"), (0, 0))
    draw = ImageDraw.Draw(canvas)
    extremes = []
    for pick, up in ((np.nanargmax, True), (np.nanargmin, False)):
        i, j = np.unravel_index(pick(h), h.shape)
        extremes.append(float(h[i, j]))
        x, y = (j + 0.5) * cols / h.shape[1], (i + 0.5) * rows / h.shape[0]
        base = tuple(int(v) for v in diverging_rgb(np.array([h[i, j]]), vmin, vmax)[0])
        s = 0.6 * cw  # a triangle about a cell wide: ▲ on the high point, ▼ on the low
        tip, foot = (y - s, y + 0.6 * s) if up else (y + s, y - 0.6 * s)
        draw.polygon([(x, tip), (x - s, foot), (x + s, foot)], fill=_ink_on(base))
    _colour_bar(canvas, (map_w + BAR_GAP_CELLS) * cw, cell_px, n_ticks, vmin, vmax)
    return MapPicture(canvas, cells_w, cells_h, map_w, vmin, vmax, extremes[0], extremes[1])


def _colour_bar(canvas: Image.Image, x0: int, cell_px: tuple[int, int], n_ticks: int,
                vmin: float, vmax: float) -> None:
    """The scale from ``vmax`` at the middle of the first line to ``vmin`` at line ``n``'s,
    then the no-data swatch on the next line, where the legend's lines name them."""
    cw, ch = cell_px
    n = max(n_ticks, 2)
    bar_w = BAR_CELLS * cw
    rows = min(n * ch, canvas.height)
    y = np.arange(rows) + 0.5
    fraction = np.clip((y - 0.5 * ch) / ((n - 1) * ch), 0.0, 1.0)
    values = vmax - fraction * (vmax - vmin)
    bar = diverging_rgb(np.repeat(values[:, None], bar_w, axis=1), vmin, vmax)
    canvas.paste(Image.fromarray(bar, "RGB"), (x0, 0))
    if (n + 1) * ch <= canvas.height:
        swatch = Image.new("RGB", (bar_w, ch - 2), NO_DATA_RGB)
        canvas.paste(swatch, (x0, n * ch + 1))
