"""The bench: the main screen, with the photo queue, the five views and the analysis workers."""

from __future__ import annotations

import threading
import time
from dataclasses import dataclass, replace
from pathlib import Path

from textual import on, work
from textual.app import ComposeResult
from textual.binding import Binding
from textual.containers import Horizontal
from textual.message import Message
from textual.screen import Screen
from textual.widgets import Footer, OptionList, Static, TabbedContent, TabPane
from textual.worker import Worker, WorkerState

from ...analysis.errors import MeasurementCancelled
from ...analysis.pipeline import MeasureSettings
from ..config import StationSettings, save_settings
from ..render.heatmap import colour_mode_from_env
from ..render.units import fmt_height, next_units
from ..station_backend import StationBackend, describe_error
from ..station_state import STATE_LABELS, QueueEntry, ViewContext
from ..widgets.figures_view import FiguresView
from ..widgets.fringe_view import FringeView
from ..widgets.photo_queue import PhotoQueue
from ..widgets.profile_view import ProfileView
from ..widgets.spectrum_view import SpectrumView
from ..widgets.status_bar import StatusBar
from ..widgets.surface_view import SurfaceView
from .bench_actions import ViewActions

__all__ = ["BenchScreen", "VIEWS"]

VIEWS = {
    "fringes": ("Fringes", FringeView),
    "spectrum": ("Spectrum", SpectrumView),
    "surface": ("Surface", SurfaceView),
    "profiles": ("Profiles", ProfileView),
    "figures": ("Figures", FiguresView),
}
RERUN_DELAY_S = 0.4  # let a burst of aperture keys settle before measuring again
_VIEW_KEYS = Binding.Group("views", compact=True)
_PHOTO_KEYS = Binding.Group("photo", compact=True)


@dataclass(frozen=True)
class Job:
    token: int
    index: int
    path: Path
    settings: MeasureSettings
    cancel: threading.Event
    load: bool


class AnalysisProgress(Message):
    """A stage of the running analysis reached ``fraction`` (0..1)."""

    def __init__(self, token: int, stage: str, fraction: float) -> None:
        super().__init__()
        self.token, self.stage, self.fraction = token, stage, fraction

    def can_replace(self, message: Message) -> bool:
        return isinstance(message, AnalysisProgress)  # bursts merge: only the newest matters


class PhotoLoaded(Message):
    def __init__(self, token: int, index: int, pixels) -> None:
        super().__init__()
        self.token, self.index, self.pixels = token, index, pixels


class BenchScreen(ViewActions, Screen):
    """Queue on the left, views on the right; analysis in exclusive thread workers."""

    BINDINGS = [
        Binding("1", "view('fringes')", "Fringes", group=_VIEW_KEYS),
        Binding("2", "view('spectrum')", "Spectrum", group=_VIEW_KEYS),
        Binding("3", "view('surface')", "Surface", group=_VIEW_KEYS),
        Binding("4", "view('profiles')", "Profiles", group=_VIEW_KEYS),
        Binding("5", "view('figures')", "Figures", group=_VIEW_KEYS),
        Binding("left_square_bracket", "step_photo(-1)", "Previous photo", group=_PHOTO_KEYS),
        Binding("right_square_bracket", "step_photo(1)", "Next photo", group=_PHOTO_KEYS),
        Binding("u", "units", "Units"),
        Binding("m", "measure", "Measure"),
        Binding("s", "save", "Save"),
        Binding("o", "open", "Open"),
        Binding("w", "settings", "Settings"),
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
    ) -> None:
        super().__init__()
        self.entries = entries
        self.settings = settings
        self.backend = backend
        self.config_path = config_path
        self.out_dir = out_dir
        self.start_folder = start_folder
        self.current = 0
        self.selected = -1
        self.profile_angle = 0.0
        self.zoom = True
        self.colour = colour_mode_from_env() if settings.colour == "auto" else settings.colour
        self._token = 0
        self._cancel: threading.Event | None = None
        self._jobs: dict[Worker, Job] = {}
        self._rerun_timer = None
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
        self.query_one(FringeView).focus()
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
        )

    def redraw(self) -> None:
        s = self.settings
        diameter = "—" if s.diameter_mm is None else f"{s.diameter_mm:g} mm"
        sign = "inverted" if s.invert else "normal"
        self.query_one("#bench-bar", Static).update(
            f"[b]Flatsight[/b] [dim]│[/dim] λ {self.wavelength_for(self.entry):g} nm [dim]│[/dim] "
            f"{s.n_terms} terms [dim]│[/dim] sign {sign} [dim]│[/dim] ⌀ {diameter} "
            f"[dim]│[/dim] {s.units}"
        )
        self.query_one(PhotoQueue).show_entries(
            self.entries, self.current, units=s.units, wavelength_nm=s.wavelength_nm
        )
        ctx = self.context()
        for key, (_, cls) in VIEWS.items():
            self.query_one(f"#{key}-view", cls).show(self.entry, ctx)

    # ---- analysis -----------------------------------------------------------------------
    def wavelength_for(self, e: QueueEntry | None) -> float:
        """The wavelength a photo is (or will be) measured at: its preset's, else the station's."""
        if e is not None and e.measurement is not None:
            return e.measurement.settings.wavelength_nm
        if e is not None and e.preset.get("wavelength_nm"):
            return float(e.preset["wavelength_nm"])
        return self.settings.wavelength_nm

    def measure_settings(self, e: QueueEntry) -> MeasureSettings:
        s = self.settings
        return MeasureSettings(
            wavelength_nm=float(e.preset.get("wavelength_nm") or s.wavelength_nm),
            n_terms=int(e.preset.get("n_terms") or s.n_terms),
            invert=s.invert,
            diameter_mm=e.preset.get("diameter_mm") or s.diameter_mm,
            aperture=e.aperture,
            exclusions=tuple(e.exclusions),
        )

    def start_analysis(self, index: int) -> None:
        """Measure photo ``index`` now, cancelling whatever is running."""
        if self._cancel is not None:
            self._cancel.set()
            for job in self._jobs.values():
                if job.token == self._token and job.index != index:
                    self._settle_stale(self.entries[job.index])
        self._token += 1
        e = self.entries[index]
        e.state, e.error = "running", None
        job = Job(
            self._token,
            index,
            e.path,
            self.measure_settings(e),
            threading.Event(),
            load=e.pixels is None,
        )
        self._cancel = job.cancel
        self._jobs[self._analyse(job)] = job
        self.say(f"Measuring {e.name}…")
        self.query_one(StatusBar).progress(0.0)
        self.redraw()

    @work(thread=True, exclusive=True, exit_on_error=False, group="analysis")
    def _analyse(self, job: Job):
        if job.load:
            pixels = self.backend.load_pixels(job.path)
            self.post_message(PhotoLoaded(job.token, job.index, pixels))

        def progress(stage: str, fraction: float) -> None:
            if not job.cancel.is_set():
                self.post_message(AnalysisProgress(job.token, stage, fraction))

        return self.backend.measure(job.path, job.settings, progress=progress, cancel=job.cancel)

    def on_photo_loaded(self, message: PhotoLoaded) -> None:
        self.entries[message.index].pixels = message.pixels
        if message.index == self.current:
            self.redraw()

    def on_analysis_progress(self, message: AnalysisProgress) -> None:
        if message.token == self._token:
            self.query_one(StatusBar).progress(message.fraction)
            self.say(f"Measuring {self.entry.name}: {message.stage}")

    @on(Worker.StateChanged)
    def _worker_changed(self, event: Worker.StateChanged) -> None:
        worker = event.worker
        if worker.group == "save":
            self._save_finished(worker)
            return
        job = self._jobs.get(worker)
        if job is None or event.state not in (
            WorkerState.SUCCESS,
            WorkerState.ERROR,
            WorkerState.CANCELLED,
        ):
            return
        del self._jobs[worker]
        if job.token != self._token or event.state == WorkerState.CANCELLED:
            return  # a stale run: a newer request has taken over
        e = self.entries[job.index]
        bar = self.query_one(StatusBar)
        bar.progress(None)
        if event.state == WorkerState.ERROR:
            if isinstance(worker.error, MeasurementCancelled):
                return
            # the queue already names the photo: keep the message to what went wrong
            message = describe_error(worker.error).replace(f"{job.path}: ", "")
            e.state, e.error, e.measurement = "error", message, None
            self.say(f"✗ {e.name}: {e.error}")
        else:
            m = worker.result
            e.measurement, e.error = m, None
            e.state = "warning" if m.warnings else "ok"
            if self.first_figures_s is None:
                self.first_figures_s = time.perf_counter() - self.started_s
            self.say(self.headline(e))
        self.redraw()

    def headline(self, e: QueueEntry) -> str:
        """The status line for a measured photo: PV and RMS in the chosen units."""
        m = e.measurement
        wl, units = self.settings.wavelength_nm, self.settings.units
        return (
            f"{STATE_LABELS[e.state][0]} {e.name}: PV {fmt_height(m.figures.pv_nm, units, wl)}, "
            f"RMS {fmt_height(m.figures.rms_nm, units, wl)}"
            + (f" — {m.warnings[0]}" if m.warnings else "")
        )

    @staticmethod
    def _settle_stale(e: QueueEntry) -> None:
        # the operator moved on before this photo finished: show it as it was before
        if e.state == "running":
            m = e.measurement
            e.state = "new" if m is None else ("warning" if m.warnings else "ok")

    def _schedule_rerun(self) -> None:
        if self._rerun_timer is not None:
            self._rerun_timer.stop()
        self._rerun_timer = self.set_timer(RERUN_DELAY_S, self._rerun)

    def _rerun(self) -> None:
        self._rerun_timer = None
        if self.entry is not None:
            self.start_analysis(self.current)

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
        self.go_to(len(self.entries) - len(new))

    # ---- actions ------------------------------------------------------------------------
    def action_view(self, name: str) -> None:
        self.query_one(TabbedContent).active = name
        self.query_one(f"#{name}-view").focus()

    @on(TabbedContent.TabActivated)
    def _tab_activated(self, event: TabbedContent.TabActivated) -> None:
        pane = event.pane
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
        if persist and self.config_path is not None:
            try:
                save_settings(new, self.config_path)
            except OSError as exc:
                self.notify(
                    f"settings not remembered: {self.config_path}: {exc.strerror}",
                    severity="warning",
                )
        self.redraw()

    # ---- keys for help and the command palette ------------------------------------------
    def key_rows(self) -> list[tuple[str, str, str, str]]:
        """``(where, key, description, action)`` for every binding of the bench and its views."""
        rows = []
        scopes = [
            ("anywhere", self.BINDINGS),
            ("fringes", FringeView.BINDINGS),
            ("surface", SurfaceView.BINDINGS),
            ("profiles", ProfileView.BINDINGS),
        ]
        for scope, bindings in scopes:
            for b in bindings:
                key = b.key.split(",")[0]
                key = {
                    "left_square_bracket": "[",
                    "right_square_bracket": "]",
                    "question_mark": "?",
                    "equals_sign": "=",
                    "plus": "+",
                    "minus": "-",
                }.get(key, key)
                rows.append((scope, key, b.description, b.action.removeprefix("screen.")))
        return rows
