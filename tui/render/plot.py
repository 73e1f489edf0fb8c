"""Line plots in the terminal: braille dots (2 x 4 per cell), tick labels, one colour per series."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from rich.text import Text

from ...analysis.formatting import format_number
from .heatmap import _StyleCache

__all__ = ["Series", "braille_char", "line_plot", "nice_ticks", "profile"]

# Unicode braille: dot (column, row) -> bit, rows 0..3 from the top (Unicode 3.0, U+2800 block).
_DOT_BITS = {
    (0, 0): 0x01,
    (0, 1): 0x02,
    (0, 2): 0x04,
    (1, 0): 0x08,
    (1, 1): 0x10,
    (1, 2): 0x20,
    (0, 3): 0x40,
    (1, 3): 0x80,
}
AXIS_RGB = (120, 120, 130)


@dataclass(frozen=True)
class Series:
    """One line: ``x`` and ``y`` of equal length (NaN in ``y`` breaks the line)."""

    label: str
    x: np.ndarray
    y: np.ndarray
    rgb: tuple[int, int, int]


def braille_char(dots: set[tuple[int, int]]) -> str:
    """The braille character with the given ``(column, row)`` dots raised."""
    code = 0
    for d in dots:
        code |= _DOT_BITS[d]
    return chr(0x2800 + code)


def nice_ticks(lo: float, hi: float, n: int = 5) -> np.ndarray:
    """Round tick values (1, 2, 5 times a power of ten) covering ``[lo, hi]``."""
    if not np.isfinite(lo) or not np.isfinite(hi) or hi <= lo:
        return np.array([lo]) if np.isfinite(lo) else np.array([0.0])
    raw = (hi - lo) / max(n, 1)
    mag = 10 ** np.floor(np.log10(raw))
    step = next(m * mag for m in (1, 2, 5, 10) if m * mag >= raw)
    start = np.ceil(lo / step - 1e-9) * step
    return np.arange(start, hi + step * 1e-6, step) + 0.0  # + 0.0 turns -0 into 0


def profile(
    height: np.ndarray,
    *,
    centre_rc: tuple[float, float],
    radius: float,
    angle_deg: float,
    n: int = 200,
) -> tuple[np.ndarray, np.ndarray]:
    """Heights along a diameter through ``centre_rc`` at ``angle_deg``.

    The angle is counter-clockwise from the map's +x (column) axis as the photo is seen
    (rows grow downward, so +y is up). Nearest-pixel sampling keeps NaN where nothing was
    measured. Returns positions in units of the radius (``-1..1``) and the heights.
    """
    h = np.asarray(height, dtype=float)
    s = np.linspace(-1.0, 1.0, n)
    a = np.radians(angle_deg)
    rows = np.rint(centre_rc[0] - s * radius * np.sin(a)).astype(int)
    cols = np.rint(centre_rc[1] + s * radius * np.cos(a)).astype(int)
    ok = (rows >= 0) & (rows < h.shape[0]) & (cols >= 0) & (cols < h.shape[1])
    out = np.full(n, np.nan)
    out[ok] = h[rows[ok], cols[ok]]
    return s, out


def _fmt(v: float) -> str:
    v = float(v) + 0.0  # -0.0 + 0.0 is +0.0: no signed zero on an axis
    return f"{v:.3g}" if abs(v) < 1000 else format_number(v, 0)


def line_plot(
    series: list[Series],
    *,
    width: int,
    height: int,
    y_label: str = "",
    x_label: str = "",
    mode: str = "truecolor",
) -> list[Text]:
    """Plot ``series`` into ``width x height`` cells, axes and labels included.

    The y range covers every finite value of every series (and zero, drawn as a faint
    dotted line). In ``"mono"`` mode the series after the first are drawn with every
    other dot left out, so they stay apart without colour.
    """
    margin = 8
    plot_w, plot_h = width - margin - 1, height - 2
    if plot_w < 4 or plot_h < 2:
        return [Text("(too small)")]
    ys = [s.y[np.isfinite(s.y)] for s in series]
    finite = np.concatenate(ys) if ys else np.array([])
    if finite.size == 0:
        return [Text("no data to plot")]
    lo, hi = float(min(finite.min(), 0.0)), float(max(finite.max(), 0.0))
    if hi - lo < 1e-9:
        lo, hi = lo - 1.0, hi + 1.0
    pad = 0.05 * (hi - lo)
    lo, hi = lo - pad, hi + pad
    xs = np.concatenate([s.x for s in series])
    x_lo, x_hi = float(np.nanmin(xs)), float(np.nanmax(xs))
    if x_hi <= x_lo:
        x_hi = x_lo + 1.0
    dots_w, dots_h = 2 * plot_w, 4 * plot_h
    cells: dict[tuple[int, int], set] = {}
    owner: dict[tuple[int, int], int] = {}

    def to_dot_row(v: np.ndarray) -> np.ndarray:
        return np.rint((hi - v) / (hi - lo) * (dots_h - 1)).astype(int)

    def put(dc: int, dr: int, k: int) -> None:
        key = (dr // 4, dc // 2)
        cells.setdefault(key, set()).add((dc % 2, dr % 4))
        owner[key] = k

    zero_row = int(to_dot_row(np.array([0.0]))[0])
    for dc in range(0, dots_w, 3):
        put(dc, zero_row, -1)
    grid_x = np.linspace(x_lo, x_hi, dots_w)
    for k, s in enumerate(series):
        order = np.argsort(s.x)
        sx, sy = np.asarray(s.x)[order], np.asarray(s.y)[order]
        yv = np.interp(grid_x, sx, np.nan_to_num(sy))
        # a column is drawn only if its nearest sample was measured: NaN breaks the line
        near = np.clip(np.searchsorted(sx, grid_x), 0, sx.size - 1)
        valid = np.isfinite(sy[near])
        rows = to_dot_row(yv)
        prev = None
        for dc in range(dots_w):
            if not valid[dc]:
                prev = None
                continue
            if mode == "mono" and k > 0 and dc % 2:
                prev = rows[dc]
                continue
            r0 = rows[dc] if prev is None else prev
            lo_r, hi_r = sorted((r0, rows[dc]))
            # join steep steps so the line stays continuous
            for dr in range(lo_r if prev is not None else rows[dc], hi_r + 1):
                put(dc, dr, k)
            prev = rows[dc]

    styles = _StyleCache(mode)
    ticks = nice_ticks(lo, hi, max(3, plot_h // 2))
    tick_rows = {int(round((hi - t) / (hi - lo) * (plot_h - 1))): t for t in ticks}
    lines = []
    for r in range(plot_h):
        line = Text()
        label = _fmt(tick_rows[r]) if r in tick_rows else ""
        line.append(f"{label:>{margin - 1}} ", style="dim")
        line.append("┤" if r in tick_rows else "│", style=styles.get(AXIS_RGB, None))
        for c in range(plot_w):
            dots = cells.get((r, c))
            if not dots:
                line.append(" ")
                continue
            k = owner[(r, c)]
            colour = AXIS_RGB if k < 0 else series[k].rgb
            line.append(braille_char(dots), styles.get(colour if mode != "mono" else None, None))
        lines.append(line)
    axis = Text(" " * margin + "└" + "─" * plot_w, style=styles.get(AXIS_RGB, None))
    lines.append(axis)
    labels = [" "] * (plot_w + margin + 1)
    for t in nice_ticks(x_lo, x_hi, max(2, plot_w // 12)):
        pos = margin + 1 + int(round((t - x_lo) / (x_hi - x_lo) * (plot_w - 1)))
        txt = _fmt(t)
        start = min(max(pos - len(txt) // 2, margin + 1), plot_w + margin + 1 - len(txt))
        if all(ch == " " for ch in labels[max(start - 1, 0) : start + len(txt) + 1]):
            labels[start : start + len(txt)] = list(txt)
    if x_label:
        labels[: margin - 1] = list(x_label[: margin - 1].rjust(margin - 1))
    lines.append(Text("".join(labels), style="dim"))
    if y_label:
        label = Text(y_label[: margin - 1].rjust(margin - 1) + " ", style="bold")
        lines[0] = label + lines[0][margin:]
    return lines
