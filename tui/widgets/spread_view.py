"""The spread view: for averaged photos, the per-pixel standard deviation between them."""

from __future__ import annotations

import numpy as np
from rich.text import Text

from ..render.heatmap import legend_lines, render_heatmap
from ..render.units import fmt_height
from .view_base import StationView, side_by_side

__all__ = ["SpreadView"]

LEGEND_WIDTH = 27


class SpreadView(StationView):
    """How much the averaged photos disagree, pixel by pixel (their repeatability)."""

    def draw(self) -> Text:
        holding = self.placeholder()
        if holding is not None:
            return holding
        e = self.entry
        avg = e.combined if e.kind == "average" else None
        if avg is None:
            return Text(
                "The spread map is for averaged photos: mark two or more photos of one "
                "part with space, then press g to average them.",
                style="dim",
            )
        ctx = self.ctx
        spread = avg.spread_nm
        w, h = self.size.width, self.size.height
        finite = spread[np.isfinite(spread)]
        top = float(finite.max()) if finite.size else 1.0
        hm = render_heatmap(
            spread, width=max(4, w - LEGEND_WIDTH - 1), height=max(1, h - 1), mode=ctx.colour,
            vmin=0.0, vmax=max(top, 1e-9), mark_extremes=False, sequential=True,
        )
        wl = ctx.wavelength_nm
        legend = legend_lines(hm.vmin_nm, hm.vmax_nm, wavelength_nm=wl,
                              n=max(3, min(7, h - 9)), mode=ctx.colour, sequential=True)
        legend += [
            Text.assemble(("photos ", "bold"), str(avg.n_photos)),
            Text.assemble(("spread RMS ", "bold"), fmt_height(avg.rms_spread_nm, ctx.units, wl)),
            Text.assemble(("std. error ", "bold"),
                          fmt_height(avg.rms_standard_error_nm, ctx.units, wl)),
            Text.assemble(("PV std  ", "bold"),
                          fmt_height(avg.figure_spread_nm.get("pv_nm", np.nan), ctx.units, wl)),
        ]
        title = Text("spread between photos (std. dev., ddof 1)", style="dim")
        body = side_by_side(hm.lines, legend, left_width=hm.width_cells, height=h - 1)
        return title + Text("\n") + body
