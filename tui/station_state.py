"""The station's model of its photo queue: one entry per photo, with its state and result."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np

from ..analysis.aperture import Aperture, Exclusion
from .safe_text import shown, shown_cut

__all__ = ["QueueEntry", "STATE_LABELS", "ViewContext"]

# state -> (glyph, label, style) for the queue and the status line
STATE_LABELS = {
    "new": ("·", "not measured", "dim"),
    "running": ("◌", "measuring", "bold #60e8ff"),
    "ok": ("✓", "measured", "bold #7fd67f"),
    "warning": ("!", "warning", "bold #ffc440"),
    "error": ("✗", "error", "bold #ff6e8a"),
}


@dataclass
class QueueEntry:
    """One photo in the queue.

    ``aperture`` is the operator's own aperture (None: the finder's); ``exclusions``
    are the circles the operator left out, added to whichever aperture is used.
    """

    path: Path
    state: str = "new"
    measurement: Any = None
    error: str | None = None
    pixels: np.ndarray | None = None
    aperture: Aperture | None = None
    exclusions: tuple[Exclusion, ...] = field(default=())
    # settings a presets file gives this photo by its name (wavelength_nm, diameter_mm,
    # n_terms); they win over the station's own for this photo
    preset: dict = field(default_factory=dict)
    preset_source: Any = None  # the Preset those came from (its tolerance and people too)
    # inspection record: this session's verdict, the log's last one for the part, the id
    verdict: str | None = None
    spec: dict | None = None  # the record's judged tolerance: rule, limits, margins, U
    # the judged (and logged) record: the `measure --json` document that `s` saves
    record: dict | None = None
    last_verdict: str | None = None
    record_id: int | None = None
    log_error: str | None = None
    # the newest record this session logged for this entry, kept when the result is
    # forgotten: the entry's next record supersedes it (one record per photo counts)
    logged_id: int | None = None
    replaced_id: int | None = None  # the record this entry's current one superseded
    marked: bool = False
    # closed fringes: the operator's answer to the ring-sign prompt for this photo (wins
    # over its preset's and the station's), and whether its last run was refused for want
    # of one
    ring_sign: str | None = None
    needs_ring_sign: bool = False
    # a measurement made of several photos: "average" or "sequence", and its photos
    kind: str = "photo"
    sources: tuple[Path, ...] = ()
    combined: Any = None  # the AveragedMeasurement or StackMeasurement behind it

    @property
    def name(self) -> str:
        """How the station shows the photo: its file name, control characters escaped."""
        if self.kind == "average":
            return f"avg×{len(self.sources)} {shown(self.path.name)}"
        if self.kind == "sequence":
            return f"seq×{len(self.sources)} {shown(self.path.name)}"
        return shown(self.path.name)

    def name_in(self, room: int, *, others: tuple[str, ...] = ()) -> str:
        """:attr:`name` cut to ``room`` characters so it stays told apart from ``others``.

        ``others`` are the other photos' file names. When they share a long start with
        this one (``BW-FL-0999_f01.png`` ... ``_f05.png``), the cut goes in the middle
        and keeps the end where they differ; otherwise the end is cut. A control
        character's escape is never split.
        """
        kind = {"average": "avg", "sequence": "seq"}.get(self.kind)
        prefix = f"{kind}×{len(self.sources)} " if kind else ""
        raw = self.path.name
        room = max(1, room - len(prefix))
        shared = max((_common_start(raw, o) for o in others if o != raw), default=0)
        keep_end = 0
        if shared >= room // 2:  # the start does not tell them apart: keep the end
            keep_end = min(room - 4, max(room // 2, len(raw) - shared))
        return prefix + shown_cut(raw, room, keep_end=keep_end)

    @property
    def shown_verdict(self) -> tuple[str | None, bool]:
        """The verdict to show and whether it is this session's (else the log's last)."""
        if self.verdict is not None:
            return self.verdict, True
        return self.last_verdict, False

    def base_aperture(self) -> Aperture | None:
        """The aperture in force, without exclusions: the operator's, the found one, a guess."""
        if self.aperture is not None:
            return self.aperture.with_exclusions(())
        if self.measurement is not None:
            return self.measurement.aperture.with_exclusions(())
        if self.pixels is not None:
            h, w = self.pixels.shape
            return Aperture((w - 1) / 2.0, (h - 1) / 2.0, 0.4 * min(h, w))
        return None

    def shown_aperture(self) -> Aperture | None:
        """What the fringe view draws: the aperture in force with the operator's exclusions,
        then those the finder left out of the found aperture (a chip in the rim, a dark
        hole), which the measurement used; the operator's come first, as ``selected``
        counts them."""
        base = self.base_aperture()
        if base is None:
            return None
        found = ()
        if self.aperture is None and self.measurement is not None:
            found = tuple(x for x in self.measurement.aperture.exclusions
                          if x not in self.exclusions)
        return base.with_exclusions(tuple(self.exclusions) + found)

    def forget_result(self) -> None:
        """Drop the measurement (settings or aperture changed); the photo stays loaded."""
        self.measurement = None
        self.error = None
        self.needs_ring_sign = False
        self.state = "new"
        self.verdict = self.record_id = self.log_error = self.replaced_id = None
        self.spec = None
        self.record = None
        self.combined = None


def _common_start(a: str, b: str) -> int:
    """How many characters ``a`` and ``b`` share from their start."""
    n = 0
    for x, y in zip(a, b, strict=False):
        if x != y:
            break
        n += 1
    return n


@dataclass(frozen=True)
class ViewContext:
    """What every view needs besides the photo's entry: the operator's current choices.

    ``map_nm`` and ``figures`` are the measurement's map and figures with
    ``removed_terms`` taken out (None without a measurement).
    """

    units: str = "nm"
    wavelength_nm: float = 632.8
    removed_terms: tuple[int, ...] = ()
    map_nm: np.ndarray | None = None
    figures: Any = None
    selected: int = -1
    colour: str = "truecolor"
    profile_angle_deg: float = 0.0
    zoom: bool = True
    # the inspection log, newest first, for the trend view; a note when there is none
    log_rows: tuple = ()
    log_note: str | None = None
    part: str | None = None
    trend_figure: str = "auto"
    trend_all: bool = False
