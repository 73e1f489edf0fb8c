"""The fringe view: the photo with the aperture and exclusions drawn over it, and editable."""

from __future__ import annotations

import textwrap

from rich.text import Text
from textual.binding import Binding

from ..render.photo import aperture_region, render_photo
from ..render.picture import photo_picture
from ..render.summary import carrier_short, quality_lines
from ..safe_text import shown
from .view_base import StationView, side_by_side

__all__ = ["FringeView"]

PANEL_WIDTH = 24


class FringeView(StationView):
    """The photo in half-block grey cells, or as a picture where the terminal draws them, the
    outlines drawn into it either way. Keys move and size the outline being edited."""

    DRAWS_PICTURES = True

    BINDINGS = [
        Binding("left", "screen.nudge(-1, 0)", "Move ←", show=False),
        Binding("right", "screen.nudge(1, 0)", "Move →", show=False),
        Binding("up", "screen.nudge(0, -1)", "Move ↑", show=False),
        Binding("down", "screen.nudge(0, 1)", "Move ↓", show=False),
        Binding("shift+left", "screen.nudge(-5, 0)", "Move ← ×5", show=False),
        Binding("shift+right", "screen.nudge(5, 0)", "Move → ×5", show=False),
        Binding("shift+up", "screen.nudge(0, -5)", "Move ↑ ×5", show=False),
        Binding("shift+down", "screen.nudge(0, 5)", "Move ↓ ×5", show=False),
        Binding("plus,equals_sign", "screen.grow(1)", "Grow"),
        Binding("minus", "screen.grow(-1)", "Shrink"),
        Binding("comma", "screen.turn(1)", "Turn the outline 1° anticlockwise", show=False),
        Binding("full_stop", "screen.turn(-1)", "Turn the outline 1° clockwise", show=False),
        Binding("less_than_sign", "screen.stretch(-1)",
                "Narrow the outline across (a circle becomes an ellipse)", show=False),
        Binding("greater_than_sign", "screen.stretch(1)", "Widen the outline across",
                show=False),
        Binding("a", "screen.auto_aperture", "Auto aperture"),
        Binding("x", "screen.add_exclusion", "Exclude"),
        Binding("e", "screen.next_outline", "Next outline"),
        Binding("d,delete", "screen.remove_exclusion", "Drop exclusion"),
        Binding("z", "screen.toggle_zoom", "Zoom to aperture"),
    ]

    def draw(self) -> Text:
        e = self.entry
        self._shown_picture = None  # where a click lands: the picture, else the cells
        if e is None or e.pixels is None:
            return self.placeholder() or Text("Loading photo…", style="dim")
        w, h = self.size.width, self.size.height
        wide = w >= 60
        map_w = w - PANEL_WIDTH - 2 if wide else w
        map_h = h if wide else max(1, h - 2)
        aperture = e.shown_aperture()
        region = (
            aperture_region(aperture, e.pixels.shape)
            if self.ctx.zoom and aperture is not None
            else None
        )
        if self.pictures_shown():
            lines = self._picture_lines(e.pixels, map_w, map_h, aperture, region)
        else:
            lines, self._grid = render_photo(
                e.pixels,
                width=map_w,
                height=map_h,
                aperture=aperture,
                selected=self.ctx.selected,
                mode=self.ctx.colour,
                region=region,
            )
        panel = self._panel(aperture)
        if wide:
            return side_by_side(
                lines, panel, left_width=max((len(x) for x in lines), default=0), height=h
            )
        out = Text("\n").join(lines)
        for line in self._summary(aperture, w):
            out.append("\n")
            line.truncate(w)
            out.append_text(line)
        return out

    def _picture_lines(self, pixels, width, height, aperture, region) -> list[Text]:
        """Show the photo as a picture; blank lines where it lies, for the text around it."""
        selected = self.ctx.selected
        cell_px = self.cell_px()
        key = (aperture, selected, region, width, height, cell_px)
        cells_w, cells_h, pic = self.place_picture(pixels, key, lambda: photo_picture(
            pixels, width=width, height=height, cell_px=cell_px, aperture=aperture,
            selected=selected, region=region))
        self._grid = None
        self._shown_picture = pic
        return [Text(" " * cells_w) for _ in range(cells_h)]

    async def on_click(self, event) -> None:
        """A click on the photo moves the outline being edited to that point."""
        pic = getattr(self, "_shown_picture", None)
        grid = getattr(self, "_grid", None)
        if pic is not None and 0 <= event.x < pic.cells_w and 0 <= event.y < pic.cells_h:
            x, y = pic.photo_xy(event.x + 0.5, event.y + 0.5, self.cell_px())
        elif grid is not None and 0 <= event.x < grid.cols and 0 <= 2 * event.y < grid.rows:
            x = grid.origin_x_px + (event.x + 0.5) * grid.step_px - 0.5
            y = grid.origin_y_px + (2 * event.y + 1.0) * grid.step_px - 0.5
        else:
            return
        await self.screen.run_action(f"centre_at({x:.1f}, {y:.1f})")

    def _summary(self, aperture, width: int = 10**6) -> list[Text]:
        """Two lines under the photo when there is no room for the side panel.

        The second line drops whole pieces, least needed first, until it fits ``width``
        (a label is never left without its value).
        """
        e = self.entry
        if aperture is None:
            return [Text(e.name, style="bold")]
        editing = "aperture" if self.ctx.selected < 0 else f"exclusion {self.ctx.selected + 1}"
        first = Text.assemble(
            (e.name, "bold"),
            ("  auto" if e.aperture is None else "  manual", "dim"),
            ("  editing ", "dim"),
            (editing, "bold #60e8ff"),
        )
        if e.measurement is None and e.error:
            return [first, Text(f"✗ {e.error}", style="#ff6e8a")]
        return [first, _status_line(aperture, e.measurement, width)]

    def _panel(self, aperture) -> list[Text]:
        e = self.entry
        rows = [Text(e.name, style="bold")]
        if aperture is None:
            return rows
        editing = "aperture" if self.ctx.selected < 0 else f"exclusion {self.ctx.selected + 1}"
        rows += [
            Text.assemble(("aperture ", "dim"), ("auto" if e.aperture is None else "manual")),
            Text(f"centre {aperture.center_x_px:.0f}, {aperture.center_y_px:.0f} px"),
            # an outline says its kind and size; a circle its radius
            Text(aperture.shape.describe() if aperture.shape is not None
                 else f"radius {aperture.radius_px:.0f} px"),
            Text(f"exclusions {len(aperture.exclusions)}"),
            Text.assemble(("editing ", "dim"), (editing, "bold #60e8ff")),
            Text("z: whole photo" if self.ctx.zoom else "z: zoom to aperture", style="dim"),
        ]
        if self.pictures_shown():
            rows.append(self.picture_note())
        rows.append(Text(""))
        m = e.measurement
        if m is not None:
            q = m.quality
            rows += [Text(line) for line in quality_lines(q, m.settings.ring_sign)]
            rows.append(Text(f"masked {100 * q.masked_fraction:.1f} %"))
            for warning in m.warnings[:3]:
                rows += wrapped(f"! {warning}", "#ffc440")
        elif e.error:
            rows += wrapped(f"✗ {e.error}", "#ff6e8a")
        return rows


def wrapped(message: str, style: str, width: int = PANEL_WIDTH) -> list[Text]:
    """A message broken into panel-wide lines."""
    return [Text(line, style=style) for line in textwrap.wrap(shown(message), width)]


def _status_line(aperture, m, width: int) -> Text:
    """The outline and the measurement in one line of at most ``width`` cells.

    Pieces go whole, least needed first: the exclusion count when there is none, the
    centre, the outline's full description (its kind stays), then the carrier.
    """
    shape = aperture.shape
    # an outline says its own size; a circle its radius
    size = shape.describe() if shape is not None else f"r {aperture.radius_px:.0f} px"
    short_size = (("rectangle" if shape.kind == "rect" else
                   "polygon" if shape.kind == "poly" else
                   "circle with flats" if shape.kind == "cut" else shape.kind)
                  if shape is not None else size)
    n_excl = len(aperture.exclusions)
    pieces = {
        "centre": f"c {aperture.center_x_px:.0f},{aperture.center_y_px:.0f}",
        "size": size,
        "excl": f"{n_excl} excl",
    }
    tail = {}
    if m is not None:
        # closed fringes have no carrier: their stated sign says more in the room
        stated = m.quality.sign == "stated" and m.settings.ring_sign
        tail["carrier"] = (f"{m.settings.ring_sign} stated" if stated
                           else carrier_short(m.quality))
        tail["masked"] = f"masked {100 * m.quality.masked_fraction:.0f} %"

    def line() -> Text:
        text = Text("  ".join(pieces.values()))
        if tail:
            text.append(("  " if pieces else "") + "  ".join(tail.values()), style="dim")
        return text

    steps = [
        lambda: n_excl == 0 and pieces.pop("excl", None),
        lambda: pieces.pop("centre", None),
        lambda: pieces.__setitem__("size", short_size),
        lambda: tail.pop("carrier", None),
        lambda: pieces.pop("excl", None),
    ]
    text = line()
    for step in steps:
        if text.cell_len <= width:
            break
        step()
        text = line()
    return text
