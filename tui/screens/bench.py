"""The bench: the main screen, with the photo queue, the five views and the analysis workers."""

from __future__ import annotations

import threading
import time
from dataclasses import replace
from pathlib import Path

from textual import on
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal
from textual.screen import Screen
from textual.widgets import Footer, OptionList, Static, TabbedContent, TabPane
from textual.worker import Worker

from ..config import StationSettings, save_settings
from ..render.heatmap import colour_mode_from_env
from ..render.units import next_units
from ..station_backend import StationBackend, describe_error
from ..station_state import STATE_LABELS, QueueEntry, ViewContext
from ..widgets.figures_view import FiguresView
from ..widgets.fringe_view import FringeView
from ..widgets.photo_queue import PhotoQueue
from ..widgets.profile_view import ProfileView
from ..widgets.spectrum_view import SpectrumView
from ..widgets.spread_view import SpreadView
from ..widgets.status_bar import StatusBar
from ..widgets.surface_view import SurfaceView
from ..widgets.trend_view import TrendView
from .bench_actions import ViewActions
from .bench_analysis import RERUN_DELAY_S, AnalysisRunner, Job
from .bench_records import RecordActions

__all__ = ["BenchScreen", "RERUN_DELAY_S", "VIEWS"]

VIEWS = {
    "fringes": ("Fringes", FringeView),
    "spectrum": ("Spectrum", SpectrumView),
    "surface": ("Surface", SurfaceView),
    "profiles": ("Profiles", ProfileView),
    "figures": ("Figures", FiguresView),
    "trend": ("Trend", TrendView),
    "spread": ("Spread", SpreadView),
}
_VIEW_KEYS = Binding.Group("views", compact=True)
_PHOTO_KEYS = Binding.Group("photo", compact=True)


class BenchScreen(AnalysisRunner, RecordActions, ViewActions, Screen):
    """Queue on the left, views on the right; analysis in exclusive thread workers."""

    BINDINGS = [
        Binding("1", "view('fringes')", "Fringes", group=_VIEW_KEYS),
        Binding("2", "view('spectrum')", "Spectrum", group=_VIEW_KEYS),
        Binding("3", "view('surface')", "Surface", group=_VIEW_KEYS),
        Binding("4", "view('profiles')", "Profiles", group=_VIEW_KEYS),
        Binding("5", "view('figures')", "Figures", group=_VIEW_KEYS),
        Binding("6", "view('trend')", "Trend", group=_VIEW_KEYS),
        Binding("7", "view('spread')", "Spread", group=_VIEW_KEYS),
        Binding("left_square_bracket", "step_photo(-1)", "Previous photo", group=_PHOTO_KEYS),
        Binding("right_square_bracket", "step_photo(1)", "Next photo", group=_PHOTO_KEYS),
        Binding("u", "units", "Units"),
        Binding("m", "measure", "Measure"),
        Binding("s", "save", "Save"),
        Binding("o", "open", "Open"),
        Binding("w", "settings", "Settings"),
        Binding("R", "ring_sign", "Ring sign of this photo (closed fringes)", show=False),
        Binding("b", "pick_preset", "Bench preset"),
        Binding("space", "toggle_mark", "Mark photo"),
        Binding("g", "average_marked", "Average marked photos"),
        Binding("n", "sequence_marked", "Marked as phase sequence"),
        Binding("question_mark,f1", "help", "Help"),
    ]

    def __init__(
        self,
        entries: list[QueueEntry],
        settings: StationSettings,
        backend: StationBackend,
        *,
        config_path: Path | None,
        out_dir: Path | None,
        start_folder: Path,
        recorder=None,
        chosen_preset=None,
        presets_file: Path | None = None,
    ) -> None:
        from ..station_log import StationRecorder

        super().__init__()
        self.recorder = recorder if recorder is not None else StationRecorder()
        self.chosen_preset = chosen_preset
        self.presets_file = presets_file
        self.log_rows: tuple = ()
        self.log_note: str | None = None
        self.trend_figure = "auto"
        self.trend_all = False
        self._spread_shown = True
        self.entries = entries
        self.settings = settings
        self.backend = backend
        self.config_path = config_path
        self.out_dir = out_dir
        self.start_folder = start_folder
        self.current = 0
        self.selected = -1
        self.profile_angle = 0.0
        self.zoom = False  # the whole photo first: z then zooms to the aperture, as it says
        self.colour = colour_mode_from_env() if settings.colour == "auto" else settings.colour
        self._token = 0
        self._cancel: threading.Event | None = None
        self._jobs: dict[Worker, Job] = {}
        self.record_lock = threading.Lock()  # one record of a photo at a time (supersedes)
        self._rerun_timer = None
        self._tab_chosen = False
        self._removed_cache: tuple | None = None
        self.first_figures_s: float | None = None
        self.started_s = time.perf_counter()

    # ---- layout -------------------------------------------------------------------------
    def compose(self) -> ComposeResult:
        yield Static(id="bench-bar")
        with Horizontal(id="bench-body"):
            yield PhotoQueue(id="queue")
            with TabbedContent(id="views"):
                for key, (title, cls) in VIEWS.items():
                    with TabPane(title, id=key):
                        yield cls(id=f"{key}-view")
        yield StatusBar(id="status")
        yield Footer(compact=True)

    def on_mount(self) -> None:
        self.redraw()
        # the queue first: ↑ ↓ then pick photos; the arrows move the aperture only once
        # the operator goes into the fringe view (1 or tab), never by surprise
        self.query_one(PhotoQueue).focus()
        self.reload_log()  # each part's last verdict for the queue, and the trend
        if self.entries:
            self.start_analysis(0)  # no key needed: the first photo is measured at once
        else:
            self.say("No photos yet: press o to open some.")

    # ---- drawing ------------------------------------------------------------------------
    @property
    def entry(self) -> QueueEntry | None:
        return self.entries[self.current] if self.entries else None

    def say(self, message: str) -> None:
        self.query_one(StatusBar).say(message)

    def removed_terms(self) -> tuple[int, ...]:
        return tuple(sorted(set(self.settings.removed_terms)))

    def _reduced(self, m):
        """The map and figures with the chosen terms out (cached; no new FFT)."""
        removed = self.removed_terms()
        if not removed or m is None:
            return None, None
        key = (id(m), removed)
        if self._removed_cache and self._removed_cache[0] == key:
            return self._removed_cache[1]
        try:
            result = self.backend.remove_terms(m, (1, 2, 3, *removed))
        except Exception as exc:  # a term beyond the fit, or a library bug: say so, keep going
            self.notify(f"cannot take those terms out: {describe_error(exc)}", severity="error")
            return None, None
        self._removed_cache = (key, result)
        return result

    def context(self) -> ViewContext:
        e = self.entry
        map_nm, figures = self._reduced(e.measurement if e else None)
        return ViewContext(
            units=self.settings.units,
            wavelength_nm=self.wavelength_for(e),
            removed_terms=self.removed_terms(),
            map_nm=map_nm,
            figures=figures,
            selected=self.selected,
            colour=self.colour,
            profile_angle_deg=self.profile_angle,
            zoom=self.zoom,
            log_rows=self.log_rows,
            log_note=self.log_note,
            part=self.part_of(e),
            trend_figure=self.trend_figure,
            trend_all=self.trend_all,
        )

    def redraw(self) -> None:
        s = self.settings
        diameter = "—" if s.diameter_mm is None else f"{s.diameter_mm:g} mm"
        sign = "inverted" if s.invert else "normal"
        if s.ring_sign is not None:  # the settings' sign for closed fringes
            sign += f", rings {s.ring_sign}"
        preset = f" [dim]│[/dim] {self.chosen_preset.name}" if self.chosen_preset else ""
        protocol = getattr(self.app, "pictures", None)
        if protocol is not None and self.colour != "mono":  # pictures: say in which protocol
            from ..picture_mode import PROTOCOL_NAMES

            preset += f" [dim]│[/dim] {PROTOCOL_NAMES[protocol]}"
        self.query_one("#bench-bar", Static).update(
            f"[b]Flatsight[/b] [dim]│[/dim] λ {self.wavelength_for(self.entry):g} nm [dim]│[/dim] "
            f"{s.n_terms} terms [dim]│[/dim] sign {sign} [dim]│[/dim] ⌀ {diameter} "
            f"[dim]│[/dim] {s.units}{preset}"
        )
        self.query_one(PhotoQueue).show_entries(
            self.entries, self.current, units=s.units, wavelength_nm=s.wavelength_nm
        )
        self._sync_spread_tab()
        ctx = self.context()
        for key, (_, cls) in VIEWS.items():
            self.query_one(f"#{key}-view", cls).show(self.entry, ctx)

    @on(Worker.StateChanged)
    def _worker_changed(self, event: Worker.StateChanged) -> None:
        self.worker_changed(event)

    # ---- queue --------------------------------------------------------------------------
    def go_to(self, index: int) -> None:
        if not self.entries:
            return
        index = max(0, min(len(self.entries) - 1, index))
        changed = index != self.current
        self.current = index
        self.selected = -1
        e = self.entries[index]
        if e.state in ("new",) or (changed and e.measurement is None and e.state != "error"):
            self.start_analysis(index)
        else:
            self.redraw()
            self.say(
                f"{STATE_LABELS[e.state][0]} {e.name}: {STATE_LABELS[e.state][1]}"
                + (f" — {e.error}" if e.error else "")
            )

    @on(OptionList.OptionHighlighted, "#queue")
    def _queue_moved(self, event: OptionList.OptionHighlighted) -> None:
        if event.option_index != self.current:
            self.go_to(event.option_index)

    def add_photos(self, paths: list[Path]) -> None:
        known = {e.path.resolve() for e in self.entries}
        new = [self.app.make_entry(Path(p)) for p in paths if Path(p).resolve() not in known]
        if not new:
            self.notify("those photos are already in the queue")
            return
        self.entries.extend(new)
        self.reload_log()  # the new photos' parts may have a history
        self.go_to(len(self.entries) - len(new))

    # ---- actions ------------------------------------------------------------------------
    def action_view(self, name: str) -> None:
        if name == "spread" and not self._spread_shown:
            self.notify("the spread map is for averaged photos: mark photos with space, "
                        "then g", severity="warning", timeout=4)
            return
        self.query_one(TabbedContent).active = name
        self.query_one(f"#{name}-view").focus()

    def _sync_spread_tab(self) -> None:
        """The Spread tab is there only while an average is in hand (it keeps the bar short)."""
        averaged = self.entry is not None and self.entry.kind == "average"
        if averaged == self._spread_shown:
            return
        tabs = self.query_one(TabbedContent)
        if averaged:
            tabs.show_tab("spread")
        else:
            if tabs.active == "spread":
                self.action_view("surface")
            tabs.hide_tab("spread")
        self._spread_shown = averaged

    @on(TabbedContent.TabActivated)
    def _tab_activated(self, event: TabbedContent.TabActivated) -> None:
        pane = event.pane
        if not self._tab_chosen:  # the first tab shown at start: the queue keeps the focus
            self._tab_chosen = True
            return
        if pane is not None and pane.id in VIEWS:
            self.query_one(f"#{pane.id}-view").focus()

    def action_step_photo(self, step: int) -> None:
        self.go_to(self.current + step)

    def action_measure(self) -> None:
        if self.entry is not None:
            self.start_analysis(self.current)

    def action_units(self) -> None:
        self._update_settings(replace(self.settings, units=next_units(self.settings.units)))
        self.notify(f"heights in {self.settings.units}", timeout=2)
        e = self.entry
        if e is not None and e.measurement is not None and e.state != "running":
            self.say(self.headline(e))

    def _update_settings(self, new: StationSettings, *, persist: bool = True) -> None:
        self.settings = new
        before = getattr(self, "_settings_before_preset", None)
        if self.chosen_preset is not None and before is not None:
            # a preset picked in the station is for this session: remember the bench's own
            new = replace(new, wavelength_nm=before.wavelength_nm,
                          diameter_mm=before.diameter_mm, n_terms=before.n_terms,
                          wavelength_uncertainty_nm=before.wavelength_uncertainty_nm,
                          reference_uncertainty_nm=before.reference_uncertainty_nm,
                          method=before.method)
        if persist and self.config_path is not None:
            try:
                save_settings(new, self.config_path)
            except OSError as exc:
                self.notify(
                    f"settings not remembered: {self.config_path}: {exc.strerror}",
                    severity="warning",
                )
        self.redraw()

    def key_rows(self) -> list[tuple[str, str, str, str]]:
        """``(where, key, description, action)`` for every binding of the bench and its views."""
        from .bench_keys import key_rows

        return key_rows(self)
