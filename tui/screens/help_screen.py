"""The help screen: every key of the station, and the cautions for working at a test bench."""

from __future__ import annotations

from rich.table import Table
from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import VerticalScroll
from textual.screen import ModalScreen
from textual.widgets import Static

__all__ = ["HelpScreen", "SAFETY_NOTE"]

SAFETY_NOTE = (
    "Safety: never look into a laser beam or its reflection off the flats; use the "
    "laser class and eyewear your shop prescribes. Handle flats by their edges with "
    "clean gloves, lay them on soft clean tissue, and let them settle to room "
    "temperature before testing. Your shop's procedures and local rules come first."
)


class HelpScreen(ModalScreen[None]):
    """Lists ``(scope, key, what it does)`` rows handed in by the bench screen."""

    BINDINGS = [Binding("escape,question_mark,q", "dismiss", "Close help")]

    def __init__(self, rows: list[tuple]) -> None:
        super().__init__()
        self.rows = rows

    def compose(self) -> ComposeResult:
        table = Table(box=None, padding=(0, 1), header_style="bold", expand=False)
        table.add_column("where", style="dim")
        table.add_column("key", style="bold #ffc440")
        table.add_column("does")
        for scope, key, description, *_ in self.rows:
            table.add_row(scope, key, description)
        for key, description in (
            ("tab", "move between the queue and the view"),
            ("ctrl+p", "command palette: every action by name"),
            ("ctrl+q", "quit"),
        ):
            table.add_row("anywhere", key, description)
        with VerticalScroll(id="help-body"):
            yield Static(Text("Flatsight station — keys", style="bold"))
            yield Static(Text(SAFETY_NOTE, style="#ffc440"), id="safety")
            yield Static(
                Text(
                    "ctrl+p finds any action by name. Mouse: click a tab or a photo; a "
                    "click on the fringes moves the outline being edited. Queue: P pass, "
                    "F fail, I inconclusive (guarded rule: within U of a limit) against the "
                    "tolerance (bold: measured now; plain: the part's last verdict in the "
                    "inspection log); ▸ marked for g or n.",
                    style="dim",
                )
            )
            yield Static(table)
            yield Static(Text("esc closes this screen", style="dim"))

    def on_mount(self) -> None:
        body = self.query_one("#help-body", VerticalScroll)
        body.focus()  # the arrow keys and PgUp / PgDn scroll at once
        self.watch(body, "scroll_y", self._show_where, init=False)
        self.watch(body, "virtual_size", self._show_where, init=False)
        self.call_after_refresh(self._show_where)

    def on_resize(self) -> None:
        self.call_after_refresh(self._show_where)

    def _show_where(self, *_) -> None:
        """Say on the frame whether more lies below or above, and how to get there."""
        body = self.query_one("#help-body", VerticalScroll)
        if body.max_scroll_y <= 0:
            body.border_subtitle = "esc closes"
            return
        share = round(100 * body.scroll_y / body.max_scroll_y)
        where = ("↓ more below" if body.scroll_y <= 0 else
                 "↑ more above" if body.scroll_y >= body.max_scroll_y else
                 f"↑↓ more ({share} %)")
        body.border_subtitle = f"{where} · ↑ ↓ PgUp PgDn scroll · esc closes"
