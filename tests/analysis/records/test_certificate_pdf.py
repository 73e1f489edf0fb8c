"""The PDF certificate (analysis/records/certificate_pdf.py), read back as a reader would.

Each PDF is opened with pypdf, a general-purpose PDF library from the registry (not the
library that wrote it): its page count, its page size and the text of every figure the
page must carry. Where poppler's ``pdftoppm`` is installed the page is also looked at as
an image: the verdict banner and the map's colours must be on it.

Paper sizes: ISO 216 A4 is 210 x 297 mm = 595.28 x 841.89 pt; US Letter (ANSI/ASME
Y14.1) is 8.5 x 11 in = 612 x 792 pt (1 pt = 1/72 in, the PDF unit, ISO 32000-1 §8.3.2.3).
"""

from __future__ import annotations

import io
import shutil
import subprocess

import numpy as np
import pytest
from flatsight.analysis.records import certificate
from flatsight.analysis.records.certificate_pdf import certificate_pdf
from PIL import Image
from pypdf import PdfReader
from test_certificate import full_record, make_record, near_count

PAPER_PT = {"a4": (595.28, 841.89), "letter": (612.0, 792.0)}


def read(pdf: bytes) -> PdfReader:
    assert pdf.startswith(b"%PDF-")
    return PdfReader(io.BytesIO(pdf))


def text_of(pdf: bytes) -> str:
    """The page's text with the reader's line breaks and spaces taken out."""
    return "".join(read(pdf).pages[0].extract_text().split())


def squeeze(s: str) -> str:
    return "".join(s.split())


@pytest.mark.parametrize("which", ["plain", "full"])
@pytest.mark.parametrize("paper", ["a4", "letter"])
def test_one_page_of_the_paper_asked_for(paper, which):
    rec = make_record() if which == "plain" else full_record()
    doc = certificate.certificate_document(rec)
    reader = read(certificate_pdf(doc, paper=paper))
    assert len(reader.pages) == 1
    box = reader.pages[0].mediabox
    assert float(box.width) == pytest.approx(PAPER_PT[paper][0], abs=0.5)
    assert float(box.height) == pytest.approx(PAPER_PT[paper][1], abs=0.5)


def test_every_figure_and_fact_of_the_record_is_on_the_page():
    rec = full_record()
    doc = certificate.certificate_document(rec, log="/srv/shop/inspections.sqlite")
    text = text_of(certificate_pdf(doc))
    # the same document as the HTML page: every fact, figure, U, Zernike row, limit
    for label, value in doc.facts:
        assert squeeze(label) in text and squeeze(value) in text, (label, value)
    for table in (doc.figures, doc.zernike, doc.tolerance):
        for row in table.rows:
            for cell in row:
                assert squeeze(cell) in text, (cell, row)
    assert squeeze(doc.verdict_word) in text and squeeze(doc.against) in text
    for warning in doc.warnings:
        assert squeeze(warning) in text
    # the record's own numbers, formatted as the page gives them (1 decimal in nm)
    for key in ("pv_nm", "rms_nm", "pvr_nm", "irregularity_nm"):
        assert f"{rec[key]:.1f}" in text, key
    assert "3.3" in text  # every U of this record
    assert rec["reference"]["sha256"] in text
    assert "JCGM100:2008" in text and "guarded" in text  # how it was judged
    assert "Inspectedby" in text and "Checkedby" in text


def test_text_from_the_record_is_printed_literally():
    # a part name, an operator and a warning that would be markup, a control or a bidi
    # override if read as anything but text
    rec = make_record() | {"part": "BW-FL-0412 <b>&amp;</b> <font size=40>x</font>",
                           "operator": "Ruben\x1b[2J Halloway\u202e",
                           "warnings": ["<para>not a paragraph</para>"]}
    text = text_of(certificate_pdf(certificate.certificate_document(rec)))
    assert squeeze("BW-FL-0412 <b>&amp;</b> <font size=40>x</font>") in text
    assert "Ruben\\x1b[2JHalloway\\u202e" in text
    assert "<para>notaparagraph</para>" in text


def test_a_long_record_is_shrunk_onto_one_page_not_split():
    rec = full_record()
    rec["warnings"] = [f"warning {k}: " + "the fringes fade toward the rim " * 6
                       for k in range(12)]
    rec["part"] = "BW-FL-0412-" + "X" * 300
    for paper in ("a4", "letter"):
        reader = read(certificate_pdf(certificate.certificate_document(rec), paper=paper))
        assert len(reader.pages) == 1


def test_an_unknown_paper_is_refused():
    with pytest.raises(ValueError, match="paper"):
        certificate_pdf(certificate.certificate_document(make_record()), paper="a3")


@pytest.mark.skipif(shutil.which("pdftoppm") is None,
                    reason="pdftoppm (poppler-utils) not installed: page image not checked")
def test_the_page_shows_the_verdict_banner_and_the_map(tmp_path):
    rec = make_record(spec="3/1(0.05)")
    pdf = tmp_path / "certificate.pdf"
    pdf.write_bytes(certificate_pdf(certificate.certificate_document(rec)))
    subprocess.run(["pdftoppm", "-r", "100", "-png", str(pdf), str(tmp_path / "p")],
                   check=True, timeout=60)
    pages = sorted(tmp_path.glob("p-*.png"))
    assert len(pages) == 1
    img = np.asarray(Image.open(pages[0]).convert("RGB"))
    # the red banner of a failed part (analysis/records/certificate.VERDICT_RGB) fills a block
    assert near_count(img, certificate.VERDICT_RGB["fail"], tol=6) > 8000
    # the map's own colours are on the page: sample the PNG at points inside the disk
    map_img = np.asarray(Image.open(io.BytesIO(certificate.map_png(rec))).convert("RGB"))
    n, pad = certificate.MAP_SIZE_PX, certificate.MAP_PAD_PX
    for row, col in [(n // 2, n // 2), (60, n // 2), (n - 60, n // 2), (n // 2, 60)]:
        colour = map_img[pad + row, pad + col]
        assert near_count(img, colour, tol=8) > 20, (row, col, colour)
