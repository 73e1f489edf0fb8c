"""The inspection certificate: one self-contained HTML page (and the map PNG) from a record.

The surface map is re-made from the record alone: from the saved height map when the
record names one (``height_map_path``), otherwise from its Zernike coefficients
evaluated over the unit disk, and the page says which. Everything the page needs,
the map included, is inside the HTML file (a base64 PNG, inline CSS), so it can be
mailed or archived as it is. It prints on one sheet of A4 or of Letter: the Zernike
table lists the largest terms and the page the first warnings, each saying that the
record holds the rest, and the terms the figures were taken without are named in words
and left out of the table.

References
----------
M. Takeda, H. Ina, S. Kobayashi, "Fourier-transform method of fringe-pattern analysis
for computer-based topography and interferometry", JOSA 72(1), 156 (1982).
R. J. Noll, "Zernike polynomials and atmospheric turbulence", JOSA 66(3), 207 (1976).
C. J. Evans, "PVr - a robust amplitude parameter for optical surface specification",
Opt. Eng. 48(4), 043605 (2009).
ISO 10110-5:2015, surface form tolerances (from memory).
"""

from __future__ import annotations

import base64
import html
import io
import json
import math
import re
from collections.abc import Mapping
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from ..formatting import finite_number, format_number, printable
from ..shapes import shape_words
from ..version import flatsight_version
from ..zernike import nm_to_noll, noll_to_nm, osa_to_noll, term_name, zernike_basis

__all__ = [
    "MAP_PAD_PX",
    "MAP_SIZE_PX",
    "CertificateDocument",
    "Table",
    "VERDICT_RGB",
    "VERDICT_WORDS",
    "certificate_document",
    "certificate_html",
    "map_colours",
    "map_grid",
    "map_png",
    "removed_terms",
    "removed_terms_text",
    "software",
    "surface_map",
    "zernike_rows",
]

MAP_SIZE_PX = 360
MAP_PAD_PX = 12
BAR_WIDTH_PX = 22
VERDICT_RGB = {"pass": (27, 122, 61), "fail": (179, 38, 30), "inconclusive": (138, 90, 0),
               None: (95, 99, 104)}
VERDICT_WORDS = {"pass": "PASS", "fail": "FAIL", "inconclusive": "INCONCLUSIVE",
                 None: "NO TOLERANCE"}
# what each verdict means, in the words of the decision rules (ISO 14253-1; ILAC G8)
VERDICT_MEANING = {
    "pass": "every limit is met",
    "fail": "a limit is not met",
    "inconclusive": "no limit is proven broken, but at least one figure lies within its "
                    "expanded uncertainty of its limit, so conformity is not proven either",
}
ZERNIKE_ROWS_SHOWN = 8  # the largest terms the page lists; the record holds them all
WARNINGS_SHOWN = 3  # warnings listed on the page; the record holds them all
PISTON_TILT = (1, 2, 3)
_FIGURE_ROWS = [
    ("pv_nm", "PV"),
    ("rms_nm", "RMS (RMSt)"),
    ("pvr_nm", "PVr (robust PV)"),
    ("power_nm", "power (+ convex)"),
    ("irregularity_nm", "irregularity (B)"),
    ("astigmatism_nm", "astigmatism"),
    ("symmetric_irregularity_nm", "symmetric irregularity (C)"),
    ("rms_irregularity_nm", "RMSi"),
    ("rms_asymmetric_nm", "RMSa"),
]


def map_colours(values: np.ndarray, vmin: float, vmax: float) -> np.ndarray:
    """The project's diverging colour map (``colormap.diverging_rgb``): values to sRGB uint8."""
    from ..colormap import diverging_rgb

    return diverging_rgb(values, vmin, vmax)


def map_grid(size_px: int = MAP_SIZE_PX) -> tuple[np.ndarray, np.ndarray]:
    """Zernike coordinates (x right, y up, unit radius) of the map's pixel centres."""
    c = (np.arange(size_px) + 0.5) / size_px * 2.0 - 1.0
    x, y = np.meshgrid(c, -c)
    return x, y


def _noll_coefficients(zernike: Mapping | None) -> np.ndarray:
    """Noll-ordered coefficients (index 0 = j 1) from the record's ``zernike`` section."""
    if not zernike or not zernike.get("coefficients_nm"):
        return np.zeros(0)
    raw = np.array([np.nan if c is None else c for c in zernike["coefficients_nm"]], float)
    if zernike.get("ordering", "noll") == "osa":
        js = [osa_to_noll(k) for k in range(raw.size)]
        out = np.zeros(max(js))
        out[np.array(js) - 1] = raw
        return out
    return raw


def removed_terms(record: Mapping) -> tuple[int, ...]:
    """The Noll terms the record's figures were taken without: always piston and tilt."""
    given = (record.get("settings") or {}).get("removed_terms") or ()
    try:
        extra = {int(j) for j in given if int(j) >= 1}
    except (TypeError, ValueError):
        extra = set()
    return tuple(sorted(set(PISTON_TILT) | extra))


def _family(j: int) -> str:
    """Term ``j``'s name without its orientation: ``tilt``, ``astigmatism``, ``heptafoil``."""
    name = term_name(j)
    return name if noll_to_nm(j)[1] == 0 else name.rsplit(" ", 1)[0]


def _spans(js) -> str:
    """``1–3, 11``: the Noll indices as runs."""
    runs: list[list[int]] = []
    for j in sorted(js):
        if runs and j == runs[-1][-1] + 1:
            runs[-1].append(j)
        else:
            runs.append([j])
    return ", ".join(f"{r[0]}–{r[-1]}" if len(r) > 2 else ", ".join(map(str, r))
                     for r in runs)


def removed_terms_text(js) -> str:
    """The removed terms in words: ``piston and tilt (Noll 1–3)``."""
    names = list(dict.fromkeys(_family(j) for j in sorted(js)))
    words = names[0] if len(names) == 1 else ", ".join(names[:-1]) + " and " + names[-1]
    return f"{words} (Noll {_spans(js)})"


def zernike_rows(coefficients_nm, *, removed=PISTON_TILT) -> list[tuple]:
    """The fitted terms as a customer reads them, largest first, removed terms left out.

    A cosine and sine pair of one order (astigmatism 0° and 45°, the two comas ...) is
    one row: its combined size ``sqrt(a_c^2 + a_s^2)`` (the pair's RMS over the disk, the
    terms being orthonormal) and the orientation ``theta0`` of one of its ``|m|`` high
    points, from ``a_c cos(m theta) + a_s sin(m theta) = A cos(m (theta - theta0))``: an
    angle in ``[0, 360/|m|)`` degrees, counter-clockwise from the photo's right-hand
    side, rounded to a whole degree. A rotationally symmetric term keeps its sign.

    Returns
    -------
    list of (noll_indices, n, abs_m, name, size_nm, orientation_deg)
        ``size_nm`` None for a term the fit could not give; ``orientation_deg`` None
        for symmetric terms and for a pair too small to have a direction.
    """
    a = np.asarray(coefficients_nm, dtype=float)
    gone = set(removed)
    rows, seen = [], set()
    for j in range(1, a.size + 1):
        if j in seen or j in gone:
            continue
        n, m = noll_to_nm(j)
        if m == 0:
            seen.add(j)
            value = a[j - 1] if np.isfinite(a[j - 1]) else None
            rows.append(((j,), n, 0, _family(j), value, None))
            continue
        pair = sorted({j, nm_to_noll(n, -m)})
        kept = [k for k in pair if k <= a.size and k not in gone]
        seen.update(pair)
        # a partner left out (removed, or past the fit) counts as zero
        cos_first = sorted(pair, key=lambda k: -noll_to_nm(k)[1])  # m > 0 is the cosine
        cos_sin = [a[k - 1] if k in kept else 0.0 for k in cos_first]
        if not all(np.isfinite(cos_sin)):
            rows.append((tuple(kept), n, abs(m), _family(j), None, None))
            continue
        size = math.hypot(*cos_sin)
        period = 360.0 / abs(m)
        angle = None
        if round(size, 2) > 0:
            angle = round((math.degrees(math.atan2(cos_sin[1], cos_sin[0])) % 360.0) / abs(m))
            angle = 0 if angle >= period else angle  # 119.7 on a 120° period is 0
        rows.append((tuple(kept), n, abs(m), _family(j), size, angle))
    return sorted(rows, key=lambda r: -abs(r[4]) if r[4] is not None else 0.0)


def _load_height_map(path: Path) -> np.ndarray | None:
    """A saved map (``.npy``, or 32-bit float ``.tif`` as ``measure --save-map`` writes)."""
    try:
        if path.suffix.lower() in (".tif", ".tiff"):
            from PIL import Image

            with Image.open(path) as img:
                return np.asarray(img, dtype=float)
        return np.load(path, allow_pickle=False).astype(float)
    except (OSError, ValueError):
        return None  # moved or unreadable: fall back to the Zernike fit, and say so


def surface_map(record: Mapping, *, size_px: int = MAP_SIZE_PX) -> tuple[np.ndarray, str]:
    """The surface height (nm, the record's removed terms taken out) as a square map.

    Parameters
    ----------
    record : mapping
        A ``measure --json`` record.
    size_px : int
        Side of the square map made from the Zernike fit.

    Returns
    -------
    height_nm : (size_px, size_px) ndarray
        NaN outside the aperture; row 0 at the top of the photo.
    source : str
        A sentence for the page saying where the map came from.
    """
    path = record.get("height_map_path")
    if path:
        h = _load_height_map(Path(path))
        if h is not None and h.ndim == 2 and np.isfinite(h).any():
            rows = np.flatnonzero(np.isfinite(h).any(axis=1))
            cols = np.flatnonzero(np.isfinite(h).any(axis=0))
            h = h[rows[0]:rows[-1] + 1, cols[0]:cols[-1] + 1]
            return h, ("Map: the measured height map saved with the record, piston and "
                       "tilt (Noll 1–3) removed.")
    a = _noll_coefficients(record.get("zernike"))
    x, y = map_grid(size_px)
    inside = x**2 + y**2 <= 1.0
    h = np.full(x.shape, np.nan)
    removed = removed_terms(record)
    if a.size:
        a = np.where(np.isfinite(a), a, 0.0)
        # what the figures were taken without is not part of the surface they describe
        a[[j - 1 for j in removed if j <= a.size]] = 0.0
        h[inside] = zernike_basis(a.size, x[inside], y[inside]) @ a
    else:
        h[inside] = 0.0
    return h, (f"Map reconstructed from the Zernike fit ({a.size} Noll terms) without "
               f"{removed_terms_text(removed)}; finer detail is not shown.")


def _font(size: int):
    from PIL import ImageFont

    try:
        return ImageFont.load_default(size=size)
    except (OSError, TypeError):  # Pillow without FreeType: the small bitmap font
        return ImageFont.load_default()


def map_png(record: Mapping, *, size_px: int = MAP_SIZE_PX) -> bytes:
    """The surface map with its colour bar (nm) as PNG bytes.

    The colour scale is symmetric about zero height, ``+-max|h|``, so the neutral
    colour is always zero. The map sits at ``(MAP_PAD_PX, MAP_PAD_PX)``, one image
    pixel per map pixel when the map is made from the Zernike fit.
    """
    from PIL import Image, ImageDraw
    from PIL.PngImagePlugin import PngInfo

    h, _ = surface_map(record, size_px=size_px)
    if h.shape != (size_px, size_px):  # a saved map: pad to a square, then fit it in
        side = max(h.shape)
        square = np.full((side, side), np.nan)
        r0, c0 = (side - h.shape[0]) // 2, (side - h.shape[1]) // 2
        square[r0:r0 + h.shape[0], c0:c0 + h.shape[1]] = h
        img = Image.fromarray(square.astype(np.float32))
        h = np.asarray(img.resize((size_px, size_px), Image.Resampling.NEAREST), float)
    finite = h[np.isfinite(h)]
    span = float(np.max(np.abs(finite))) if finite.size else 0.0
    span = span if span > 0 else 1.0
    rgb = map_colours(h, -span, span)
    rgb[~np.isfinite(h)] = 255  # outside the aperture: paper white

    pad, bar = MAP_PAD_PX, BAR_WIDTH_PX
    font = _font(13)
    label_w = 86
    width = pad + size_px + 2 * pad + bar + label_w
    height = size_px + 2 * pad
    canvas = Image.new("RGB", (width, height), "white")
    canvas.paste(Image.fromarray(rgb, "RGB"), (pad, pad))
    draw = ImageDraw.Draw(canvas)
    draw.ellipse((pad - 1, pad - 1, pad + size_px, pad + size_px), outline=(120, 120, 120))

    bar_x = pad + size_px + 2 * pad
    ramp = np.linspace(span, -span, size_px)[:, None] * np.ones((1, bar))
    canvas.paste(Image.fromarray(map_colours(ramp, -span, span), "RGB"), (bar_x, pad))
    draw.rectangle((bar_x - 1, pad - 1, bar_x + bar, pad + size_px), outline=(80, 80, 80))
    for frac in (0.0, 0.25, 0.5, 0.75, 1.0):
        value = span * (1 - 2 * frac)
        y = pad + round(frac * (size_px - 1))
        draw.line((bar_x + bar, y, bar_x + bar + 4, y), fill=(40, 40, 40))
        draw.text((bar_x + bar + 7, y), f"{format_number(value, 1, sign=True)} nm",
                  fill=(20, 20, 20), font=font, anchor="lm")
    info = PngInfo()  # the PNG's own Software field, read by image viewers and exiftool
    info.add_text("Software", software(record))
    buf = io.BytesIO()
    canvas.save(buf, format="PNG", optimize=True, pnginfo=info)
    return buf.getvalue()


def _e(value) -> str:
    """Text for the page, printed literally: control and bidi characters as escapes."""
    return html.escape(printable("" if value is None else value))


def _fmt(value, digits: int) -> str:
    return format_number(value, digits)


_CSS = """
:root { --pass: rgb(27,122,61); --fail: rgb(179,38,30); --inconclusive: rgb(138,90,0);
        --none: rgb(95,99,104); }
* { box-sizing: border-box; }
html { background: #fff; }
body { font: 8pt/1.2 "DejaVu Sans", "Liberation Sans", Arial, sans-serif; color: #16181b;
       margin: 0 auto; padding: 10mm 8mm; max-width: 186mm; }
header { display: flex; align-items: baseline; gap: 4mm; flex-wrap: wrap; }
h1 { font-size: 13pt; margin: 0; }
h2 { font-size: 8.5pt; margin: 1.5mm 0 0.5mm; border-bottom: 0.25mm solid #999;
     break-after: avoid; page-break-after: avoid; }
p { margin: 0.8mm 0; }
.sub { color: #444; margin: 0; font-size: 7pt; }
table { border-collapse: collapse; width: 100%; break-inside: avoid; page-break-inside: avoid; }
th, td { text-align: left; padding: 0.2mm 1.4mm; border-bottom: 0.2mm solid #ccc;
         vertical-align: top; }
th { font-weight: 600; background: #f1f2f4; }
td.num, th.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
.verdict { display: flex; align-items: center; gap: 5mm; padding: 1.6mm 4mm; color: #fff;
           border-radius: 1.2mm; margin: 1mm 0 1.5mm; -webkit-print-color-adjust: exact;
           print-color-adjust: exact; break-inside: avoid; }
.verdict .word { font-size: 16pt; font-weight: 700; letter-spacing: 0.08em; }
.verdict.pass { background: var(--pass); }
.verdict.fail { background: var(--fail); }
.verdict.inconclusive { background: var(--inconclusive); }
.verdict.none { background: var(--none); }
.top { display: flex; gap: 4mm; align-items: flex-start; break-inside: avoid; }
.top figure { margin: 0; flex: 0 0 54mm; }
.top figure img { width: 54mm; height: auto; display: block; }
.cols { display: flex; gap: 5mm; align-items: flex-start; }
.cols > div { flex: 1 1 0; min-width: 0; }
.cols > div:first-child { flex-grow: 0.9; }
table.figs td:first-child { white-space: nowrap; }
table.zern, table.figs { font-size: 7.4pt; }
table.zern td:nth-child(2) { white-space: nowrap; }
.keep { break-inside: avoid; page-break-inside: avoid; }
figcaption { font-size: 6.8pt; color: #444; margin-top: 0.6mm; }
.facts { flex: 1; font-size: 7.3pt; }
.facts th { width: 25mm; background: none; white-space: nowrap; }
.facts td { overflow-wrap: anywhere; }
.hash { font-family: "DejaVu Sans Mono", monospace; font-size: 6.5pt; word-break: break-all; }
td.pass { color: var(--pass); font-weight: 700; }
td.fail { color: var(--fail); font-weight: 700; }
td.inconclusive { color: var(--inconclusive); font-weight: 700; }
.small, .small td, .small th { font-size: 6.5pt; line-height: 1.18; color: #333; }
.fine { columns: 3; column-gap: 4.5mm; font-size: 6.1pt; line-height: 1.17; color: #333; }
.fine h2 { column-span: all; }
.fine p { margin: 0 0 0.8mm; }
ul.method { margin: 0 0 0.8mm; padding-left: 3mm; }
ul.method li { margin: 0 0 0.4mm; break-inside: avoid; }
ul.warn { margin: 0.5mm 0; padding-left: 4mm; }
.sign { display: flex; gap: 10mm; margin-top: 3mm; break-inside: avoid; }
.sign div { flex: 1; border-top: 0.3mm solid #333; padding-top: 0.6mm; font-size: 7pt; }
@page { margin: 9mm; }
@media print { body { padding: 0; max-width: none; } }
"""


def _when(stamp) -> str | None:
    """``2026-12-02T07:10:00.000Z`` as ``2026-12-02 07:10:00 UTC``."""
    if not stamp:
        return None
    return str(stamp).replace("T", " ").split(".")[0].removesuffix("Z") + " UTC"


def software(record: Mapping) -> str:
    """Which Flatsight measured the record, and which wrote the certificate when that differs.

    The record's ``flatsight_version`` is the version that measured; a certificate
    written later by another version says so, so the page never hides a change of
    software between measurement and report.
    """
    measured = record.get("flatsight_version")
    writer = flatsight_version()
    if not measured:
        return f"Flatsight version not recorded; certificate by Flatsight {writer}"
    if measured == writer:
        return f"Flatsight {measured}"
    return f"measured with Flatsight {measured}; certificate by Flatsight {writer}"


def _measured_from(record: Mapping) -> str | None:
    """What the figures come from when it is more than one photo: an average or a sequence."""
    average = record.get("average") or {}
    frames = [str(p) for p in record.get("frames") or []]
    if average.get("photos"):
        kind, paths = f"average of {len(average['photos'])} photos", average["photos"]
    elif frames:
        kind, paths = f"phase-shifted sequence of {len(frames)} frames", frames
    else:
        return None
    names = [Path(str(p)).name for p in paths]
    more = f" and {len(names) - 3} more (all in the record)" if len(names) > 3 else ""
    return f"{kind}: {', '.join(names[:3])}{more}"


# --- the certificate document: what the page says, for the HTML and the PDF alike ---------


@dataclass(frozen=True)
class Table:
    """A table of plain text: a header row, body rows, which columns are numbers.

    ``row_marks`` tags each row (a verdict, for the tolerance table's colours) or is
    empty; ``note`` is a line of small print under the table.
    """

    header: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]
    numeric: tuple[bool, ...]
    note: str | None = None
    row_marks: tuple[str | None, ...] = ()


@dataclass(frozen=True)
class CertificateDocument:
    """Everything one certificate says, as plain text (each rendering escapes it).

    Built from a logged record by :func:`certificate_document`; rendered as HTML by
    :func:`certificate_html` and as a PDF page by ``certificate_pdf.certificate_pdf``.
    Paragraphs are ``(lead, text)`` pairs: a short bold lead (or None) and the text.
    """

    part: str
    subtitle: str
    software: str
    verdict: str | None  # "pass", "fail", "inconclusive" or None (no tolerance)
    verdict_word: str
    against: str
    map_png: bytes
    map_caption: str
    facts: tuple[tuple[str, str], ...]  # (label, value); a label ending SHA-256 is a hash
    figures_title: str
    figures: Table
    zernike_title: str
    zernike: Table | None
    zernike_empty: str
    tolerance: Table | None
    warnings: tuple[str, ...]
    fine: tuple[tuple[str | None, str], ...]
    method_items: tuple[str, ...]
    small_print: tuple[str, ...]  # paragraphs of the fine print set smaller still


def _facts(record: Mapping, log: str | None, map_source: str) -> tuple[tuple[str, str], ...]:
    ap = record.get("aperture") or {}
    settings = record.get("settings") or {}
    reference = record.get("reference") or {}
    rows = [
        ("Part", record.get("part")),
        ("Operator", record.get("operator")),
        ("Station", record.get("station")),
        ("Date (UTC)", _when(record.get("logged_utc"))),
        ("Record", (f"{record.get('record_id')} in {log}" if log and
                    record.get("record_id") is not None else record.get("record_id"))),
    ]
    if record.get("superseded_by") is not None:  # a later record of the same photo
        rows.append(("Replaced by", f"record {record['superseded_by']}: the same photo "
                                    "measured again in one station session"))
    # an average or a sequence names its photos; one photo its path
    rows.append(("Made from", _measured_from(record)) if _measured_from(record)
                else ("Photo", record.get("photo")))
    if reference:
        rows.append(("Reference", f"map {reference.get('path') or '—'} subtracted"))
    rows += [
        ("Wavelength", f"{_fmt(record.get('wavelength_nm'), 2)} nm"),
        ("Aperture", (f"{_fmt(settings.get('diameter_mm'), 1)} mm diameter"
                      if settings.get("diameter_mm") else
                      f"radius {_fmt(ap.get('radius_px'), 1)} px in the photo")),
    ]
    if ap.get("shape"):  # a part that is not a circle seen square-on
        rows.append(("Outline", shape_words(ap["shape"])))
    rows += [
        ("Software", software(record)),
        ("Map", "height in nm, the photo's top up, + high; "
                + map_source.removeprefix("Map: ").removeprefix("Map ")),
    ]
    sha = record.get("photo_sha256")
    if not sha:  # an average or a sequence records its photos' names, not their hashes
        sha = "not recorded for photos combined" if _measured_from(record) else "—"
    rows.append(("Photo SHA-256", sha))
    if reference:
        rows.append(("Ref. SHA-256", reference.get("sha256") or "not recorded"))
    return tuple((k, "—" if v is None else str(v)) for k, v in rows)


def _analysis_text(quality: Mapping) -> str:
    """How the photo became phase: the method, why, and what it could resolve."""
    if quality.get("method") == "intensity-fit":
        text = ("a least-squares fit of a Zernike phase directly to the fringe intensity "
                f"(method intensity-fit, chosen: {quality.get('method_reason') or '—'}; "
                f"{quality.get('terms_fitted') or '—'} terms, all the fringes resolve)")
    else:
        text = ("Fourier-transform fringe analysis (Takeda, Ina & Kobayashi, JOSA 72, 156, "
                "1982)" + (f" (method carrier: {quality['method_reason']})"
                           if quality.get("method_reason") else ""))
    if quality.get("sign") == "stated":
        text += ("; the fringes were closed, so the sign (convex or concave) was stated by "
                 "the operator from the push test, not measured")
    return text


def _settings_text(settings: Mapping) -> str:
    """The measurement's settings in words (the record keeps them as data)."""
    words = []
    for key, value in settings.items():
        if key == "wavelength_nm":
            words.append(f"test wavelength {_fmt(value, 2)} nm")
        elif key == "n_terms":
            words.append(f"{value} Zernike terms fitted")
        elif key == "invert":
            words.append("sign inverted (--invert)" if value else "sign as photographed")
        elif key == "diameter_mm":
            words.append(f"diameter {_fmt(value, 1)} mm" if value else "diameter not given")
        elif key == "report_wavelength_nm":
            if value:
                words.append(f"also reported at {_fmt(value, 2)} nm")
        elif key == "removed_terms":
            words.append(f"{removed_terms_text(removed_terms({'settings': settings}))} "
                         "removed from every figure")
        elif key == "method":
            words.append(f"method {value}")
        elif key == "ring_sign":
            if value:
                words.append(f"closed fringes stated {value} (push test)")
        else:
            words.append(f"{key} = {json.dumps(value)}")
    return "; ".join(words)


def _figures_table(record: Mapping) -> Table:
    lam = finite_number(record.get("wavelength_nm"))
    uncertainty = record.get("uncertainty") or {}
    rows = []
    for key, label in _FIGURE_ROWS:
        nm = finite_number(record.get(key))
        waves = nm / lam if nm is not None and lam else None
        u = finite_number(uncertainty.get(key))
        rows.append((label, _fmt(nm, 1), "—" if u is None else f"± {_fmt(u, 1)}",
                     _fmt(waves, 4)))
    roc = record.get("radius_of_curvature_m")
    if roc is not None:
        rows.append(("radius (as power)", f"{_fmt(roc, 1)} m", "", ""))
    return Table(header=("figure", "nm", "U (k = 2) nm", f"waves at {_fmt(lam, 2)} nm"),
                 rows=tuple(rows), numeric=(False, True, True, True))


def _spec_table(spec: Mapping) -> Table:
    rows, marks = [], []
    for lim in spec.get("limits", []):
        unit = {"fr": "fringes", "w": "waves", "um": "µm"}.get(lim.get("unit"), lim.get("unit"))
        wl = lim.get("unit_wavelength_nm")
        unit_note = f" at {_fmt(wl, 2)} nm" if wl else ""
        name, label = lim.get("name"), lim.get("label")
        title = label if name == label or not name else f"{name}: {label}"
        u = finite_number(lim.get("uncertainty_nm"))
        verdict = lim.get("verdict")
        magnitude = " (magnitude)" if lim.get("compared") == "magnitude" else ""
        rows.append((
            str(title),
            f"≤ {lim.get('limit')} {unit}{unit_note} = {_fmt(lim.get('limit_nm'), 1)} nm",
            f"{_fmt(lim.get('measured_nm'), 1)} nm{magnitude}",
            f"± {_fmt(u, 1)} nm" if u is not None else "—",
            f"{format_number(lim.get('margin_nm'), 1, sign=True)} nm",
            str(VERDICT_WORDS.get(verdict, verdict)),
        ))
        marks.append(verdict if verdict in VERDICT_MEANING else None)
    return Table(header=("limit", "tolerance", "measured", "U (k = 2)", "margin", "verdict"),
                 rows=tuple(rows), numeric=(False, True, True, True, True, False),
                 row_marks=tuple(marks))


def _decision(spec: Mapping) -> tuple[list[tuple[str | None, str]], list[str]]:
    """The decision rule in words and what the verdict means under it (and small print)."""
    rule = spec.get("decision_rule") or "simple"
    text = spec.get("decision_rule_text")
    if not text:  # a record judged before decision rules were recorded: the simple rule
        text = ("simple acceptance: a limit passes when the measured value is within it "
                "(decision rule not recorded with this measurement)")
    verdict = spec.get("verdict")
    out: list[tuple[str | None, str]] = [
        ("Decision rule.", f"Verdicts are given under the {rule} decision rule: {text}.")]
    if verdict in VERDICT_MEANING:
        out.append((None, f"{VERDICT_WORDS[verdict]}: {VERDICT_MEANING[verdict]}."))
    small = []
    if rule == "simple":
        small.append("Under simple acceptance a value close to its limit passes or fails on "
                     "the measured value alone, with the risk that the true value lies on "
                     "the other side of the limit; the margin and U above show how close "
                     "each figure came.")
    return out, small


def _uncertainty_text(record: Mapping) -> str:
    """What the expanded uncertainties contain, from the record's own budget."""
    budget = record.get("uncertainty_budget") or {}
    if not record.get("uncertainty") or not budget:
        return ("This record carries no uncertainties (it was measured before Flatsight "
                "stated them), so no U is given.")
    k = budget.get("coverage_factor", 2)
    parts = [f"Each U is an expanded uncertainty with coverage factor k = {k} "
             "(JCGM 100:2008, the GUM), for a level of confidence of about 95 %: standard "
             "uncertainties combined in quadrature and multiplied by k."]
    if budget.get("basis"):
        parts.append(f"What it contains: {budget['basis']}.")
    stated = [f"map noise {_fmt(budget.get('map_noise_nm'), 2)} nm RMS"]
    wl_u = budget.get("wavelength_uncertainty_nm")
    stated.append(f"wavelength standard uncertainty {_fmt(wl_u, 3)} nm" if wl_u else
                  "wavelength uncertainty taken as 0 (a spectral line is known far better "
                  "than a photo measures)")
    stated.append(f"reference flat {_fmt(budget.get('reference_uncertainty_nm'), 1)} nm (k = 2)"
                  if budget.get("reference_uncertainty_nm") else
                  "reference flat uncertainty not stated (taken as 0)")
    photos = budget.get("photos") or 1
    if photos > 1:
        stated.append(f"{photos} photos averaged (the noise part taken on the averaged "
                      "map; the method part, a bias the photos share, not divided)")
    parts.append("For this measurement: " + "; ".join(stated) + ".")
    return " ".join(parts)


def _method_items(record: Mapping) -> tuple[tuple[str | None, str], list[str], str | None]:
    """How the figures were taken, in words: its lead paragraph, its items, a note."""
    from .. import figures
    from ..record import FIGURES_METHOD

    recorded = record.get("figures_method")
    if recorded and recorded != FIGURES_METHOD:
        return (None, str(recorded)), [], None  # measured by another version: its words
    doc = figures.__doc__ or ""
    section = doc.split("How the figures are taken", 1)[-1].split("References", 1)[0]
    paragraphs: list[str] = []
    for line in section.splitlines()[1:]:  # the heading's own line holds only its aside
        text = line.strip()
        if not text or set(text) <= {"-"}:
            continue
        if text.startswith("* ") or not paragraphs:
            paragraphs.append(text.removeprefix("* "))
        else:
            paragraphs[-1] += " " + text

    def plain(text: str) -> str:  # the docstring's reStructuredText marks, dropped
        text = text.replace("``", "").replace("**", "")
        return re.sub(r"\*([^*]+)\*", r"\1", text)

    note = (None if recorded else
            "The record does not name its figure method; this is the method of the "
            "Flatsight that wrote the certificate.")
    return (("How the figures are taken.", plain(paragraphs[0])),
            [plain(item) for item in paragraphs[1:]], note)


def _zernike_table(record: Mapping) -> Table | None:
    """The largest fitted terms, removed terms left out, pairs as size and orientation."""
    a = _noll_coefficients(record.get("zernike"))
    lam = finite_number(record.get("wavelength_nm"))
    if not a.size:
        return None
    rows = zernike_rows(a, removed=removed_terms(record))
    shown = rows[:ZERNIKE_ROWS_SHOWN]
    body = []
    for js, _, _, name, size, angle in shown:
        waves = size / lam if size is not None and lam else None
        body.append((", ".join(map(str, js)), str(name), _fmt(size, 2), _fmt(waves, 4),
                     "—" if angle is None else f"{angle}°"))
    note = (f"The {len(shown)} largest of {len(rows)} rows; " if len(rows) > len(shown)
            else "Every fitted term; ")
    note += (f"all {a.size} are in the record (history --json). A cosine and sine pair "
             "is one row: its combined RMS, and at what angle (counter-clockwise from the "
             "photo's right) one of its |m| high points lies.")
    return Table(header=("Noll", "term", "nm RMS", "waves", "high at"), rows=tuple(body),
                 numeric=(True, False, True, True, True), note=note)


def _warnings(record: Mapping) -> tuple[str, ...]:
    warnings = [str(w) for w in record.get("warnings") or []]
    shown = warnings[:WARNINGS_SHOWN]
    more = len(warnings) - WARNINGS_SHOWN
    if more > 0:
        shown.append(f"and {more} more, in the record (flatsight history --json)")
    return tuple(shown)


SCOPE = ("The figures describe the surface form of the measured face over the analysed "
         "aperture, from a single photo against a reference flat. The reference flat's own "
         "form error is included in them, as are air currents, temperature differences and "
         "the way the part was supported when the photo was taken. They do not cover the "
         "other faces, surface imperfections (scratches, digs), roughness, dimensions, or "
         "anything outside the aperture. This certificate is not a substitute for the "
         "shop's calibrated instruments or for the customer's own acceptance procedure.")


def certificate_document(record: Mapping, *, map_png_bytes: bytes | None = None,
                         log: str | None = None) -> CertificateDocument:
    """What the certificate of one logged record says (see :class:`CertificateDocument`).

    Parameters
    ----------
    record : mapping
        A record from the inspection log (``measure --json`` fields plus ``record_id``,
        ``part``, ``operator``, ``station``, ``logged_utc``).
    map_png_bytes : bytes, optional
        The map image; made with :func:`map_png` when not given.
    log : str, optional
        The inspection log the record was read from, named beside the record id.
    """
    png = map_png_bytes if map_png_bytes is not None else map_png(record)
    _, map_source = surface_map(record, size_px=8)
    spec = record.get("spec") or {}
    verdict = spec.get("verdict") if spec.get("verdict") in VERDICT_MEANING else None
    rule = spec.get("decision_rule") or "simple"
    against = (f"against {spec.get('tolerance')} (ISO 10110-5 notation as Flatsight reads "
               f"it; fringes at {_fmt(spec.get('spec_wavelength_nm'), 2)} nm) under the "
               f"{rule} decision rule"
               if spec else "no tolerance was given, so no pass or fail is stated")
    part = str(record.get("part") or "part not named")
    zern = record.get("zernike") or {}
    n_terms = len(zern.get("coefficients_nm") or [])
    removed = removed_terms_text(removed_terms(record))
    decision, small = _decision(spec) if spec else ([], [])
    method_lead, method_items, method_note = _method_items(record)
    method = (f"One photo of the fringes between the part and a reference flat in "
              f"monochromatic light at {_fmt(record.get('wavelength_nm'), 2)} nm, analysed "
              f"by {_analysis_text(record.get('quality') or {})}; the phase gives height as "
              "phase × wavelength / 4π. A "
              f"{n_terms}-term Zernike fit in Noll's ordering and normalisation (Noll, JOSA "
              "66, 207, 1976) gives power, astigmatism and the symmetric terms; PVr follows "
              "Evans (Opt. Eng. 48, 043605, 2009). Tolerances are written in ISO 10110-5 "
              f"notation. Settings: {_settings_text(record.get('settings') or {}) or '—'}.")
    return CertificateDocument(
        part=part,
        subtitle=(f"{part} · record {record.get('record_id', '—')} · measured "
                  f"{_when(record.get('logged_utc')) or '—'} · {software(record)}"),
        software=software(record),
        verdict=verdict,
        verdict_word=VERDICT_WORDS[verdict],
        against=against,
        map_png=png,
        map_caption="surface height map, colour bar in nanometres",
        facts=_facts(record, log, map_source),
        figures_title=f"Figures ({removed} removed)",
        figures=_figures_table(record),
        zernike_title=f"Zernike terms without {removed}",
        zernike=_zernike_table(record),
        zernike_empty="The record holds no Zernike coefficients.",
        tolerance=_spec_table(spec) if spec else None,
        warnings=_warnings(record),
        fine=(*decision, (None, _uncertainty_text(record)), ("Method.", method),
              ("What this measurement covers.", SCOPE), method_lead),
        method_items=tuple(method_items),
        small_print=tuple(small) + ((method_note,) if method_note else ()),
    )


# --- the HTML rendering --------------------------------------------------------------------


def _table_html(t: Table, css: str = "") -> str:
    def cell(tag: str, text: str, numeric: bool, mark: str | None = None) -> str:
        classes = " ".join(c for c in ("num" if numeric else "", mark or "") if c)
        attr = f' class="{classes}"' if classes else ""
        return f"<{tag}{attr}>{_e(text)}</{tag}>"

    head = "".join(cell("th", h, n) for h, n in zip(t.header, t.numeric, strict=True))
    marks = t.row_marks or (None,) * len(t.rows)
    body = "".join(
        "<tr>" + "".join(cell("td", c, n, mark if i == len(row) - 1 else None)
                         for i, (c, n) in enumerate(zip(row, t.numeric, strict=True)))
        + "</tr>" for row, mark in zip(t.rows, marks, strict=True))
    attr = f' class="{css}"' if css else ""
    note = f'<p class="small">{_e(t.note)}</p>' if t.note else ""
    return f"<table{attr}><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>{note}"


def _paragraph_html(lead: str | None, text: str, css: str = "") -> str:
    attr = f' class="{css}"' if css else ""
    return f"<p{attr}>" + (f"<b>{_e(lead)}</b> " if lead else "") + f"{_e(text)}</p>"


def certificate_html(record: Mapping, *, map_png_bytes: bytes | None = None,
                     log: str | None = None) -> str:
    """The certificate of one logged record as a self-contained HTML page of one sheet.

    It prints on one A4 or one Letter sheet: the Zernike table lists the largest terms
    (:data:`ZERNIKE_ROWS_SHOWN`) and the page the first :data:`WARNINGS_SHOWN` warnings,
    each saying where the rest are. The arguments are :func:`certificate_document`'s.

    Returns
    -------
    str
        The whole HTML page: no external files, fonts or scripts.
    """
    doc = certificate_document(record, map_png_bytes=map_png_bytes, log=log)
    b64 = base64.b64encode(doc.map_png).decode("ascii")
    hash_cell = ' class="hash"'
    facts = "".join(
        f"<tr><th>{_e(k)}</th><td{hash_cell if k.endswith('SHA-256') else ''}>"
        f"{_e(v)}</td></tr>" for k, v in doc.facts)
    zernike = (_table_html(doc.zernike, "zern") if doc.zernike is not None
               else f"<p>{_e(doc.zernike_empty)}</p>")
    warnings = ("<h2>Warnings at measurement</h2><ul class=\"warn small\">"
                + "".join(f"<li>{_e(w)}</li>" for w in doc.warnings) + "</ul>"
                if doc.warnings else "")
    fine = "".join(_paragraph_html(lead, text) for lead, text in doc.fine)
    items = ("<ul class=\"method\">" + "".join(f"<li>{_e(i)}</li>" for i in doc.method_items)
             + "</ul>" if doc.method_items else "")
    small = "".join(_paragraph_html(None, text, "small") for text in doc.small_print)
    return f"""<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<meta name="viewport" content="width=device-width, initial-scale=1">
<title>Flatness certificate — {_e(doc.part)}</title>
<style>{_CSS}</style>
</head>
<body>
<header>
<h1>Surface flatness certificate</h1>
<p class="sub">{_e(doc.subtitle)}</p>
</header>
<section class="verdict {doc.verdict or 'none'}" id="verdict">
<span class="word">{_e(doc.verdict_word)}</span><span>{_e(doc.against)}</span>
</section>
<section class="top">
<figure>
<img alt="{_e(doc.map_caption)}" src="data:image/png;base64,{b64}">
</figure>
<table class="facts">{facts}</table>
</section>
<div class="cols">
<div>
<h2>{_e(doc.figures_title)}</h2>
{_table_html(doc.figures, "figs")}
</div>
<div>
<h2>{_e(doc.zernike_title)}</h2>
{zernike}
</div>
</div>
{"<h2>Tolerance</h2>" + _table_html(doc.tolerance) if doc.tolerance is not None else ""}
{warnings}
<section class="fine">
<h2>Decision rule, uncertainty, method and scope</h2>
{fine}{items}{small}
</section>
<div class="sign"><div>Inspected by</div><div>Checked by</div><div>Date</div></div>
</body>
</html>
"""
