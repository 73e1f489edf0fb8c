"""The profile view: height along two perpendicular diameters, at an angle the operator turns."""

from __future__ import annotations

import numpy as np
from rich.text import Text
from textual.binding import Binding

from ..render.plot import Series, line_plot, profile
from ..render.units import UNIT_LABELS, convert
from .view_base import StationView

__all__ = ["ProfileView", "diameter_profiles"]

FIRST_RGB = (255, 170, 60)
SECOND_RGB = (96, 200, 255)


def diameter_profiles(m, height_map: np.ndarray, angle_deg: float, n: int = 240):
    """Heights along the diameters at ``angle_deg`` and ``angle_deg + 90``.

    Positions are in mm from the centre when the diameter is known, else in units of
    the aperture radius. Returns ``(positions, first, second, unit_label)``.
    """
    g, a = m.geometry, m.aperture
    centre_rc = (
        (a.center_y_px - g.origin_y_px) / g.step_px,
        (a.center_x_px - g.origin_x_px) / g.step_px,
    )
    radius = a.radius_px / g.step_px
    s, first = profile(height_map, centre_rc=centre_rc, radius=radius, angle_deg=angle_deg, n=n)
    _, second = profile(
        height_map, centre_rc=centre_rc, radius=radius, angle_deg=angle_deg + 90.0, n=n
    )
    if m.settings.diameter_mm:
        return s * m.settings.diameter_mm / 2.0, first, second, "mm"
    return s, first, second, "r/R"


def _rgb(c: tuple[int, int, int]) -> str:
    return f"rgb({c[0]},{c[1]},{c[2]})"


class ProfileView(StationView):
    """Two perpendicular profiles through the aperture centre as a braille line plot."""

    BINDINGS = [
        Binding("left", "screen.turn_profiles(-5)", "Turn ↺"),
        Binding("right", "screen.turn_profiles(5)", "Turn ↻"),
        Binding("shift+left", "screen.turn_profiles(-1)", "Turn ↺ 1°", show=False),
        Binding("shift+right", "screen.turn_profiles(1)", "Turn ↻ 1°", show=False),
    ]

    def draw(self) -> Text:
        holding = self.placeholder()
        if holding is not None:
            return holding
        m = self.entry.measurement
        ctx = self.ctx
        height_map = ctx.map_nm if ctx.map_nm is not None else m.height_nm
        angle = ctx.profile_angle_deg
        x, first, second, xunit = diameter_profiles(m, height_map, angle)
        scale = convert(1.0, ctx.units, ctx.wavelength_nm)
        series = [
            Series(f"{angle:.0f}°", x, first * scale, FIRST_RGB),
            Series(f"{(angle + 90) % 180:.0f}°", x, second * scale, SECOND_RGB),
        ]
        w, h = self.size.width, self.size.height
        head = Text()
        mono = ctx.colour == "mono"
        head.append("━━ " if not mono else "⣿⣿ ", style=_rgb(FIRST_RGB) if not mono else "")
        head.append(f"{angle % 180:.0f}°   ")
        head.append("━━ " if not mono else "⡇⡇ ", style=_rgb(SECOND_RGB) if not mono else "")
        head.append(f"{(angle + 90) % 180:.0f}°   ")
        head.append("angle counter-clockwise from the photo's x axis", style="dim")
        head.truncate(w)
        plot = line_plot(
            series,
            width=w,
            height=max(4, h - 1),
            y_label=UNIT_LABELS[ctx.units],
            x_label=xunit,
            mode=ctx.colour,
        )
        out = head
        for line in plot:
            out.append("\n")
            out.append_text(line)
        return out
