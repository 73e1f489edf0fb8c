"""The bench's record keeping: log each measurement, verdicts, trends, presets, combined photos."""

from __future__ import annotations

import copy
from dataclasses import replace
from pathlib import Path

from textual import work
from textual.worker import Worker, WorkerState

from ..report_text import VERDICT_WORDS
from ..station_backend import describe_error
from ..station_log import entry_options, read_log, record_result
from ..station_state import QueueEntry
from ..widgets.trend_view import TREND_FIGURES

__all__ = ["RecordActions"]



class RecordActions:
    """Mixed into the bench screen after :class:`ViewActions`.

    The bench provides ``entries``, ``entry``, ``current``, ``recorder``,
    ``chosen_preset``, ``presets_file``, ``settings``, ``redraw()``, ``say()``,
    ``headline()``, ``go_to()``, ``start_analysis()`` and ``_update_settings()``.
    """

    # ---- which preset and part apply to a photo -----------------------------------------
    def photo_preset(self, e: QueueEntry):
        """The preset in force for ``e``: the one chosen in the station, else its own."""
        return self.chosen_preset if self.chosen_preset is not None else e.preset_source

    def photo_settings(self, e: QueueEntry | None) -> dict:
        """The per-photo settings of ``e``'s own preset; none once a preset was chosen."""
        if e is None or self.chosen_preset is not None:
            return {}
        return e.preset

    def part_of(self, e: QueueEntry | None) -> str | None:
        if e is None:
            return None
        return self.recorder.options.get("part") or e.path.stem

    # ---- recording ----------------------------------------------------------------------
    def record_options(self, e: QueueEntry):
        """The options ``e``'s record is judged and logged with, as ``measure`` takes them."""
        options = entry_options(self.recorder, self.photo_preset(e), e.path)
        if options.decision is None:  # neither the command line nor the preset: the station's
            options.decision = self.settings.decision
        return options

    def record(self, index: int) -> None:
        """Judge and log entry ``index``'s fresh measurement (in a worker: SQLite may wait)."""
        e = self.entries[index]
        # a copy: the entry may change meanwhile
        self._record(index, copy.copy(e), self.record_options(e), e)

    @work(thread=True, exit_on_error=False, group="record")
    def _record(self, index: int, snapshot: QueueEntry, options, entry: QueueEntry):
        """Log the measurement; it supersedes the session's earlier record of this entry.

        One photo measured again (an aperture nudge, an exclusion, a setting) counts once
        in history and trend: the new record names the one it replaces, which stays in
        the log. The lock keeps the chain in log order when two records are in flight.
        """
        from ..station_combine import combined_record

        record = combined_record(snapshot, self.backend)
        if record is None:
            return index, snapshot.measurement, None
        with self.record_lock:
            if entry.logged_id is not None:
                record["supersedes"] = entry.logged_id
            outcome = record_result(options, record)
            if outcome.record_id is not None:
                entry.logged_id = outcome.record_id
        return index, snapshot.measurement, outcome

    def _record_finished(self, worker: Worker) -> None:
        if worker.state == WorkerState.ERROR:
            self.notify(f"not recorded: {describe_error(worker.error)}", severity="error")
            return
        if worker.state != WorkerState.SUCCESS:
            return
        index, measurement, outcome = worker.result
        e = self.entries[index]
        if outcome is None or e.measurement is not measurement:
            return  # no records in this build, or the photo was measured again meanwhile
        e.verdict, e.record_id, e.log_error = outcome.verdict, outcome.record_id, outcome.error
        e.spec = outcome.record.get("spec")
        e.record = outcome.record
        e.replaced_id = outcome.record.get("supersedes") if outcome.record_id else None
        if outcome.error:
            self.notify(outcome.error, severity="error", timeout=10)
        part = self.part_of(e)
        for other in self.entries:
            if self.part_of(other) == part:
                other.last_verdict = outcome.verdict
        if index == self.current:
            self.say(self.headline(e))
        self.redraw()
        if outcome.record_id is not None:
            self.reload_log()

    def verdict_text(self, e: QueueEntry, *, tolerance: bool = True) -> str:
        """`` · pass``, `` · FAIL`` or `` · INCONCLUSIVE`` and the record id, for the status line.

        ``tolerance`` adds the tolerance's text after the verdict. The figures view (5)
        gives each limit with its margin and U.
        """
        if e.verdict is None and e.record_id is None and not e.log_error:
            return ""
        out = ""
        if e.verdict is not None:
            spec = self.photo_preset(e)
            text = self.recorder.options.get("spec") or (spec.tolerance if spec else None)
            word = VERDICT_WORDS.get(e.verdict, e.verdict)
            out += f" · {word} {(text or '') if tolerance else ''}".rstrip()
        if e.record_id is not None:
            out += f" · record {e.record_id}"
            if e.replaced_id is not None:
                out += f" (replaces {e.replaced_id})"
        elif e.log_error:
            out += " · not logged"
        return out

    # ---- reading the log back -------------------------------------------------------------
    def reload_log(self) -> None:
        parts = {self.part_of(e) for e in self.entries}
        self._read_log(self.recorder.log_path, parts)

    @work(thread=True, exclusive=True, exit_on_error=False, group="logread")
    def _read_log(self, log_path: Path | None, parts: set):
        return read_log(log_path, parts=parts)

    def _log_read(self, worker: Worker) -> None:
        if worker.state != WorkerState.SUCCESS:
            return
        rows, last, note = worker.result
        self.log_rows, self.log_note = tuple(rows), note
        for e in self.entries:
            e.last_verdict = last.get(self.part_of(e), e.last_verdict)
        self.redraw()

    # ---- trend view -----------------------------------------------------------------------
    def action_trend_figure(self) -> None:
        i = TREND_FIGURES.index(self.trend_figure) if self.trend_figure in TREND_FIGURES else -1
        self.trend_figure = TREND_FIGURES[(i + 1) % len(TREND_FIGURES)]
        self.notify(f"trend of {self.trend_figure}"
                    + (" (the tolerance's first figure)" if self.trend_figure == "auto" else ""),
                    timeout=2)
        self.redraw()

    def action_trend_scope(self) -> None:
        self.trend_all = not self.trend_all
        self.redraw()

    # ---- presets --------------------------------------------------------------------------
    def action_pick_preset(self) -> None:
        from ...analysis.errors import SettingsError
        from ...analysis.records.presets import default_presets_path, load_presets
        from .preset_screen import BY_NAME, PresetScreen

        source = self.presets_file or default_presets_path()
        try:
            presets = load_presets(self.presets_file)
        except SettingsError as exc:
            self.notify(str(exc), severity="error", timeout=10)
            return
        if not presets:
            self.notify(f"no presets in {source}: give --presets FILE", severity="warning")
            return

        def done(choice) -> None:
            if choice is None:
                return
            self.apply_preset_choice(None if choice is BY_NAME else choice)

        current = self.chosen_preset.name if self.chosen_preset else None
        self.app.push_screen(PresetScreen(presets, current=current, source=str(source)), done)

    def apply_preset_choice(self, preset) -> None:
        """Use ``preset`` for every photo (None: each photo's own again) and measure anew.

        A preset's wavelength, diameter, terms, method and ring sign replace the station's
        settings for this session (not remembered); going back to "by photo name" restores
        the settings as they were before the first preset was chosen.
        """
        if self.chosen_preset is None:
            self._settings_before_preset = self.settings
        new = self.settings
        if preset is None:  # back to the settings as they were before the first preset
            new = getattr(self, "_settings_before_preset", None) or self.settings
            new = replace(new, units=self.settings.units,
                          removed_terms=self.settings.removed_terms)
        self.chosen_preset = preset
        if preset is not None:
            changes = {"wavelength_nm": preset.wavelength_nm, "diameter_mm": preset.diameter_mm,
                       "n_terms": preset.zernike_terms,
                       "wavelength_uncertainty_nm": preset.wavelength_uncertainty_nm,
                       "reference_uncertainty_nm": preset.reference_uncertainty_nm,
                       "method": preset.method, "ring_sign": preset.ring_sign}
            new = replace(new, **{k: v for k, v in changes.items() if v is not None})
        for e in self.entries:
            if e.state != "error" or e.pixels is not None:
                e.forget_result()
        # not remembered in station.toml: a preset belongs to this session's bench
        self._update_settings(new, persist=False)
        self.notify(f"preset {preset.name}" if preset else "presets by photo name", timeout=3)
        if self.entry is not None:
            self.start_analysis(self.current)

    # ---- several photos as one measurement ------------------------------------------------
    def action_toggle_mark(self) -> None:
        e = self.entry
        if e is None:
            return
        if e.kind != "photo":
            self.notify("only single photos can be marked", severity="warning")
            return
        e.marked = not e.marked
        n = sum(x.marked for x in self.entries)
        self.say(f"{n} photo{'s' if n != 1 else ''} marked: g averages them, "
                 "n measures them as a phase-shifted sequence")
        self.redraw()

    def _combine(self, kind: str, least: int) -> None:
        marked = [e for e in self.entries if e.marked and e.kind == "photo"]
        if len(marked) < least:
            what = "average" if kind == "average" else "measure as a sequence"
            self.notify(f"mark at least {least} photos with space to {what} them "
                        f"({len(marked)} marked)", severity="warning")
            return
        first = marked[0]
        entry = QueueEntry(first.path, kind=kind, sources=tuple(e.path for e in marked),
                           preset=dict(first.preset), preset_source=first.preset_source,
                           pixels=first.pixels)
        for e in marked:
            e.marked = False
        self.entries.append(entry)
        self.go_to(len(self.entries) - 1)

    def action_average_marked(self) -> None:
        self._combine("average", 2)

    def action_sequence_marked(self) -> None:
        self._combine("sequence", 3)
