"""How ``measure`` prints a record: figures with their U, verdicts, widths, names as written.

The records come from the library's own ``measurement_to_record`` over a stand-in
measurement (station_fakes: a known Zernike surface, no Fourier analysis), so they carry
every field a real record does.
"""

from __future__ import annotations

import io
import re

import pytest
from flatsight.analysis.records.tolerances import evaluate, parse_tolerance, spec_section
from flatsight.tui.report_text import Reporter
from rich.console import Console
from station_fakes import fake_backend, write_photos


@pytest.fixture(scope="module")
def record(tmp_path_factory):
    from flatsight.analysis.pipeline import MeasureSettings

    folder = tmp_path_factory.mktemp("photos")
    photo = write_photos(folder, ["BW-FL-0412.png"])[0]
    backend, _ = fake_backend()
    m = backend.measure(photo, MeasureSettings(wavelength_nm=632.8, diameter_mm=100.0))
    return backend.to_record(m)


def judged(record, tolerance, decision):
    out = dict(record)
    out["spec"] = spec_section(evaluate(parse_tolerance(tolerance), out, decision=decision))
    return out


def printed(records, *, width, detail):
    buf = io.StringIO()
    reporter = Reporter(mode="table", detail=detail, stream=buf)
    reporter.console = Console(file=buf, width=width, highlight=False, color_system=None)
    for r in records:
        reporter.emit(r)
    reporter.finish()
    return buf.getvalue()


def test_detail_gives_each_figure_with_its_u(record):
    out = printed([record], width=80, detail=True)
    assert "± U nm" in out and "expanded uncertainty (k = 2)" in out
    pv_line = next(line for line in out.splitlines() if line.startswith("PV "))
    assert f"{record['pv_nm']:.1f}" in pv_line
    assert f"{record['uncertainty']['pv_nm']:.1f}" in pv_line
    for label in ("C (symmetric irreg.)", "RMSi", "RMSa"):
        assert label in out


def test_an_inconclusive_verdict_names_the_rule_the_limit_and_the_margin(record):
    pv, u = record["pv_nm"], record["uncertainty"]["pv_nm"]
    limit = round(pv + u / 2, 1)  # within U of the value: inconclusive (ISO 14253-1, guarded)
    out = printed([judged(record, f"pv<={limit}nm", "guarded")], width=80, detail=True)
    assert f"tolerance pv<={limit}nm (guarded decision rule): INCONCLUSIVE" in out
    line = [line for line in out.splitlines() if line.startswith("PV ")][-1]  # the limit's
    assert line.split()[-1] == "INCONCLUSIVE"
    assert f"≤ {limit:.1f} nm" in line
    assert f"+{limit - pv:.1f} nm" in line  # the margin: limit minus value (ISO 14999-4)
    assert "pass when value + U is within the limit" in " ".join(out.split())
    out = printed([judged(record, f"pv<={limit}nm", "simple")], width=80, detail=True)
    assert "(simple decision rule): PASS" in out


@pytest.mark.parametrize("width", [80, 120])
def test_batch_table_fits_and_never_cuts_a_number(record, width):
    others = []
    for k, name in enumerate(["BW-FL-0412_mercury.jpg", "a-rather-long-photo-name-from-a-"
                              "camera_0001.png"]):
        r = dict(record, photo=f"shots/{name}", pv_nm=1234.5 + k,
                 power_nm=-987.6, uncertainty={**record["uncertainty"], "pv_nm": 123.4})
        others.append(judged(r, "pv<=1250nm", "guarded"))
    out = printed([record, *others], width=width, detail=False)
    lines = out.splitlines()
    assert max(len(line) for line in lines) <= width
    assert "…" not in out
    for number in ("1234.5", "1235.5", "-987.6", "±123.4", "INCONCLUSIVE",
                   f"±{record['uncertainty']['rms_nm']:.1f}"):
        assert number in out, number
    assert ("PVr" in out and "waves" in out) == (width >= 100)  # the extra column when wide
    # below the table, what decided each verdict that is not a pass: limit and margin
    flat = " ".join(out.split())
    assert ("BW-FL-0412_mercury.jpg: INCONCLUSIVE PV 1234.5 ± 123.4 ≤ 1250.0 nm "
            "(by 15.5 nm)") in flat


@pytest.mark.parametrize("detail", [False, True])
def test_a_failed_limit_is_named_with_its_limit_and_by_how_much(record, detail):
    # issue 9 item 12: the table said "tolerance 3/2(1): FAIL" without the limit that
    # failed or by how much. ISO 10110-5 B is in fringes of 546.07 nm, a fringe being half
    # a wavelength of height (common practice; ISO 10110-5, from memory)
    fringe_nm = 546.07 / 2
    irregularity_fr = record["irregularity_nm"] / fringe_nm
    power_fr = abs(record["power_nm"]) / fringe_nm
    b = round(irregularity_fr / 2, 1)  # well below the measured value: fails
    a = round(power_fr + 1, 1)  # well above: passes
    out = printed([judged(record, f"3/{a}({b})", "simple") | {"photo": "shots/BW-FL-0588.png"}],
                  width=80, detail=detail)
    lines = out.splitlines()
    assert max(len(line) for line in lines) <= 80
    finding = (f"FAIL irregularity B {irregularity_fr:.2f} ± "
               f"{record['uncertainty']['irregularity_nm'] / fringe_nm:.2f} > {b:.2f} fr "
               f"(by {irregularity_fr - b:.2f} fr, at 546.07 nm)")
    assert any(line.strip() == finding or line == f"BW-FL-0588.png: {finding}"
               for line in lines), out
    assert "power A" not in out.replace("A power", "")  # a limit that passed is not a finding
    if not detail:  # the photo named once, beside or above what it failed
        assert sum("BW-FL-0588.png" in line for line in lines) == 2  # the row and the finding


def test_a_finding_reads_over_or_inside_and_in_the_limits_own_unit(record):
    from flatsight.tui.report_text import limit_finding

    r = dict(record, uncertainty={**record["uncertainty"], "rms_nm": 0.5, "pv_nm": 9.0})
    rms_w = r["rms_nm"] / r["wavelength_nm"]  # "w" is a wave of the test wavelength
    rms_limit, limit = round(rms_w * 0.5, 3), round(r["pv_nm"] + 2)
    spec = judged(r, f"rms<={rms_limit}w, pv<={limit}nm", "guarded")["spec"]
    rms, pv = (limit_finding(lim).plain for lim in spec["limits"])
    # a limit of 0.033 w is read to a decimal more than it is written
    assert rms.startswith(f"FAIL RMS {rms_w:.4f} ± ") and f"> {rms_limit:.4f} w" in rms
    assert rms.endswith(f"at {r['wavelength_nm']:g} nm)")
    # about 2 nm inside the limit, within U = 9 nm: inconclusive under the guarded rule
    # (ISO 14253-1, from memory)
    assert pv == (f"INCONCLUSIVE PV {r['pv_nm']:.1f} ± 9.0 ≤ {limit:.1f} nm "
                  f"(by {limit - r['pv_nm']:.1f} nm)")


def test_a_narrow_terminal_gets_blocks_not_cut_numbers(record):
    r = dict(record, pv_nm=1234.5, uncertainty={**record["uncertainty"], "pv_nm": 123.4})
    out = printed([record, r], width=44, detail=False)
    assert "…" not in out and "1234.5 ±123.4" in out
    assert max(len(line) for line in out.splitlines()) <= 44


def test_no_signed_zero_anywhere(record):
    # a fitted term a hair below zero is written 0.00, never -0.00 (analysis/formatting.py)
    z = dict(record["zernike"])
    z["coefficients_nm"] = [-1e-9, -0.0001, -0.004, *z["coefficients_nm"][3:]]
    r = dict(record, zernike=z, power_nm=-0.01, power_waves=-0.00001, power_fringes=-0.00003,
             rms_asymmetric_nm=-0.0)
    for detail in (True, False):
        out = printed([judged(r, "power<=1nm", "guarded")], width=100, detail=detail)
        assert not re.search(r"-0\.0+(?![0-9])", out), out


def test_names_are_printed_literally(record):
    # a file name or part is shown as written: Rich markup is not obeyed, control
    # characters are shown escaped (analysis/formatting.py, printable)
    r = dict(record, photo="shots/[bold]BW-FL[red]\x1b[2J.png", part="[red]BW-FL-0412")
    for detail in (True, False):
        out = printed([r], width=130, detail=detail)
        assert "[bold]BW-FL[red]\\x1b[2J.png" in out
        assert "\x1b" not in out
    assert "[red]BW-FL-0412" in printed([r], width=100, detail=True)


def test_a_watch_line_names_the_limit_that_decided(record):
    from pathlib import Path

    from flatsight.tui.cmd_watch import _line

    r = dict(record, part="BW-FL-0412", uncertainty={**record["uncertainty"], "pv_nm": 5.0})
    limit = round(r["pv_nm"] + 2.0, 1)  # within U = 5 nm: inconclusive (guarded)
    line = _line(judged(r, f"pv<={limit}nm", "guarded"), Path("BW-FL-0412.png"))
    assert line.endswith("INCONCLUSIVE (pv margin +2.0 nm, U 5.0 nm)")
    assert _line(judged(r, "pv<=10000nm", "guarded"), Path("x.png")).rstrip().endswith("PASS")


# --- the batch table in a narrow terminal, and what the table output names ---


class Terminal(io.StringIO):
    """A stream that says it is a terminal, so rich takes its width from COLUMNS."""

    def isatty(self) -> bool:
        return True


def batch_batch_record(name: str, value: float, verdict: str) -> dict:
    return {"photo": f"/shop/shots/{name}", "wavelength_nm": 546.07, "pv_nm": value,
            "rms_nm": value / 5, "pvr_nm": value * 0.9, "pvr_waves": value / 546.07,
            "power_nm": -value / 2, "irregularity_nm": value / 3,
            "spec": {"verdict": verdict}, "warnings": ["a speck"]}


def batch_record(name: str, value: float, verdict: str) -> dict:
    return {"photo": f"/shop/shots/{name}", "wavelength_nm": 546.07, "pv_nm": value,
            "rms_nm": value / 5, "pvr_nm": value * 0.9, "pvr_waves": value / 546.07,
            "power_nm": -value / 2, "irregularity_nm": value / 3,
            "spec": {"verdict": verdict}, "warnings": ["a speck"]}


def test_the_batch_table_never_cuts_a_number_at_80_columns(monkeypatch):
    # issue 9, layout: at 80 columns the table showed `58…`, `-4…`, `fa…`
    monkeypatch.setenv("COLUMNS", "80")
    out = Terminal()
    reporter = Reporter(mode="table", detail=False, stream=out)
    names = ["BW-FL-0412_mercury.jpg", "BW-WN-0207_mercury-long-name-from-camera.tif"]
    for name, value, verdict in zip(names, (312.345, 58.2), ("fail", "pass"), strict=True):
        reporter.emit(batch_record(name, value, verdict))
    reporter.finish()
    text = re.sub(r"\x1b\[[0-9;]*m", "", out.getvalue())  # rich's colours off
    assert "…" not in text
    assert max(len(line) for line in text.splitlines()) <= 80
    # (PVr in waves joins the table from 100 columns on; at 80 it is left out whole)
    for whole in ("312.3", "-156.2", "281.1", "104.1", "58.2", "-29.1", "fail",
                  "pass", "546.07"):
        assert whole in text.lower(), whole  # a fail is written FAIL


def test_the_progress_bar_is_taken_off_the_screen_before_a_result_prints():
    # issue 9, layout: `unwrap ━━━ 0/1 0:00:05sample_images/BW-FL-0412_hene.png …`: the
    # bar (stderr) stayed on the line that the result (stdout) then printed onto
    err = Terminal()
    reporter = Reporter(mode="table", detail=True, stream=Terminal())
    progress = reporter.progress(2, stream=err)
    progress.start("BW-FL-0412_hene.png", 0)
    progress.stage("unwrap", 0.5)
    assert progress._bar.live.is_started
    progress.pause()  # what measure calls before printing a result or an error line
    assert not progress._bar.live.is_started
    progress.start("BW-FL-0412_mercury.jpg", 1)  # and the bar comes back for the next
    assert progress._bar.live.is_started
    progress.stop()
    assert not progress._bar.live.is_started


def test_a_subtracted_reference_is_named_in_the_table_output(measured):
    # issue 9 item 13: `--reference` output did not say a reference was subtracted
    from flatsight.analysis.record import measurement_to_record

    out = Terminal()
    reporter = Reporter(mode="table", detail=True, stream=out)
    r = measurement_to_record(measured)
    r["reference"] = {"path": "/shop/maps/BW-REF-01.npy", "sha256": "ab" * 32,
                      "map_rms_nm": 3.125, "covered_fraction": 0.987}
    reporter.emit(r)
    text = re.sub(r"\x1b\[[0-9;]*m", "", out.getvalue())
    assert "reference BW-REF-01.npy subtracted" in text and "98.7 %" in text


def test_a_subtracted_reference_is_named_under_the_batch_table(measured):
    # issue 9 item 13: the batch table did not say a reference map was subtracted
    from flatsight.analysis.record import flat_fields, measurement_to_record

    ref = {"path": "/shop/maps/BW-REF-01.npy", "sha256": "ab" * 32, "map_rms_nm": 3.125,
           "covered_fraction": 0.987}
    rows = [measurement_to_record(measured) | {"photo": f"shots/BW-FL-04{k}.png",
                                               "reference": ref} for k in (12, 13)]
    text = printed(rows, width=80, detail=False)
    assert "reference BW-REF-01.npy subtracted from every photo" in text
    assert max(len(line) for line in text.splitlines()) <= 80
    # CSV and JSON carry which map and its SHA-256 (record.flat_fields flattens sections)
    assert flat_fields(rows[0])["reference.sha256"] == "ab" * 32
    assert flat_fields(rows[0])["reference.path"] == ref["path"]
    text = printed([rows[0], measurement_to_record(measured)], width=80, detail=False)
    assert "subtracted from 1 of the 2 photos" in text


def test_the_fringe_column_says_its_wavelength(measured):
    # issue 9 item 10: fringes are counted at the test wavelength, ISO 3/A(B) limits at
    # 546.07 nm; the table must say which
    from flatsight.analysis.record import measurement_to_record
    from flatsight.tui.report_text import figures_table

    r = measurement_to_record(measured)
    headers = [str(c.header) for c in figures_table(r).columns]
    assert f"fringes @{r['wavelength_nm']:g}" in headers
