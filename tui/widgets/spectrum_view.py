"""The spectrum view: where the fringes' sideband sits, and the window the analysis kept."""

from __future__ import annotations

from rich.text import Text

from ..render.photo import render_spectrum
from ..render.summary import method_lines, quality_lines
from .fringe_view import PANEL_WIDTH, wrapped
from .view_base import StationView, side_by_side

__all__ = ["SpectrumView"]


class SpectrumView(StationView):
    """The log-magnitude spectrum with the carrier, its window and the background marked."""

    def draw(self) -> Text:
        holding = self.placeholder()
        if holding is not None:
            return holding
        m = self.entry.measurement
        if m.quality.method == "intensity-fit":
            # no sideband: the phase was fitted to the fringes themselves
            return Text("\n".join([*quality_lines(m.quality, m.settings.ring_sign), "",
                                   "no carrier window: the fringes were too few or closed, "
                                   "so the phase was fitted to their brightness directly"]),
                        style="dim")
        if m.quality.per_photo or m.quality.carrier_fringes != m.quality.carrier_fringes:
            # an average has one spectrum per photo, a phase-shifted sequence none at all
            what = ("an average of photos: each has its own spectrum; open the photos "
                    "one by one" if m.quality.per_photo else
                    "phase-shifted frames: no tilt carrier, so no sideband to show")
            return Text("\n".join([*quality_lines(m.quality), "", what]), style="dim")
        sp = m.spectrum
        w, h = self.size.width, self.size.height
        wide = w >= 60
        lines, _ = render_spectrum(
            sp.log_magnitude,
            carrier_rc=sp.carrier_rc,
            window_radius=sp.window_radius,
            dc_radius=sp.dc_radius,
            width=w - PANEL_WIDTH - 2 if wide else w,
            height=h if wide else max(1, h - 2),
            mode=self.ctx.colour,
        )
        q = m.quality
        panel = [
            Text("Spectrum (log)", style="bold"),
            Text.assemble(("× ", "bold #ffc440"), "carrier"),
            Text.assemble(("○ ", "#ffc440"), "sideband window"),
            Text.assemble(("○ ", "#60a0ff"), "background (DC)"),
            Text.assemble(("┈ ", "#969696"), "mirror sideband"),
            Text(""),
            Text(f"{q.carrier_fringes:.1f} fringes across"),
            Text(f"period {q.fringe_period_px:.1f} px"),
            Text(f"direction {q.carrier_angle_deg:.0f}°"),
            Text(f"window ±{q.resolution_cycles_per_aperture:.1f} cyc/ap"),
            *(Text(line) for line in method_lines(q)),
            Text(""),
        ]
        panel += wrapped(
            "The window must stand clear of the blue ring and of the edge: "
            "closer to the centre means too little tilt, at the edge the "
            "fringes are too fine for the camera.",
            "dim",
            PANEL_WIDTH,
        )
        if wide:
            return side_by_side(
                lines, panel, left_width=max((len(x) for x in lines), default=0), height=h
            )
        out = Text("\n").join(lines)
        out.append(f"\n{q.carrier_fringes:.1f} fringes, period {q.fringe_period_px:.1f} px")
        return out
