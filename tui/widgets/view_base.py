"""What the station's views share: the entry and context they draw, and a side-by-side layout."""

from __future__ import annotations

from rich.text import Text
from textual.widget import Widget

from ..safe_text import shown
from ..station_state import QueueEntry, ViewContext

__all__ = ["StationView", "side_by_side"]


def side_by_side(
    left: list[Text], right: list[Text], *, left_width: int, gap: int = 2, height: int | None = None
) -> Text:
    """Two columns of lines joined into one Text, the left one padded to ``left_width``."""
    rows = max(len(left), len(right)) if height is None else height
    out = Text()
    for i in range(rows):
        line = left[i].copy() if i < len(left) else Text()
        line.truncate(left_width, pad=True)
        line.append(" " * gap)
        if i < len(right):
            line.append_text(right[i])
        if i:
            out.append("\n")
        out.append_text(line)
    return out


class StationView(Widget, can_focus=True):
    """A focusable view of the current photo; subclasses draw it in :meth:`render`.

    A view that ``DRAWS_PICTURES`` holds a picture docked at its top left when the
    station draws pictures (``app.pictures`` names the terminal's graphics protocol);
    its text then leaves the picture's cells blank (:meth:`place_picture`).
    """

    DEFAULT_CSS = """
    StationView { height: 1fr; width: 1fr; }
    StationView > .picture { dock: left; display: none; }
    """
    DRAWS_PICTURES = False

    def __init__(self, **kwargs) -> None:
        super().__init__(**kwargs)
        self.entry: QueueEntry | None = None
        self.ctx = ViewContext()

    def compose(self):
        protocol = getattr(self.app, "pictures", None)
        if self.DRAWS_PICTURES and protocol is not None:
            from ..picture_mode import picture_widget

            yield picture_widget(protocol)

    def pictures_shown(self) -> bool:
        """Whether this view draws a picture now: the station draws them, and in colour."""
        return (self.DRAWS_PICTURES and getattr(self.app, "pictures", None) is not None
                and self.ctx.colour != "mono")

    def picture_note(self) -> Text:
        """A line naming how the picture is drawn, for the view's side column."""
        from ..picture_mode import PROTOCOL_NAMES

        return Text(f"picture: {PROTOCOL_NAMES[self.app.pictures]}", style="dim")

    def cell_px(self) -> tuple[int, int]:
        return getattr(self.app, "cell_px", (10, 20))

    def place_picture(self, source, key, make, *, top: int = 0) -> tuple[int, int, object]:
        """Show the picture ``make()`` returns of ``source`` (an array).

        It is remade only when ``source`` is another object or ``key`` (the drawing's
        settings) changes; the source is held while its picture is shown, so a new
        array can never be taken for it.
        ``make`` returns None or an object with ``image``, ``cells_w`` and ``cells_h``.
        Returns the cells it fills, ``(0, 0, None)`` for none, and that object.
        """
        self._picture_placed = True
        widget = self.query_one(".picture")
        if (source is not getattr(self, "_picture_source", None)
                or key != getattr(self, "_picture_key", None)):
            self._picture_source = source
            self._picture_key = key
            self._picture = make()
            widget.image = None if self._picture is None else self._picture.image
        pic = self._picture
        if pic is None:
            widget.display = False
            return 0, 0, None
        widget.styles.width = pic.cells_w
        widget.styles.height = pic.cells_h
        widget.styles.margin = (top, 0, 0, 0)
        widget.display = True
        return pic.cells_w, pic.cells_h, pic

    def _hide_picture(self) -> None:
        for widget in self.query(".picture"):
            widget.display = False

    def show(self, entry: QueueEntry | None, ctx: ViewContext) -> None:
        """Draw ``entry`` with the operator's choices in ``ctx``."""
        self.entry = entry
        self.ctx = ctx
        self.refresh()

    def render(self) -> Text:
        self._picture_placed = False
        try:
            return self.draw()
        except Exception as exc:  # a drawing bug must not take the station down
            return Text(f"cannot draw this view: {type(exc).__name__}: {shown(exc)}",
                        style="#ff6e8a")
        finally:
            if not self._picture_placed:  # cells, a placeholder or an error: no picture
                self._hide_picture()

    def draw(self) -> Text:
        """The view's content at the widget's current size."""
        raise NotImplementedError

    def placeholder(self) -> Text | None:
        """A line to show when there is nothing to draw yet, else None."""
        e = self.entry
        if e is None:
            return Text("No photo. Press o to open photos.", style="dim")
        if e.state == "error":
            return Text.assemble(("✗ ", "bold #ff6e8a"), (e.error or "error", ""))
        if e.measurement is None:
            return Text(
                "Measuring…" if e.state == "running" else "Not measured yet (m).", style="dim"
            )
        return None
