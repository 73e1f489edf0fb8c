"""How `measure` prints its results: rich tables for people, JSON Lines or CSV for scripts."""

from __future__ import annotations

import csv
import json
import sys
from pathlib import Path
from typing import TextIO

from flatsight.analysis.record import flat_fields
from flatsight.analysis.zernike import noll_to_osa, term_name
from rich.console import Console
from rich.table import Table
from rich.text import Text

from .safe_text import csv_row, literal, shown

__all__ = ["Reporter", "figures_table", "warning_text", "zernike_table"]

# (label, record key stem, show in fringes)
FIGURE_ROWS = [
    ("PV", "pv", True),
    ("RMS", "rms", False),
    ("PVr (robust PV)", "pvr", False),
    ("power", "power", True),
    ("irregularity", "irregularity", True),
    ("astigmatism", "astigmatism", False),
]


def warning_text(warning: str, where: str = "") -> Text:
    """``warning: ...`` (after ``where: `` when given), the text shown literally."""
    head = f"{shown(where)}: warning:" if where else "warning:"
    return Text.assemble((head, "yellow"), " ", shown(warning))


def _fmt(value, digits: int = 1) -> str:
    return "-" if value is None else f"{value:.{digits}f}"


def figures_table(record: dict) -> Table:
    """The headline figures of one record in nm, waves and fringes."""
    lam = record["wavelength_nm"]
    t = Table(title=None, show_edge=False, pad_edge=False, box=None, header_style="bold")
    t.add_column("figure")
    t.add_column("nm", justify="right")
    t.add_column(f"waves @{lam:g}", justify="right")
    t.add_column(f"fringes @{lam:g}", justify="right")  # at the test wavelength
    report = record.get("report_waves")
    if report:
        t.add_column(f"waves @{report['wavelength_nm']:g}", justify="right")
    for label, key, fringes in FIGURE_ROWS:
        nm = record.get(f"{key}_nm")
        fr = record.get(f"{key}_fringes") if fringes else None
        if key == "power" and nm is not None:
            label = f"power ({'convex' if nm > 0 else 'concave' if nm < 0 else 'flat'})"
        if key == "astigmatism" and record.get("astigmatism_axis_deg") is not None:
            label = f"astigmatism (axis {record['astigmatism_axis_deg']:.0f}°)"
        row = [label, _fmt(nm), _fmt(record.get(f"{key}_waves"), 4),
               _fmt(fr, 3) if fringes else ""]
        if report:
            row.append(_fmt(report.get(f"{key}_waves"), 4))
        t.add_row(*row)
    roc = record.get("radius_of_curvature_m")
    if roc is not None:
        t.add_row("radius of curvature", f"{roc:,.0f} m", "", "")
    return t


def zernike_table(record: dict, *, first: int = 4, last: int = 15) -> Table:
    """Zernike terms ``first..last`` (Noll) with the trade's names, nm and waves."""
    lam = record["wavelength_nm"]
    z = record["zernike"]
    coef = z["coefficients_nm"]
    t = Table(show_edge=False, pad_edge=False, box=None, header_style="bold")
    t.add_column("Noll", justify="right")
    t.add_column("OSA", justify="right")
    t.add_column("term")
    t.add_column("nm", justify="right")
    t.add_column("waves", justify="right")
    for j in range(first, last + 1):
        k = noll_to_osa(j)
        i = (j - 1) if z["ordering"] == "noll" else k
        if i >= len(coef):
            break
        c = coef[i]
        t.add_row(str(j), str(k), term_name(j), _fmt(c, 2), _fmt(None if c is None else c / lam, 4))
    return t


class _Progress:
    """A progress bar on stderr when it is a terminal; silent otherwise."""

    def __init__(self, total: int, stream: TextIO) -> None:
        self.enabled = stream.isatty() and total > 0
        self._bar = None
        if self.enabled:
            from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

            # the description is a file name: never markup
            self._bar = Progress(TextColumn("{task.description}", markup=False), BarColumn(),
                                 TextColumn("{task.completed}/{task.total}"),
                                 TimeElapsedColumn(), console=Console(file=stream),
                                 transient=True)
            self._task = self._bar.add_task("measuring", total=total)
            self._bar.start()
        self._done = 0

    def start(self, photo: str, index: int) -> None:
        if self._bar is not None:
            self._bar.update(self._task, completed=index, description=shown(photo))
            self._bar.start()

    def stage(self, stage: str, fraction: float) -> None:
        if self._bar is not None:
            self._bar.update(self._task, description=f"{stage}")

    def pause(self) -> None:
        # take the (transient) bar off the screen before a result or an error line prints:
        # it lives on stderr, the result goes to stdout, and a bar left in place glues its
        # last frame to the start of the result; start() brings it back for the next photo
        if self._bar is not None:
            self._bar.stop()

    def stop(self) -> None:
        if self._bar is not None:
            self._bar.stop()


class Reporter:
    """Prints each record as it comes: a table for people, or JSON Lines / CSV."""

    def __init__(self, *, mode: str, detail: bool, ordering: str = "noll",
                 stream: TextIO | None = None) -> None:
        self.mode = mode
        self.detail = detail
        self.ordering = ordering
        self.stream = stream or sys.stdout
        # a pipe or a file gets a fixed, roomy width rather than rich's 80 columns
        width = None if self.stream.isatty() else 110
        self.console = Console(file=self.stream, highlight=False, width=width)
        self._csv: csv.DictWriter | None = None
        self._rows: list[dict] = []

    def progress(self, total: int, stream: TextIO) -> _Progress:
        return _Progress(total, stream)

    def emit(self, record: dict, measurement=None) -> None:
        if self.mode == "json":
            self.stream.write(json.dumps(record, allow_nan=False) + "\n")
            self.stream.flush()
        elif self.mode == "csv":
            row = csv_row(flat_fields(record))
            if self._csv is None:
                self._csv = csv.DictWriter(self.stream, fieldnames=list(row),
                                           extrasaction="ignore", lineterminator="\n")
                self._csv.writeheader()
            self._csv.writerow(row)
            self.stream.flush()
        elif self.detail:
            self._detail(record)
        else:
            self._rows.append(record)

    def _detail(self, r: dict) -> None:
        c = self.console
        ap = r["aperture"]
        head = Text()
        head.append(shown(r["photo"]), style="bold")
        head.append(f"   {r['wavelength_nm']:g} nm   aperture r={ap['radius_px']:.1f} px at "
                    f"({ap['center_x_px']:.1f}, {ap['center_y_px']:.1f}) {ap['source']}")
        if r.get("part"):
            head.append(f"   part {shown(r['part'])}")
        c.print(head)
        ref = r.get("reference")
        if ref:
            # the figures are of the part alone only because this map came off them
            covered = ref.get("covered_fraction")
            c.print(literal(f"reference {Path(ref.get('path') or '?').name} subtracted "
                            f"(map RMS {_fmt(ref.get('map_rms_nm'), 1)} nm"
                            + (f", covering {100 * covered:.1f} % of the aperture)"
                               if covered is not None else ")")))
        c.print(figures_table(r))
        c.print()
        c.print(zernike_table(r))
        q = r["quality"]
        c.print(f"fringes: {q['carrier_fringes']:.1f} across at {q['carrier_angle_deg']:.0f}°, "
                f"{q['fringe_period_px']:.1f} px each; resolution "
                f"{q['resolution_cycles_per_aperture']:.1f} cycles/aperture; visibility "
                f"{q['mean_modulation']:.2f}; masked {100 * q['masked_fraction']:.1f} %")
        self._verdict_line(r)
        for w in r.get("warnings", []):
            c.print(warning_text(w))
        if r.get("record_id") is not None:
            c.print(f"logged as record {r['record_id']}")
        c.print()

    def _verdict_line(self, r: dict) -> None:
        spec = r.get("spec")
        if not spec:
            return
        ok = spec.get("verdict") == "pass"
        style = "bold green" if ok else "bold red"
        text = spec.get("text") or spec.get("tolerance") or ""
        self.console.print(Text.assemble(f"tolerance {shown(text)}: ",
                                         (shown(spec.get("verdict", "?")).upper(), style)))

    def finish(self) -> None:
        if self.mode != "table" or not self._rows:
            return
        from rich import box

        # no rules between columns and two-line headers: ten columns fit in 80
        t = Table(header_style="bold", box=box.SIMPLE_HEAD, show_edge=False, pad_edge=False,
                  padding=(0, 0, 0, 1))
        rows = []
        for r in self._rows:
            verdict = (r.get("spec") or {}).get("verdict", "")
            rows.append((r, verdict, [
                f"{r['wavelength_nm']:g}", _fmt(r["pv_nm"]), _fmt(r["rms_nm"]),
                _fmt(r["pvr_nm"]), _fmt(r["pvr_waves"], 3), _fmt(r["power_nm"]),
                _fmt(r["irregularity_nm"]), verdict, str(len(r.get("warnings", [])))]))
        # a narrow terminal folds the photo's name, never a number or a verdict: a cut
        # number (`58…`) reads as another number
        t.add_column("photo", overflow="fold", min_width=12)
        for k, (col, just) in enumerate([
                ("λ\nnm", "right"), ("PV\nnm", "right"), ("RMS\nnm", "right"),
                ("PVr\nnm", "right"), ("PVr\nwaves", "right"), ("power\nnm", "right"),
                ("irreg.\nnm", "right"), ("verdict", "left"), ("warn.", "right")]):
            widest = max([len(cells[k]) for _, _, cells in rows] + [len(w) for w in
                                                                    col.split("\n")])
            t.add_column(col, justify=just, no_wrap=True, min_width=widest)
        for r, verdict, cells in rows:
            style = {"pass": "green", "fail": "bold red"}.get(verdict, "")
            t.add_row(literal(Path(r["photo"]).name), *cells[:7], literal(verdict, style),
                      cells[8])
        self.console.print(t)
        for r in self._rows:
            for w in r.get("warnings", []):
                self.console.print(warning_text(w, Path(r["photo"]).name))
