"""Tolerance, log, history, trend, report and presets through the command line, end to end."""

from __future__ import annotations

import argparse
import csv
import io
import json
from datetime import UTC, datetime, timedelta

import pytest
from flatsight.analysis.records import log as inspection_log
from flatsight.analysis.synthetic import SyntheticSurface, make_fringe_photo, write_photo
from flatsight.tui import cmd_records, record_options
from flatsight.tui.cli import main

# power <= 1 fringe at 546.07 nm (273 nm) and PVr <= 150 nm. PVr rather than the PV-based
# irregularity B, so that a stray pixel in a synthetic photo cannot decide the verdict
# (Evans 2009: PVr is the robust amplitude parameter)
SPEC = "3/1(-), pvr<=150nm"


@pytest.fixture(scope="module")
def photos(tmp_path_factory):
    """Two synthetic photos: one within SPEC, one whose spherical term breaks B."""
    folder = tmp_path_factory.mktemp("photos")
    good = folder / "BW-FL-0412.png"
    bad = folder / "BW-FL-0413.png"
    write_photo(make_fringe_photo(SyntheticSurface({4: 20.0}), shape=(360, 480), seed=1), good)
    # spherical a11 = 60 nm: PV 3.354 x 60 = 201 nm > 150 nm (Noll's Z11 =
    # sqrt(5)(6 rho^4 - 6 rho^2 + 1), Noll, JOSA 66(3), 207, 1976, spans 1.5 sqrt(5) over the
    # disk); the good photo, power only: 2 sqrt(3) x 20 = 69 nm (Z4 = sqrt(3)(2 rho^2 - 1)
    # spans 2 sqrt(3)), passes both
    write_photo(make_fringe_photo(SyntheticSurface({4: 10.0, 11: 60.0}), shape=(360, 480),
                                  seed=2), bad)
    return good, bad


def run_cli(capsys, *argv):
    status = main([str(a) for a in argv])
    captured = capsys.readouterr()
    return status, captured.out, captured.err


def test_measure_exit_status_follows_the_tolerance(photos, tmp_path, capsys):
    good, bad = photos
    log = tmp_path / "log.sqlite"
    common = ["-w", "632.8", "--spec", SPEC, "--log", log, "--json", "--operator", "Tamsin Ode",
              "--station", "bench-2"]
    status, out, _ = run_cli(capsys, "measure", good, "--part", "BW-FL-0412", *common)
    assert status == 0
    rec = json.loads(out)
    assert rec["spec"]["verdict"] == "pass" and isinstance(rec["record_id"], int)
    assert rec["spec"]["tolerance"] == SPEC
    assert {x["name"] for x in rec["spec"]["limits"]} == {"A", "pvr"}
    status, out, _ = run_cli(capsys, "measure", bad, "--part", "BW-FL-0413", *common)
    assert status == 1
    assert json.loads(out)["spec"]["verdict"] == "fail"
    status, out, _ = run_cli(capsys, "measure", good, bad, *common)
    assert status == 1  # the highest status of the batch
    assert len(out.splitlines()) == 2
    status, _, err = run_cli(capsys, "measure", good, "-w", "632.8", "--spec", "3/1(0.5",
                             "--log", log)
    assert status == 2 and "at character 8" in err  # the missing ')'
    assert len(err.strip().splitlines()) == 1
    before = len(inspection_log.query(log))
    status, out, _ = run_cli(capsys, "measure", good, "-w", "632.8", "--no-log", "--json")
    assert status == 0 and "record_id" not in json.loads(out)
    assert len(inspection_log.query(log)) == before == 4


def test_guarded_decision_exits_5_when_inconclusive_and_the_worst_status_wins(photos, tmp_path,
                                                                              capsys):
    good, bad = photos
    # a stated reference-flat uncertainty of 40 nm (k = 2) makes every figure's U at least
    # 40 nm: U = k * sqrt(sum of u_i^2) >= k * 40 / 2 (JCGM 100:2008, 5.1.2 and 6.2.1).
    # The good photo's PVr is about 69 nm (power only, 2 sqrt(3) x 20 nm; Noll 1976), so
    # "pvr<=75nm" lies within U of it: inconclusive under the guarded rule (ISO 14253-1)
    common = ["-w", "632.8", "--spec", "pvr<=75nm", "--decision", "guarded",
              "--reference-uncertainty", "40", "--no-log", "--json"]
    status, out, err = run_cli(capsys, "measure", good, *common)
    assert status == 5, err
    rec = json.loads(out)
    spec = rec["spec"]
    assert spec["verdict"] == "inconclusive" and spec["decision_rule"] == "guarded"
    assert spec["limits"][0]["uncertainty_nm"] >= 40.0
    assert rec["uncertainty"]["pvr_nm"] == spec["limits"][0]["uncertainty_nm"]
    assert rec["uncertainty_budget"]["reference_uncertainty_nm"] == 40.0
    # the bad photo's PVr, about 201 nm (spherical 60 nm x 3.354: Noll's
    # Z11 = sqrt(5)(6 rho^4 - 6 rho^2 + 1) spans 1.5 sqrt(5) over the disk), minus U is
    # still beyond 75 nm: it fails (1), which outranks inconclusive (5); a missing file
    # (2) outranks both
    status, out, err = run_cli(capsys, "measure", good, bad, *common)
    assert status == 1, err
    assert [json.loads(line)["spec"]["verdict"] for line in out.splitlines()] == [
        "inconclusive", "fail"]
    status, out, err = run_cli(capsys, "measure", good, tmp_path / "missing.png", *common)
    assert status == 2 and len(out.splitlines()) == 1


@pytest.fixture(scope="module")
def filled_log(photos, tmp_path_factory):
    good, bad = photos
    log = tmp_path_factory.mktemp("log") / "log.sqlite"
    for photo, part in ((good, "BW-FL-0412"), (bad, "BW-FL-0413"), (good, "BW-FL-0412")):
        main(["measure", str(photo), "-w", "632.8", "--spec", SPEC, "--log", str(log),
              "--part", part, "--operator", "Ruben Halloway", "--station", "bench-2"])
    return log


def test_history_json_csv_and_table(filled_log, capsys):
    status, out, _ = run_cli(capsys, "history", "--log", filled_log, "--json")
    assert status == 0
    rows = [json.loads(line) for line in out.splitlines()]
    assert [r["record_id"] for r in rows] == [3, 2, 1]  # newest first
    assert [r["verdict"] for r in rows] == ["pass", "fail", "pass"]
    for r in rows:  # the fields of measure --json plus the record's own
        for key in ("photo_sha256", "pv_nm", "pvr_nm", "zernike", "settings", "spec",
                    "record_id", "logged_utc", "part", "operator", "station"):
            assert key in r
    status, out, _ = run_cli(capsys, "history", "--log", filled_log, "--csv", "--verdict", "fail")
    table = list(csv.DictReader(io.StringIO(out)))
    assert [(t["record_id"], t["part"], t["verdict"]) for t in table] == [
        ("2", "BW-FL-0413", "fail")]
    assert float(table[0]["pvr_nm"]) > 150.0
    status, out, _ = run_cli(capsys, "history", "--log", filled_log, "--part", "BW-FL-0412")
    assert status == 0 and "BW-FL-0412" in out and "BW-FL-0413" not in out
    assert max(len(line) for line in out.splitlines()) <= 80
    status, _, err = run_cli(capsys, "history", "--log", filled_log.parent / "none.sqlite")
    assert status == 2 and "no inspection log" in err


def test_trend_shows_limit_and_pass_rate(filled_log, capsys, monkeypatch):
    monkeypatch.setenv("COLUMNS", "80")
    status, out, _ = run_cli(capsys, "trend", "--log", filled_log, "--figure", "pvr_nm")
    assert status == 0
    assert "pass rate 2/3 (66.7 %)" in out
    assert "limit 150.0 nm (pvr of 3/1(-), pvr<=150nm)" in out
    plot = [line for line in out.splitlines() if "│" in line]
    assert any("---" in line for line in plot)
    assert sum(line.count("x") for line in plot) == 1
    assert sum(line.count("o") for line in plot) >= 1
    assert max(len(line) for line in out.splitlines()) <= 80


def test_trend_lines_against_a_hand_placement():
    t0 = datetime(2026, 11, 1, tzinfo=UTC)
    points = [(t0, 0.0, "pass"), (t0 + timedelta(days=5), 50.0, "fail"),
              (t0 + timedelta(days=10), 100.0, None)]
    lines = cmd_records.trend_lines(points, width=60, height=11, limits_nm=[40.0])
    body = [line.split("│", 1)[1] for line in lines[:11]]
    # range 0..100 padded by 5 %: -5..105, 11 rows -> row = round((105 - v) / 110 * 10)
    rows = {v: round((105 - v) / 110 * 10) for v in (0.0, 50.0, 100.0, 40.0)}
    width = len(body[0])
    assert body[rows[0.0]][0] == "o"
    assert body[rows[50.0]][round(0.5 * (width - 1))] == "x"
    assert body[rows[100.0]][width - 1] == "*"
    assert set(body[rows[40.0]]) == {"-"}
    assert lines[-1].strip().startswith("2026-11-01") and lines[-1].rstrip().endswith("00:00")
    assert all(len(line) <= 60 for line in lines)


def test_an_inconclusive_record_is_marked_and_counted_as_not_passed(tmp_path, capsys,
                                                                    monkeypatch):
    t0 = datetime(2026, 11, 1, tzinfo=UTC)
    points = [(t0, 10.0, "inconclusive"), (t0 + timedelta(days=1), 10.0, "pass")]
    lines = cmd_records.trend_lines(points, width=40, height=5)
    assert "?" in "".join(lines) and "o" in "".join(lines)
    # where an inconclusive and a fail share a cell, the fail stays visible
    lines = cmd_records.trend_lines([(t0, 10.0, "inconclusive"),
                                     (t0 + timedelta(minutes=1), 10.0, "fail"),
                                     (t0 + timedelta(days=10), 20.0, "pass")],
                                    width=40, height=5)
    assert "x" in "".join(lines) and "?" not in "".join(lines)
    log = tmp_path / "log.sqlite"
    for day, verdict in ((1, "pass"), (2, "inconclusive"), (3, "fail")):
        inspection_log.record_measurement(
            log, {"pvr_nm": 60.0 + day, "spec": {"tolerance": "pvr<=62nm", "verdict": verdict}},
            part="BW-FL-0412", logged_utc=f"2026-11-0{day}T08:00:00Z")
    monkeypatch.setenv("COLUMNS", "80")
    status, out, _ = run_cli(capsys, "trend", "--log", log)
    assert status == 0 and "pass rate 1/3 (33.3 %)" in out and "? inconclusive" in out
    status, out, _ = run_cli(capsys, "history", "--log", log, "--verdict", "inconclusive",
                             "--json")
    assert status == 0 and [json.loads(x)["pvr_nm"] for x in out.splitlines()] == [62.0]


def test_report_html_and_png(filled_log, tmp_path, capsys):
    html_out = tmp_path / "cert.html"
    status, out, _ = run_cli(capsys, "report", "2", "--log", filled_log, "--output", html_out)
    assert status == 0 and "fail" in out
    page = html_out.read_text(encoding="utf-8")
    assert ">FAIL<" in page and "BW-FL-0413" in page and "data:image/png;base64," in page
    assert f"<th>Record</th><td>2 in {filled_log.absolute()}</td>" in page  # its provenance
    png_out = tmp_path / "map.png"
    status, _, _ = run_cli(capsys, "report", "1", "--log", filled_log, "-o", png_out)
    assert status == 0 and png_out.read_bytes().startswith(b"\x89PNG")
    status, _, err = run_cli(capsys, "report", "1", "--log", filled_log, "-o", tmp_path / "x.jpg")
    assert status == 2 and "FILE.pdf, FILE.html or FILE.png" in err
    status, _, err = run_cli(capsys, "report", "99", "--log", filled_log, "-o", html_out)
    assert status == 2 and "no record 99" in err
    assert not list(tmp_path.glob(".cert.html.*"))  # no temporary files left behind


def test_report_pdf_one_page_of_the_paper_asked_for(filled_log, tmp_path, capsys):
    from pypdf import PdfReader

    rec = inspection_log.get(filled_log, 2)
    for paper, size_pt in (("a4", (595.28, 841.89)), ("letter", (612.0, 792.0))):
        out = tmp_path / f"cert-{paper}.pdf"
        status, said, err = run_cli(capsys, "report", "2", "--log", filled_log, "--output",
                                    out, "--paper", paper)
        assert status == 0, err
        assert "record 2" in said and "part BW-FL-0413" in said
        reader = PdfReader(out)  # pypdf, an outside reader of what was written
        assert len(reader.pages) == 1
        box = reader.pages[0].mediabox  # ISO 216 A4 / US Letter in PDF points
        assert (float(box.width), float(box.height)) == pytest.approx(size_pt, abs=0.5)
        text = "".join(reader.pages[0].extract_text().split())
        assert "FAIL" in text and "BW-FL-0413" in text and rec["photo_sha256"] in text
        assert f"{rec['pvr_nm']:.1f}" in text
    assert not list(tmp_path.glob(".cert-*"))  # no temporary files left behind


def test_report_writes_one_certificate_per_selected_record(filled_log, tmp_path, capsys):
    rows = inspection_log.query(filled_log)
    folder = tmp_path / "certs"
    status, said, err = run_cli(capsys, "report", "--log", filled_log, "--output-dir", folder)
    assert status == 0, err
    names = sorted(p.name for p in folder.iterdir())
    assert names == sorted(f"{r['part']}_r{r['record_id']}.pdf" for r in rows)
    assert said.count("wrote ") == len(rows)
    # select as history does: one part, one verdict, HTML instead of PDF
    part = rows[0]["part"]
    status, _, err = run_cli(capsys, "report", "--log", filled_log, "--part", part,
                             "--format", "html", "--output-dir", tmp_path / "part")
    assert status == 0, err
    assert sorted(p.name for p in (tmp_path / "part").iterdir()) == sorted(
        f"{part}_r{r['record_id']}.html" for r in rows if r["part"] == part)
    failed = [r for r in rows if (r.get("spec") or {}).get("verdict") == "fail"]
    status, _, err = run_cli(capsys, "report", "--log", filled_log, "--verdict", "fail",
                             "--output-dir", tmp_path / "fail")
    assert status == 0, err
    assert len(list((tmp_path / "fail").iterdir())) == len(failed) > 0
    # nothing selected: said, and nothing written
    status, _, err = run_cli(capsys, "report", "--log", filled_log, "--since", "2999-01-01",
                             "--output-dir", tmp_path / "none")
    assert status == 0 and "nothing written" in err and not (tmp_path / "none").exists()


@pytest.mark.parametrize("argv, words", [
    (["report", "--output", "x.pdf"], ["RECORD_ID", "--output-dir"]),
    (["report", "1"], ["--output FILE"]),
    (["report", "1", "--output", "x.pdf", "--part", "BW-FL-0412"], ["--part selects"]),
    (["report", "1", "--output-dir", "out"], ["either RECORD_ID"]),
    (["report", "1", "--output", "x.pdf", "--paper", "a3"], ["--paper", "a3"]),
])
def test_report_usage_errors_are_said_and_nothing_is_written(filled_log, tmp_path, capsys,
                                                              monkeypatch, argv, words):
    monkeypatch.chdir(tmp_path)
    status, out, err = run_cli(capsys, *argv, "--log", filled_log)
    assert status == 2 and out == "" and "Traceback" not in err
    assert all(w in err for w in words), err
    assert not list(tmp_path.iterdir())  # nothing written


def test_preset_fills_what_the_command_line_leaves_unset(photos, tmp_path, capsys):
    good, _ = photos
    presets = tmp_path / "presets.toml"
    presets.write_text(
        '[presets.bench-2-hene]\nwavelength_nm = 632.8\ntolerance = "3/1(0.01)"\n'
        'operator = "Tamsin Ode"\nstation = "bench-2"\n', encoding="utf-8")
    log = tmp_path / "log.sqlite"
    status, out, _ = run_cli(capsys, "measure", good, "--presets", presets, "--preset",
                             "bench-2-hene", "--log", log, "--json")
    rec = json.loads(out)
    assert status == 1 and rec["spec"]["tolerance"] == "3/1(0.01)"
    assert rec["wavelength_nm"] == 632.8 and rec["operator"] == "Tamsin Ode"
    # the command line wins over the preset
    status, out, _ = run_cli(capsys, "measure", good, "--presets", presets, "--preset",
                             "bench-2-hene", "--spec", "pv<=1000nm", "--operator",
                             "Ruben Halloway", "--log", log, "--json")
    rec = json.loads(out)
    assert status == 0 and rec["spec"]["tolerance"] == "pv<=1000nm"
    assert rec["operator"] == "Ruben Halloway" and rec["station"] == "bench-2"
    status, _, err = run_cli(capsys, "measure", good, "--presets", presets, "--preset", "x")
    assert status == 2 and "no preset 'x'" in err and "bench-2-hene" in err


def test_finish_record_leaves_its_input_alone(tmp_path):
    p = argparse.ArgumentParser()
    record_options.add_record_options(p)
    args = p.parse_args(["--spec", "pv<=10nm", "--log", str(tmp_path / "l.sqlite"),
                         "--part", "BW-FL-0412"])
    record = {"photo": "x.png", "wavelength_nm": 632.8, "pv_nm": 12.0}
    out, status = record_options.finish_record(args, record)
    assert record == {"photo": "x.png", "wavelength_nm": 632.8, "pv_nm": 12.0}
    assert status == 1 and out["spec"]["verdict"] == "fail" and out["record_id"] == 1
    assert inspection_log.get(tmp_path / "l.sqlite", 1)["pv_nm"] == 12.0


def test_measure_names_each_photos_part_after_its_file_as_the_station_does(photos, tmp_path,
                                                                           capsys):
    # issue 9 item 2: measure logged no part, so history --part never found CLI records
    good, bad = photos
    log = tmp_path / "log.sqlite"
    status, out, _ = run_cli(capsys, "measure", good, bad, "-w", "632.8", "--log", log,
                             "--json")
    assert status == 0
    assert [json.loads(line)["part"] for line in out.splitlines()] == ["BW-FL-0412",
                                                                       "BW-FL-0413"]
    status, out, _ = run_cli(capsys, "history", "--log", log, "--part", "BW-FL-0413",
                             "--json")
    assert status == 0 and [json.loads(line)["part"] for line in out.splitlines()] == [
        "BW-FL-0413"]


def test_one_part_for_several_photos_is_a_usage_error_unless_averaged(photos, tmp_path,
                                                                      capsys):
    # issue 9 item 2: --part with a batch labelled every photo with one part, silently
    good, bad = photos
    log = tmp_path / "log.sqlite"
    status, out, err = run_cli(capsys, "measure", good, bad, "-w", "632.8", "--log", log,
                               "--part", "BW-FL-0412")
    assert status == 2 and out == ""
    assert len(err.strip().splitlines()) == 1 and "--part" in err and "--average" in err
    assert not log.exists()
    status, out, _ = run_cli(capsys, "measure", good, good, "-w", "632.8", "--log", log,
                             "--part", "BW-FL-0412", "--average", "--json")
    assert status == 0 and json.loads(out)["part"] == "BW-FL-0412"


def test_an_average_without_part_takes_its_first_photos(photos, tmp_path, capsys):
    good, _ = photos
    status, out, _ = run_cli(capsys, "measure", good, good, "-w", "632.8", "--no-log",
                             "--average", "--json")
    assert status == 0 and json.loads(out)["part"] == "BW-FL-0412"


def test_report_says_which_log_record_part_and_photo_it_used(filled_log, tmp_path, capsys,
                                                            monkeypatch):
    # issue 9 item 3: without --log, report silently read the default log and wrote a
    # certificate for a part from an earlier day
    monkeypatch.setattr(inspection_log, "default_log_path", lambda: filled_log)
    html_out = tmp_path / "cert.html"
    status, out, _ = run_cli(capsys, "report", "2", "--output", html_out)
    assert status == 0
    rec = inspection_log.get(filled_log, 2)
    assert str(filled_log) in out and "default log" in out
    assert "record 2" in out and "part BW-FL-0413" in out and "photo BW-FL-0413.png" in out
    assert rec["logged_utc"][:16].replace("T", " ") in out
    status, out, _ = run_cli(capsys, "report", "2", "--log", filled_log, "--output", html_out)
    assert status == 0 and str(filled_log) in out and "default log" not in out


def test_trend_starts_on_the_figure_the_tolerance_limits(filled_log, capsys, monkeypatch):
    # issue 9 item 11: trend defaulted to pvr_nm even when the tolerance limits another
    # figure; the station starts on the limited one. SPEC's first limit is ISO 10110-5's
    # sagitta (power) error A, 3/1(-)
    monkeypatch.setenv("COLUMNS", "80")
    status, out, _ = run_cli(capsys, "trend", "--log", filled_log)
    assert status == 0
    assert out.splitlines()[0].startswith("power_nm over time")
    assert out.splitlines()[1].startswith("(the figure the latest record's tolerance limits")
    assert "no tolerance on this figure" not in out


def test_history_never_splits_a_number_at_80_columns_or_in_a_pipe(filled_log, tmp_path,
                                                                  capsys, monkeypatch):
    # issue 9, layout: history wrapped numbers mid-digit at 80 columns and always when
    # piped (`flatsight history | cat`); a long part name must fold, not the figures
    import shutil

    log = tmp_path / "log.sqlite"
    shutil.copy(filled_log, log)
    rec = inspection_log.get(log, 2)
    rec.update(pv_nm=12345.678, pvr_nm=11111.111, power_nm=-9876.543,
               irregularity_nm=2222.222)
    inspection_log.record_measurement(
        log, rec, part="BW-FL-0412-a-very-long-part-name-from-the-shop-floor",
        operator="Ruben Halloway-" + "x" * 40, station="bench-3-" + "y" * 40,
        logged_utc=rec["logged_utc"])
    for columns in ("80", "200"):
        monkeypatch.setenv("COLUMNS", columns)
        status, out, _ = run_cli(capsys, "history", "--log", log)  # capsys: not a terminal
        assert status == 0
        # PV (12345.7) is left out whole below 100 columns, and said to be
        wholes = ["11111.1", "-9876.5", "2222.2", f"{inspection_log.get(log, 2)['pvr_nm']:.1f}"]
        wholes += ["12345.7"] if columns == "200" else ["left out at this width: PV"]
        for whole in wholes:
            assert whole in out, (columns, whole, out)
        assert max(len(line) for line in out.splitlines()[1:]) <= int(columns)


def test_history_marks_averages_sequences_and_references_and_names_the_photo(
        filled_log, tmp_path, capsys, monkeypatch):
    # issue 9 item 13: history did not mark averages or sequences and had no photo column
    import shutil

    log = tmp_path / "log.sqlite"
    shutil.copy(filled_log, log)
    base = inspection_log.get(log, 1)
    for k in ("record_id", "logged_utc", "part", "operator", "station", "verdict"):
        base.pop(k, None)
    average = base | {"photo": "average of 3: a.png, b.png, c.png", "average": {
        "photos": ["/shop/BW-FL-0412_a.png", "/shop/BW-FL-0412_b.png",
                   "/shop/BW-FL-0412_c.png"], "n_photos": 3}, "pvr_nm": 12345.678}
    sequence = base | {"photo": "/shop/seq/frame1.png", "frames": [
        f"/shop/seq/frame{k}.png" for k in range(1, 5)], "power_nm": -9876.543}
    referenced = base | {"photo": "/shop/BW-FL-0588.png", "reference": {
        "path": "/shop/maps/BW-REF-01.npy", "sha256": "cd" * 32}}
    for rec, part in ((average, "BW-FL-0412"), (sequence, "BW-FL-0413"),
                      (referenced, "BW-FL-0588")):
        inspection_log.record_measurement(log, rec, part=part)
    monkeypatch.setenv("COLUMNS", "80")
    status, out, _ = run_cli(capsys, "history", "--log", log)  # capsys: a pipe
    assert status == 0
    assert max(len(line) for line in out.splitlines()[1:]) <= 80
    for shown in ("avg 3: BW-FL-0412_a.png", "seq 4: frame1.png", "ref: BW-FL-0588.png",
                  "BW-FL-0412.png", "12345.7", "-9876.5", "avg N: the average of N photos"):
        assert shown in out, (shown, out)
    status, out, _ = run_cli(capsys, "history", "--log", log, "--csv")
    rows = {r["part"]: r for r in csv.DictReader(io.StringIO(out)) if r["record_id"] > "3"}
    assert (rows["BW-FL-0412"]["source"], rows["BW-FL-0412"]["photos"]) == ("average", "3")
    assert (rows["BW-FL-0413"]["source"], rows["BW-FL-0413"]["photos"]) == ("sequence", "4")
    assert rows["BW-FL-0588"]["reference_sha256"] == "cd" * 32
    assert rows["BW-FL-0588"]["reference_map"] == "/shop/maps/BW-REF-01.npy"


def test_history_csv_names_each_parts_outline_spreadsheet_safe(filled_log, tmp_path, capsys):
    # issue 10: the outline's kind, its --aperture text and an ellipse's viewing angle,
    # after the older columns; a stored record's text is data, defended for spreadsheets
    import shutil

    log = tmp_path / "log.sqlite"
    shutil.copy(filled_log, log)
    base = inspection_log.get(log, 1)
    for k in ("record_id", "logged_utc", "part", "operator", "station", "verdict"):
        base.pop(k, None)
    shape = {"kind": "ellipse", "center_x_px": 320.0, "center_y_px": 240.0, "a_px": 200.0,
             "b_px": 160.0, "angle_deg": 30.0, "view_angle_deg": 36.87,
             "text": "ellipse:320,240,200,160,30"}
    tampered = {**shape, "kind": "=1+1", "text": "@SUM(A1)\x1b[2J"}
    for aperture_shape, part in ((shape, "BW-FL-0596"), (tampered, "BW-FL-0597")):
        inspection_log.record_measurement(
            log, base | {"aperture": {**base["aperture"], "shape": aperture_shape}}, part=part)
    status, out, _ = run_cli(capsys, "history", "--log", log, "--csv")
    assert status == 0
    reader = csv.DictReader(io.StringIO(out))
    assert reader.fieldnames[-3:] == ["aperture_shape", "aperture_outline",
                                      "aperture_view_angle_deg"]
    rows = {r["part"]: r for r in reader}
    assert (rows["BW-FL-0412"]["aperture_shape"], rows["BW-FL-0412"]["aperture_view_angle_deg"]
            ) == ("circle", "")
    assert rows["BW-FL-0412"]["aperture_outline"].startswith("circle:")
    assert [rows["BW-FL-0596"][k] for k in ("aperture_shape", "aperture_outline",
                                            "aperture_view_angle_deg")] == [
        "ellipse", "ellipse:320,240,200,160,30", "36.87"]
    assert rows["BW-FL-0597"]["aperture_shape"] == "'=1+1"
    assert rows["BW-FL-0597"]["aperture_outline"] == "'@SUM(A1)\\x1b[2J"
