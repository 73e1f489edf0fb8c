"""The line above the footer: what the station is doing, and the analysis's progress."""

from __future__ import annotations

from rich.text import Text
from textual.app import ComposeResult
from textual.containers import Horizontal
from textual.widgets import Label, ProgressBar

from ...analysis.formatting import printable

__all__ = ["StatusBar"]


class StatusBar(Horizontal):
    """A message on the left and a progress bar on the right (hidden when idle)."""

    DEFAULT_CSS = """
    StatusBar { height: 1; background: $boost; }
    StatusBar > Label { width: 1fr; height: 1; padding: 0 1; }
    StatusBar > ProgressBar { width: 26; height: 1; }
    StatusBar > ProgressBar.-idle { display: none; }
    """

    def compose(self) -> ComposeResult:
        yield Label("", id="status-text")
        yield ProgressBar(
            total=1.0, show_eta=False, show_percentage=True, id="status-progress", classes="-idle"
        )

    def say(self, message: str) -> None:
        """Show ``message`` as written: photo names and tolerances may hold brackets."""
        self.query_one("#status-text", Label).update(Text(printable(message)))

    def progress(self, fraction: float | None) -> None:
        """Show ``fraction`` (0..1) on the bar; None hides it."""
        bar = self.query_one("#status-progress", ProgressBar)
        bar.set_class(fraction is None, "-idle")
        if fraction is not None:
            bar.update(progress=max(0.0, min(1.0, fraction)))
