"""The photo picker: a folder tree showing only folders and photos."""

from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import DirectoryTree, Input, Static

from ...analysis.loading import is_photo_path, photos_in
from ..safe_text import literal

__all__ = ["OpenScreen", "PhotoTree", "photos_in"]


class PhotoTree(DirectoryTree):
    """A directory tree that hides everything but folders and photos (and dot files)."""

    def filter_paths(self, paths: Iterable[Path]) -> Iterable[Path]:
        return [
            p
            for p in paths
            if not p.name.startswith(".") and (p.is_dir() or is_photo_path(p))
        ]

    def process_label(self, label):
        # a file name is shown as written: never markup, control characters escaped
        return literal(label) if isinstance(label, str) else label


class OpenScreen(ModalScreen[list[Path] | None]):
    """Enter on a photo returns it; ``f`` returns every photo of the highlighted folder.

    ``backspace`` goes up to the parent folder, and a folder or a photo can be typed
    into the path field (``/`` goes there): enter opens the folder in the tree, or
    the photo at once.
    """

    BINDINGS = [
        Binding("escape", "cancel", "Cancel"),
        Binding("f", "take_folder", "Whole folder"),
        Binding("backspace", "parent", "Up a folder"),
        Binding("slash", "type_path", "Type a path"),
    ]

    def __init__(self, start: Path) -> None:
        super().__init__()
        self.start = start

    def compose(self) -> ComposeResult:
        with Vertical(id="open-box"):
            yield Static(
                "Open photos — enter: this photo · f: every photo in the folder · "
                "backspace: up a folder · /: type a path · esc: cancel",
                classes="title",
            )
            yield Input(str(self.start), id="open-path",
                        placeholder="a folder or a photo, then enter")
            yield PhotoTree(self.start, id="open-tree")

    def on_mount(self) -> None:
        self.query_one(PhotoTree).focus()

    @property
    def folder(self) -> Path:
        return Path(self.query_one(PhotoTree).path)

    def show_folder(self, folder: Path) -> None:
        """Root the tree at ``folder`` and say so in the path field."""
        self.query_one(PhotoTree).path = folder
        self.query_one("#open-path", Input).value = str(folder)

    def action_parent(self) -> None:
        here = self.folder.resolve()
        if here.parent == here:
            self.notify(f"{here} has no parent folder", severity="warning", timeout=3)
            return
        self.show_folder(here.parent)

    def action_type_path(self) -> None:
        self.query_one("#open-path", Input).focus()

    def on_input_submitted(self, event: Input.Submitted) -> None:
        typed = event.value.strip()
        target = Path(typed).expanduser() if typed else self.folder
        if target.is_dir():
            self.show_folder(target)
            self.query_one(PhotoTree).focus()
        elif target.is_file() and is_photo_path(target):
            self.dismiss([target])
        elif target.is_file():
            self.notify(f"{target} is not a photo (PNG, JPEG or TIFF)", severity="error")
        else:
            self.notify(f"no folder or photo at {target}", severity="error")

    def on_directory_tree_file_selected(self, event: DirectoryTree.FileSelected) -> None:
        self.dismiss([Path(event.path)])

    def action_take_folder(self) -> None:
        tree = self.query_one(PhotoTree)
        node = tree.cursor_node
        folder = Path(node.data.path) if node and node.data else self.folder
        if folder.is_file():
            folder = folder.parent
        photos = photos_in(folder)
        if photos:
            self.dismiss(photos)
        else:
            self.notify(f"no photos in {folder}", severity="warning")

    def action_cancel(self) -> None:
        self.dismiss(None)
