"""The settings screen: wavelength, clear-aperture diameter, Zernike terms, sign, ring sign."""

from __future__ import annotations

from dataclasses import replace

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal, Vertical
from textual.screen import ModalScreen
from textual.widgets import Button, Checkbox, Input, Label, Select, Static

from ...analysis.errors import SettingsError
from ..config import StationSettings, validate
from ..safe_text import literal

__all__ = ["PUSH_TEST", "RING_SIGN_CHOICES", "SettingsScreen"]

PUSH_TEST = (
    "Push test: press gently on the top flat's edge to close the air gap. Flatsight "
    "assumes the wedge is wider toward the top of the photo, so the fringes travel up; "
    "if yours travel down, tick Invert. Closed rings moving out from the centre: "
    "convex; shrinking in: concave."
)

# the ring-sign choices: what the select shows, and the setting ("" for none)
RING_SIGN_CHOICES = (
    ("not stated: ask when a photo needs it", ""),
    ("convex (centre high)", "convex"),
    ("concave (centre low)", "concave"),
)


def _number(text: str, what: str) -> float:
    try:
        return float(text.strip().replace(",", "."))
    except ValueError:
        raise SettingsError(f"{what}: {text!r} is not a number") from None


class SettingsScreen(ModalScreen[StationSettings | None]):
    """Edits a copy of the settings; Apply returns it, Escape returns None."""

    BINDINGS = [Binding("escape", "cancel", "Cancel"), Binding("ctrl+s", "apply", "Apply")]

    def __init__(self, settings: StationSettings) -> None:
        super().__init__()
        self.settings = settings

    def compose(self) -> ComposeResult:
        s = self.settings
        with Vertical(id="settings-box"):
            yield Static("Measurement settings", classes="title")
            with Horizontal(classes="row"):
                yield Label("Wavelength, nm", classes="key")
                yield Input(
                    f"{s.wavelength_nm:g}",
                    id="wavelength",
                    tooltip="He-Ne 632.8, sodium 589.3, helium 587.56, mercury e 546.07",
                )
            yield Static("He-Ne 632.8 · Na 589.3 · He 587.56 · Hg e 546.07", classes="hint")
            with Horizontal(classes="row"):
                yield Label("Diameter, mm", classes="key")
                yield Input(
                    "" if s.diameter_mm is None else f"{s.diameter_mm:g}",
                    id="diameter",
                    placeholder="unknown",
                )
                yield Label("Zernike terms", classes="key", id="terms-label")
                yield Input(str(s.n_terms), id="terms", type="integer")
            with Horizontal(classes="row"):
                yield Label("Closed rings", classes="key")
                yield Select(RING_SIGN_CHOICES, value=s.ring_sign or "", allow_blank=False,
                             id="ring-sign", tooltip="the part's form from the push test; "
                             "for this session only, never remembered")
            yield Checkbox("Invert the surface (fringes travel down)", s.invert, id="invert")
            yield Static(PUSH_TEST, classes="hint", id="push-test")
            yield Label("", id="settings-error")
            with Horizontal(id="settings-buttons"):
                yield Button("Apply", variant="primary", id="apply")
                yield Button("Cancel", id="cancel")

    def read_settings(self) -> StationSettings:
        """The settings as typed, validated (raises :class:`SettingsError`)."""
        wl = _number(self.query_one("#wavelength", Input).value, "wavelength")
        d_text = self.query_one("#diameter", Input).value.strip()
        diameter = _number(d_text, "diameter") if d_text else None
        terms_text = self.query_one("#terms", Input).value.strip()
        try:
            terms = int(terms_text)
        except ValueError:
            raise SettingsError(f"Zernike terms: {terms_text!r} is not a whole number") from None
        invert = self.query_one("#invert", Checkbox).value
        ring_sign = self.query_one("#ring-sign", Select).value or None
        return validate(
            replace(
                self.settings, wavelength_nm=wl, diameter_mm=diameter, n_terms=terms,
                invert=invert, ring_sign=ring_sign,
            )
        )

    def action_apply(self) -> None:
        try:
            self.dismiss(self.read_settings())
        except SettingsError as exc:
            self.query_one("#settings-error", Label).update(literal(f"✗ {exc}"))

    def action_cancel(self) -> None:
        self.dismiss(None)

    def on_input_submitted(self, event: Input.Submitted) -> None:
        self.action_apply()

    def on_button_pressed(self, event: Button.Pressed) -> None:
        if event.button.id == "apply":
            self.action_apply()
        else:
            self.action_cancel()
