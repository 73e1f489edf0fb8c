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
    """A focusable view of the current photo; subclasses draw it in :meth:`render`."""

    DEFAULT_CSS = """
    StationView { height: 1fr; width: 1fr; }
    """

    def __init__(self, **kwargs) -> None:
        super().__init__(**kwargs)
        self.entry: QueueEntry | None = None
        self.ctx = ViewContext()

    def show(self, entry: QueueEntry | None, ctx: ViewContext) -> None:
        """Draw ``entry`` with the operator's choices in ``ctx``."""
        self.entry = entry
        self.ctx = ctx
        self.refresh()

    def render(self) -> Text:
        try:
            return self.draw()
        except Exception as exc:  # a drawing bug must not take the station down
            return Text(f"cannot draw this view: {type(exc).__name__}: {shown(exc)}",
                        style="#ff6e8a")

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
