"""The Flatsight station app: wires the bench screen, its styles, settings and palette together."""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from functools import partial
from pathlib import Path

from textual.app import App, SystemCommand
from textual.binding import Binding
from textual.screen import Screen

from .config import StationSettings
from .safe_text import shown
from .screens.bench import BenchScreen
from .screens.ring_sign_screen import RingSignScreen
from .station_backend import StationBackend, default_backend
from .station_state import QueueEntry

__all__ = ["FlatsightStation"]


class FlatsightStation(App):
    """The inspection station.

    Parameters
    ----------
    photos : sequence of paths
        The queue; the first is measured at once.
    settings : StationSettings
        Wavelength, sign, diameter, terms, units (the remembered ones, usually).
    backend : StationBackend, optional
        The analysis functions; the real library by default. Tests hand in their own.
    config_path : path, optional
        Where changed settings are remembered; None remembers nothing.
    out_dir : path, optional
        Where results are saved; by default beside each photo.
    start_folder : path, optional
        Where the photo picker opens (default: the first photo's folder, or the cwd).
    notice : str, optional
        A note to show at start (for example, that the settings file was unusable).
    presets_file : path, optional
        Presets file (TOML): its ``[photos]`` table gives photos their own preset, and
        the preset picker (b) lists its presets.
    recorder : StationRecorder, optional
        Where measurements are logged and with which tolerance and people; by default
        nothing is logged (``flatsight inspect`` passes the default log).
    preset : Preset, optional
        A preset chosen at start (``--preset``), used for every photo.
    pictures : {"sixel", "kitty"}, optional
        The terminal's graphics protocol, to draw the photo and the map as pictures
        (``picture_mode.picture_protocol``); None draws them in half-block cells.
    cell_px : (int, int)
        One terminal cell's width and height in pixels, the size pictures are made at.
    """

    TITLE = "Flatsight"
    CSS_PATH = ["station.tcss", "screens/screens.tcss"]
    BINDINGS = [Binding("ctrl+q", "quit", "Quit", priority=True)]

    def __init__(
        self,
        photos: Sequence[str | Path] = (),
        *,
        settings: StationSettings,
        backend: StationBackend | None = None,
        config_path: Path | None = None,
        out_dir: Path | None = None,
        start_folder: Path | None = None,
        notice: str | None = None,
        presets_file: Path | None = None,
        recorder=None,
        preset=None,
        pictures: str | None = None,
        cell_px: tuple[int, int] = (10, 20),
    ) -> None:
        super().__init__()
        self.pictures = pictures
        self.cell_px = cell_px
        self.presets_file = presets_file
        self._photo_presets = None  # the presets file, read at the first photo
        self.recorder = recorder
        self.preset = preset
        self.entries = [self.make_entry(Path(p)) for p in photos]
        self.station_settings = settings
        self.backend = backend if backend is not None else default_backend()
        self.config_path = config_path
        self.out_dir = out_dir
        self.start_folder = start_folder or (
            self.entries[0].path.parent if self.entries else Path.cwd()
        )
        self.notice = notice

    def make_entry(self, path: Path) -> QueueEntry:
        """A queue entry, with the settings the presets file gives its name (if any)."""
        entry = QueueEntry(path)
        if self.presets_file is not None:
            from ..analysis.errors import SettingsError
            from ..analysis.records.presets import PresetsFile, load_presets_file

            if self._photo_presets is None:  # read the file once, for every photo
                try:
                    self._photo_presets = load_presets_file(self.presets_file)
                except SettingsError:  # checked at start; a later bad edit is ignored
                    self._photo_presets = PresetsFile({}, {})
            preset = self._photo_presets.for_photo(path)
            if preset is not None:
                entry.preset_source = preset
                entry.preset = {"wavelength_nm": preset.wavelength_nm,
                                "diameter_mm": preset.diameter_mm,
                                "n_terms": preset.zernike_terms,
                                "wavelength_uncertainty_nm": preset.wavelength_uncertainty_nm,
                                "reference_uncertainty_nm": preset.reference_uncertainty_nm,
                                "method": preset.method, "ring_sign": preset.ring_sign}
        return entry

    def on_mount(self) -> None:
        self.push_screen(self.make_bench())
        if self.notice:
            self.notify(self.notice, severity="warning", timeout=8)

    def make_bench(self) -> BenchScreen:
        return BenchScreen(
            self.entries,
            self.station_settings,
            self.backend,
            config_path=self.config_path,
            out_dir=self.out_dir,
            start_folder=self.start_folder,
            recorder=self.recorder,
            chosen_preset=self.preset,
            presets_file=self.presets_file,
        )

    def notify(self, message: str, *, title: str = "", severity="information",
               timeout: float | None = None, markup: bool = True) -> None:
        """Every notification, shown literally: messages name photos, parts and folders."""
        super().notify(shown(message), title=shown(title), severity=severity, timeout=timeout,
                       markup=False)

    @property
    def bench(self) -> BenchScreen:
        return next(s for s in self.screen_stack if isinstance(s, BenchScreen))

    def get_system_commands(self, screen: Screen) -> Iterable[SystemCommand]:
        yield from super().get_system_commands(screen)
        if isinstance(screen, RingSignScreen):  # the prompt's answers, by name too
            for b in screen.BINDINGS:
                yield SystemCommand(b.description, f"key: {b.key}",
                                    partial(screen.run_action, b.action))
            return
        if not isinstance(screen, BenchScreen):
            return
        seen = set()
        for scope, key, description, action in screen.key_rows():
            if action in seen:
                continue
            seen.add(action)
            where = "" if scope == "anywhere" else f" ({scope})"
            yield SystemCommand(
                f"{description}{where}", f"key: {key}", partial(screen.run_action, action)
            )
