"""The bench's analysis: measuring in exclusive thread workers, progress, results, reruns."""

from __future__ import annotations

import threading
import time
from dataclasses import dataclass
from pathlib import Path

from textual import work
from textual.message import Message
from textual.worker import Worker, WorkerState

from ...analysis.errors import MeasurementCancelled, RingSignNeededError
from ...analysis.pipeline import MeasureSettings
from ..render.units import fmt_height
from ..safe_text import shown
from ..station_backend import describe_error
from ..station_state import STATE_LABELS, QueueEntry
from ..widgets.status_bar import StatusBar

__all__ = ["AnalysisProgress", "AnalysisRunner", "Job", "PhotoLoaded", "RERUN_DELAY_S"]

RERUN_DELAY_S = 0.4  # let a burst of aperture keys settle before measuring again

# the station's own words for the library's RingSignNeededError (which names --ring-sign),
# short enough for the status line at 80 columns
SIGN_NEEDED = "closed rings: convex or concave? press R"


def _first_set(*values):
    """The first value that is not None (0 is a value: a stated zero uncertainty)."""
    return next(v for v in values if v is not None)


@dataclass(frozen=True)
class Job:
    token: int
    index: int
    path: Path
    settings: MeasureSettings
    cancel: threading.Event
    load: bool
    kind: str = "photo"
    sources: tuple[Path, ...] = ()
    # an average: each photo's own settings (its bench's wavelength, diameter and terms)
    source_settings: tuple[MeasureSettings, ...] = ()


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


def _without_photo(message: str, path: Path) -> str:
    """``message`` without the photo's path, at its start or as "... in PATH: ..."."""
    where = shown(path)
    return message.replace(f" in {where}: ", ": ").removeprefix(f"{where}: ")


class AnalysisRunner:
    """Mixed into the bench screen: starts, follows and settles the analysis workers.

    The bench provides ``entries``, ``current``, ``settings``, ``backend``, ``redraw()``,
    ``say()``, ``record()``, ``verdict_text()``, ``ask_ring_sign()`` and the worker
    bookkeeping attributes.
    """

    # ---- analysis -----------------------------------------------------------------------
    def wavelength_for(self, e: QueueEntry | None) -> float:
        """The wavelength a photo is (or will be) measured at: its preset's, else the station's."""
        if e is not None and e.measurement is not None:
            return e.measurement.settings.wavelength_nm
        own = self.photo_settings(e)
        if own.get("wavelength_nm"):
            return float(own["wavelength_nm"])
        return self.settings.wavelength_nm

    def measure_settings(self, e: QueueEntry) -> MeasureSettings:
        s = self.settings
        own = self.photo_settings(e)
        return MeasureSettings(
            wavelength_nm=float(own.get("wavelength_nm") or s.wavelength_nm),
            n_terms=int(own.get("n_terms") or s.n_terms),
            invert=s.invert,
            diameter_mm=own.get("diameter_mm") or s.diameter_mm,
            aperture=e.aperture,
            exclusions=tuple(e.exclusions),
            wavelength_uncertainty_nm=float(
                _first_set(own.get("wavelength_uncertainty_nm"), s.wavelength_uncertainty_nm)),
            reference_uncertainty_nm=float(
                _first_set(own.get("reference_uncertainty_nm"), s.reference_uncertainty_nm)),
            method=own.get("method") or s.method,
            # the operator's answer for this photo, its preset's, the station's
            ring_sign=e.ring_sign or own.get("ring_sign") or s.ring_sign,
        )

    def source_settings(self, e: QueueEntry) -> tuple[MeasureSettings, ...]:
        """For an average: the settings each of its photos is measured with on its own."""
        if e.kind != "average":
            return ()
        singles = {x.path: x for x in self.entries if x.kind == "photo"}
        return tuple(self.measure_settings(singles[p]) if p in singles
                     else self.measure_settings(e) for p in e.sources)

    def start_analysis(self, index: int) -> None:
        """Measure photo ``index`` now, cancelling whatever is running or waiting to run."""
        if self._rerun_timer is not None:  # a re-run this one makes redundant
            self._rerun_timer.stop()
            self._rerun_timer = None
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
            kind=e.kind,
            sources=e.sources,
            source_settings=self.source_settings(e),
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

        if job.kind != "photo":
            from .. import station_combine

            if job.kind == "average":
                return station_combine.measure_average(
                    self.backend, job.sources, job.settings, progress=progress,
                    cancel=job.cancel, per_photo=job.source_settings)
            return station_combine.measure_sequence(self.backend, job.sources, job.settings,
                                                    progress=progress, cancel=job.cancel)
        return self.backend.measure(job.path, job.settings, progress=progress, cancel=job.cancel)

    def on_photo_loaded(self, message: PhotoLoaded) -> None:
        self.entries[message.index].pixels = message.pixels
        if message.index == self.current:
            self.redraw()

    def on_analysis_progress(self, message: AnalysisProgress) -> None:
        if message.token == self._token:
            self.query_one(StatusBar).progress(message.fraction)
            self.say(f"Measuring {self.entry.name}: {message.stage}")

    def worker_changed(self, event: Worker.StateChanged) -> None:
        """Every worker's end: saving, recording, reading the log, or an analysis."""
        worker = event.worker
        if worker.group == "save":
            self._save_finished(worker)
            return
        if worker.group in ("record", "logread"):
            if event.state in (WorkerState.SUCCESS, WorkerState.ERROR):
                (self._record_finished if worker.group == "record" else self._log_read)(worker)
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
            sign_needed = isinstance(worker.error, RingSignNeededError)
            # the queue already names the photo: keep the message to what went wrong
            message = SIGN_NEEDED if sign_needed else _without_photo(
                describe_error(worker.error), job.path)
            e.state, e.error, e.measurement = "error", message, None
            e.needs_ring_sign = sign_needed
            self.say(f"✗ {e.name}: {e.error}")
            if sign_needed and job.index == self.current and self.app.screen is self:
                self.ask_ring_sign(job.index)  # asked when it matters; R asks again
        else:
            m = worker.result
            if e.kind != "photo":  # an average or a sequence: its measurement inside
                e.combined, m = m, m.measurement
            e.measurement, e.error = m, None
            e.state = "warning" if m.warnings else "ok"
            e.verdict = e.record_id = e.log_error = e.record = None
            if self.first_figures_s is None:
                self.first_figures_s = time.perf_counter() - self.started_s
            self.say(self.headline(e))
            self.record(job.index)
        self.redraw()

    def headline(self, e: QueueEntry) -> str:
        """The status line for a measured photo: PV and RMS in the chosen units, the verdict
        and the record.

        It is made to fit the status bar: where it would not, the tolerance's text goes
        first (the figures view gives it), then the photo's name is cut. A warning
        follows, as much of it as there is room for.
        """
        m = e.measurement
        wl, units = self.settings.wavelength_nm, self.settings.units
        figures = (f": PV {fmt_height(m.figures.pv_nm, units, wl)}, "
                   f"RMS {fmt_height(m.figures.rms_nm, units, wl)}")
        glyph = STATE_LABELS[e.state][0]
        room = self.app.size.width - 2  # the status bar's padding; idle, it has no bar
        verdict = self.verdict_text(e)
        line = f"{glyph} {e.name}{figures}{verdict}"
        if len(line) > room:
            verdict = self.verdict_text(e, tolerance=False)
            others = tuple(x.path.name for x in self.entries if x is not e)
            name_room = max(8, room - len(f"{glyph} {figures}{verdict}"))
            line = f"{glyph} {e.name_in(name_room, others=others)}{figures}{verdict}"
        return line + (f" — {m.warnings[0]}" if m.warnings else "")

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
