"""The station's figure rows and text summary: each figure with its U, no signed zero."""

from __future__ import annotations

import re
from dataclasses import replace

import numpy as np
from flatsight.analysis.pipeline import MeasureSettings
from flatsight.tui.render.summary import figure_rows, summary_text, uncertainty_text, zernike_rows
from flatsight.tui.render.units import fmt_height
from station_fakes import fake_backend, write_photos


def test_every_figure_row_has_its_u_in_the_chosen_units(tmp_path):
    backend, _ = fake_backend()
    m = backend.measure(write_photos(tmp_path, ["BW-FL-0412.png"])[0], MeasureSettings())
    f = m.figures
    for units in ("nm", "waves", "fringes"):
        for name, _ in figure_rows(f, units=units, wavelength_nm=632.8):
            text = uncertainty_text(f, name, units=units, wavelength_nm=632.8)
            if name == "radius":
                assert text == ""  # no uncertainty is given for the radius
                continue
            assert text.startswith("± ") and text.endswith({"nm": "nm", "waves": "λ",
                                                            "fringes": "fr"}[units])
    # one fringe is half a wavelength of height (double pass; common practice)
    u = f.uncertainty_nm["pv_nm"]
    assert uncertainty_text(f, "PV", units="fringes", wavelength_nm=632.8) == (
        f"± {fmt_height(u, 'fringes', 632.8)}")
    assert f"± {fmt_height(u, 'nm', 632.8)}" in summary_text(m)


def test_no_signed_zero_in_rows_or_summary(tmp_path):
    backend, _ = fake_backend()
    m = backend.measure(write_photos(tmp_path, ["BW-FL-0412.png"])[0], MeasureSettings())
    tiny = np.array([-1e-12, 1e-12, -0.001, *m.zernike.coefficients_nm[3:]])
    rows = zernike_rows(tiny, wavelength_nm=632.8)
    assert [r[2] for r in rows[:3]] == ["0.00", "0.00", "0.00"]  # analysis/formatting.py
    assert [r[3] for r in rows[:3]] == ["0.0000", "0.0000", "0.0000"]
    flat = replace(m.figures, power_nm=-0.01, power_fringes=-0.00006)
    text = " ".join(v for _, v in figure_rows(flat, units="nm", wavelength_nm=632.8))
    assert "0.0 nm  (0.00 fr)" in text
    assert not re.search(r"-0\.0+(?![0-9])", summary_text(replace(m, figures=flat)))


def test_the_summary_says_a_stated_ring_sign(tmp_path):
    # issue 10: closed fringes measured with the operator's sign say so, and which
    backend, _ = fake_backend()
    photo = write_photos(tmp_path, ["BW-FL-0440-rings.png"])[0]
    text = summary_text(backend.measure(photo, MeasureSettings(ring_sign="concave")))
    assert "sign           stated concave for closed fringes (push test), not measured" in text
    assert "  sign stated: concave" in text and "method intensity-fit" in text
    plain = summary_text(backend.measure(
        write_photos(tmp_path, ["BW-FL-0412.png"])[0], MeasureSettings(ring_sign="concave")))
    assert "sign           as photographed" in plain and "sign stated" not in plain
