"""Whether the station draws the photo and the map as pictures, and with which protocol.

Asked once, before the station starts: the terminal answers its graphics queries on the
keyboard's input, which Textual reads once it runs (textual-image's note).
"""

from __future__ import annotations

import os
import sys
from collections.abc import Callable, Mapping

__all__ = ["PICTURE_CHOICES", "PROTOCOL_NAMES", "cell_pixels", "detect_protocol",
           "picture_protocol", "picture_widget"]

PICTURE_CHOICES = ("auto", "on", "sixel", "kitty", "off")
PROTOCOL_NAMES = {"sixel": "Sixel", "kitty": "Kitty"}
ENV_VAR = "FLATSIGHT_IMAGES"


def detect_protocol() -> str | None:
    """``"sixel"`` or ``"kitty"`` if the terminal answers that it draws them, else None.

    Only a terminal is asked: with the output or the keyboard redirected there is none.
    """
    out, keys = sys.__stdout__, sys.__stdin__
    if out is None or keys is None or not (out.isatty() and keys.isatty()):
        return None
    # the import asks the terminal (Sixel first, then Kitty's protocol; 0.1 s each at most)
    from textual_image.renderable import Image, SixelImage, TGPImage

    return {SixelImage: "sixel", TGPImage: "kitty"}.get(Image)


def _kitty_terminal(env: Mapping[str, str]) -> bool:
    return "KITTY_WINDOW_ID" in env or env.get("TERM") == "xterm-kitty"


def picture_protocol(
    choice: str,
    env: Mapping[str, str] | None = None,
    detect: Callable[[], str | None] | None = None,
) -> str | None:
    """The graphics protocol the station uses for ``choice``, or None for half-block cells.

    ``auto``: the one the terminal reports, none with ``NO_COLOR`` set (the terminal is
    not even asked then). ``on``: the one reported, else Kitty's in kitty and
    Sixel elsewhere (for a terminal behind tmux or screen, which do not answer).
    ``sixel``, ``kitty``: that one. ``off``: none. Either way the views draw pictures only
    while the maps are in colour: in character mode (``--colour mono``, ``v``, or
    ``NO_COLOR``) they draw characters.
    """
    env = os.environ if env is None else env
    if choice == "off":
        return None
    if choice in PROTOCOL_NAMES:
        return choice
    if choice == "auto" and env.get("NO_COLOR"):
        return None
    found = (detect or detect_protocol)()
    if found is not None or choice == "auto":
        return found
    return "kitty" if _kitty_terminal(env) else "sixel"


def cell_pixels() -> tuple[int, int]:
    """One terminal cell's ``(width, height)`` in pixels, as textual-image measures it.

    Asked of the terminal once, before the station starts (and the graphics widgets'
    module with it); 10 x 20 where it cannot say.
    """
    # the widgets' module asks the terminal as it is imported: here, not once Textual runs
    import textual_image.widget  # noqa: F401
    from textual_image._terminal import get_cell_size

    size = get_cell_size()
    return (max(1, int(size.width)), max(1, int(size.height)))


def picture_widget(protocol: str):
    """A textual-image widget drawing with ``protocol`` ("sixel" or "kitty")."""
    from textual_image.widget import SixelImage, TGPImage

    cls = SixelImage if protocol == "sixel" else TGPImage
    return cls(classes="picture")
