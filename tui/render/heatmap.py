"""The surface map as terminal cells: half-block heatmap, legend, and the colour-depth fallbacks.

Three ways to draw, chosen by :func:`colour_mode_from_env` or by the operator:

``"truecolor"``
    Two map pixels per cell (upper half block, foreground over background), 24-bit colour.
``"256"``
    The same cells with each colour snapped to the xterm 256-colour palette.
``"mono"``
    One character per cell from a ramp, for terminals without colour or with
    ``NO_COLOR`` set: lows draw with horizontal strokes, highs with crosses and blobs.
"""

from __future__ import annotations

import os
from collections.abc import Mapping
from dataclasses import dataclass

import numpy as np
from rich.color import Color
from rich.style import Style
from rich.text import Text

from ...analysis.colormap import NO_DATA_RGB, diverging_rgb, sequential_rgb
from ...analysis.formatting import format_number

__all__ = [
    "MONO_RAMP",
    "Heatmap",
    "colour_mode_from_env",
    "fit_cells",
    "legend_lines",
    "legend_ticks",
    "mono_char",
    "render_heatmap",
    "resample_nanmean",
    "rgb_to_xterm256",
    "symmetric_range",
]

MODES = ("truecolor", "256", "mono")
# Deepest low .. zero .. highest high; blank is kept for "no data".
MONO_RAMP = "#=-~.+*%@"
HIGH_GLYPH = {"truecolor": "▲", "256": "▲", "mono": "H"}
LOW_GLYPH = {"truecolor": "▼", "256": "▼", "mono": "L"}
_CUBE = np.array([0, 95, 135, 175, 215, 255])


def colour_mode_from_env(env: Mapping[str, str] | None = None) -> str:
    """Pick a drawing mode from the environment.

    ``NO_COLOR`` (any non-empty value, see no-color.org, common practice) gives
    ``"mono"``; ``COLORTERM=truecolor`` or ``24bit`` gives ``"truecolor"``; otherwise
    ``"256"``, which every colour terminal of the last decades shows.
    """
    env = os.environ if env is None else env
    if env.get("NO_COLOR"):
        return "mono"
    if env.get("COLORTERM", "").lower() in ("truecolor", "24bit"):
        return "truecolor"
    return "256"


def _xterm_palette() -> np.ndarray:
    cube = np.array([(r, g, b) for r in _CUBE for g in _CUBE for b in _CUBE], dtype=float)
    greys = np.repeat((8.0 + 10.0 * np.arange(24))[:, None], 3, axis=1)
    return np.concatenate([cube, greys])  # entries 16..255


_PALETTE = _xterm_palette()


def rgb_to_xterm256(rgb: np.ndarray) -> np.ndarray:
    """Nearest xterm 256-colour index (cube 16..231 or grey ramp 232..255) for 8-bit RGB.

    The 6x6x6 cube levels are 0, 95, 135, ..., 255 and the greys 8 + 10k (xterm's
    256colres.pl, common practice). "Nearest" uses the red-mean weighted RGB distance
    (a cheap approximation of perceived difference, common practice), which keeps the
    map's pale ambers from turning pink as a plain RGB distance does.
    """
    rgb = np.asarray(rgb, dtype=float)
    flat = rgb.reshape(-1, 3)
    d = flat[:, None, :] - _PALETTE[None, :, :]
    rmean = 0.5 * (flat[:, None, 0] + _PALETTE[None, :, 0])
    dist = (
        (2 + rmean / 256) * d[..., 0] ** 2
        + 4 * d[..., 1] ** 2
        + (2 + (255 - rmean) / 256) * d[..., 2] ** 2
    )
    return (16 + dist.argmin(axis=1)).reshape(rgb.shape[:-1])


def resample_nanmean(values: np.ndarray, shape: tuple[int, int]) -> np.ndarray:
    """Block means of ``values`` onto a coarser ``shape`` grid, ignoring NaN.

    A block with no finite value stays NaN. When ``shape`` is finer than the input
    the nearest input pixel is repeated.
    """
    v = np.asarray(values, dtype=float)
    rows, cols = shape
    r_idx = np.floor(np.arange(rows) * v.shape[0] / rows).astype(int)
    c_idx = np.floor(np.arange(cols) * v.shape[1] / cols).astype(int)
    finite = np.isfinite(v)
    filled = np.where(finite, v, 0.0)
    sums = np.add.reduceat(np.add.reduceat(filled, r_idx, axis=0), c_idx, axis=1)
    counts = np.add.reduceat(np.add.reduceat(finite.astype(float), r_idx, axis=0), c_idx, axis=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(counts > 0, sums / np.maximum(counts, 1), np.nan)


def fit_cells(shape: tuple[int, int], width: int, height: int) -> tuple[int, int]:
    """Pixel grid ``(rows, cols)`` for a map of ``shape`` drawn in ``width x height`` cells.

    A half-block cell holds two pixels one above the other and is about twice as
    tall as wide, so each grid pixel is about square: the map keeps its aspect ratio.
    ``rows`` is even.
    """
    m, n = shape
    if width < 1 or height < 1 or m < 1 or n < 1:
        return (0, 0)
    scale = min(width / n, 2 * height / m)
    cols = max(1, min(width, int(round(n * scale))))
    rows = max(2, min(2 * height, int(round(m * scale))))
    if rows % 2:
        rows = rows + 1 if rows < 2 * height else rows - 1
    return (rows, cols)


def symmetric_range(height_nm: np.ndarray) -> tuple[float, float]:
    """``(-a, a)``, ``a`` the largest finite ``|height|``: zero gets the neutral colour."""
    h = np.asarray(height_nm, dtype=float)
    finite = h[np.isfinite(h)]
    a = float(np.max(np.abs(finite))) if finite.size else 0.0
    if a <= 0.0:
        a = 1.0
    return (-a, a)


def mono_char(values: np.ndarray, vmin: float, vmax: float) -> np.ndarray:
    """Ramp characters for ``values`` (NaN -> blank), as a ``<U1`` array."""
    v = np.asarray(values, dtype=float)
    t = np.clip((v - vmin) / (vmax - vmin), 0.0, 1.0)
    idx = np.rint(np.nan_to_num(t) * (len(MONO_RAMP) - 1)).astype(int)
    out = np.array(list(MONO_RAMP))[idx]
    out[~np.isfinite(v)] = " "
    return out


@dataclass(frozen=True)
class Heatmap:
    """A rendered surface map.

    Attributes
    ----------
    lines : list of Text
        One per terminal row, each ``width_cells`` wide.
    vmin_nm, vmax_nm : float
        The colour scale's range.
    high_cell, low_cell : (row, col) or None
        Where the high and low points are marked (terminal cells).
    high_nm, low_nm : float
        Their heights.
    """

    lines: list[Text]
    vmin_nm: float
    vmax_nm: float
    high_cell: tuple[int, int] | None
    low_cell: tuple[int, int] | None
    high_nm: float
    low_nm: float
    width_cells: int


class _StyleCache:
    def __init__(self, mode: str) -> None:
        self.mode = mode
        self._cache: dict[tuple, Style] = {}

    def colour(self, rgb: tuple[int, int, int]) -> Color:
        if self.mode == "256":
            return Color.from_ansi(int(rgb_to_xterm256(np.array(rgb))))
        return Color.from_rgb(*rgb)

    def get(self, fg: tuple | None, bg: tuple | None, bold: bool = False) -> Style:
        key = (fg, bg, bold)
        style = self._cache.get(key)
        if style is None:
            style = Style(
                color=self.colour(fg) if fg else None,
                bgcolor=self.colour(bg) if bg else None,
                bold=bold,
            )
            self._cache[key] = style
        return style


def _ink_on(rgb: tuple[int, int, int]) -> tuple[int, int, int]:
    # dark glyph on light cells and light glyph on dark ones (relative luminance, ITU-R BT.709)
    lum = 0.2126 * rgb[0] + 0.7152 * rgb[1] + 0.0722 * rgb[2]
    return (20, 20, 24) if lum > 140 else (250, 250, 250)


def _extreme_cell(h: np.ndarray, which: str, rows: int, cols: int) -> tuple[tuple[int, int], float]:
    flat = np.nanargmax(h) if which == "high" else np.nanargmin(h)
    i, j = np.unravel_index(flat, h.shape)
    pix_row = min(rows - 1, int(i * rows / h.shape[0]))
    col = min(cols - 1, int(j * cols / h.shape[1]))
    return (pix_row // 2, col), float(h[i, j])


def render_heatmap(
    height_nm: np.ndarray,
    *,
    width: int,
    height: int,
    mode: str = "truecolor",
    vmin: float | None = None,
    vmax: float | None = None,
    mark_extremes: bool = True,
    inside: np.ndarray | None = None,
    sequential: bool = False,
) -> Heatmap:
    """Draw a height map into at most ``width x height`` terminal cells.

    Parameters
    ----------
    height_nm : (M, N) ndarray
        Heights in nm, NaN where nothing was measured (row 0 at the top of the photo).
    width, height : int
        Room in terminal cells.
    mode : {"truecolor", "256", "mono"}
        Colour depth (see the module docstring).
    vmin, vmax : float, optional
        Colour range; by default symmetric about zero over the finite heights.
    mark_extremes : bool
        Put a high (``▲``, ``H``) and low (``▼``, ``L``) mark on the extreme cells.
    inside : (M, N) bool ndarray, optional
        The clear aperture: NaN pixels inside it (masked specks, exclusions) get the
        "no data" colour, NaN pixels outside stay blank.
    sequential : bool
        Draw on the sequential map (light at ``vmin``, dark at ``vmax``), for a magnitude
        that is never negative such as the spread between photos.
    """
    if mode not in MODES:
        raise ValueError(f"unknown colour mode {mode!r}; use one of {', '.join(MODES)}")
    h = np.asarray(height_nm, dtype=float)
    if vmin is None or vmax is None:
        vmin, vmax = symmetric_range(h)
    rows, cols = fit_cells(h.shape, width, height)
    has_data = bool(np.isfinite(h).any())
    if rows == 0 or not has_data:
        return Heatmap(
            [Text(" " * max(width, 0)) for _ in range(max(height, 0))],
            vmin,
            vmax,
            None,
            None,
            float("nan"),
            float("nan"),
            max(width, 0),
        )
    grid = resample_nanmean(h, (rows, cols))
    high = low = None
    high_nm = low_nm = float("nan")
    if mark_extremes:
        high, high_nm = _extreme_cell(h, "high", rows, cols)
        low, low_nm = _extreme_cell(h, "low", rows, cols)

    lines: list[Text] = []
    if mode == "mono":
        # one character per cell stands for the pair of map pixels it covers
        cells = resample_nanmean(grid, (rows // 2, cols))
        chars = mono_char(cells, vmin, vmax)
        for r in range(rows // 2):
            row = list(chars[r])
            if high and high[0] == r:
                row[high[1]] = HIGH_GLYPH[mode]
            if low and low[0] == r:
                row[low[1]] = LOW_GLYPH[mode]
            lines.append(Text("".join(row)))
        return Heatmap(lines, vmin, vmax, high, low, high_nm, low_nm, cols)

    # a magnitude that is never negative (a spread) goes on the sequential map
    rgb = (sequential_rgb if sequential else diverging_rgb)(grid, vmin, vmax)
    finite = np.isfinite(grid)
    if inside is not None:
        # masked pixels inside the aperture are drawn, in the no-data colour
        finite = finite | (resample_nanmean(np.asarray(inside, dtype=float), (rows, cols)) > 0.5)
    styles = _StyleCache(mode)
    for r in range(rows // 2):
        text = Text()
        for c in range(cols):
            top_ok, bot_ok = finite[2 * r, c], finite[2 * r + 1, c]
            top = tuple(int(x) for x in rgb[2 * r, c])
            bot = tuple(int(x) for x in rgb[2 * r + 1, c])
            if (r, c) in (high, low):
                base = top if top_ok else bot
                glyph = HIGH_GLYPH[mode] if (r, c) == high else LOW_GLYPH[mode]
                text.append(glyph, styles.get(_ink_on(base), base, bold=True))
            elif top_ok and bot_ok:
                text.append("▀", styles.get(top, bot))
            elif top_ok:
                text.append("▀", styles.get(top, None))
            elif bot_ok:
                text.append("▄", styles.get(bot, None))
            else:
                text.append(" ")
        lines.append(text)
    return Heatmap(lines, vmin, vmax, high, low, high_nm, low_nm, cols)


def legend_ticks(vmin: float, vmax: float, n: int) -> np.ndarray:
    """``n`` legend values from ``vmax`` down to ``vmin``, evenly spaced."""
    return np.linspace(vmax, vmin, max(n, 2))


def legend_lines(
    vmin_nm: float,
    vmax_nm: float,
    *,
    wavelength_nm: float,
    n: int = 7,
    mode: str = "truecolor",
    sequential: bool = False,
    swatches: bool = True,
) -> list[Text]:
    """Colour (or character) swatches with their heights in nm and in waves.

    A wave is one ``wavelength_nm`` of height; the values run from the top of the scale
    to the bottom so the legend reads like the map (high above, low below). Without
    ``swatches`` the lines hold the values alone, for a colour bar drawn beside them.
    """
    styles = _StyleCache(mode)
    ticks = legend_ticks(vmin_nm, vmax_nm, n)
    lines = []
    for value in ticks:
        line = Text()
        if not swatches:
            pass
        elif mode == "mono":
            line.append(f" {mono_char(np.array([value]), vmin_nm, vmax_nm)[0]}  ")
        else:
            colours = sequential_rgb if sequential else diverging_rgb
            rgb = tuple(int(x) for x in colours(np.array([value]), vmin_nm, vmax_nm)[0])
            line.append("  ", styles.get(None, rgb))
            line.append("  ")
        line.append(f"{format_number(value, 1, sign=True):>7} nm "
                    f"{format_number(value / wavelength_nm, 3, sign=True):>6} λ")
        lines.append(line)
    no_data = Text()
    if not swatches:
        pass
    elif mode == "mono":
        no_data.append("    ")
    else:
        no_data.append("  ", styles.get(None, NO_DATA_RGB))
        no_data.append("  ")
    no_data.append("no data", style="dim")
    lines.append(no_data)
    return lines
