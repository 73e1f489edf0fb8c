"""The station driven headless with the Pilot: each workflow an operator goes through."""

from __future__ import annotations

import asyncio
import functools
import io
import json
import threading

import numpy as np
import pytest
from flatsight.analysis.pipeline import with_terms_removed
from flatsight.analysis.record import measurement_to_record
from flatsight.analysis.version import flatsight_version
from flatsight.tui.app import FlatsightStation
from flatsight.tui.config import StationSettings, load_settings
from flatsight.tui.screens.bench import BenchScreen
from flatsight.tui.screens.help_screen import HelpScreen
from flatsight.tui.screens.open_screen import OpenScreen
from flatsight.tui.screens.settings_screen import SettingsScreen
from rich.console import Console
from station_fakes import FOUND_APERTURE, ManualTimers, fake_backend, settle, write_photos

PARTS = ["BW-FL-0412.png", "BW-FL-0413.png", "bad-photo.png", "BW-FL-0415-nofringes.png"]


def make_app(tmp_path, names=PARTS, **settings):
    photos = write_photos(tmp_path, names)
    backend, lib = fake_backend()
    app = FlatsightStation(
        photos,
        settings=StationSettings(colour="truecolor", **settings),
        backend=backend,
        config_path=tmp_path / "station.toml",
    )
    return app, lib


def sync(scenario):
    """Run an async Pilot scenario as a plain test (the suite has no asyncio plugin)."""

    @functools.wraps(scenario)
    def test(*args, **kwargs):
        asyncio.run(scenario(*args, **kwargs))

    return test


async def rerun(pilot, timers: ManualTimers) -> None:
    """End the burst of aperture keys (the bench's debounce timer fires) and settle."""
    assert timers.fire() == 1  # however many keys, one pending re-run
    await settle(pilot)


def plain(widget) -> str:
    return widget.render().plain


def status(app) -> str:
    return str(app.screen.query_one("#status-text").render())


def queue_lines(app) -> list[str]:
    q = app.screen.query_one("#queue")
    return [q.get_option_at_index(i).prompt.plain for i in range(q.option_count)]


@sync
async def test_first_photo_is_measured_without_a_key(tmp_path):
    app, lib = make_app(tmp_path)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        bench = app.screen
        assert isinstance(bench, BenchScreen)
        assert [name for name, _ in lib.measured] == ["BW-FL-0412.png"]
        e = bench.entries[0]
        assert e.state == "ok" and e.measurement is not None
        pv = e.measurement.figures.pv_nm
        assert f"PV {pv:.1f} nm" in status(app)
        assert queue_lines(app)[0].startswith("✓ ") and f"{pv:.1f} nm" in queue_lines(app)[0]
        assert queue_lines(app)[1].startswith("· ")  # not measured yet
        assert bench.first_figures_s is not None


@sync
async def test_queue_moves_and_a_bad_photo_shows_an_error_and_the_app_carries_on(tmp_path):
    app, lib = make_app(tmp_path)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        await pilot.press("right_square_bracket")
        await settle(pilot)
        await pilot.press("right_square_bracket")  # the unreadable photo
        await settle(pilot)
        bench = app.screen
        bad = bench.entries[2]
        assert bad.state == "error" and "not a PNG, JPEG or TIFF" in bad.error
        assert "bad-photo.png" in status(app) and "✗" in status(app)
        assert queue_lines(app)[2].startswith("✗ ") and "error" in queue_lines(app)[2]
        assert "not a PNG" in plain(bench.query_one("#fringes-view"))
        await pilot.press("right_square_bracket")  # a photo without usable fringes
        await settle(pilot)
        nofringes = bench.entries[3]
        assert nofringes.state == "error" and "add tilt" in nofringes.error
        assert nofringes.pixels is not None  # the photo itself is still shown
        await pilot.press("left_square_bracket", "left_square_bracket")
        await settle(pilot)
        assert bench.current == 1 and bench.entries[1].state == "ok"
        # the queue moves with the arrow keys too when it has the focus
        bench.query_one("#queue").focus()
        await pilot.press("up")
        await settle(pilot)
        assert bench.current == 0


@sync
async def test_moving_and_sizing_the_aperture_reruns_the_analysis(tmp_path):
    app, lib = make_app(tmp_path, names=PARTS[:1])
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        bench = app.screen
        timers = ManualTimers(bench)  # the test, not the clock, says when a burst ends
        bench.query_one("#fringes-view").focus()
        step = max(1.0, 0.01 * FOUND_APERTURE.radius_px)
        await pilot.press("right", "right", "down", "plus")
        # the outline moves at once; the analysis waits for the keys to settle
        assert bench.entries[0].aperture.center_x_px == pytest.approx(
            FOUND_APERTURE.center_x_px + 2 * step
        )
        await settle(pilot)
        assert len(lib.measured) == 1  # nothing measured during the burst
        # each key restarted the wait: four timers made, three stopped, one pending
        assert len(timers.made) == 4 and len(timers.pending) == 1
        assert timers.fire() == 1
        await settle(pilot)
        assert len(lib.measured) == 2  # one re-run for the burst of four keys
        used = lib.measured[-1][1].aperture
        assert used.center_x_px == pytest.approx(FOUND_APERTURE.center_x_px + 2 * step)
        assert used.center_y_px == pytest.approx(FOUND_APERTURE.center_y_px + step)
        assert used.radius_px == pytest.approx(FOUND_APERTURE.radius_px + step)
        assert bench.entries[0].measurement.aperture.radius_px == pytest.approx(used.radius_px)
        assert "manual" in plain(bench.query_one("#fringes-view"))
        await pilot.press("minus", "minus")
        await rerun(pilot, timers)
        assert lib.measured[-1][1].aperture.radius_px == pytest.approx(
            FOUND_APERTURE.radius_px - step
        )
        # re-run the finder: the operator's aperture is dropped
        await pilot.press("a")
        await settle(pilot)
        assert bench.entries[0].aperture is None and lib.measured[-1][1].aperture is None


@sync
async def test_narrowing_turning_and_widening_the_outline(tmp_path):
    # a round part seen at an angle: `<` narrows the circle into an ellipse, `,` and `.`
    # turn it by a degree, `>` widens it again; the re-run measures that outline
    app, lib = make_app(tmp_path, names=PARTS[:1])
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        bench = app.screen
        timers = ManualTimers(bench)
        bench.query_one("#fringes-view").focus()
        await pilot.press("less_than_sign", "less_than_sign", "comma", "comma", "full_stop")
        shape = bench.entries[0].aperture.shape
        assert shape.kind == "ellipse"
        assert shape.b_px == pytest.approx(FOUND_APERTURE.radius_px / 1.02**2)
        assert shape.angle_deg == pytest.approx(1.0)
        await pilot.press("greater_than_sign")
        await rerun(pilot, timers)
        used = lib.measured[-1][1].aperture
        assert used.kind == "ellipse"
        assert used.shape.b_px == pytest.approx(FOUND_APERTURE.radius_px / 1.02)


@sync
async def test_a_click_on_the_photo_moves_the_outline_there(tmp_path):
    app, lib = make_app(tmp_path, names=PARTS[:1])
    async with app.run_test(size=(120, 40)) as pilot:
        await settle(pilot)
        timers = ManualTimers(app.screen)
        bench = app.screen
        view = bench.query_one("#fringes-view")
        grid = view._grid
        # the cell whose centre is photo point (60, 50) by the grid's own mapping
        col = int((60.0 - grid.origin_x_px + 0.5) / grid.step_px)
        line = int((50.0 - grid.origin_y_px + 0.5) / grid.step_px) // 2
        await pilot.click(view, offset=(col, line))
        await rerun(pilot, timers)
        used = lib.measured[-1][1].aperture
        assert abs(used.center_x_px - 60.0) <= grid.step_px
        assert abs(used.center_y_px - 50.0) <= grid.step_px
        assert used.radius_px == FOUND_APERTURE.radius_px


@sync
async def test_exclusions_are_added_edited_and_removed(tmp_path):
    app, lib = make_app(tmp_path, names=PARTS[:1])
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        timers = ManualTimers(app.screen)
        bench = app.screen
        bench.query_one("#fringes-view").focus()
        await pilot.press("x", "plus", "plus", "left")
        await rerun(pilot, timers)
        ex = lib.measured[-1][1].exclusions
        assert len(ex) == 1 and bench.selected == 0
        assert ex[0].center_x_px < FOUND_APERTURE.center_x_px  # moved left, not the aperture
        assert ex[0].radius_px > 0.15 * FOUND_APERTURE.radius_px
        m = bench.entries[0].measurement
        assert m.quality.masked_fraction > 0.02  # the excluded circle is out of the map
        await pilot.press("e")  # back to the aperture outline
        assert bench.selected == -1
        await pilot.press("e", "d")
        await rerun(pilot, timers)
        assert lib.measured[-1][1].exclusions == ()


@sync
async def test_toggling_terms_updates_map_and_figures_without_a_new_analysis(tmp_path):
    app, lib = make_app(tmp_path, names=PARTS[:1])
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        bench = app.screen
        await pilot.press("3")
        assert bench.query_one("#views").active == "surface"
        m = bench.entries[0].measurement
        await pilot.press("p")
        await pilot.pause()
        ctx = bench.context()
        assert len(lib.measured) == 1  # no new analysis
        assert bench.settings.removed_terms == (4,)
        # the reference: the library's own term removal on the same measurement
        ref_map, ref_fig = with_terms_removed(m, (1, 2, 3, 4))
        np.testing.assert_allclose(ctx.map_nm, ref_map, equal_nan=True)
        assert ctx.figures.pv_nm == pytest.approx(ref_fig.pv_nm)
        # the demo part is mostly power (SURFACE_NM): taking it out lowers the PV
        assert ctx.figures.pv_nm < 0.8 * m.figures.pv_nm
        shown = plain(bench.query_one("#surface-view"))
        assert f"{ref_fig.pv_nm:.1f} nm" in shown and "without power" in shown
        await pilot.press("a")
        await pilot.pause()
        assert bench.settings.removed_terms == (4, 5, 6)
        await pilot.press("p")
        await pilot.pause()
        assert bench.settings.removed_terms == (5, 6)
        await pilot.press("r")
        await pilot.pause()
        assert bench.settings.removed_terms == () and bench.context().map_nm is None
        assert len(lib.measured) == 1


@sync
async def test_units_switch_everywhere(tmp_path):
    app, lib = make_app(tmp_path, names=PARTS[:1], wavelength_nm=632.8)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        bench = app.screen
        pv = bench.entries[0].measurement.figures.pv_nm
        await pilot.press("u", "5")
        await pilot.pause()
        console = Console(width=80, record=True, file=io.StringIO())
        console.print(bench.query_one("#figures-view")._content())
        shown = console.export_text()
        assert f"{pv / 632.8:.3f} λ" in shown  # PV in waves of 632.8 nm
        assert bench.settings.units == "waves"
        assert f"{pv / 632.8:.3f} λ" in queue_lines(app)[0]
        await pilot.press("u")
        await pilot.pause()
        assert bench.settings.units == "fringes"
        assert f"{pv / 316.4:.2f} fr" in queue_lines(app)[0]  # one fringe = λ/2
        assert f"PV {pv / 316.4:.2f} fr" in status(app)
        assert load_settings(tmp_path / "station.toml")[0].units == "fringes"  # remembered
        await pilot.press("u")
        assert bench.settings.units == "nm"


@sync
async def test_settings_screen_validates_applies_remembers_and_remeasures(tmp_path):
    app, lib = make_app(tmp_path, names=PARTS[:2])
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        await pilot.press("w")
        await pilot.pause()
        screen = app.screen
        assert isinstance(screen, SettingsScreen)
        assert "Push test" in str(screen.query_one("#push-test").render())
        screen.query_one("#wavelength").value = "-5"
        await pilot.press("ctrl+s")
        await pilot.pause()
        assert app.screen is screen  # refused, still open
        assert "wavelength" in str(screen.query_one("#settings-error").render())
        screen.query_one("#wavelength").value = "589.3"
        screen.query_one("#diameter").value = "100"
        screen.query_one("#invert").value = True
        await pilot.press("ctrl+s")
        await settle(pilot)
        bench = app.screen
        assert isinstance(bench, BenchScreen)
        s = bench.settings
        assert (s.wavelength_nm, s.diameter_mm, s.invert) == (589.3, 100.0, True)
        used = lib.measured[-1][1]
        assert (used.wavelength_nm, used.diameter_mm, used.invert) == (589.3, 100.0, True)
        assert bench.entries[0].measurement.figures.radius_of_curvature_m is not None
        assert load_settings(tmp_path / "station.toml")[0].wavelength_nm == 589.3
        # escape leaves the settings as they were
        await pilot.press("w")
        await pilot.pause()
        app.screen.query_one("#wavelength").value = "632.8"
        await pilot.press("escape")
        await pilot.pause()
        assert app.screen.settings.wavelength_nm == 589.3


@sync
async def test_save_writes_the_record_the_map_and_a_summary(tmp_path):
    out = tmp_path / "results"
    photos = write_photos(tmp_path, PARTS[:1])
    backend, lib = fake_backend()
    app = FlatsightStation(
        photos,
        settings=StationSettings(colour="truecolor"),
        backend=backend,
        config_path=None,
        out_dir=out,
    )
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        m = app.screen.entries[0].measurement
        await pilot.press("3", "p", "s")
        await settle(pilot)
        record = json.loads((out / "BW-FL-0412.flatsight.json").read_text(encoding="utf-8"))
        # the library's record, with the part and people `flatsight measure --json` adds
        # (tests/tui/test_station_records.py compares the two documents key by key)
        judged = ("part", "operator", "station", "logged_utc")
        assert {k: v for k, v in record.items() if k not in judged} == json.loads(
            json.dumps(measurement_to_record(m)))
        assert record["part"] == "BW-FL-0412"
        saved = np.load(out / "BW-FL-0412.height.npy")
        np.testing.assert_allclose(saved, m.height_nm, rtol=1e-6, equal_nan=True)
        summary = (out / "BW-FL-0412.summary.txt").read_text(encoding="utf-8")
        assert f"{m.figures.pv_nm:.1f} nm" in summary and "power also removed" in summary
        # both files name the Flatsight that measured, for whoever reads them later
        assert record["flatsight_version"] == flatsight_version()
        assert f"\nflatsight      {flatsight_version()}\n" in summary
        assert sorted(p.name for p in out.iterdir()) == [
            "BW-FL-0412.flatsight.json",
            "BW-FL-0412.height.npy",
            "BW-FL-0412.summary.txt",
        ]
        assert "Saved" in status(app)


@sync
async def test_save_into_an_unwritable_place_is_a_message_not_a_crash(tmp_path):
    blocker = tmp_path / "file-not-folder"
    blocker.write_text("x", encoding="utf-8")
    photos = write_photos(tmp_path, PARTS[:1])
    backend, _ = fake_backend()
    app = FlatsightStation(
        photos, settings=StationSettings(), backend=backend, out_dir=blocker / "inside"
    )
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        await pilot.press("s")
        await settle(pilot)
        assert app.is_running
        assert any("not saved" in n.message for n in app._notifications)


@sync
async def test_a_new_request_cancels_the_stale_one(tmp_path):
    app, lib = make_app(tmp_path, names=PARTS[:2])
    lib.gate = threading.Event()  # hold the first analysis mid-way
    async with app.run_test(size=(80, 24)) as pilot:
        await pilot.pause()  # mounted: the first analysis started and holds at the gate
        bench = app.screen
        first_cancel = bench._cancel
        assert bench.entries[0].state == "running"
        await pilot.press("right_square_bracket")
        await pilot.pause()
        assert first_cancel.is_set()  # the stale run was told to stop
        lib.gate.set()
        await settle(pilot)
        assert bench.entries[1].state == "ok"
        assert bench.entries[0].state == "new" and bench.entries[0].measurement is None
        assert queue_lines(app)[0].startswith("· ")  # no longer shown as measuring


@sync
async def test_open_picker_adds_photos_and_measures_them(tmp_path):
    extra = tmp_path / "more"
    extra.mkdir()
    new = write_photos(extra, ["BW-FL-0520.png", "BW-FL-0521.tif"])
    (extra / "notes.txt").write_text("not a photo", encoding="utf-8")
    photos = write_photos(tmp_path, PARTS[:1])
    backend, lib = fake_backend()
    app = FlatsightStation(photos, settings=StationSettings(), backend=backend, start_folder=extra)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        await pilot.press("o")
        await settle(pilot)  # the tree reads the folder in a worker
        assert isinstance(app.screen, OpenScreen)
        tree = app.screen.query_one("#open-tree")
        shown = [str(node.label) for node in tree.root.children]
        assert shown == ["BW-FL-0520.png", "BW-FL-0521.tif"]  # no notes.txt
        await pilot.press("down", "enter")  # pick the first photo
        await settle(pilot)
        bench = app.screen
        assert isinstance(bench, BenchScreen)
        assert [e.path for e in bench.entries] == [photos[0], new[0]]
        assert bench.current == 1 and bench.entries[1].state == "ok"
        await pilot.press("o")
        await settle(pilot)
        await pilot.press("f")  # every photo of the folder; the one already there is kept once
        await settle(pilot)
        assert [e.path for e in bench.entries] == [photos[0], *new]
        assert bench.current == 2 and bench.entries[2].state == "ok"


@sync
async def test_help_lists_keys_and_the_safety_note_and_the_palette_has_every_action(tmp_path):
    app, _ = make_app(tmp_path, names=PARTS[:1])
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        bench = app.screen
        commands = [c.title for c in app.get_system_commands(bench)]
        for row in bench.key_rows():
            assert any(title.startswith(row[2]) for title in commands), row
        await pilot.press("question_mark")
        await pilot.pause()
        assert isinstance(app.screen, HelpScreen)
        safety = str(app.screen.query_one("#safety").render())
        assert "laser" in safety and "local rules" in safety
        await pilot.press("escape")
        await pilot.pause()
        assert isinstance(app.screen, BenchScreen)
        # the palette finds an action by name and runs it like its key
        await pilot.press("ctrl+p")
        await settle(pilot)
        await pilot.press(*"units")
        await settle(pilot)  # the palette searches in a worker
        await pilot.press("enter")
        await settle(pilot)
        assert app.screen is bench and bench.settings.units == "waves"


@sync
async def test_resize_redraws_and_ctrl_q_quits(tmp_path):
    app, _ = make_app(tmp_path, names=PARTS[:1])
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        await pilot.press("3")
        view = app.screen.query_one("#surface-view")
        small = plain(view)
        await pilot.resize_terminal(120, 40)
        await pilot.pause()
        large = plain(view)
        assert view.size.width > 60 and len(large.splitlines()) > len(small.splitlines())
        await pilot.press("ctrl+q")
        await pilot.pause()
    assert app.return_code == 0


@sync
async def test_empty_queue_starts_and_says_what_to_do(tmp_path):
    backend, lib = fake_backend()
    app = FlatsightStation([], settings=StationSettings(), backend=backend)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        assert "press o" in status(app)
        await pilot.press("s", "m", "3", "p", "right", "x")
        await pilot.pause()
        assert app.is_running and lib.measured == []


# ---- the command line that starts the station ---------------------------------------------
def _inspect_args(*argv):
    import argparse

    from flatsight.tui import cmd_inspect

    parser = argparse.ArgumentParser()
    cmd_inspect.add_parser(parser.add_subparsers())
    return cmd_inspect, parser.parse_args(["inspect", *argv])


def test_inspect_expands_folders_and_reports_missing_names(tmp_path):
    photos = write_photos(tmp_path, ["b.png", "a.tif"])
    (tmp_path / "notes.txt").write_text("x", encoding="utf-8")
    cmd, args = _inspect_args(str(tmp_path), str(tmp_path / "gone.png"))
    paths, problems = cmd.expand(args.photos)
    assert paths == sorted(photos)
    assert problems == [f"{tmp_path / 'gone.png'}: no such file or folder"]


def test_inspect_options_override_the_remembered_settings():
    cmd, args = _inspect_args(
        "--wavelength", "sodium", "--diameter", "50", "--invert", "--terms", "21"
    )
    s = cmd.settings_from_args(args, StationSettings(units="waves"))
    # sodium D 589.3 nm (common practice; tui/options.py)
    assert (s.wavelength_nm, s.diameter_mm, s.invert, s.n_terms, s.units) == (
        589.3,
        50.0,
        True,
        21,
        "waves",
    )


def test_inspect_refuses_bad_input_with_one_line_and_exit_2(tmp_path, capsys):
    cmd, args = _inspect_args(str(tmp_path / "nothing-here"))
    assert cmd.run(args) == 2
    assert "no such file or folder" in capsys.readouterr().err
    photo = write_photos(tmp_path, ["BW-FL-0412.png"])[0]
    cmd, args = _inspect_args(
        str(photo), "--terms", "3", "--config", str(tmp_path / "station.toml")
    )
    assert cmd.run(args) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "Zernike terms" in err


def test_analysis_and_the_command_line_do_not_import_textual():
    # the library stays UI-free and `flatsight --help` stays quick (house style)
    import subprocess
    import sys

    code = (
        "import sys, flatsight.analysis.colormap, flatsight.tui.cmd_inspect, "
        "flatsight.tui.render.heatmap; "
        "print(any(m == 'textual' or m.startswith('textual.') for m in sys.modules))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"


@sync
async def test_the_real_library_end_to_end(photo_set):
    # the station with the real measurement library on the suite's synthetic photos;
    # the reference is the library called directly on the same file
    from flatsight.analysis.pipeline import MeasureSettings, measure

    photos = [photo_set.good_png, photo_set.bad["truncated.png"], photo_set.bad["rings.png"]]
    app = FlatsightStation(photos, settings=StationSettings(colour="mono"), config_path=None)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        bench = app.screen
        m = bench.entries[0].measurement
        assert bench.entries[0].state in ("ok", "warning")
        direct = measure(photo_set.good_png, MeasureSettings(wavelength_nm=632.8))
        assert m.figures.pv_nm == pytest.approx(direct.figures.pv_nm, rel=1e-3)
        assert m.figures.power_nm == pytest.approx(direct.figures.power_nm, rel=1e-3)
        for _ in range(2):
            await pilot.press("right_square_bracket")
            await settle(pilot)
        truncated, rings = bench.entries[1], bench.entries[2]
        assert truncated.state == "error" and "\n" not in truncated.error
        assert rings.state == "error" and rings.error and rings.needs_ring_sign
        # closed rings: the station asks for the sign (test_ring_sign.py); not now
        from flatsight.tui.screens.ring_sign_screen import RingSignScreen

        assert isinstance(app.screen, RingSignScreen)
        await pilot.press("escape")
        await settle(pilot)
        assert app.screen is bench
        await pilot.press("3")  # the mono surface map of the good photo still draws
        await pilot.press("left_square_bracket", "left_square_bracket")
        await settle(pilot)
        shown = plain(bench.query_one("#surface-view"))
        assert "H" in shown and "L" in shown and "PV" in shown


@sync
async def test_at_start_the_arrow_keys_go_to_the_queue_not_the_aperture(tmp_path):
    # issue 9 item 8: the focus started in the fringe view, so ↓ and → moved the aperture
    # (and each nudge measured and logged the part again)
    app, lib = make_app(tmp_path, names=PARTS[:2])
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        bench = app.screen
        assert app.focused is bench.query_one("#queue")
        await pilot.press("right", "down")
        await settle(pilot)
        assert bench.current == 1
        assert all(e.aperture is None for e in bench.entries)
        assert all(settings.aperture is None for _, settings in lib.measured)


@pytest.mark.parametrize("size", [(80, 24), (120, 40)])
@sync
async def test_no_key_of_the_footer_shows_past_the_palette_hint(tmp_path, size):
    # issue 9, layout: `^p paletter`, `palettem`, `palette3`: a letter of the key row
    # showed in the cell after the palette hint, in every view, at both sizes
    app, _ = make_app(tmp_path, names=PARTS[:1])
    async with app.run_test(size=size) as pilot:
        await settle(pilot)
        for view in ("", "1", "3", "6"):
            if view:
                await pilot.press(view)
                await settle(pilot)
            widget, _ = app.screen.get_widget_at(size[0] - 1, size[1] - 1)
            assert widget.has_class("-command-palette"), (view, widget)


@pytest.mark.parametrize("size", [(80, 24), (120, 40)])
@sync
async def test_the_note_of_terms_taken_out_wraps_in_the_legend_not_onto_the_map(tmp_path,
                                                                               size):
    # issue 9, layout: after `p a c t` the "without …" note wrapped onto the map, shifting
    # it a row, and the rest of the note was cut
    app, _ = make_app(tmp_path, names=PARTS[:1])
    async with app.run_test(size=size) as pilot:
        await settle(pilot)
        view = app.screen.query_one("#surface-view")
        await pilot.press("3")
        await pilot.pause()
        before = plain(view).splitlines()
        await pilot.press("p", "a", "c", "t")
        await settle(pilot)
        after = plain(view).splitlines()
        # as many lines as the view has rows, none wider than the view: nothing wraps
        assert len(after) == len(before) == view.size.height
        assert max(len(line) for line in after) <= view.size.width
        # the whole note, over as many legend lines as it takes
        legend = " ".join(line.split("  ")[-1].strip() for line in after)
        assert "without power, astigmatism, coma, trefoil" in legend, legend


@sync
async def test_z_first_zooms_to_the_aperture_as_it_says_and_again_shows_the_whole_photo(
        tmp_path):
    # issue 9: `z` zoomed out first, though it is described as zoom to the aperture
    from flatsight.tui.widgets.fringe_view import FringeView

    zoom = next(b for b in FringeView.BINDINGS if b.key == "z")
    assert zoom.description == "Zoom to aperture"
    app, _ = make_app(tmp_path, names=PARTS[:1])
    async with app.run_test(size=(120, 40)) as pilot:
        await settle(pilot)
        await pilot.press("1")
        await pilot.pause()
        view = app.screen.query_one("#fringes-view")
        plain(view)
        whole = view._grid
        assert (whole.origin_x_px, whole.origin_y_px) == (0.0, 0.0)  # the whole photo
        assert "z: zoom to aperture" in plain(view)
        await pilot.press("z")
        await pilot.pause()
        plain(view)
        zoomed = view._grid
        # the aperture (centre 80, 60, radius 48 px in the stand-in photo) and a margin
        assert zoomed.origin_x_px > 0 and zoomed.step_px < whole.step_px
        assert zoomed.origin_x_px <= FOUND_APERTURE.center_x_px - FOUND_APERTURE.radius_px
        assert "z: whole photo" in plain(view)
        await pilot.press("z")
        await pilot.pause()
        plain(view)
        assert view._grid.origin_x_px == 0.0


@pytest.mark.parametrize("size", [(80, 24), (120, 40)])
@sync
async def test_the_help_screen_says_that_it_scrolls_and_where_it_is(tmp_path, size):
    # issue 9: the help screen gave no sign that it scrolls
    app, _ = make_app(tmp_path, names=PARTS[:1])
    app.animation_level = "none"  # scrolling jumps: nothing here waits on an animation
    async with app.run_test(size=size) as pilot:
        await settle(pilot)
        await pilot.press("question_mark")
        await settle(pilot)
        body = app.screen.query_one("#help-body")
        assert body.max_scroll_y > 0  # the keys do not fit even at 120x40
        assert app.focused is body
        assert str(body.border_subtitle).startswith("↓ more below")
        await pilot.press("pagedown")
        await settle(pilot)
        assert "more" in str(body.border_subtitle)
        await pilot.press("end")
        await settle(pilot)
        assert body.scroll_y == body.max_scroll_y
        assert str(body.border_subtitle).startswith("↑ more above")
        assert "esc closes" in str(body.border_subtitle)


@sync
async def test_open_picker_goes_up_a_folder_and_takes_a_typed_path(tmp_path):
    # issue 9: the open dialog could not go above its start folder
    start = tmp_path / "bench-2" / "today"
    start.mkdir(parents=True)
    write_photos(start, ["BW-FL-0520.png"])
    far = tmp_path / "far off"
    far.mkdir()
    wanted = write_photos(far, ["BW-FL-0601.png"])[0]
    photos = write_photos(tmp_path, PARTS[:1])
    backend, _ = fake_backend()
    app = FlatsightStation(photos, settings=StationSettings(), backend=backend,
                           start_folder=start)
    async with app.run_test(size=(80, 24)) as pilot:
        await settle(pilot)
        await pilot.press("o")
        await settle(pilot)
        picker = app.screen
        assert isinstance(picker, OpenScreen)
        path_field = picker.query_one("#open-path")
        await pilot.press("backspace")  # up to bench-2
        await settle(pilot)
        assert picker.folder == start.parent and path_field.value == str(start.parent)
        await pilot.press("backspace")
        await settle(pilot)
        assert picker.folder == tmp_path
        labels = [str(n.label) for n in picker.query_one("#open-tree").root.children]
        assert "bench-2" in labels and "far off" in labels
        # a path typed in (with / and f in it, which are keys of the picker elsewhere)
        await pilot.press("slash")
        assert app.focused is path_field
        path_field.value = ""
        await pilot.press(*str(tmp_path / "nowhere"), "enter")
        await settle(pilot)
        assert app.screen is picker  # a path that is not there: a message, the picker stays
        assert any("no folder or photo at" in n.message for n in app._notifications)
        path_field.value = ""
        await pilot.press(*str(far), "enter")
        await settle(pilot)
        assert picker.folder == far and app.focused is picker.query_one("#open-tree")
        await pilot.press("slash")
        path_field.value = ""
        await pilot.press(*str(wanted), "enter")
        await settle(pilot)
        bench = app.screen
        assert isinstance(bench, BenchScreen)
        assert [e.path for e in bench.entries] == [photos[0], wanted]
