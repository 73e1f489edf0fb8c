"""The surface view: the height map as a heatmap with its legend, and Zernike terms to take out."""

from __future__ import annotations

import textwrap

import numpy as np
from rich.text import Text
from textual.binding import Binding

from ...analysis.zernike import term_name
from ..render.heatmap import legend_lines, render_heatmap
from ..render.picture import map_cells, map_picture
from ..render.units import fmt_height
from .view_base import StationView, side_by_side

__all__ = ["SurfaceView", "TERM_GROUPS"]

# key -> (label, Noll terms) of the term groups the operator can take out of the map
TERM_GROUPS = {
    "p": ("power", (4,)),
    "a": ("astigmatism", (5, 6)),
    "c": ("coma", (7, 8)),
    "t": ("trefoil", (9, 10)),
    "h": ("spherical", (11,)),
}
LEGEND_WIDTH = 27


class SurfaceView(StationView):
    """Heatmap of the surface (high ▲, low ▼) with a legend in nm and waves; a picture of
    it with a colour bar where the terminal draws pictures."""

    DRAWS_PICTURES = True

    BINDINGS = [
        Binding("p", "screen.toggle_terms('p')", "±Power"),
        Binding("a", "screen.toggle_terms('a')", "±Astig"),
        Binding("c", "screen.toggle_terms('c')", "±Coma"),
        Binding("t", "screen.toggle_terms('t')", "±Trefoil"),
        Binding("h", "screen.toggle_terms('h')", "±Spherical"),
        Binding("r", "screen.restore_terms", "Restore terms"),
        Binding("v", "screen.cycle_colour", "Colours"),
    ]

    def _terms_line(self) -> Text:
        removed = set(self.ctx.removed_terms)
        line = Text("out: ", style="dim")
        line.append("tilt ")
        for key, (label, terms) in TERM_GROUPS.items():
            on = set(terms) <= removed
            line.append(f"{key}:", style="dim")
            line.append(label[:5] + " ", style="bold #60e8ff" if on else "dim strike")
        return line

    def _map_picture(self, height_map, inside, width: int, height: int, n_ticks: int):
        """Show the map and its colour bar as a picture, below the terms line."""
        cell_px = self.cell_px()
        key = (width, height, n_ticks, cell_px)
        return self.place_picture(height_map, key, lambda: map_picture(
            height_map, width=width, height=height, cell_px=cell_px, n_ticks=n_ticks,
            inside=inside), top=1)[2]

    def draw(self) -> Text:
        holding = self.placeholder()
        if holding is not None:
            return holding
        m = self.entry.measurement
        ctx = self.ctx
        height_map = ctx.map_nm if ctx.map_nm is not None else m.height_nm
        figures = ctx.figures if ctx.figures is not None else m.figures
        w, h = self.size.width, self.size.height
        map_w = max(4, w - LEGEND_WIDTH - 1)
        inside = np.hypot(*m.geometry.unit_xy(m.aperture)) <= 1.0
        pictured = self.pictures_shown()
        if pictured:
            cells_w, _ = map_cells(height_map.shape, map_w, max(1, h - 1), self.cell_px())
        else:
            hm = render_heatmap(
                height_map, width=map_w, height=max(1, h - 1), mode=ctx.colour, inside=inside
            )
            cells_w = hm.width_cells
        wl = ctx.wavelength_nm
        # the note of the terms taken out, wrapped to the legend's column: a line longer
        # than the column would wrap onto the map and push it a row down
        room = max(8, w - cells_w - 2)
        extra = sorted(set(ctx.removed_terms) - {1, 2, 3})
        note = []
        if extra:
            names = ", ".join(dict.fromkeys(term_name(j).split(" ")[0] for j in extra))
            note = [Text(line, style="#60e8ff")
                    for line in textwrap.wrap(f"without {names}", room)]
        n_ticks = max(3, min(9, h - 10 - len(note)))
        if pictured:
            # the map's picture states the scale and the extremes the legend gives
            hm = self._map_picture(height_map, inside, map_w, max(1, h - 1), n_ticks)
            lines = [Text(" " * cells_w) for _ in range(hm.cells_h)]
        else:
            lines = hm.lines
        legend = legend_lines(hm.vmin_nm, hm.vmax_nm, wavelength_nm=wl, n=n_ticks,
                              mode=ctx.colour, swatches=not pictured)
        hi_mark = "H" if ctx.colour == "mono" else "▲"
        lo_mark = "L" if ctx.colour == "mono" else "▼"
        legend += [
            Text.assemble(
                (f"{hi_mark} high ", "bold"), fmt_height(hm.high_nm, ctx.units, wl, signed=True)
            ),
            Text.assemble(
                (f"{lo_mark} low  ", "bold"), fmt_height(hm.low_nm, ctx.units, wl, signed=True)
            ),
            Text.assemble(("PV   ", "bold"), fmt_height(figures.pv_nm, ctx.units, wl)),
            Text.assemble(("RMS  ", "bold"), fmt_height(figures.rms_nm, ctx.units, wl)),
        ]
        legend += note
        if pictured:
            legend.append(self.picture_note())
        for line in legend:
            line.truncate(room)
        body = side_by_side(lines, legend, left_width=cells_w, height=h - 1)
        out = self._terms_line()
        out.append("\n")
        out.append_text(body)
        return out

