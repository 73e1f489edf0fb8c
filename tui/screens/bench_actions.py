"""The bench's actions besides analysis: dialogs, saving, aperture editing, terms, profiles."""

from __future__ import annotations

import copy
from dataclasses import replace

from textual import work
from textual.worker import Worker, WorkerState

from ...analysis.aperture import Exclusion
from ..config import StationSettings
from ..station_backend import describe_error
from ..widgets.surface_view import TERM_GROUPS

__all__ = ["ViewActions"]

COLOUR_CYCLE = ("truecolor", "256", "mono")


class ViewActions:
    """Actions the keys call; mixed into the bench screen, whose state they change.

    The bench provides ``entry``, ``selected``, ``settings``, ``colour``, ``zoom``,
    ``profile_angle``, ``redraw()``, ``start_analysis()``, ``measure_settings()``,
    ``photo_settings()``, ``_schedule_rerun()`` and ``_update_settings()``.
    """

    def action_settings(self) -> None:
        from .settings_screen import SettingsScreen

        def done(new: StationSettings | None) -> None:
            if new is None or new == self.settings:
                return
            measuring = (new.wavelength_nm, new.n_terms, new.invert, new.diameter_mm)
            old = (
                self.settings.wavelength_nm,
                self.settings.n_terms,
                self.settings.invert,
                self.settings.diameter_mm,
            )
            if measuring != old:
                changed = list(self.entries)
            elif new.ring_sign != self.settings.ring_sign:
                # a new ring sign changes only the photos of closed fringes that take it
                changed = [e for e in self.entries if self.takes_station_sign(e)]
            else:
                changed = []
            self._update_settings(new)
            for e in changed:
                if e.state != "error" or e.pixels is not None:
                    e.forget_result()
            if any(e is self.entry for e in changed):  # identity: entries hold arrays
                self.start_analysis(self.current)

        self.app.push_screen(SettingsScreen(self.settings), done)

    def takes_station_sign(self, e) -> bool:
        """Whether ``e`` is a photo of closed fringes whose ring sign is the station's."""
        if e.ring_sign is not None or self.photo_settings(e).get("ring_sign"):
            return False
        m = e.measurement
        return e.needs_ring_sign or (m is not None and m.quality.sign == "stated")

    def action_ring_sign(self) -> None:
        """State whether the part in this photo of closed fringes is convex or concave."""
        e = self.entry
        m = e.measurement if e is not None else None
        # phase-shifted frames, and a photo measured by its tilt, have their sign measured
        if e is None or e.kind == "sequence" or (
                e.kind == "photo" and m is not None and m.quality.sign == "measured"):
            self.notify("a ring sign is for a photo of closed fringes; this one's sign is "
                        "measured", severity="warning")
            return
        self.ask_ring_sign(self.current)

    def ask_ring_sign(self, index: int) -> None:
        """The ring-sign prompt for entry ``index``; its answer measures the photo again."""
        from .ring_sign_screen import RingSignScreen

        e = self.entries[index]
        current = self.measure_settings(e).ring_sign

        def done(sign: str | None) -> None:
            if sign is None:
                if e.needs_ring_sign:
                    self.say(f"✗ {e.name}: not measured: no ring sign stated (R asks again)")
                return
            e.ring_sign = sign
            e.forget_result()
            if e.kind == "average":  # its photos are of one part: its sign is theirs too
                for x in self.entries:
                    if x.kind == "photo" and x.path in e.sources and x.ring_sign != sign:
                        x.ring_sign = sign
                        x.forget_result()
            self.notify(f"{e.name}: stated {sign}", timeout=3)
            if index == self.current:
                self.start_analysis(index)
            else:
                self.redraw()

        self.app.push_screen(RingSignScreen(e.name, current=current), done)

    def action_open(self) -> None:
        from .open_screen import OpenScreen

        def done(paths) -> None:
            if paths:
                self.add_photos(paths)

        self.app.push_screen(OpenScreen(self.start_folder), done)

    def action_help(self) -> None:
        from .help_screen import HelpScreen

        self.app.push_screen(HelpScreen(self.key_rows()))

    def action_save(self) -> None:
        e = self.entry
        if e is None or e.measurement is None:
            self.notify("nothing to save yet: measure the photo first", severity="warning")
            return
        _, figures = self._reduced(e.measurement)
        photo = None
        if e.kind != "photo":  # avg3 / seq4 beside the first photo, never over its own files
            tag = {"average": "avg", "sequence": "seq"}[e.kind]
            photo = e.path.with_name(f"{e.path.stem}.{tag}{len(e.sources)}{e.path.suffix}")
        self._save(e.measurement, figures, self.removed_terms(), photo, copy.copy(e),
                   self.record_options(e))

    @work(thread=True, exit_on_error=False, group="save")
    def _save(self, m, figures, removed, photo, snapshot, options):
        from ..station_save import save_result, saved_record

        return save_result(
            m, self.backend, folder=self.out_dir, figures=figures, removed_terms=removed,
            photo=photo, record=saved_record(snapshot, self.backend, options),
        )

    def _save_finished(self, worker: Worker) -> None:
        if worker.state == WorkerState.SUCCESS:
            paths = worker.result
            self.say(f"Saved {', '.join(p.name for p in paths)} in {paths[0].parent}")
            self.notify(f"saved {len(paths)} files in {paths[0].parent}", timeout=4)
        elif worker.state == WorkerState.ERROR:
            self.notify(f"not saved: {describe_error(worker.error)}", severity="error")

    # aperture editing (fringe view)
    def _edit(self, change) -> None:
        e = self.entry
        if e is None or e.base_aperture() is None:
            return
        ap = e.base_aperture()
        if self.selected < 0:
            e.aperture = change(ap)
        else:
            ex = list(e.exclusions)
            ex[self.selected] = change(ex[self.selected])
            e.exclusions = tuple(ex)
            e.aperture = e.aperture or ap
        self.redraw()
        self._schedule_rerun()

    def _step_px(self) -> float:
        ap = self.entry.base_aperture() if self.entry else None
        return max(1.0, 0.01 * ap.radius_px) if ap else 1.0

    def action_nudge(self, dx: int, dy: int) -> None:
        step = self._step_px()
        self._edit(lambda c: _moved(c, dx * step, dy * step, 0.0))

    def action_centre_at(self, x: float, y: float) -> None:
        """Move the outline being edited so its centre is at photo point ``(x, y)``."""
        self._edit(lambda c: _moved(c, x - c.center_x_px, y - c.center_y_px, 0.0))

    def action_grow(self, sign: int) -> None:
        step = self._step_px()
        self._edit(lambda c: _moved(c, 0.0, 0.0, sign * step))

    def action_turn(self, degrees: float) -> None:
        """Turn the part's outline (an ellipse, a rectangle, a polygon) counter-clockwise."""
        if self.selected < 0:
            self._edit(lambda c: c.reshaped(turn_deg=degrees))

    def action_stretch(self, sign: int) -> None:
        """Scale the outline's second dimension by 2 % (a circle becomes an ellipse)."""
        if self.selected < 0:
            self._edit(lambda c: c.reshaped(stretch=1.02 if sign > 0 else 1 / 1.02))

    def action_auto_aperture(self) -> None:
        e = self.entry
        if e is not None:
            e.aperture = None
            self.selected = -1
            self.start_analysis(self.current)

    def action_add_exclusion(self) -> None:
        e = self.entry
        ap = e.base_aperture() if e else None
        if ap is None:
            return
        e.exclusions = (
            *e.exclusions,
            Exclusion(ap.center_x_px, ap.center_y_px, 0.15 * ap.radius_px),
        )
        e.aperture = e.aperture or ap
        self.selected = len(e.exclusions) - 1
        self.redraw()
        self._schedule_rerun()

    def action_toggle_zoom(self) -> None:
        """Zoom the fringe view to the aperture; again, back to the whole photo."""
        self.zoom = not self.zoom
        self.notify("zoomed to the aperture (z: the whole photo)" if self.zoom
                    else "the whole photo (z: zoom to the aperture)", timeout=2)
        self.redraw()

    def action_next_outline(self) -> None:
        n = len(self.entry.exclusions) if self.entry else 0
        self.selected = -1 if self.selected + 1 >= n else self.selected + 1
        self.redraw()

    def action_remove_exclusion(self) -> None:
        e = self.entry
        if e is None or self.selected < 0:
            self.notify("select an exclusion first (e)", timeout=2)
            return
        ex = list(e.exclusions)
        del ex[self.selected]
        e.exclusions = tuple(ex)
        self.selected = -1
        self.redraw()
        self._schedule_rerun()

    # surface view
    def action_toggle_terms(self, key: str) -> None:
        terms = set(TERM_GROUPS[key][1])
        removed = set(self.settings.removed_terms)
        removed = removed - terms if terms <= removed else removed | terms
        limit = self.settings.n_terms
        self._update_settings(
            replace(self.settings, removed_terms=tuple(sorted(j for j in removed if j <= limit)))
        )

    def action_restore_terms(self) -> None:
        self._update_settings(replace(self.settings, removed_terms=()))

    def action_cycle_colour(self) -> None:
        self.colour = COLOUR_CYCLE[(COLOUR_CYCLE.index(self.colour) + 1) % len(COLOUR_CYCLE)]
        self.notify(f"maps drawn in {self.colour}", timeout=2)
        self.redraw()

    def action_turn_profiles(self, degrees: float) -> None:
        self.profile_angle = (self.profile_angle + degrees) % 180.0
        self.redraw()


def _moved(circle, dx: float, dy: float, dr: float):
    """The aperture or exclusion ``circle`` shifted and grown (radius at least 2 px)."""
    if isinstance(circle, Exclusion):
        return Exclusion(
            circle.center_x_px + dx, circle.center_y_px + dy, max(2.0, circle.radius_px + dr)
        )
    return circle.moved(dx, dy, dr)
