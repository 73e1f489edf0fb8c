"""The preset picker: choose one of the presets file's named bench presets for every photo."""

from __future__ import annotations

from rich.text import Text
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import OptionList, Static
from textual.widgets.option_list import Option

__all__ = ["BY_NAME", "PresetScreen", "describe_preset"]

BY_NAME = "\0by-name"  # the choice that goes back to each photo's own preset (or none)


def describe_preset(p) -> str:
    """One line of what a preset sets, e.g. ``632.8 nm · 3/1(0.5) · Tamsin Ode @ bench-2``."""
    parts = []
    if p.wavelength_nm is not None:
        parts.append(f"{p.wavelength_nm:g} nm")
    if p.diameter_mm is not None:
        parts.append(f"⌀ {p.diameter_mm:g} mm")
    if p.zernike_terms is not None:
        parts.append(f"{p.zernike_terms} terms")
    if p.tolerance:
        parts.append(p.tolerance)
    who = " @ ".join(x for x in (p.operator, p.station) if x)
    if who:
        parts.append(who)
    return " · ".join(parts) or "sets nothing"


class PresetScreen(ModalScreen[object]):
    """Lists the presets; Enter returns the chosen Preset (or BY_NAME), Escape None."""

    BINDINGS = [Binding("escape", "cancel", "Cancel")]

    def __init__(self, presets: dict, *, current: str | None, source: str) -> None:
        super().__init__()
        self.presets = presets
        self.current = current
        self.source = source

    def compose(self) -> ComposeResult:
        options = [Option(Text.assemble(("by photo name", "bold"),
                                        (" · each photo's own preset, else the settings",
                                         "dim")), id=BY_NAME)]
        for name, p in self.presets.items():
            mark = "● " if name == self.current else "  "
            options.append(Option(Text.assemble(mark, (name, "bold"), " ",
                                                (describe_preset(p), "dim")), id=name))
        with Vertical(id="preset-box"):
            yield Static("Bench preset", classes="title")
            yield Static(f"from {self.source}", classes="hint")
            yield OptionList(*options, id="preset-list")
            yield Static("enter applies to every photo · esc keeps the current one",
                         classes="hint")

    def on_mount(self) -> None:
        listing = self.query_one(OptionList)
        names = list(self.presets)
        listing.highlighted = names.index(self.current) + 1 if self.current in names else 0
        listing.focus()

    def on_option_list_option_selected(self, event: OptionList.OptionSelected) -> None:
        key = event.option.id
        self.dismiss(BY_NAME if key == BY_NAME else self.presets[key])

    def action_cancel(self) -> None:
        self.dismiss(None)
