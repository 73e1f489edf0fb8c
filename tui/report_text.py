"""How `measure` prints its results: rich tables for people, JSON Lines or CSV for scripts."""

from __future__ import annotations

import csv
import json
import sys
from pathlib import Path
from typing import TextIO

from flatsight.analysis.formatting import format_number
from flatsight.analysis.record import flat_fields
from flatsight.analysis.shapes import shape_words
from flatsight.analysis.zernike import noll_to_osa, term_name
from rich import box
from rich.console import Console
from rich.padding import Padding
from rich.table import Table
from rich.text import Text

from .render.summary import carrier_lines
from .safe_text import csv_row, literal, shown

__all__ = ["Reporter", "cell_width", "figures_table", "inspection_text", "limit_finding",
           "limit_lines", "limits_table", "verdict_text", "warning_text", "zernike_table"]

# (label, record key stem, show in fringes)
FIGURE_ROWS = [
    ("PV", "pv", True),
    ("RMS", "rms", False),
    ("PVr (robust PV)", "pvr", False),
    ("power", "power", True),
    ("irregularity", "irregularity", True),
    ("astigmatism", "astigmatism", False),
    ("C (symmetric irreg.)", "symmetric_irregularity", True),
    ("RMSi", "rms_irregularity", False),
    ("RMSa", "rms_asymmetric", False),
]
# a figure's record key -> its short name, for the tolerance's limits
SHORT_NAMES = {"pv_nm": "PV", "rms_nm": "RMS", "pvr_nm": "PVr", "power_nm": "power",
               "irregularity_nm": "irregularity", "astigmatism_nm": "astigmatism",
               "symmetric_irregularity_nm": "symmetric", "rms_irregularity_nm": "RMSi",
               "rms_asymmetric_nm": "RMSa"}
# verdict -> (word, style) in tables and lines
VERDICT_WORDS = {"pass": "pass", "fail": "FAIL", "inconclusive": "INCONCLUSIVE"}
VERDICT_STYLES = {"pass": (VERDICT_WORDS["pass"], "bold green"),
                  "fail": (VERDICT_WORDS["fail"], "bold red"),
                  "inconclusive": (VERDICT_WORDS["inconclusive"], "bold yellow")}
U_NOTE = ("U: expanded uncertainty (k = 2) in nm: the map's noise, the method, the "
          "wavelength and the reference flat (--json gives each in uncertainty_budget)")
BATCH_U_NOTE = "±: " + U_NOTE.removeprefix("U: ")


def warning_text(warning: str, where: str = "") -> Text:
    """``warning: ...`` (after ``where: `` when given), the text shown literally."""
    head = f"{shown(where)}: warning:" if where else "warning:"
    return Text.assemble((head, "yellow"), " ", shown(warning))


def _fmt(value, digits: int = 1) -> str:
    return format_number(value, digits, missing="-")


def fringes_text(q: dict) -> tuple[str, str]:
    """The record's carrier and its visibility in words; an average's as the range over its
    photos (it has no carrier of its own), a map without a carrier says so."""
    per_photo = q.get("per_photo") or ()
    if per_photo:
        lines = carrier_lines(None, None, None, [
            (p.get("carrier_fringes"), p.get("fringe_period_px"), p.get("mean_modulation"))
            for p in per_photo])
        visibility = lines[-1].removeprefix("visibility ")
        return f"{lines[0].rstrip(':')} carrier: " + ", ".join(lines[1:-1]), visibility
    visibility = _fmt(q.get("mean_modulation"), 2)
    if q.get("carrier_fringes") is None:
        return "no tilt carrier", visibility
    return (f"{_fmt(q['carrier_fringes'])} across at {_fmt(q['carrier_angle_deg'], 0)}°, "
            f"{_fmt(q['fringe_period_px'])} px each"), visibility


def method_text(q: dict) -> str | None:
    """The single-photo method, why it was chosen, and what it fitted, in one line.

    None for a map combined from several photos (no method of its own).
    """
    method = q.get("method")
    if not method:
        return None
    parts = [f"{method} ({q.get('method_reason') or 'chosen'})"]
    if q.get("terms_fitted"):
        parts.append(f"{q['terms_fitted']} Zernike terms, all the fringes resolve")
    if q.get("sign") == "stated":
        parts.append("sign stated by the operator, not measured")
    return "; ".join(parts)


def _u(record: dict, key: str) -> float | None:
    """The expanded uncertainty of figure ``key`` (``"pv_nm"``), or None."""
    value = (record.get("uncertainty") or {}).get(key)
    return value if isinstance(value, int | float) else None


def cell_width(cell) -> int:
    """Terminal cells the widest line of a table cell takes."""
    plain = cell.plain if isinstance(cell, Text) else str(cell)
    return max(Text(line).cell_len for line in plain.split("\n"))


def verdict_text(verdict: str | None, *, upper: bool = False) -> Text:
    """``pass``, ``FAIL`` or ``INCONCLUSIVE`` in its colour; empty without a verdict."""
    word, style = VERDICT_STYLES.get(verdict, (shown(verdict or ""), ""))
    return Text(word.upper() if upper else word, style=style)


def figures_table(record: dict) -> Table:
    """The figures of one record in nm with their U, in waves and in fringes."""
    lam = record["wavelength_nm"]
    t = Table(title=None, show_edge=False, pad_edge=False, box=None, header_style="bold")
    t.add_column("figure")
    t.add_column("nm", justify="right", no_wrap=True)
    t.add_column("± U nm", justify="right", no_wrap=True)
    t.add_column(f"waves @{lam:g}", justify="right", no_wrap=True)
    t.add_column(f"fringes @{lam:g}", justify="right", no_wrap=True)  # test wavelength
    report = record.get("report_waves")
    if report:
        t.add_column(f"waves @{report['wavelength_nm']:g}", justify="right", no_wrap=True)
    for label, key, fringes in FIGURE_ROWS:
        nm = record.get(f"{key}_nm")
        if nm is None and key not in ("pv", "rms", "pvr", "power", "irregularity"):
            continue  # an older record without this figure
        waves = record.get(f"{key}_waves")
        if waves is None and isinstance(nm, int | float):
            waves = nm / lam
        fr = None if waves is None or not fringes else 2.0 * waves
        if key == "power" and isinstance(nm, int | float):
            label = f"power ({'convex' if nm > 0 else 'concave' if nm < 0 else 'flat'})"
        if key == "astigmatism" and record.get("astigmatism_axis_deg") is not None:
            label = f"astigmatism (axis {format_number(record['astigmatism_axis_deg'], 0)}°)"
        u = _u(record, f"{key}_nm")
        row = [label, _fmt(nm), "" if u is None else _fmt(u), _fmt(waves, 4),
               _fmt(fr, 3) if fringes else ""]
        if report:
            rw = report.get(f"{key}_waves")
            if rw is None and isinstance(nm, int | float):
                rw = nm / report["wavelength_nm"]
            row.append(_fmt(rw, 4))
        t.add_row(*row)
    roc = record.get("radius_of_curvature_m")
    if roc is not None:
        t.add_row("radius of curvature", f"{format_number(roc, 0, grouping=True)} m", "", "", "")
    return t


def _limit_cells(lim: dict) -> tuple[Text, str, str, str, Text]:
    """One judged limit as (name, measured ± U, limit, margin, verdict), heights in nm."""
    short = SHORT_NAMES.get(lim.get("figure"), lim.get("label") or "")
    name = str(lim.get("name") or "")
    title = short if name.lower() in (short.lower(), lim.get("figure")) else f"{name} {short}"
    measured = format_number(lim.get("measured_nm"))
    if lim.get("compared") == "magnitude":
        measured = f"|{measured}|"
    u = lim.get("uncertainty_nm")
    if u is not None:
        measured += f" ± {format_number(u)}"
    return (Text(shown(title)), f"{measured} nm",
            f"≤ {format_number(lim.get('limit_nm'))} nm",
            f"{format_number(lim.get('margin_nm'), sign=True)} nm",
            verdict_text(lim.get("verdict")))


def limits_table(spec: dict) -> Table:
    """Each limit of a judged tolerance: measured ± U, the limit, the margin, the verdict."""
    t = Table(show_edge=False, pad_edge=False, box=None, header_style="bold")
    t.add_column("limit")
    t.add_column("measured ± U", justify="right", no_wrap=True)
    t.add_column("limit", justify="right", no_wrap=True)
    t.add_column("margin", justify="right", no_wrap=True)
    t.add_column("verdict", no_wrap=True)
    for lim in spec.get("limits", []):
        t.add_row(*_limit_cells(lim))
    return t


# a limit's unit as a finding writes it (the tolerance's own spellings)
UNIT_SHORT = {"fr": "fr", "w": "w", "um": "µm", "nm": "nm"}


def _decimals(value: float) -> int:
    """How many decimals ``value`` is written with (0.5 -> 1, 0.25 -> 2, 63 -> 0)."""
    return len(f"{abs(float(value)):.6f}".rstrip("0").partition(".")[2])


def limit_finding(lim: dict) -> Text:
    """One judged limit in the tolerance's own unit, with the limit and by how much.

    ``FAIL irregularity B 0.82 ± 0.05 > 0.50 fr (by 0.32 fr, at 546.07 nm)``: the
    verdict, the limit's name, the measured value with its U, ``>`` or ``≤`` the limit,
    how far over or inside it lies, and the wavelength of a fringe or wave unit.
    """
    short = SHORT_NAMES.get(lim.get("figure"), "")
    name = str(lim.get("name") or "")
    if len(name) == 1 and short:  # ISO 10110-5's letters: "irregularity B"
        title = f"{short} {name}"
    else:  # RMSt, RMSi, RMSa by their own names; plain limits by the figure's
        title = name if name.startswith("RMS") or not short else short
    unit = lim.get("unit") if lim.get("measured") is not None else "nm"
    if unit == "nm":
        measured, limit, margin, u = (lim.get(k) for k in (
            "measured_nm", "limit_nm", "margin_nm", "uncertainty_nm"))
    else:
        measured, limit, margin, u = (lim.get(k) for k in (
            "measured", "limit", "margin", "uncertainty"))
    word = verdict_text(lim.get("verdict"), upper=True)
    unit_text = UNIT_SHORT.get(unit, shown(unit or ""))
    if not isinstance(measured, int | float) or not isinstance(limit, int | float):
        return Text.assemble(word, f" {shown(title)}: not measured (limit "
                                   f"{format_number(limit)} {unit_text})")
    digits = min(4, max(1 if unit == "nm" else 2, _decimals(limit) + 1))
    value = format_number(measured, digits)
    if lim.get("compared") == "magnitude":
        value = f"|{value}|"
    if isinstance(u, int | float):
        value += f" ± {format_number(u, digits)}"
    over = isinstance(margin, int | float) and margin < 0
    by = abs(margin) if isinstance(margin, int | float) else None
    by_digits = digits
    while by is not None and by_digits < 4 and round(by, by_digits) == 0 and by > 0:
        by_digits += 1  # a hair over the limit still reads as over, not "by 0.00"
    notes = [f"by {format_number(by, by_digits)} {unit_text}"] if by is not None else []
    wavelength = lim.get("unit_wavelength_nm")
    if unit in ("fr", "w") and isinstance(wavelength, int | float):
        notes.append(f"at {wavelength:g} nm")
    return Text.assemble(word, f" {shown(title)} {value} {'>' if over else '≤'} "
                               f"{format_number(limit, digits)} {unit_text}"
                               + (f" ({', '.join(notes)})" if notes else ""))


def limit_as_written(lim: dict) -> str:
    """`` (2 fr at 546.07 nm)``: a limit in the unit the tolerance gave it, with the
    wavelength its fringes or waves are counted at; empty for a limit written in nm."""
    unit, wavelength = lim.get("unit"), lim.get("unit_wavelength_nm")
    if unit in (None, "nm", "um") or wavelength is None or lim.get("limit") is None:
        return ""
    shown_unit = {"fr": "fr", "w": "λ"}.get(unit, shown(unit))
    return f" ({format_number(lim['limit'], 3).rstrip('0').rstrip('.')} {shown_unit} at " \
           f"{format_number(wavelength, 2).rstrip('0').rstrip('.')} nm)"


def limit_lines(spec: dict) -> list[Text]:
    """The same as :func:`limits_table`, one line a limit that wraps rather than cuts.

    Each limit written in fringes or waves says at which wavelength they are counted, as
    a drawing's fringes (546.07 nm unless stated) need not be the test's.
    """
    lines = []
    for lim in spec.get("limits", []):
        title, measured, limit, margin, verdict = _limit_cells(lim)
        lines.append(Text.assemble(title, ": ", verdict, f"  {measured} {limit}"
                                   f"{limit_as_written(lim)}, margin {margin}"))
    return lines


def inspection_text(record: dict) -> str:
    """The record's part, people, log entry and verdict as plain text, for a summary file.

    Empty when the record carries none of them (a measurement not judged or logged).
    """
    rows = [(label, record.get(key)) for label, key in (
        ("part", "part"), ("operator", "operator"), ("station", "station"),
        ("logged (UTC)", "logged_utc"), ("record", "record_id"))]
    spec = record.get("spec") or {}
    if not spec and all(value is None for _, value in rows):
        return ""
    out = ["", "Inspection"]
    out += [f"  {label:<14} {shown(value)}" for label, value in rows if value is not None]
    if spec:
        rule = spec.get("decision_rule") or "simple"
        out.append(f"  tolerance      {shown(spec.get('tolerance') or '')} ({rule} decision "
                   f"rule): {verdict_text(spec.get('verdict'), upper=True).plain}")
        out += [f"    {line.plain}" for line in limit_lines(spec)]
        if spec.get("decision_rule_text"):
            out.append(f"  {shown(spec['decision_rule_text'])}")
    return "\n".join(out) + "\n"


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
        if ap.get("shape"):  # an outline: its own form, never a circle it is not
            head.append(f"   {r['wavelength_nm']:g} nm   aperture "
                        f"{shown(ap['shape'].get('text', '?'))} {ap['source']}")
        else:
            head.append(f"   {r['wavelength_nm']:g} nm   aperture r={_fmt(ap['radius_px'])} "
                        f"px at ({_fmt(ap['center_x_px'])}, {_fmt(ap['center_y_px'])}) "
                        f"{ap['source']}")
        if r.get("part"):
            head.append(f"   part {shown(r['part'])}")
        if ap.get("shape"):
            head.append(f"\n   outline: {shape_words(ap['shape'])}")
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
        if r.get("uncertainty"):
            c.print(Text(U_NOTE, style="dim"))
        c.print()
        c.print(zernike_table(r))
        q = r["quality"]
        carrier, visibility = fringes_text(q)
        window = q.get("resolution_cycles_per_aperture")
        c.print(f"fringes: {carrier}; "
                + (f"resolution {_fmt(window)} cycles/aperture; " if window is not None else "")
                + f"visibility {visibility}; masked {_fmt(100 * q['masked_fraction'])} %")
        method = method_text(q)
        if method is not None:
            c.print(f"method: {method}")
        self._verdict(r)
        for w in r.get("warnings", []):
            c.print(warning_text(w))
        if r.get("record_id") is not None:
            c.print(f"logged as record {r['record_id']}")
        c.print()

    def _verdict(self, r: dict) -> None:
        """The tolerance's verdict under its decision rule, then each limit with U and margin."""
        spec = r.get("spec")
        if not spec:
            return
        rule = spec.get("decision_rule") or "simple"
        line = Text.assemble("tolerance ", shown(spec.get("tolerance") or ""),
                             f" ({rule} decision rule): ",
                             verdict_text(spec.get("verdict"), upper=True))
        self.console.print(line)
        for lim in spec.get("limits", []):
            if lim.get("verdict") != "pass":
                self.console.print(Padding(limit_finding(lim), (0, 0, 0, 2), expand=False))
        self.console.print(limits_table(spec))
        if spec.get("decision_rule_text"):
            self.console.print(Text(shown(spec["decision_rule_text"]), style="dim"))

    def _batch_columns(self) -> list[tuple[str, str, object]]:
        """(header, justify, cell maker) of the batch table; more columns on a wide terminal."""

        def with_u(key: str):
            def cell(r: dict) -> Text:
                text = Text(_fmt(r.get(key)))
                u = _u(r, key)
                if u is not None:
                    text.append(f"\n±{_fmt(u)}", style="dim")
                return text

            return cell

        columns = [
            ("λ\nnm", "right", lambda r: f"{r['wavelength_nm']:g}"),
            ("PV\nnm", "right", with_u("pv_nm")),
            ("RMS\nnm", "right", with_u("rms_nm")),
            ("PVr\nnm", "right", with_u("pvr_nm")),
            ("power\nnm", "right", with_u("power_nm")),
            ("irreg.\nnm", "right", with_u("irregularity_nm")),
            ("verdict", "left", lambda r: verdict_text((r.get("spec") or {}).get("verdict"))),
        ]
        if self.console.width >= 100:
            columns.insert(4, ("PVr\nwaves", "right", lambda r: _fmt(r.get("pvr_waves"), 3)))
            columns.append(("warn.", "right", lambda r: str(len(r.get("warnings", [])))))
        return columns

    def finish(self) -> None:
        if self.mode != "table" or not self._rows:
            return
        columns = self._batch_columns()
        cells = [[make(r) for _, _, make in columns] for r in self._rows]
        # the numbers never fold or shorten: below the width they need, one block a photo
        widths = [max(cell_width(header), *(cell_width(row[i]) for row in cells))
                  for i, (header, _, _) in enumerate(columns)]
        if sum(widths) + 2 * len(columns) + 10 > self.console.width:
            self._narrow(columns, cells)
        else:
            t = Table(header_style="bold", box=box.SIMPLE_HEAD, show_edge=False,
                      pad_edge=False, collapse_padding=True)
            t.add_column("photo", overflow="fold", ratio=1,
                         min_width=min(10, max(len(Path(r["photo"]).name) for r in self._rows)))
            for header, justify, _ in columns:
                t.add_column(header, justify=justify, no_wrap=True)
            for r, row in zip(self._rows, cells, strict=True):
                t.add_row(Text(shown(Path(r["photo"]).name)), *row)
            self.console.print(t)
        if any(_u(r, "pv_nm") is not None for r in self._rows):
            self.console.print(Text(BATCH_U_NOTE, style="dim"))
        self._references()
        for r in self._rows:  # what decided each verdict that is not a pass
            spec = r.get("spec") or {}
            if spec.get("verdict") in ("fail", "inconclusive"):
                self._findings(Path(r["photo"]).name, spec)
        for r in self._rows:
            for w in r.get("warnings", []):
                self.console.print(warning_text(w, Path(r["photo"]).name))

    def _references(self) -> None:
        """Which reference map was taken off the figures above, and off how many photos."""
        paths = [(r.get("reference") or {}).get("path") for r in self._rows]
        for path in dict.fromkeys(p for p in paths if p):
            n = paths.count(path)
            whose = "every photo" if n == len(paths) else f"{n} of the {len(paths)} photos"
            self.console.print(literal(f"reference {Path(path).name} subtracted from {whose} "
                                       "(path and SHA-256 in --json)"))

    def _findings(self, photo: str, spec: dict) -> None:
        """``photo: FAIL irregularity B ...`` for each limit that did not pass; the photo
        on a line of its own when a finding would not fit beside it."""
        name = Text(f"{shown(photo)}:")
        found = [limit_finding(lim) for lim in spec.get("limits", [])
                 if lim.get("verdict") != "pass"]
        if all(name.cell_len + 1 + f.cell_len <= self.console.width for f in found):
            for f in found:
                self.console.print(name + " " + f)
            return
        self.console.print(name)
        for f in found:
            self.console.print(Padding(f, (0, 0, 0, 2), expand=False))

    def _narrow(self, columns, cells) -> None:
        """Each photo as its name and ``figure value ±U unit`` pairs packed into lines."""
        width = self.console.width
        for r, row in zip(self._rows, cells, strict=True):
            self.console.print(Text(shown(Path(r["photo"]).name), style="bold"))
            line = ""
            for (header, _, _), cell in zip(columns, row, strict=True):
                name, _, unit = header.partition("\n")
                value = cell.plain.replace("\n", " ") if isinstance(cell, Text) else str(cell)
                pair = " ".join(x for x in (name, value, unit) if x)
                if line and len(line) + 2 + len(pair) > width:
                    self.console.print(Text(line))
                    line = ""
                line = f"{line}  {pair}" if line else f"  {pair}"
            if line:
                self.console.print(Text(line))
