"""The photo picker: a folder tree showing only folders and photos."""

from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path

from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Vertical
from textual.screen import ModalScreen
from textual.widgets import DirectoryTree, Static

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
    """Enter on a photo returns it; ``f`` returns every photo of the highlighted folder."""

    BINDINGS = [
        Binding("escape", "cancel", "Cancel"),
        Binding("f", "take_folder", "Whole folder"),
    ]

    def __init__(self, start: Path) -> None:
        super().__init__()
        self.start = start

    def compose(self) -> ComposeResult:
        with Vertical(id="open-box"):
            yield Static(
                "Open photos — enter: this photo · f: every photo in the folder · esc: cancel",
                classes="title",
            )
            yield PhotoTree(self.start, id="open-tree")

    def on_mount(self) -> None:
        self.query_one(PhotoTree).focus()

    def on_directory_tree_file_selected(self, event: DirectoryTree.FileSelected) -> None:
        self.dismiss([Path(event.path)])

    def action_take_folder(self) -> None:
        tree = self.query_one(PhotoTree)
        node = tree.cursor_node
        folder = Path(node.data.path) if node and node.data else self.start
        if folder.is_file():
            folder = folder.parent
        photos = photos_in(folder)
        if photos:
            self.dismiss(photos)
        else:
            self.notify(f"no photos in {folder}", severity="warning")

    def action_cancel(self) -> None:
        self.dismiss(None)
