"""The station's inspection records, driven with the Pilot: logging, verdicts, trend, presets.

The stand-in analysis (station_fakes) builds its map from a known Zernike surface, so
each verdict is checked against the PV of that map computed here with numpy, and each
logged record against what ``flatsight measure``'s functions make of the same result.
"""

from __future__ import annotations

import asyncio
import functools
import io
import json
import sqlite3

import numpy as np
import pytest
from flatsight.analysis.record import measurement_to_record
from flatsight.analysis.records.log import query, record_measurement
from flatsight.analysis.records.tolerances import evaluate, parse_tolerance
from flatsight.tui.app import FlatsightStation
from flatsight.tui.config import StationSettings
from flatsight.tui.screens.bench import BenchScreen
from flatsight.tui.screens.preset_screen import PresetScreen
from flatsight.tui.station_log import StationRecorder
from rich.console import Console
from station_fakes import fake_backend, settle, write_photos

PARTS = ["BW-FL-0412.png", "BW-FL-0413.png"]


def sync(scenario):
    @functools.wraps(scenario)
    def test(*args, **kwargs):
        asyncio.run(scenario(*args, **kwargs))

    return test


def make_app(tmp_path, *, names=PARTS, log=True, presets_file=None, preset=None, **options):
    photos = write_photos(tmp_path, names)
    backend, lib = fake_backend()
    recorder = StationRecorder(tmp_path / "log.sqlite" if log else None,
                               {"operator": "Tamsin Ode", "station": "bench-2", **options})
    app = FlatsightStation(photos, settings=StationSettings(colour="truecolor"),
                           backend=backend, config_path=tmp_path / "station.toml",
                           recorder=recorder, presets_file=presets_file, preset=preset)
    return app, lib


def queue_lines(app) -> list[str]:
    q = app.screen.query_one("#queue")
    return [q.get_option_at_index(i).prompt.plain for i in range(q.option_count)]


def status(app) -> str:
    return str(app.screen.query_one("#status-text").render())


def map_pv(m) -> float:
    # slow obvious reference: PV is the highest minus the lowest measured height
    h = m.height_nm[m.valid]
    return float(h.max() - h.min())


@sync
async def test_each_measurement_is_logged_as_measure_logs_it_with_its_verdict(tmp_path):
    app, _ = make_app(tmp_path, spec="pv<=500nm, rms<=5nm")
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        bench = app.screen
        e = bench.entries[0]
        # the fake surface has 40 nm RMS of power: PV well under 500 nm, RMS over 5 nm
        assert map_pv(e.measurement) < 500 and e.measurement.figures.rms_nm > 5
        assert e.verdict == "fail" and e.record_id == 1
        # at 80 columns the tolerance's text gives way to the record (issue 10); the
        # figures view names it
        assert status(app).endswith(" · FAIL · record 1") and len(status(app)) <= 78
        console = Console(width=200, record=True, file=io.StringIO())
        console.print(bench.query_one("#figures-view")._content())
        assert "tolerance pv<=500nm, rms<=5nm" in console.export_text()
        assert queue_lines(app)[0].endswith(" F")
        rows = query(tmp_path / "log.sqlite")
        assert len(rows) == 1
        row = rows[0]
        assert (row["part"], row["operator"], row["station"]) == (
            "BW-FL-0412", "Tamsin Ode", "bench-2")
        expected = measurement_to_record(e.measurement)
        for key in ("photo_sha256", "pv_nm", "rms_nm", "power_nm", "zernike", "settings"):
            assert row[key] == expected[key], key
        judged = evaluate(parse_tolerance("pv<=500nm, rms<=5nm"), expected)
        assert row["spec"]["verdict"] == judged.verdict == "fail"
        # a second photo is its own part (the file stem) and is logged too
        await pilot.press("right_square_bracket")
        await settle(pilot)
        assert [r["part"] for r in query(tmp_path / "log.sqlite")] == [
            "BW-FL-0413", "BW-FL-0412"]


@sync
async def test_guarded_rule_shows_inconclusive_with_each_limit_its_u_and_margin(tmp_path):
    # the fake surface's PV is that of its map (numpy, below); a limit 1 nm above it lies
    # within the PV's expanded uncertainty: inconclusive under the guarded rule (ISO
    # 14253-1, from memory), while the simple rule passes it
    app, lib = make_app(tmp_path, log=False)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        bench = app.screen
        figures = bench.entries[0].measurement.figures
        limit = round(figures.pv_nm + 1.0, 1)
        u = figures.uncertainty_nm["pv_nm"]
        assert u > 1.0
        bench.recorder.options["spec"] = f"pv<={limit}nm"
        bench._update_settings(StationSettings(colour="truecolor", decision="guarded",
                                               reference_uncertainty_nm=4.0), persist=False)
        await pilot.press("m")
        await settle(pilot)
        e = bench.entries[0]
        assert e.verdict == "inconclusive" and e.spec["decision_rule"] == "guarded"
        assert queue_lines(app)[0].endswith(" I")
        assert "INCONCLUSIVE pv<=" in status(app)
        # the stated reference uncertainty reached the measurement (MeasureSettings)
        assert lib.measured[-1][1].reference_uncertainty_nm == 4.0
        await pilot.press("5")
        await pilot.pause()
        console = Console(width=200, record=True, file=io.StringIO())
        console.print(app.screen.query_one("#figures-view")._content())
        shown = console.export_text()
        assert "(guarded): INCONCLUSIVE" in shown
        new_u = e.measurement.figures.uncertainty_nm["pv_nm"]
        assert f"± {new_u:.1f} nm ≤ {limit:.1f} nm" in shown
        assert f"margin +{limit - e.measurement.figures.pv_nm:.1f} nm" in shown
        assert f"± {new_u:.1f} nm" in shown.split("tolerance")[0]  # beside the PV figure


@sync
async def test_the_queue_shows_each_parts_last_verdict_from_the_log(tmp_path):
    log = tmp_path / "log.sqlite"
    record_measurement(log, {"spec": {"tolerance": "3/1(0.5)", "verdict": "fail"}},
                       part="BW-FL-0413", logged_utc="2026-11-30T08:00:00Z")
    app, lib = make_app(tmp_path, spec="pv<=500nm")
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        lines = queue_lines(app)
        assert [n for n, _ in lib.measured] == ["BW-FL-0412.png"]  # 0413 not measured now
        assert lines[1].endswith(" F") and lines[0].endswith(" P")
        assert app.screen.entries[1].shown_verdict == ("fail", False)


@sync
async def test_part_option_names_every_photo_and_no_log_still_judges(tmp_path):
    app, _ = make_app(tmp_path, log=False, spec="pv<=500nm", part="BW-FL-0588")
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        bench = app.screen
        assert bench.part_of(bench.entries[1]) == "BW-FL-0588"
        e = bench.entries[0]
        assert e.verdict == "pass" and e.record_id is None and e.log_error is None
        assert not (tmp_path / "log.sqlite").exists()


@pytest.mark.parametrize("kind", ["folder-is-a-file", "not-a-database"])
@sync
async def test_a_log_that_cannot_be_written_is_a_message_not_a_crash(tmp_path, kind):
    if kind == "folder-is-a-file":
        (tmp_path / "blocker").write_text("a file where the log's folder should be")
        log = tmp_path / "blocker" / "log.sqlite"
    else:
        log = tmp_path / "log.sqlite"
        log.write_bytes(b"this is not SQLite" * 100)
    photos = write_photos(tmp_path, PARTS)
    backend, _ = fake_backend()
    app = FlatsightStation(photos, settings=StationSettings(), backend=backend,
                           recorder=StationRecorder(log, {"spec": "pv<=500nm"}))
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        e = app.screen.entries[0]
        assert app.is_running and e.state == "ok"
        assert e.verdict == "pass"  # judged all the same
        assert e.log_error.startswith("not logged:") and str(log.parent) in e.log_error
        assert "\n" not in e.log_error and "not logged" in status(app)


@sync
async def test_trend_view_plots_the_part_with_its_tolerance_line_and_pass_rate(tmp_path):
    log = tmp_path / "log.sqlite"
    spec = {"tolerance": "pvr<=80nm", "limits": [
        {"figure": "pvr_nm", "limit_nm": 80.0, "compared": "value", "name": "pvr"}]}
    history = [("2026-11-20T08:00:00Z", 70.0, "pass"), ("2026-11-25T08:00:00Z", 95.0, "fail"),
               ("2026-11-28T08:00:00Z", 60.0, "pass")]
    for when, pvr, verdict in history:
        record_measurement(log, {"pvr_nm": pvr, "spec": {**spec, "verdict": verdict}},
                           part="BW-FL-0412", logged_utc=when)
    record_measurement(log, {"pvr_nm": 20.0, "spec": {**spec, "verdict": "pass"}},
                       part="BW-TP-0031", logged_utc="2026-11-29T08:00:00Z")
    app, _ = make_app(tmp_path, names=PARTS[:1], spec="pvr<=80nm")
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        await pilot.press("6")
        await pilot.pause()
        text = app.screen.query_one("#trend-view").render().plain
        pvr_now = app.screen.entries[0].measurement.figures.pvr_nm
        passed = sum(v == "pass" for _, _, v in history) + (pvr_now <= 80.0)
        assert "pvr_nm over time · part BW-FL-0412 · 4 records" in text
        assert f"pass rate {passed}/4" in text
        assert "limit 80.0 nm" in text and "---" in text
        assert "x" in text.split("└")[0]  # the failed inspection is marked
        await pilot.press("l")
        await pilot.pause()
        text = app.screen.query_one("#trend-view").render().plain
        assert "all parts · 5 records" in text and f"pass rate {passed + 1}/5" in text
        await pilot.press("f")
        await pilot.pause()
        assert app.screen.query_one("#trend-view").render().plain.startswith("pvr_nm")
        await pilot.press("f")
        await pilot.pause()
        assert app.screen.query_one("#trend-view").render().plain.startswith("pv_nm")


PRESETS = """
[presets.bench-1-sodium]
wavelength_nm = 589.3
diameter_mm = 80
zernike_terms = 28
method = "intensity-fit"
ring_sign = "convex"
tolerance = "pv<=1nm"
operator = "Ruben Halloway"
station = "bench-1"

[presets.bench-2-hene]
wavelength_nm = 632.8
tolerance = "pv<=900nm"
operator = "Tamsin Ode"
"""


@sync
async def test_a_preset_chosen_in_the_station_applies_its_settings_and_people(tmp_path):
    presets = tmp_path / "presets.toml"
    presets.write_text(PRESETS)
    app, lib = make_app(tmp_path, names=PARTS[:1], presets_file=presets, operator=None,
                        station=None)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        await pilot.press("b")
        await pilot.pause()
        assert isinstance(app.screen, PresetScreen)
        await pilot.press("down", "enter")  # past "by photo name" to bench-1-sodium
        await settle(pilot)
        bench = app.screen
        assert isinstance(bench, BenchScreen) and bench.chosen_preset.name == "bench-1-sodium"
        s = lib.measured[-1][1]
        assert (s.wavelength_nm, s.diameter_mm, s.n_terms) == (589.3, 80.0, 28)
        assert (s.method, s.ring_sign) == ("intensity-fit", "convex")  # issue 10
        assert "bench-1-sodium" in str(bench.query_one("#bench-bar").render())
        row = query(tmp_path / "log.sqlite", limit=1)[0]
        assert (row["operator"], row["station"], row["spec"]["tolerance"]) == (
            "Ruben Halloway", "bench-1", "pv<=1nm")
        assert row["verdict"] == bench.entries[0].verdict == "fail"
        await pilot.press("u")  # remembering the units must not remember the preset's bench
        await pilot.pause()
        from flatsight.tui.config import load_settings

        remembered, _ = load_settings(tmp_path / "station.toml")
        assert (remembered.units, remembered.wavelength_nm, remembered.method) == (
            "waves", 632.8, "auto")
        # back to the settings and each photo's own preset (none here): 632.8 nm again
        await pilot.press("b")
        await pilot.pause()
        await pilot.press("home", "enter")
        await settle(pilot)
        assert bench.chosen_preset is None
        assert "bench-1-sodium" not in str(bench.query_one("#bench-bar").render())
        s = lib.measured[-1][1]
        assert (s.wavelength_nm, s.diameter_mm, s.n_terms) == (632.8, None, 36)
        assert (s.method, s.ring_sign) == ("auto", None)


@sync
async def test_presets_file_without_presets_says_so(tmp_path):
    presets = tmp_path / "presets.toml"
    presets.write_text("# nothing yet\n")
    app, _ = make_app(tmp_path, names=PARTS[:1], presets_file=presets)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        await pilot.press("b")
        await pilot.pause()
        assert isinstance(app.screen, BenchScreen) and app.is_running


def test_new_actions_have_keys_in_help_and_the_palette(tmp_path):
    async def scenario():
        app, _ = make_app(tmp_path, names=PARTS[:1], log=False)
        async with app.run_test(size=(80, 24)) as pilot:
            await settle(pilot)
            bench = app.screen
            actions = {row[3]: row[1] for row in bench.key_rows()}
            for action, key in {"view('trend')": "6", "view('spread')": "7",
                                "pick_preset": "b", "toggle_mark": "space",
                                "average_marked": "g", "sequence_marked": "n",
                                "trend_figure": "f", "trend_scope": "l"}.items():
                assert actions.get(action) == key, action
            titles = [c.title for c in app.get_system_commands(bench)]
            for row in bench.key_rows():
                assert any(t.startswith(row[2]) for t in titles), row

    asyncio.run(scenario())


# ---- the command line that starts the station ---------------------------------------------
def _inspect(tmp_path, monkeypatch, *argv):
    import argparse

    from flatsight.tui import app as app_module
    from flatsight.tui import cmd_inspect

    started = {}

    class Stub:
        return_code = 0

        def __init__(self, photos, **kwargs):
            started.update(kwargs, photos=photos)

        def run(self):
            pass

    monkeypatch.setattr(app_module, "FlatsightStation", Stub)
    parser = argparse.ArgumentParser()
    cmd_inspect.add_parser(parser.add_subparsers())
    photo = write_photos(tmp_path, ["BW-FL-0412.png"])[0]
    args = parser.parse_args(["inspect", str(photo), "--config", str(tmp_path / "s.toml"),
                              *argv])
    return cmd_inspect.run(args), started


def test_inspect_passes_log_part_people_and_preset_to_the_station(tmp_path, monkeypatch):
    presets = tmp_path / "presets.toml"
    presets.write_text(PRESETS)
    code, started = _inspect(tmp_path, monkeypatch, "--log", str(tmp_path / "l.sqlite"),
                             "--part", "BW-FL-0412", "--operator", "Tamsin Ode",
                             "--presets", str(presets), "--preset", "bench-1-sodium")
    assert code == 0
    rec = started["recorder"]
    assert rec.log_path == tmp_path / "l.sqlite"
    assert rec.options["part"] == "BW-FL-0412" and rec.options["operator"] == "Tamsin Ode"
    assert started["preset"].name == "bench-1-sodium"
    assert started["settings"].wavelength_nm == 589.3  # the preset fills the unset option
    code, started = _inspect(tmp_path, monkeypatch, "--no-log")
    assert code == 0 and started["recorder"].log_path is None


def test_inspect_takes_the_decision_rule_and_the_uncertainties(tmp_path, monkeypatch):
    code, started = _inspect(tmp_path, monkeypatch, "--no-log", "--decision", "guarded",
                             "--wavelength-uncertainty", "0.05", "--reference-uncertainty", "6")
    assert code == 0
    assert started["recorder"].options["decision"] == "guarded"
    s = started["settings"]
    assert (s.decision, s.wavelength_uncertainty_nm, s.reference_uncertainty_nm) == (
        "guarded", 0.05, 6.0)


@pytest.mark.parametrize("argv, says", [
    (("--spec", "3/1(0.5"), "3/1(0.5"),
    (("--preset", "bench-9"), "no preset 'bench-9'"),
])
def test_inspect_refuses_a_bad_tolerance_or_preset_with_exit_2(tmp_path, monkeypatch, capsys,
                                                               argv, says):
    presets = tmp_path / "presets.toml"
    presets.write_text(PRESETS)
    code, started = _inspect(tmp_path, monkeypatch, "--presets", str(presets), *argv)
    err = capsys.readouterr().err
    assert code == 2 and not started
    assert err.startswith("flatsight inspect: error:") and says in err
    assert len(err.strip().splitlines()) == 1


def test_log_file_is_a_real_sqlite_log(tmp_path):
    # the records the station writes are plain SQLite: integrity as sqlite3 itself sees it
    async def scenario():
        app, _ = make_app(tmp_path, names=PARTS[:1], spec="pv<=500nm")
        async with app.run_test(size=(80, 24)) as pilot:
            await settle(pilot)

    asyncio.run(scenario())
    con = sqlite3.connect(tmp_path / "log.sqlite")
    try:
        assert con.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        assert con.execute("SELECT count(*) FROM inspections").fetchone()[0] == 1
    finally:
        con.close()
    assert np.isfinite(query(tmp_path / "log.sqlite")[0]["pv_nm"])


def test_read_log_finds_a_parts_last_verdict_beyond_the_rows_it_reads(tmp_path):
    from flatsight.tui.station_log import read_log

    log = tmp_path / "log.sqlite"
    record_measurement(log, {"spec": {"verdict": "fail"}}, part="BW-FL-0412",
                       logged_utc="2026-11-01T08:00:00Z")
    record_measurement(log, {"spec": {"verdict": "pass"}}, part="BW-FL-0412",
                       logged_utc="2026-11-02T08:00:00Z")
    record_measurement(log, {"spec": {"verdict": "fail"}}, part="BW-TP-0031",
                       logged_utc="2026-11-03T08:00:00Z")
    rows, verdicts, note = read_log(log, parts={"BW-FL-0412", "BW-TP-0031", "BW-WN-0207"},
                                    limit=1)
    assert note is None and [r["part"] for r in rows] == ["BW-TP-0031"]
    assert verdicts == {"BW-TP-0031": "fail", "BW-FL-0412": "pass"}  # newest, not oldest
    assert read_log(None)[2].startswith("not logging")
    assert read_log(tmp_path / "none.sqlite")[2].startswith("no records yet")


@sync
async def test_save_writes_the_document_measure_json_gives_for_the_same_photo(
        tmp_path, monkeypatch, capsys):
    # issue 9 item 5: `s` wrote a record without spec, part, operator or station

    import flatsight.analysis.pipeline as pipeline
    from flatsight.tui.cli import main

    app, lib = make_app(tmp_path, names=PARTS[:1], spec="pv<=500nm, rms<=5nm")
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        await pilot.press("s")
        await settle(pilot)
    saved = json.loads((tmp_path / "BW-FL-0412.flatsight.json").read_text(encoding="utf-8"))
    summary = (tmp_path / "BW-FL-0412.summary.txt").read_text(encoding="utf-8")
    # the same photo through `flatsight measure --json`, with the station's stand-in analysis
    monkeypatch.setattr(pipeline, "measure",
                        lambda photo, settings, **_: lib.measure(photo, settings))
    status = main(["measure", str(tmp_path / PARTS[0]), "--wavelength", "632.8", "--json",
                   "--spec", "pv<=500nm, rms<=5nm", "--operator", "Tamsin Ode",
                   "--station", "bench-2", "--log", str(tmp_path / "cli.sqlite")])
    printed = json.loads(capsys.readouterr().out)
    assert status == 1  # the fake surface's RMS is over 5 nm
    assert set(saved) == set(printed)
    for key in printed:
        if key != "logged_utc":  # the time stamps differ by the seconds between the runs
            assert saved[key] == printed[key], key
    assert saved["spec"]["verdict"] == "fail" and saved["part"] == "BW-FL-0412"
    assert saved["record_id"] == 1  # the record the station logged, by its id
    # the summary says what the record says: part, people, the verdict and each limit
    for words in ("part           BW-FL-0412", "operator       Tamsin Ode",
                  "station        bench-2", "record         1",
                  "tolerance      pv<=500nm, rms<=5nm (simple decision rule): FAIL"):
        assert words in summary, words
    assert "RMS: FAIL" in summary
    assert summary.index("Inspection") < summary.index("Figures")  # the verdict up top


@sync
async def test_measuring_a_photo_again_supersedes_its_record_and_counts_once(tmp_path,
                                                                              capsys):
    # issue 9 item 8: every aperture nudge, exclusion or settings change logged a new
    # record (10 records for one part), and the trend's pass rate counted them all
    from flatsight.tui.cli import main
    from station_fakes import ManualTimers

    log = tmp_path / "log.sqlite"
    app, lib = make_app(tmp_path, spec="pv<=500nm")
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        bench = app.screen
        timers = ManualTimers(bench)
        await pilot.press("1")  # into the fringe view: the arrows now move the aperture
        for key in ("right", "down", "x"):
            await pilot.press(key)
            await settle(pilot)
            assert timers.fire() == 1
            await settle(pilot)
        await pilot.press("m")  # measured again on purpose
        await settle(pilot)
        assert len(lib.measured) == 5
        everything = query(log, superseded=True)
        assert [r["record_id"] for r in everything] == [5, 4, 3, 2, 1]
        # each record names the one it replaces; none is lost
        assert [r.get("supersedes") for r in everything] == [4, 3, 2, 1, None]
        assert [r.get("superseded_by") for r in everything] == [None, 5, 4, 3, 2]
        assert [r["record_id"] for r in query(log)] == [5]
        assert "record 5 (replaces 4)" in status(app)
        # issue 10: cut at 80 columns; the tolerance's text gives way (view 5 has it)
        assert len(status(app)) <= 78 and status(app).endswith("· record 5 (replaces 4)")
        # the next photo is its own part: its first record replaces nothing; going back
        # to the first photo shows its result without measuring or logging it again
        await pilot.press("right_square_bracket")
        await settle(pilot)
        await pilot.press("left_square_bracket")
        await settle(pilot)
        assert [r["record_id"] for r in query(log)] == [6, 5]
        assert query(log)[0].get("supersedes") is None
        await pilot.press("6")
        await pilot.pause()
        trend = app.screen.query_one("#trend-view").render().plain
        assert "part BW-FL-0412 · 1 record\n" in trend and "pass rate 1/1" in trend
    # history counts the photo once; --superseded lists the replaced records, marked
    assert main(["history", "--log", str(log), "--part", "BW-FL-0412", "--json"]) == 0
    assert [json.loads(x)["record_id"] for x in capsys.readouterr().out.splitlines()] == [5]
    assert main(["history", "--log", str(log), "--part", "BW-FL-0412", "--superseded"]) == 0
    listed = capsys.readouterr().out
    assert all(f"pass →{n + 1}" in listed for n in (1, 2, 3, 4))
    assert "→N: replaced by record N" in listed
    assert main(["trend", "--log", str(log), "--part", "BW-FL-0412"]) == 0
    assert "pv_nm over time: 1 records, part BW-FL-0412" in capsys.readouterr().out
    # a superseded record is still found by its id, and its certificate says so
    assert main(["report", "2", "--log", str(log), "--output", str(tmp_path / "c.html")]) == 0
    assert "replaced by record 3" in capsys.readouterr().out


@sync
async def test_the_figures_view_says_at_which_wavelength_each_fringe_count_is(tmp_path):
    # issue 9 item 10: "fringes" were at the test wavelength while the 3/A(B) limits are
    # at 546.07 nm (ISO 10110-5's reference wavelength, from memory), and neither said so
    app, _ = make_app(tmp_path, names=PARTS[:1], spec="3/2(0.5)")
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        await pilot.press("5")
        await pilot.pause()

        def figures_text() -> str:
            console = Console(width=200, record=True, file=io.StringIO())
            console.print(app.screen.query_one("#figures-view")._content())
            return console.export_text()

        shown = figures_text()
        assert "heights in nm" in shown
        assert "fr: fringes of 632.8 nm" in shown  # the power's fringes: the test's
        assert "≤ 546.1 nm (2 fr at 546.07 nm)" in shown  # A = 2 fringes of 546.07 nm
        assert "≤ 136.5 nm (0.5 fr at 546.07 nm)" in shown  # B
        await pilot.press("u", "u")  # nm -> waves -> fringes
        await pilot.pause()
        assert "heights in fringes of 632.8 nm" in figures_text()
