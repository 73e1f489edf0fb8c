"""The queue of photos down the left side: each one's state and headline figure."""

from __future__ import annotations

from rich.text import Text
from textual.binding import Binding
from textual.widgets import OptionList
from textual.widgets.option_list import Option

from ..render.units import fmt_height
from ..station_state import STATE_LABELS, QueueEntry

__all__ = ["PhotoQueue", "VERDICT_TAGS", "entry_prompt"]

# verdict -> (tag, style of this session's verdict, style of the log's last one)
VERDICT_TAGS = {
    "pass": ("P", "bold #7fd67f", "#4f8f4f"),
    "fail": ("F", "bold #ffffff on #b0304a", "#ff6e8a"),
    "inconclusive": ("I", "bold #1a1a1a on #ffc440", "#ffc440"),
}


def entry_prompt(entry: QueueEntry, *, units: str, wavelength_nm: float, width: int,
                 others: tuple[str, ...] = ()) -> Text:
    """One queue line: state glyph, mark, photo name (cut to fit), PV, verdict tag.

    ``others`` are the queue's file names: a name cut to fit keeps what tells it apart.

    The verdict tag is P (pass), F (fail) or I (inconclusive under the guarded decision
    rule): bold for this session's measurement, plain for the part's last verdict in the
    inspection log.
    """
    glyph, _, style = STATE_LABELS[entry.state]
    if entry.state in ("ok", "warning") and entry.measurement is not None:
        wl = entry.measurement.settings.wavelength_nm  # the photo's own, under a preset
        figure = fmt_height(entry.measurement.figures.pv_nm, units, wl)
    elif entry.state == "error":
        figure = "error"
    elif entry.state == "running":
        figure = "…"
    else:
        figure = ""
    verdict, fresh = entry.shown_verdict
    tag = VERDICT_TAGS.get(verdict)
    room = max(4, width - 3 - len(figure) - (2 if tag else 0) - (1 if entry.marked else 0))
    name = entry.name_in(room, others=others)
    line = Text()
    line.append(glyph + " ", style=style)
    if entry.marked:
        line.append("▸", style="bold #60e8ff")
    line.append(name.ljust(room))
    line.append(" " + figure, style="dim" if entry.state == "error" else "")
    if tag:
        line.append(" ")
        line.append(tag[0], style=tag[1] if fresh else tag[2])
    return line


class PhotoQueue(OptionList):
    """The photos to inspect; moving the highlight opens that photo."""

    BINDINGS = [
        Binding("down,j", "cursor_down", "Next photo", show=False),
        Binding("up,k", "cursor_up", "Previous photo", show=False),
    ]

    def show_entries(
        self, entries: list[QueueEntry], current: int, *, units: str, wavelength_nm: float
    ) -> None:
        """Redraw every line and keep the highlight on ``current``."""
        width = max(12, (self.scrollable_content_region.width or self.size.width or 22) - 1)
        names = tuple(dict.fromkeys(e.path.name for e in entries))
        options = [
            Option(entry_prompt(e, units=units, wavelength_nm=wavelength_nm, width=width,
                                others=names), id=str(i))
            for i, e in enumerate(entries)
        ]
        with self.prevent(OptionList.OptionHighlighted):
            self.clear_options()
            self.add_options(options)
            if entries:
                self.highlighted = current
