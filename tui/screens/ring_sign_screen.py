"""The ring-sign prompt: closed fringes need the operator to say convex or concave."""

from __future__ import annotations

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.screen import ModalScreen
from textual.widgets import Button, Static

from ..safe_text import literal

__all__ = ["RING_PUSH_TEST", "RingSignScreen"]

# the push test for closed rings in two lines (flatsight measure --help, "Closed fringes")
RING_PUSH_TEST = (
    "Push test, as your shop's procedure says: press gently on the top flat's edge. "
    "Rings moving out: convex (centre high); moving in: concave."
)


class RingSignScreen(ModalScreen[str | None]):
    """Asks whether the part in one photo of closed rings is convex or concave.

    Dismisses with ``"convex"``, ``"concave"``, or None when cancelled. The keys follow
    what the operator sees: o, the rings move out; i, they move in.
    """

    BINDINGS = [
        Binding("o", "choose('convex')", "Convex: the rings move out"),
        Binding("i", "choose('concave')", "Concave: the rings move in"),
        Binding("escape", "cancel", "Cancel: leave the photo unmeasured"),
    ]

    def __init__(self, photo_name: str, *, current: str | None = None) -> None:
        super().__init__()
        self.photo_name = photo_name
        self.current = current

    def compose(self) -> ComposeResult:
        with Vertical(id="ring-box"):
            yield Static("Closed fringes: convex or concave?", classes="title")
            name = literal(self.photo_name, style="bold")
            if self.current is not None:
                name.append(f"  (now stated {self.current})", style="dim")
            yield Static(name, id="ring-photo")
            yield Static(
                Text("One photo of closed rings looks the same either way.", style="dim"))
            yield Static(RING_PUSH_TEST, id="ring-push-test")
            with Horizontal(id="ring-buttons"):
                yield Button("o  out: convex", variant="primary", id="convex")
                yield Button("i  in: concave", variant="primary", id="concave")
                yield Button("esc  cancel", id="cancel")

    def on_mount(self) -> None:
        # no sign by default: a stray enter must not state one (it would flip the power)
        self.query_one("#cancel", Button).focus()

    def action_choose(self, sign: str) -> None:
        self.dismiss(sign)

    def action_cancel(self) -> None:
        self.dismiss(None)

    def on_button_pressed(self, event: Button.Pressed) -> None:
        event.stop()
        if event.button.id in ("convex", "concave"):
            self.action_choose(event.button.id)
        else:
            self.action_cancel()
