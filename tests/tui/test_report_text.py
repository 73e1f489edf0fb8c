"""The batch table of ``flatsight measure`` (tui/report_text.py) in a narrow terminal."""

from __future__ import annotations

import io
import re

from flatsight.tui.report_text import Reporter


class Terminal(io.StringIO):
    """A stream that says it is a terminal, so rich takes its width from COLUMNS."""

    def isatty(self) -> bool:
        return True


def record(name: str, value: float, verdict: str) -> dict:
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
        reporter.emit(record(name, value, verdict))
    reporter.finish()
    text = re.sub(r"\x1b\[[0-9;]*m", "", out.getvalue())  # rich's colours off
    assert "…" not in text
    assert max(len(line) for line in text.splitlines()) <= 80
    for whole in ("312.3", "-156.2", "281.1", "0.572", "104.1", "58.2", "-29.1", "fail",
                  "pass", "546.07"):
        assert whole in text, whole


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


def test_the_fringe_column_says_its_wavelength(measured):
    # issue 9 item 10: fringes are counted at the test wavelength, ISO 3/A(B) limits at
    # 546.07 nm; the table must say which
    from flatsight.analysis.record import measurement_to_record
    from flatsight.tui.report_text import figures_table

    r = measurement_to_record(measured)
    headers = [str(c.header) for c in figures_table(r).columns]
    assert f"fringes @{r['wavelength_nm']:g}" in headers
