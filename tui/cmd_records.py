"""The ``history``, ``trend`` and ``report`` commands: reading the inspection log back.

``add_parser(subparsers)`` adds all three; each sets ``records_command`` so that
``run(args)`` knows which to run (``args.run(args)`` works too).
Exit status: 0 done, 2 bad options or log (one-line error on stderr).
"""

from __future__ import annotations

import argparse
import csv
import json
import re
import shutil
import sys
from collections.abc import Sequence
from datetime import datetime
from pathlib import Path

from ..analysis.errors import FlatsightError, SettingsError
from ..analysis.formatting import format_number
from .options import count_type, whole_number_type
from .record_options import LOG_HELP, log_type
from .safe_text import csv_row, literal, shown

__all__ = ["add_parser", "run", "run_history", "run_report", "run_trend", "trend_lines"]

TREND_FIGURES = ("pv_nm", "rms_nm", "pvr_nm", "power_nm", "irregularity_nm", "astigmatism_nm",
                 "symmetric_irregularity_nm", "rms_irregularity_nm", "rms_asymmetric_nm")
CSV_FIELDS = ("record_id", "logged_utc", "part", "operator", "station", "photo",
              "photo_sha256", "wavelength_nm", *TREND_FIGURES, "radius_of_curvature_m",
              "tolerance", "verdict", "source", "photos", "reference_map",
              "reference_sha256", "supersedes", "superseded_by",
              # the part's outline (record.outline_fields), last: older columns keep places
              "aperture_shape", "aperture_outline", "aperture_view_angle_deg")
# how history marks a record made of several photos, or with a reference map taken off
SOURCE_NOTE = ("avg N: the average of N photos of the part (the first one named); seq N: "
               "a phase-shifted sequence of N frames; ref: a reference map subtracted")


# a record id SQLite can hold; plot rows a terminal can show
record_id_type = whole_number_type("record id", 1, 2**63 - 1)
height_type = whole_number_type("--height", 4, 500)


def _log_option(p: argparse.ArgumentParser) -> None:
    p.add_argument("--log", metavar="PATH|URL", default=None, type=log_type,
                   help=LOG_HELP.format(default="inspections.sqlite in the user data dir",
                                        fallback="station.toml's 'log' if set"))


def add_parser(subparsers) -> None:
    """Add ``history``, ``trend`` and ``report`` to a CLI's subparsers."""
    h = subparsers.add_parser(
        "history", help="list logged inspections, newest first",
        description="List logged inspections, newest first. --json gives JSON Lines with "
                    "the fields of 'measure --json' plus record_id, logged_utc, part, "
                    "operator, station and verdict. A photo the station measured again in "
                    "one session counts once: its newest record (see --superseded).")
    _log_option(h)
    h.add_argument("--part", metavar="ID", help="only this part")
    h.add_argument("--since", metavar="DATE", help="only from this date (ISO 8601, UTC)")
    h.add_argument("--verdict", choices=("pass", "fail", "inconclusive"),
                   help="only this verdict")
    h.add_argument("--limit", metavar="N", type=count_type, default=None,
                   help="at most N records")
    h.add_argument("--superseded", action="store_true",
                   help="also list the records a later one replaced (the station measured "
                        "the same photo again in one session), marked '→ID' with the id "
                        "that replaced them")
    fmt = h.add_mutually_exclusive_group()
    fmt.add_argument("--json", action="store_true", help="JSON Lines, one record a line")
    fmt.add_argument("--csv", action="store_true", help="CSV with one row a record")
    h.set_defaults(records_command="history", run=run_history)

    t = subparsers.add_parser(
        "trend", help="plot a figure over time with its tolerance line and pass rate",
        description="Plot a figure over time in the terminal. Each mark is one record's "
                    "overall verdict (o passed, x failed, ? inconclusive, * no tolerance); "
                    "the dashed line "
                    "is the latest record's tightest limit on that figure (both signs for "
                    "power, which is limited by magnitude).")
    _log_option(t)
    t.add_argument("--since", metavar="DATE", help="only from this date (ISO 8601, UTC)")
    t.add_argument("--part", metavar="ID", help="only this part")
    t.add_argument("--figure", default=None, choices=TREND_FIGURES,
                   help="figure to plot (default: the one the latest record's tolerance "
                        "limits first, as in the station; pvr_nm without a tolerance)")
    t.add_argument("--height", type=height_type, default=12,
                   help="plot rows (4 to 500, default 12)")
    t.set_defaults(records_command="trend", run=run_trend)

    r = subparsers.add_parser(
        "report", help="write the certificate of logged inspections (PDF, HTML)",
        description="Write the certificate of a logged inspection: FILE.pdf is one A4 (or "
                    "--paper letter) page made without a browser; FILE.html is one "
                    "self-contained page that prints on A4 or Letter; FILE.png is the "
                    "surface map alone. Several at once: select records as history does "
                    "(--part, --since, --verdict) and give --output-dir DIR, one file per "
                    "record named PART_rRECORD.pdf (or .html with --format html).",
        epilog="examples:\n"
               "  flatsight report 17 --output BW-FL-0412.pdf\n"
               "  flatsight report 17 --output BW-FL-0412.pdf --paper letter\n"
               "  flatsight report --part BW-FL-0412 --output-dir certificates\n"
               "  flatsight report --since 2026-12-01 --verdict pass --output-dir out\n",
        formatter_class=argparse.RawDescriptionHelpFormatter)
    r.add_argument("record_id", type=record_id_type, metavar="RECORD_ID", nargs="?",
                   help="the record (see 'flatsight history'), with --output")
    _log_option(r)
    r.add_argument("--output", "-o", metavar="FILE",
                   help="FILE.pdf, FILE.html or FILE.png, for one RECORD_ID")
    r.add_argument("--output-dir", metavar="DIR",
                   help="write one certificate per selected record into DIR (made if "
                        "missing); select with --part, --since and --verdict")
    r.add_argument("--part", metavar="ID", help="with --output-dir: only this part")
    r.add_argument("--since", metavar="DATE",
                   help="with --output-dir: only from this date (ISO 8601, UTC)")
    r.add_argument("--verdict", choices=("pass", "fail", "inconclusive"),
                   help="with --output-dir: only this verdict")
    r.add_argument("--format", choices=("pdf", "html"), default="pdf",
                   help="with --output-dir: the certificates' format (default pdf)")
    r.add_argument("--paper", choices=("a4", "letter"), default="a4",
                   help="paper of a PDF certificate (default a4)")
    r.set_defaults(records_command="report", run=run_report)


def run(args: argparse.Namespace) -> int:
    """Run whichever of the three commands ``args`` was parsed for."""
    commands = {"history": run_history, "trend": run_trend, "report": run_report}
    return commands[args.records_command](args)


def _log_path(args: argparse.Namespace):
    """The log to read: ``--log``, else station.toml's ``log``, else the default file."""
    from .record_options import log_location_from_args

    return log_location_from_args(args)


def _fail(command: str, exc: FlatsightError) -> int:
    print(f"flatsight {command}: error: {shown(exc)}", file=sys.stderr)
    return 2


# --- history --------------------------------------------------------------------------------


def _source(rec: dict) -> tuple[str, int, str]:
    """What a record was measured from: ``photo``, ``average`` or ``sequence``, how many
    photos, and the (first) photo's path."""
    average = rec.get("average") or {}
    frames = rec.get("frames") or []
    if average.get("photos"):
        return "average", len(average["photos"]), str(average["photos"][0])
    if frames:
        return "sequence", len(frames), str(frames[0])
    return "photo", 1, str(rec.get("photo") or "")


def _source_cell(rec: dict) -> str:
    """``avg 3: BW-FL-0412_hene.png``, ``seq 4: frame1.png``, ``ref: …``: the history's
    photo column, the file name only (the path is in --json and --csv)."""
    kind, count, first = _source(rec)
    mark = {"average": f"avg {count}", "sequence": f"seq {count}"}.get(kind, "")
    if rec.get("reference"):
        mark = f"{mark} ref".strip()
    name = Path(first).name or "—"
    return f"{mark}: {name}" if mark else name


def _csv_row(rec: dict) -> dict:
    from ..analysis.record import outline_fields

    spec = rec.get("spec") or {}
    row = {k: rec.get(k) for k in CSV_FIELDS}
    row["tolerance"] = spec.get("tolerance")
    row["source"], row["photos"], _ = _source(rec)
    reference = rec.get("reference") or {}
    row["reference_map"], row["reference_sha256"] = reference.get("path"), reference.get("sha256")
    row["aperture_shape"], row["aperture_outline"], row["aperture_view_angle_deg"] = (
        outline_fields(rec))
    return csv_row(row)


def _cell(value, digits: int = 1) -> str:
    """A table cell: a number to ``digits`` places, or stored text shown literally."""
    if value is None:
        return "—"
    if isinstance(value, float):
        return format_number(value, digits)
    return literal(value)


def run_history(args: argparse.Namespace) -> int:
    """``flatsight history``: the log's records, newest first."""
    from ..analysis.records.log import query

    try:
        rows = query(_log_path(args), part=args.part, since=args.since, verdict=args.verdict,
                     limit=args.limit, superseded=args.superseded)
    except FlatsightError as exc:
        return _fail("history", exc)
    out = sys.stdout
    if args.json:
        for rec in rows:
            out.write(json.dumps(rec, allow_nan=False) + "\n")
        return 0
    if args.csv:
        writer = csv.DictWriter(out, fieldnames=CSV_FIELDS, lineterminator="\n")
        writer.writeheader()
        for rec in rows:
            writer.writerow(_csv_row(rec))
        return 0
    from rich import box
    from rich.console import Console
    from rich.table import Table
    from rich.text import Text

    from .report_text import cell_width

    console = Console()
    if not rows:
        console.print("no records match", style="dim")
        return 0
    # who and where only when the terminal has room, and PV beside the robust PVr from
    # 100 columns; below that the photo stands under the part, so neither name is cut
    people = console.width >= 120
    wide = console.width >= 100
    table = Table(box=box.SIMPLE_HEAD, header_style="bold", pad_edge=False, show_edge=False,
                  padding=(0, 0, 0, 1))
    columns = [("id", "right"), ("time (UTC)", "left")]
    columns += [("part", "left"), ("photo", "left")] if wide else [("part / photo", "left")]
    if people:
        columns += [("operator", "left"), ("station", "left")]
    columns += [("PV", "right")] if wide else []
    columns += [("PVr", "right"), ("power", "right"), ("irreg.", "right"), ("verdict", "left")]
    body = []
    for rec in rows:
        verdict = rec.get("verdict")
        style = {"pass": "bold green", "fail": "bold red",
                 "inconclusive": "bold yellow"}.get(verdict, "dim")
        cells = [str(rec["record_id"]),
                 literal(str(rec.get("logged_utc", ""))[:16].replace("T", " "))]
        part, photo = _cell(rec.get("part")), _cell(_source_cell(rec))
        cells += [part, photo] if wide else [Text("\n").join([part, photo])]
        if people:
            cells += [_cell(rec.get("operator")), _cell(rec.get("station"))]
        cells += [_cell(rec.get("pv_nm"))] if wide else []
        cells += [_cell(rec.get("pvr_nm")), _cell(rec.get("power_nm")),
                  _cell(rec.get("irregularity_nm")), literal(verdict or "—", style)]
        if rec.get("superseded_by") is not None:
            cells[-1] = literal(f"{verdict or '—'} →{rec['superseded_by']}", "dim")
        body.append(cells)
    # names fold when the terminal (or a pipe's 80 columns) is narrow; the id, time,
    # figures and verdict never break, so no number is read split in two
    names = {"part", "photo", "part / photo", "operator", "station"}
    for k, (name, justify) in enumerate(columns):
        widest = max(cell_width(cells[k]) for cells in body)
        table.add_column(name, justify=justify, overflow="fold", no_wrap=name not in names,
                         min_width=min(widest, 10) if name in names else max(widest, len(name)))
    for cells in body:
        table.add_row(*cells)
    console.print(literal(f"{len(rows)} inspections in {_log_path(args)} (heights in nm)"),
                  style="bold", overflow="fold")
    console.print(table)
    if any(_source_cell(rec) != Path(_source(rec)[2]).name for rec in rows):
        console.print(SOURCE_NOTE, style="dim")
    if any(rec.get("superseded_by") is not None for rec in rows):
        console.print("→N: replaced by record N (the same photo measured again in one "
                      "station session)", style="dim")
    left_out = ["PV"] * (not wide) + ["operator", "station"] * (not people)
    if left_out:
        console.print(f"left out at this width: {', '.join(left_out)} (--json, --csv have "
                      "all)", style="dim")
    return 0


# --- trend ----------------------------------------------------------------------------------


def _parse_time(stamp: str) -> datetime:
    return datetime.fromisoformat(stamp.replace("Z", "+00:00"))


def trend_lines(
    points: Sequence[tuple[datetime, float, str | None]],
    *,
    width: int = 80,
    height: int = 12,
    limits_nm: Sequence[float] = (),
) -> list[str]:
    """A plain-character plot of values over time.

    Parameters
    ----------
    points : sequence of (time, value, verdict)
        Oldest first; verdict ``"pass"``, ``"fail"`` or None.
    width, height : int
        Characters across (all of the plot, labels included) and plot rows.
    limits_nm : sequence of float
        Values to draw as dashed lines (a tolerance, and its negative for power).

    Returns
    -------
    list of str
        ``height`` plot rows, the time axis, and its date labels; every line at most
        ``width`` characters.
    """
    values = [v for _, v, _ in points]
    lo = min([*values, *limits_nm])
    hi = max([*values, *limits_nm])
    if hi == lo:
        lo, hi = lo - 1.0, hi + 1.0
    pad = 0.05 * (hi - lo)
    lo, hi = lo - pad, hi + pad
    label_w = max(len(format_number(hi)), len(format_number(lo))) + 1
    plot_w = max(10, width - label_w - 2)
    grid = [[" "] * plot_w for _ in range(height)]

    def row_of(v: float) -> int:
        return min(height - 1, max(0, round((hi - v) / (hi - lo) * (height - 1))))

    for limit in limits_nm:
        r = row_of(limit)
        grid[r] = ["-" if c == " " else c for c in grid[r]]
    t0, t1 = points[0][0], points[-1][0]
    span = (t1 - t0).total_seconds()
    rank = {"fail": 4, "inconclusive": 3, "pass": 2, None: 1}
    mark = {"fail": "x", "inconclusive": "?", "pass": "o", None: "*"}
    best: dict[tuple[int, int], str | None] = {}
    for i, (t, v, verdict) in enumerate(points):
        frac = (t - t0).total_seconds() / span if span > 0 else (
            i / (len(points) - 1) if len(points) > 1 else 0.5)
        cell = (row_of(v), min(plot_w - 1, round(frac * (plot_w - 1))))
        # where points share a cell, a failure must stay visible
        if cell not in best or rank.get(verdict, 1) > rank.get(best[cell], 1):
            best[cell] = verdict
    for (r, c), verdict in best.items():
        grid[r][c] = mark.get(verdict, "*")
    lines = []
    for r in range(height):
        value = hi - r * (hi - lo) / (height - 1)
        label = format_number(value) if r in (0, height - 1, height // 2) else ""
        lines.append(f"{label:>{label_w}} │" + "".join(grid[r]))
    lines.append(" " * label_w + " └" + "─" * plot_w)
    first, last = t0.strftime("%Y-%m-%d %H:%M"), t1.strftime("%Y-%m-%d %H:%M")
    gap = max(1, plot_w - len(first) - len(last))  # dates under the first and last column
    lines.append(" " * (label_w + 2) + (first + " " * gap + last if span > 0 else first))
    return [line[:width] for line in lines]


def _limits_for(rec: dict, figure: str) -> tuple[list[float], str]:
    """The latest record's tightest limit on ``figure`` (and -limit for a magnitude)."""
    spec = rec.get("spec") or {}
    found = [lim for lim in spec.get("limits", [])
             if lim.get("figure") == figure and lim.get("limit_nm") is not None]
    if not found:
        return [], "no tolerance on this figure in the latest record"
    tight = min(found, key=lambda lim: lim["limit_nm"])
    lines = [tight["limit_nm"]]
    if tight.get("compared") == "magnitude":
        lines.append(-tight["limit_nm"])
    return lines, (f"limit {format_number(tight['limit_nm'])} nm "
                   f"({tight.get('name')} of {spec.get('tolerance')})")


def limited_figure(rows: list[dict], figures=TREND_FIGURES) -> str:
    """The figure the newest record's tolerance limits first (power for ISO 3/A(B)), else PVr.

    ``rows`` newest first, as :func:`~flatsight.analysis.records.log.query` gives them.
    """
    for row in rows:
        for limit in (row.get("spec") or {}).get("limits", []):
            if limit.get("figure") in figures:
                return limit["figure"]
    return "pvr_nm"


def run_trend(args: argparse.Namespace) -> int:
    """``flatsight trend``: one figure over time, its tolerance line, the pass rate."""
    from ..analysis.records.log import query

    try:
        rows = query(_log_path(args), part=args.part, since=args.since)
    except FlatsightError as exc:
        return _fail("trend", exc)
    chosen = args.figure is None
    figure = limited_figure(rows) if chosen else args.figure
    rows = rows[::-1]  # oldest first
    points = [(_parse_time(r["logged_utc"]), float(r[figure]), r.get("verdict"))
              for r in rows if isinstance(r.get(figure), int | float)]
    from rich.console import Console
    from rich.text import Text

    console = Console(highlight=False)
    if not points:
        console.print(f"no records with {figure} match", style="dim")
        return 0
    limits, limit_note = _limits_for(rows[-1], figure)
    width = min(console.width if console.is_terminal else shutil.get_terminal_size().columns,
                120)
    console.print(literal(f"{figure} over time: {len(points)} records"
                          + (f", part {args.part}" if args.part else "")), style="bold")
    if chosen and limits:
        console.print("(the figure the latest record's tolerance limits first; --figure "
                      "for another)", style="dim")
    for line in trend_lines(points, width=max(40, width), height=args.height,
                            limits_nm=limits):
        label, bar, body = line.partition("│")
        if not bar:  # the time axis and its dates
            console.print(Text(line))
            continue
        text = Text(body)
        text.highlight_regex(r"x", "bold red")
        text.highlight_regex(r"o", "green")
        text.highlight_regex(r"\?", "bold yellow")
        text.highlight_regex(r"-+", "yellow")
        console.print(Text(label + bar) + text)
    judged = [r for r in rows if r.get("verdict") in ("pass", "fail", "inconclusive")]
    passed = sum(r["verdict"] == "pass" for r in judged)
    rate = (f"pass rate {passed}/{len(judged)} ({100.0 * passed / len(judged):.1f} %)"
            if judged else "pass rate: no record had a tolerance")
    console.print("o pass  x fail  ? inconclusive  * no tolerance")
    console.print(literal(f"--- {limit_note}"))
    console.print(rate, style="bold")
    return 0


# --- report ---------------------------------------------------------------------------------


def _certificate_bytes(rec: dict, suffix: str, *, log: str, paper: str) -> bytes:
    """The certificate (``.pdf``, ``.html``) or the map (``.png``) of one record."""
    from ..analysis.records.certificate import certificate_document, certificate_html, map_png

    if suffix == ".png":
        return map_png(rec)
    if suffix == ".pdf":
        from ..analysis.records.certificate_pdf import certificate_pdf

        return certificate_pdf(certificate_document(rec, log=log), paper=paper)
    return certificate_html(rec, log=log).encode("utf-8")


def _file_name(rec: dict, suffix: str) -> str:
    """``BW-FL-0412_r17.pdf``: the part (only letters, digits, ``.-_``) and the record id."""
    part = re.sub(r"[^A-Za-z0-9._-]+", "-", str(rec.get("part") or "")).strip(".-") or "part"
    return f"{part[:80]}_r{rec['record_id']}{suffix}"


def _wrote(out: Path, rec: dict, record_id, which: str) -> str:
    """What a written certificate was made from, and whether a later record replaced it."""
    verdict = (rec.get("spec") or {}).get("verdict") or "no tolerance"
    when = (rec.get("logged_utc") or "")[:16].replace("T", " ")
    photo = Path(rec.get("photo") or "").name or "no photo"
    line = shown(f"wrote {out} from record {record_id} of {which}: part "
                 f"{rec.get('part') or '(none)'}, photo {photo}, logged {when or '?'} UTC, "
                 f"{verdict}")
    if rec.get("superseded_by") is not None:
        line += (f"\nnote: record {record_id} was replaced by record {rec['superseded_by']} "
                 "(the same photo measured again in one station session)")
    return line


def run_report(args: argparse.Namespace) -> int:
    """``flatsight report``: certificates (PDF, HTML) or the map (PNG) of logged records."""
    from ..analysis.atomic import atomic_write_bytes
    from ..analysis.records.log import get, query

    try:
        log = _log_path(args)
    except FlatsightError as exc:
        return _fail("report", exc)
    # say what the certificate was made from: a record read from the wrong log, or an
    # old record of the same part, is then seen at once (a database without its password)
    which = f"{log}" if args.log else f"{log} (the default log; --log for another)"
    log_name = str(log.resolve()) if isinstance(log, Path) else str(log)
    selecting = [f"--{n}" for n in ("part", "since", "verdict")
                 if getattr(args, n) is not None]
    if args.output_dir is None:
        problem = ("give RECORD_ID and --output FILE for one certificate, or --output-dir "
                   "DIR (with --part, --since, --verdict) for several")
        if args.record_id is None or args.output is None:
            return _fail("report", SettingsError(problem))
        if selecting:
            return _fail("report", SettingsError(
                f"{', '.join(selecting)} {'selects' if len(selecting) == 1 else 'select'} "
                "records for --output-dir; RECORD_ID names one record already"))
        out = Path(args.output).expanduser()
        suffix = {".htm": ".html"}.get(out.suffix.lower(), out.suffix.lower())
        if suffix not in (".html", ".png", ".pdf"):
            return _fail("report", SettingsError(
                f"cannot write a report as {out.name}: name the output FILE.pdf, FILE.html "
                "or FILE.png"))
        try:
            rec = get(log, args.record_id)
            atomic_write_bytes(out, _certificate_bytes(rec, suffix, log=log_name,
                                                       paper=args.paper))
        except FlatsightError as exc:
            return _fail("report", exc)
        except OSError as exc:
            return _fail("report", SettingsError(f"cannot write {out}: {exc.strerror or exc}"))
        print(_wrote(out, rec, args.record_id, which))
        return 0

    if args.record_id is not None or args.output is not None:
        return _fail("report", SettingsError(
            "--output-dir writes the records --part, --since and --verdict select; give "
            "either RECORD_ID with --output FILE, or --output-dir DIR"))
    folder = Path(args.output_dir).expanduser()
    suffix = "." + args.format
    try:
        rows = query(log, part=args.part, since=args.since, verdict=args.verdict)
    except FlatsightError as exc:
        return _fail("report", exc)
    if not rows:
        print(shown(f"no record of {which} matches; nothing written"), file=sys.stderr)
        return 0
    try:
        folder.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        return _fail("report", SettingsError(f"cannot make {folder}: {exc.strerror or exc}"))
    status = 0
    for rec in reversed(rows):  # oldest first, as they were logged
        out = folder / _file_name(rec, suffix)
        try:
            atomic_write_bytes(out, _certificate_bytes(rec, suffix, log=log_name,
                                                       paper=args.paper))
        except OSError as exc:
            print(f"flatsight report: error: cannot write {shown(out)}: "
                  f"{shown(exc.strerror or exc)}", file=sys.stderr)
            status = 2
            continue
        print(_wrote(out, rec, rec["record_id"], which))
    return status
