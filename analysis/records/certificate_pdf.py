"""The certificate as one PDF page (A4 or Letter), drawn with ReportLab: no browser needed.

It renders the same :class:`~.certificate.CertificateDocument` the HTML certificate
renders, so both say the same thing: the verdict, the map with its colour bar, the
facts of the measurement (part, operator, station, date, photo and its SHA-256), the
figures with their expanded uncertainties, the largest Zernike terms, the tolerance
and how it was judged, the method and the scope. Everything is kept to one page: the
content is laid out at its natural size and shrunk as a whole only if it would not fit.

Text from the record (part names, operators, file names) is escaped before ReportLab
reads it, so it is printed literally, never read as ReportLab's paragraph markup.

References
----------
ReportLab PDF library, https://docs.reportlab.com (the PLATYPUS layout engine).
ISO 216 (A4, 210 x 297 mm) and ANSI/ASME Y14.1 (Letter, 8.5 x 11 in), paper sizes.
"""

from __future__ import annotations

import io
from xml.sax.saxutils import escape

from ..formatting import printable
from .certificate import VERDICT_RGB, CertificateDocument, Table

__all__ = ["PAPERS", "certificate_pdf"]

#: paper name -> (width, height) in PDF points (1/72 in)
PAPERS = {"a4": (595.2756, 841.8898), "letter": (612.0, 792.0)}

_INK = (0.086, 0.094, 0.106)
_GREY = (0.27, 0.27, 0.27)
# a system font with wide coverage where there is one, else the Bitstream Vera that
# ReportLab ships (Latin, the signs the page uses: ± ≤ √ ° µ)
_SYSTEM_FONTS = ("/usr/share/fonts/truetype/dejavu/DejaVuSans.ttf",
                 "/usr/share/fonts/truetype/dejavu/DejaVuSans-Bold.ttf")


def _fonts() -> tuple[str, str, set[int]]:
    """Register the page's regular and bold fonts; their names and the characters they have."""
    import os

    import reportlab
    from reportlab.pdfbase import pdfmetrics
    from reportlab.pdfbase.ttfonts import TTFont

    if all(os.path.isfile(f) for f in _SYSTEM_FONTS):
        regular, bold = _SYSTEM_FONTS
    else:
        folder = os.path.join(os.path.dirname(reportlab.__file__), "fonts")
        regular, bold = os.path.join(folder, "Vera.ttf"), os.path.join(folder, "VeraBd.ttf")
    if "FlatsightSans" not in pdfmetrics.getRegisteredFontNames():
        pdfmetrics.registerFont(TTFont("FlatsightSans", regular))
        pdfmetrics.registerFont(TTFont("FlatsightSans-Bold", bold))
    covered = set(pdfmetrics.getFont("FlatsightSans").face.charToGlyph)
    return "FlatsightSans", "FlatsightSans-Bold", covered


def _plain(text: str, covered: set[int]) -> str:
    """Plain text as ReportLab paragraph text, printed literally.

    Escaped so ReportLab never reads it as its paragraph markup; a control or bidi
    character (:func:`~.formatting.printable`), or one the font cannot draw, is written
    as its code (``\\u202e``) rather than obeyed, dropped or drawn as an empty box.
    """
    out = []
    for ch in printable(text):
        code = ord(ch)
        if code < 0x20 or 0x7F <= code < 0xA0 or (code not in covered and ch != " "):
            out.append(f"\\x{code:02x}" if code < 0x100 else f"\\u{code:04x}")
        else:
            out.append(ch)
    return escape("".join(out))


def certificate_pdf(doc: CertificateDocument, *, paper: str = "a4") -> bytes:
    """The certificate ``doc`` as the bytes of a one-page PDF on ``paper`` ("a4", "letter")."""
    from reportlab.lib import colors
    from reportlab.lib.enums import TA_RIGHT
    from reportlab.lib.styles import ParagraphStyle
    from reportlab.lib.units import mm
    from reportlab.platypus import (
        Image,
        KeepInFrame,
        Paragraph,
        SimpleDocTemplate,
        Spacer,
        TableStyle,
    )
    from reportlab.platypus import Table as RLTable

    if paper not in PAPERS:
        raise ValueError(f"paper {paper!r} is not one of {', '.join(PAPERS)}")
    font, font_bold, covered = _fonts()

    def _p(text: str) -> str:
        return _plain(text, covered)

    width, height = PAPERS[paper]
    margin = 10 * mm
    frame_w, frame_h = width - 2 * margin, height - 2 * margin
    ink = colors.Color(*_INK)
    grey = colors.Color(*_GREY)
    base = ParagraphStyle("base", fontName=font, fontSize=7.6, leading=9.2,
                          textColor=ink)
    small = ParagraphStyle("small", parent=base, fontSize=6.4, leading=7.7, textColor=grey)
    fine = ParagraphStyle("fine", parent=base, fontSize=6.1, leading=7.3, textColor=grey)
    num = ParagraphStyle("num", parent=base, alignment=TA_RIGHT)
    head = ParagraphStyle("head", parent=base, fontName=font_bold)
    head_num = ParagraphStyle("head_num", parent=head, alignment=TA_RIGHT)
    h1 = ParagraphStyle("h1", parent=base, fontName=font_bold, fontSize=13,
                        leading=15)
    h2 = ParagraphStyle("h2", parent=base, fontName=font_bold, fontSize=8.4,
                        leading=10, spaceBefore=4, spaceAfter=1.5)
    mono = ParagraphStyle("mono", parent=base, fontName="Courier", fontSize=6.6,
                          leading=7.8)

    # a row's verdict in its colour, as on the banner
    marked = {v: ParagraphStyle(f"mark_{v}", parent=head, textColor=colors.Color(
        *(c / 255 for c in VERDICT_RGB[v]))) for v in VERDICT_RGB if v}

    def table(t: Table, col_widths, *, style=base) -> RLTable:
        header = [Paragraph(_p(h), head_num if n else head)
                  for h, n in zip(t.header, t.numeric, strict=True)]
        marks = t.row_marks or (None,) * len(t.rows)
        body = [[Paragraph(_p(c), marked[mark] if mark and i == len(row) - 1
                           else num if n else style)
                 for i, (c, n) in enumerate(zip(row, t.numeric, strict=True))]
                for row, mark in zip(t.rows, marks, strict=True)]
        out = RLTable([header, *body], colWidths=col_widths, repeatRows=1)
        out.setStyle(TableStyle([
            ("VALIGN", (0, 0), (-1, -1), "TOP"),
            ("LEFTPADDING", (0, 0), (-1, -1), 2),
            ("RIGHTPADDING", (0, 0), (-1, -1), 2),
            ("TOPPADDING", (0, 0), (-1, -1), 0.8),
            ("BOTTOMPADDING", (0, 0), (-1, -1), 0.8),
            ("LINEBELOW", (0, 0), (-1, 0), 0.5, grey),
            ("LINEBELOW", (0, 1), (-1, -1), 0.2, colors.Color(0.8, 0.8, 0.8)),
        ]))
        return out

    def fractions(total: float, *parts: float) -> list[float]:
        s = sum(parts)
        return [total * p / s for p in parts]

    story: list = []
    story.append(Paragraph("Surface flatness certificate", h1))
    story.append(Paragraph(_p(doc.subtitle), small))
    story.append(Spacer(1, 3))

    # the verdict banner, in the verdict's colour
    rgb = VERDICT_RGB.get(doc.verdict, VERDICT_RGB[None])
    banner_word = ParagraphStyle("word", parent=base, fontName=font_bold,
                                 fontSize=16, leading=19, textColor=colors.white)
    banner_text = ParagraphStyle("btext", parent=base, textColor=colors.white)
    banner = RLTable([[Paragraph(_p(doc.verdict_word), banner_word),
                       Paragraph(_p(doc.against), banner_text)]],
                     colWidths=[42 * mm, frame_w - 42 * mm])
    banner.setStyle(TableStyle([
        ("BACKGROUND", (0, 0), (-1, -1), colors.Color(*(c / 255 for c in rgb))),
        ("VALIGN", (0, 0), (-1, -1), "MIDDLE"),
        ("LEFTPADDING", (0, 0), (-1, -1), 8),
        ("TOPPADDING", (0, 0), (-1, -1), 4),
        ("BOTTOMPADDING", (0, 0), (-1, -1), 4),
    ]))
    story += [banner, Spacer(1, 4)]

    # the map (its colour bar drawn in the PNG) beside the facts of the measurement
    from PIL import Image as PILImage

    with PILImage.open(io.BytesIO(doc.map_png)) as im:
        map_w_px, map_h_px = im.size
    map_w = 74 * mm
    picture = Image(io.BytesIO(doc.map_png), width=map_w, height=map_w * map_h_px / map_w_px)
    facts_w = frame_w - map_w - 4 * mm
    fact_rows = [[Paragraph(_p(label), head),
                  Paragraph(_p(value), mono if label.endswith("SHA-256") else base)]
                 for label, value in doc.facts]
    facts = RLTable(fact_rows, colWidths=[24 * mm, facts_w - 24 * mm])
    facts.setStyle(TableStyle([
        ("VALIGN", (0, 0), (-1, -1), "TOP"),
        ("LEFTPADDING", (0, 0), (-1, -1), 2), ("RIGHTPADDING", (0, 0), (-1, -1), 2),
        ("TOPPADDING", (0, 0), (-1, -1), 0.6), ("BOTTOMPADDING", (0, 0), (-1, -1), 0.6),
        ("LINEBELOW", (0, 0), (-1, -1), 0.2, colors.Color(0.85, 0.85, 0.85)),
    ]))
    top = RLTable([[[picture, Paragraph(_p(doc.map_caption), small)], facts]],
                  colWidths=[map_w + 4 * mm, facts_w])
    top.setStyle(TableStyle([("VALIGN", (0, 0), (-1, -1), "TOP"),
                             ("LEFTPADDING", (0, 0), (-1, -1), 0),
                             ("RIGHTPADDING", (0, 0), (-1, -1), 0)]))
    story.append(top)

    # figures and the largest Zernike terms, side by side
    left_w = frame_w * 0.47
    right_w = frame_w - left_w - 5 * mm
    left = [Paragraph(_p(doc.figures_title), h2),
            table(doc.figures, fractions(left_w, 3.2, 1.4, 1.5, 1.5))]
    right = [Paragraph(_p(doc.zernike_title), h2)]
    if doc.zernike is not None:
        right.append(table(doc.zernike, fractions(right_w, 1.2, 3.2, 1.4, 1.4, 1.3)))
        if doc.zernike.note:
            right.append(Paragraph(_p(doc.zernike.note), small))
    else:
        right.append(Paragraph(_p(doc.zernike_empty), base))
    cols = RLTable([[left, right]], colWidths=[left_w + 5 * mm, right_w])
    cols.setStyle(TableStyle([("VALIGN", (0, 0), (-1, -1), "TOP"),
                              ("LEFTPADDING", (0, 0), (-1, -1), 0),
                              ("RIGHTPADDING", (0, 0), (-1, -1), 0)]))
    story.append(cols)

    if doc.tolerance is not None:
        story.append(Paragraph("Tolerance", h2))
        story.append(table(doc.tolerance, fractions(frame_w, 3.4, 2.6, 1.8, 1.3, 1.3, 1.4)))
    if doc.warnings:
        story.append(Paragraph("Warnings at measurement", h2))
        for w in doc.warnings:
            story.append(Paragraph("• " + _p(w), small))

    # the fine print: decision rule, uncertainty, method, scope, cautions (two columns)
    story.append(Paragraph("Decision rule, uncertainty, method and scope", h2))
    paragraphs = [Paragraph((f"<b>{_p(lead)}</b> " if lead else "") + _p(text), fine)
                  for lead, text in doc.fine]
    paragraphs += [Paragraph("• " + _p(item), fine) for item in doc.method_items]
    half = (len(paragraphs) + 1) // 2
    col_w = (frame_w - 5 * mm) / 2
    fine_cols = RLTable([[paragraphs[:half], paragraphs[half:]]],
                        colWidths=[col_w + 5 * mm, col_w])
    fine_cols.setStyle(TableStyle([("VALIGN", (0, 0), (-1, -1), "TOP"),
                                   ("LEFTPADDING", (0, 0), (-1, -1), 0),
                                   ("RIGHTPADDING", (0, 0), (-1, -1), 0)]))
    story.append(fine_cols)

    signs = RLTable([[Paragraph("Inspected by", small), Paragraph("Checked by", small),
                      Paragraph("Date", small)]], colWidths=[frame_w / 3] * 3)
    signs.setStyle(TableStyle([("LINEABOVE", (0, 0), (-1, 0), 0.6, ink),
                               ("LEFTPADDING", (0, 0), (-1, -1), 0),
                               ("TOPPADDING", (0, 0), (-1, -1), 1)]))
    story += [Spacer(1, 14), signs]

    buf = io.BytesIO()
    pdf = SimpleDocTemplate(
        buf, pagesize=(width, height), leftMargin=margin, rightMargin=margin,
        topMargin=margin, bottomMargin=margin, title=f"Flatness certificate — {doc.part}",
        author=doc.software, creator=doc.software, subject="surface flatness certificate")
    # one page, always: shrink the whole (never split it) if it would not fit
    pdf.build([KeepInFrame(frame_w, frame_h, story, mode="shrink")])
    return buf.getvalue()
