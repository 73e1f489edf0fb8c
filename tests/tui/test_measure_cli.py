"""`flatsight measure` end to end: tables, JSON Lines, CSV, maps, batches and bad input.

Mostly in-process through ``flatsight.tui.cli.main`` (quick, and capsys sees the output);
one real run of the installed ``flatsight`` console command. Every run passes ``--no-log``
or a log in tmp_path, so no test writes to the user's data folder.

Exit status (tui/options.py, EXIT_CODES): 0 all measured, 2 usage error or unreadable
file, 3 read but not analysable; in a batch the highest applies.
"""

from __future__ import annotations

import csv
import io
import json
import os
import sqlite3
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
from cli_interrupt import interrupt_once_logged
from flatsight.analysis.records import log as inspection_log
from flatsight.tui.cli import main
from PIL import Image

W = ["--wavelength", "632.8"]


def run_cli(capsys, *argv) -> tuple[int, str, str]:
    status = main([str(a) for a in argv])
    captured = capsys.readouterr()
    return status, captured.out, captured.err


def json_lines(out: str) -> list[dict]:
    return [json.loads(line) for line in out.splitlines() if line.strip()]


def assert_one_line_error(err: str, *words: str) -> str:
    assert "Traceback" not in err
    lines = err.strip().splitlines()
    assert len(lines) == 1, f"expected one line on stderr, got {len(lines)}:\n{err}"
    for word in words:
        assert word in lines[0], (word, lines[0])
    return lines[0]


def assert_log_refused(err: str, unlogged: list[str], *words: str) -> str:
    """stderr of a batch the log refused: the reason once, then the photos not logged."""
    assert "Traceback" not in err
    lines = err.strip().splitlines()
    assert len(lines) == 2, f"expected the reason and the unlogged photos, got:\n{err}"
    assert "cannot write the log" in lines[0]
    for word in words:
        assert word in lines[0], (word, lines[0])
    assert lines[1] == f"flatsight measure: not logged ({len(unlogged)}): {', '.join(unlogged)}"
    return lines[0]


# --- good photos -------------------------------------------------------------------------


def test_table_for_a_good_photo(photo_set, capsys, tmp_path):
    log = tmp_path / "x.sqlite"
    status, out, err = run_cli(capsys, "measure", photo_set.good_png, *W, "--log", log)
    assert status == 0, err
    assert err == ""
    assert photo_set.good_png.name in out.replace("\n", "")
    for word in ("PV", "RMS", "PVr", "power", "irregularity", "waves", "fringes"):
        assert word in out, word
    # power of the known surface (a4 = +40 nm: concave, 2 sqrt 3 x 40 = 139 nm of sag)
    assert "concave" in out and "-13" in out
    assert log.exists()  # the log went where it was told


@pytest.mark.slow
def test_json_lines_one_object_per_photo(photo_set, capsys):
    status, out, err = run_cli(capsys, "measure", photo_set.good_png, photo_set.good_tif16, *W,
                               "--json", "--no-log")
    assert status == 0, err
    lines = out.splitlines()
    assert len(lines) == 2
    records = [json.loads(line) for line in lines]
    assert [r["photo"] for r in records] == [str(photo_set.good_png), str(photo_set.good_tif16)]
    for r in records:
        assert r["wavelength_nm"] == 632.8
        assert r["zernike"]["ordering"] == "noll" and len(r["zernike"]["coefficients_nm"]) == 36
        assert r["pv_waves"] == pytest.approx(r["pv_nm"] / 632.8, abs=1e-5)
        assert "record_id" not in r  # --no-log
    # the known surfaces (conftest): a4 = +40 nm on the PNG, -25 nm on the 16-bit TIFF
    assert records[0]["zernike"]["coefficients_nm"][3] == pytest.approx(40.0, abs=1.5)
    assert records[1]["zernike"]["coefficients_nm"][3] == pytest.approx(-25.0, abs=1.5)
    assert records[1]["power_nm"] > 0  # convex: centre high


def test_csv_inverted(photo_set, capsys):
    status, out, err = run_cli(capsys, "measure", photo_set.good_png, *W, "--csv", "--no-log",
                               "--diameter", "100", "--invert")
    assert status == 0, err
    rows = list(csv.DictReader(io.StringIO(out)))
    assert len(rows) == 1
    row = rows[0]
    assert row["photo"] == str(photo_set.good_png)
    for key in ("pv_nm", "rms_nm", "pvr_nm", "power_nm", "irregularity_nm", "pv_waves",
                "aperture.radius_px", "quality.masked_fraction", "z1_nm", "z36_nm"):
        assert row[key] != "", key
    assert float(row["pv_waves"]) == pytest.approx(float(row["pv_nm"]) / 632.8, abs=1e-5)
    # --invert flips the surface: the concave part (a4 = +40 nm) now reads convex, and the
    # radius is signed like the power
    assert float(row["z4_nm"]) == pytest.approx(-40.0, abs=1.5)
    assert float(row["power_nm"]) > 0 and float(row["radius_of_curvature_m"]) > 0
    assert row["settings.invert"] == "True"
    # the part's outline (issue 10): a circle, as --aperture takes it back
    assert row["aperture.shape"] == "circle"
    assert row["aperture.outline"] == "circle:{},{},{}".format(
        *(row[f"aperture.{k}"].removesuffix(".0") for k in ("center_x_px", "center_y_px",
                                                             "radius_px")))
    # each figure's expanded uncertainty (k = 2) in the column beside it
    header = out.splitlines()[0].split(",")
    for figure in ("pv_nm", "rms_nm", "pvr_nm", "power_nm", "irregularity_nm"):
        assert header[header.index(figure) + 1] == f"u_{figure}"
        assert float(row[f"u_{figure}"]) > 0


@pytest.mark.slow
def test_folders_globs_osa_and_maps(photo_set, capsys, tmp_path):
    maps = tmp_path / "maps"
    maps.mkdir()
    folder = photo_set.good_png.parent
    pattern = str(photo_set.folder / "*.jpg")
    status, out, err = run_cli(capsys, "measure", folder, pattern, *W, "--json", "--no-log",
                               "--ordering", "osa", "--save-map", maps / "{name}.npy")
    assert status == 0, err
    records = json_lines(out)
    # the folder's photos in sorted order, then what the glob matched
    assert [Path(r["photo"]).name for r in records] == [
        "BW-FL-0412_hene.png", "BW-FL-0413_hene.tif", "BW-FL-0414_hene.jpg"]
    assert sorted(p.name for p in maps.iterdir()) == [
        "BW-FL-0412_hene.npy", "BW-FL-0413_hene.npy", "BW-FL-0414_hene.npy"]
    for r in records:
        assert r["zernike"]["ordering"] == "osa" and r["zernike"]["first_index"] == 0
        saved = np.load(r["height_map_path"])
        assert saved.dtype == np.float32 and np.isfinite(saved).sum() > 1000


def test_save_map_tif_for_one_photo(photo_set, capsys, tmp_path):
    target = tmp_path / "BW-FL-0412.tif"
    status, out, err = run_cli(capsys, "measure", photo_set.good_tif16, *W, "--json",
                               "--no-log", "--save-map", target)
    assert status == 0, err
    with Image.open(target) as im:
        assert im.mode == "F"
    assert json_lines(out)[0]["height_map_path"] == str(target.resolve())
    assert sorted(p.name for p in tmp_path.iterdir()) == ["BW-FL-0412.tif"]


def test_save_map_needs_name_with_several_photos(photo_set, capsys, tmp_path):
    status, out, err = run_cli(capsys, "measure", photo_set.good_png, photo_set.good_tif16, *W,
                               "--no-log", "--save-map", tmp_path / "map.npy")
    assert status == 2 and out == ""
    assert_one_line_error(err, "{name}")
    assert list(tmp_path.iterdir()) == []


# --- bad input ---------------------------------------------------------------------------

# (file in the session's bad folder, exit status, a word the one line must hold)
BAD_FILES = [
    ("empty.png", 2, "empty"),
    ("text.png", 2, "not an image"),
    ("truncated.png", 2, "cut short"),
    ("bomb.png", 2, "decompression"),
    ("one-pixel.png", 2, "too small"),
    ("blank-grey.png", 3, "aperture"),
    ("noise.png", 3, "aperture"),
    ("rings.png", 3, "--ring-sign"),  # closed rings: measurable once the sign is stated
    ("white-disk.png", 3, "aperture"),
]


@pytest.mark.parametrize("name, code, word", BAD_FILES, ids=[b[0] for b in BAD_FILES])
def test_bad_photo(photo_set, capsys, name, code, word):
    path = photo_set.bad[name]
    status, out, err = run_cli(capsys, "measure", path, *W, "--json", "--no-log")
    assert status == code
    assert out == ""
    assert_one_line_error(err, str(path), word)


def test_decompression_bomb_guard_stays_on(photo_set, capsys, monkeypatch):
    # Pillow's guard (PIL.Image.MAX_IMAGE_PIXELS) lowered below the photo's 0.3 MP
    import PIL.Image

    monkeypatch.setattr(PIL.Image, "MAX_IMAGE_PIXELS", 100_000)
    status, out, err = run_cli(capsys, "measure", photo_set.good_png, *W, "--no-log")
    assert status == 2 and out == ""
    assert_one_line_error(err, str(photo_set.good_png), "decompression")


def test_missing_path(capsys, tmp_path):
    missing = tmp_path / "BW-FL-0999.png"
    status, out, err = run_cli(capsys, "measure", missing, *W, "--no-log")
    assert status == 2 and out == ""
    assert_one_line_error(err, str(missing), "no such file")


def test_folder_without_photos(photo_set, capsys):
    status, out, err = run_cli(capsys, "measure", photo_set.empty_folder, *W, "--no-log")
    assert status == 2 and out == ""
    assert_one_line_error(err, str(photo_set.empty_folder), "no PNG")


def test_glob_that_matches_nothing(photo_set, capsys):
    pattern = str(photo_set.folder / "*.nothing-*.png")
    status, out, err = run_cli(capsys, "measure", pattern, *W, "--no-log")
    assert status == 2 and out == ""
    assert_one_line_error(err, "no photos match")


def test_missing_wavelength(photo_set, capsys):
    status, out, err = run_cli(capsys, "measure", photo_set.good_png, "--no-log")
    assert status == 2 and out == ""
    assert_one_line_error(err, "--wavelength")


@pytest.mark.parametrize("value", ["abc", "5", "99999"])
def test_bad_wavelength(photo_set, capsys, value):
    # one line on stderr, like every other refusal (issue 2). BUG: argparse prints its
    # usage block (about 9 lines) before the error line for an option whose type fails.
    status, out, err = run_cli(capsys, "measure", photo_set.good_png, "--wavelength", value,
                               "--no-log")
    assert status == 2 and out == ""
    assert_one_line_error(err, value)


@pytest.mark.parametrize("value", ["1,2", "a,b,c", "300,200,-5", "ellipse:1,2,3",
                                   "rect:300,200,0,50,10", "poly:1,2;3,4", "annulus:9,9,5,8",
                                   "hexagon:1,2,3"])
def test_malformed_aperture(photo_set, capsys, value):
    # same argparse usage-block BUG as test_bad_wavelength
    status, out, err = run_cli(capsys, "measure", photo_set.good_png, *W, "--aperture", value,
                               "--no-log")
    assert status == 2 and out == ""
    assert_one_line_error(err, value)


def test_a_shaped_aperture_off_the_photo_names_its_shape(photo_set, capsys):
    status, out, err = run_cli(capsys, "measure", photo_set.good_png, *W, "--aperture",
                               "rect:5000,5000,100,50,30", "--no-log")
    assert status == 2 and out == ""
    assert_one_line_error(err, "rect:5000,5000,100,50,30", "does not fit")


def test_aperture_off_the_photo(photo_set, capsys):
    status, out, err = run_cli(capsys, "measure", photo_set.good_png, *W, "--aperture",
                               "5000,5000,100", "--no-log")
    assert status == 2 and out == ""
    assert_one_line_error(err, "5000", "does not fit")


@pytest.mark.slow
def test_batch_keeps_going_and_exits_with_the_highest_status(photo_set, capsys, tmp_path):
    bad = [photo_set.bad["empty.png"], photo_set.bad["noise.png"],
           photo_set.bad["truncated.png"], tmp_path / "missing.png"]
    status, out, err = run_cli(capsys, "measure", photo_set.good_png, *bad,
                               photo_set.good_tif16, *W, "--json", "--no-log")
    records = json_lines(out)
    # every good photo still gets its result, in order
    assert [r["photo"] for r in records] == [str(photo_set.good_png), str(photo_set.good_tif16)]
    assert status == 3  # unreadable (2) and unanalysable (3): the highest applies
    lines = err.strip().splitlines()
    assert len(lines) == len(bad) and "Traceback" not in err
    for path, line in zip(bad, lines, strict=True):
        assert str(path) in line


def test_batch_of_only_unreadable_files_exits_2(photo_set, capsys):
    bad = [photo_set.bad["empty.png"], photo_set.bad["text.png"]]
    status, out, err = run_cli(capsys, "measure", *bad, *W, "--json", "--no-log")
    assert status == 2 and out == ""
    assert len(err.strip().splitlines()) == 2


# --- help and the console command --------------------------------------------------------


def test_help_lists_measure(capsys):
    status, out, _ = run_cli(capsys, "--help")
    assert status == 0
    assert "measure" in out and "exit status" in out
    status, out, _ = run_cli(capsys, "measure", "--help")
    assert status == 0
    for option in ("--wavelength", "--json", "--csv", "--aperture", "--invert", "--save-map"):
        assert option in out


def test_no_command_shows_help(capsys):
    status, out, _ = run_cli(capsys)
    assert status == 2 and "measure" in out


@pytest.mark.slow
def test_console_command(photo_set, tmp_path):
    # the console script of the environment running the tests (.venv/bin is seldom on
    # PATH, and a `flatsight` found there may be another install)
    exe = Path(sys.executable).with_name("flatsight")
    command = [str(exe)] if exe.exists() else [sys.executable, "-m", "flatsight.tui.cli"]
    env = dict(os.environ, HOME=str(tmp_path), XDG_DATA_HOME=str(tmp_path / "data"),
               XDG_CONFIG_HOME=str(tmp_path / "config"), COLUMNS="120")
    env.pop("FLATSIGHT_DEBUG", None)
    done = subprocess.run(command + ["--help"], capture_output=True, text=True, env=env,
                          timeout=60, check=False)
    assert done.returncode == 0 and "measure" in done.stdout
    empty = photo_set.bad["empty.png"]
    done = subprocess.run(
        command + ["measure", str(photo_set.good_png), str(empty), "--wavelength", "hene",
                   "--json", "--no-log"],
        capture_output=True, text=True, env=env, timeout=120, check=False)
    assert done.returncode == 2
    records = json_lines(done.stdout)
    assert len(records) == 1 and records[0]["wavelength_nm"] == 632.8
    assert_one_line_error(done.stderr, str(empty))
    assert not (tmp_path / "data").exists()  # --no-log: nothing written to the data folder


# --- a log that cannot be written: every result still shown, one line, exit 2 --------------


def three_photos(tmp_path, photo_set):
    names = ["BW-FL-0412.png", "BW-FL-0413.png", "BW-FL-0588.png"]
    for name in names:
        (tmp_path / name).write_bytes(photo_set.good_png.read_bytes())
    return [tmp_path / name for name in names]


@pytest.mark.parametrize("mode", ["--json", "table"])
def test_a_folder_as_the_log_still_shows_every_result(mode, quick_measure, photo_set, tmp_path,
                                                     capsys):
    photos = three_photos(tmp_path, photo_set)
    flags = [mode] if mode != "table" else []
    status, out, err = run_cli(capsys, "measure", *photos, *W, "--log", tmp_path, *flags)
    assert status == 2
    line = assert_log_refused(err, [p.name for p in photos], "is a folder")
    assert "internal error" not in line
    if mode == "--json":
        records = json_lines(out)
        assert [Path(r["photo"]).name for r in records] == [p.name for p in photos]
        assert all("record_id" not in r for r in records)
    else:
        for p in photos:
            assert p.name in out


def test_a_full_disk_mid_batch_still_shows_every_result(quick_measure, photo_set, tmp_path,
                                                       capsys, monkeypatch):

    from flatsight.analysis.records import log as inspection_log

    photos = three_photos(tmp_path, photo_set)
    log = tmp_path / "log.sqlite"
    real_connect, connections = sqlite3.connect, []

    def second_write_finds_the_disk_full(*args, **kwargs):
        # 'PRAGMA max_page_count' makes SQLite answer SQLITE_FULL, as on a full disk
        # (SQLite documentation, from memory); from the second record on the file may not grow
        con = real_connect(*args, **kwargs)
        connections.append(con)
        if len(connections) > 1:
            pages = con.execute("PRAGMA page_count").fetchone()[0]
            con.execute(f"PRAGMA max_page_count = {pages}")
        return con

    monkeypatch.setattr(sqlite3, "connect", second_write_finds_the_disk_full)
    # a record bigger than any free room in the pages (--part names one photo's part only)
    long_name = "Ruben Halloway " + "0" * 20000
    status, out, err = run_cli(capsys, "measure", *photos, *W, "--log", log, "--json",
                               "--operator", long_name)
    monkeypatch.undo()
    assert status == 2
    line = assert_log_refused(err, [p.name for p in photos[1:]], "the disk is full")
    assert "not a readable" not in line
    records = json_lines(out)
    assert len(records) == 3
    assert [("record_id" in r) for r in records] == [True, False, False]
    assert [r["record_id"] for r in inspection_log.query(log)] == [records[0]["record_id"]]


@pytest.mark.parametrize("existing", [False, True])
def test_a_log_the_user_cannot_write_still_shows_the_result(existing, photo_set, shared_folder,
                                                           run_as_reader):
    # a new log in a folder the user may not write (a 0555 folder, a read-only mount),
    # or a log the user may only read (a 0444 file)
    log = shared_folder / "log.sqlite"
    if existing:
        inspection_log.record_measurement(log, {"photo": "BW-FL-0400.png", "pv_nm": 40.0})
    before = log.read_bytes() if existing else None
    photo = shared_folder / "BW-FL-0412.png"
    photo.write_bytes(photo_set.good_png.read_bytes())
    code = "import sys; from flatsight.tui.cli import main; sys.exit(main(sys.argv[1:]))"
    done = run_as_reader(shared_folder, code, "measure", str(photo), *W, "--json",
                         "--log", str(log))
    assert done.returncode == 2, done.stderr
    line = assert_log_refused(done.stderr, [photo.name])
    assert "not a readable" not in line
    records = json_lines(done.stdout)
    assert len(records) == 1 and "record_id" not in records[0]
    assert (log.read_bytes() if existing else log.exists()) == (before if existing else False)


# --- every option checked before a photo is measured; nothing logged that was not shown ----


@pytest.fixture
def measure_calls(monkeypatch):
    """Photos handed to the analysis (which must not be reached with a bad option)."""
    import flatsight.analysis.pipeline as pipeline

    calls = []
    monkeypatch.setattr(pipeline, "measure", lambda photo, *a, **k: calls.append(photo))
    return calls


@pytest.mark.parametrize("option, words", [
    (["--diameter", "inf"], ["diameter", "out of range"]),
    (["--diameter", "1e300"], ["diameter", "out of range"]),
    (["--diameter", "nan"], ["diameter", "out of range"]),
    (["--aperture", "100,100,1e308"], ["1e308"]),
    (["--aperture", "nan,240,100"], ["nan"]),
    (["--exclude", "100,100,inf"], ["inf"]),
    (["--terms", "9" * 400], ["Zernike terms", "out of range"]),
    (["--spec", "3/" + "9" * 400 + "(1)"], ["too large"]),
    (["--spec", "pv<=" + "1" * 400 + "nm"], ["too large"]),
    (["--spec", "3/²(1)"], ["at character 3", "expected a number"]),
    (["--spec-wavelength", "1e300", "--spec", "3/1(1)"], ["spec-wavelength", "out of range"]),
    (["--save-map", "maps/{name}.png"], ["height map", ".npy"]),
    (["--log", ""], ["--log", "file path"]),
])
def test_a_bad_option_is_a_usage_error_before_any_photo(option, words, photo_set, tmp_path,
                                                        capsys, measure_calls, monkeypatch):
    monkeypatch.chdir(tmp_path)  # a default log would go here... were one written
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "data"))
    log = [] if "--log" in option else ["--log", tmp_path / "log.sqlite"]
    status, out, err = run_cli(capsys, "measure", photo_set.good_png, photo_set.good_tif16,
                               *W, *log, *option)
    assert status == 2 and out == ""
    line = assert_one_line_error(err, *words)
    assert "could not convert" not in line and "internal error" not in line
    assert measure_calls == []
    assert not (tmp_path / "log.sqlite").exists() and not (tmp_path / "data").exists()


def test_an_aperture_larger_than_the_photo_is_a_usage_error(photo_set, capsys, tmp_path):
    log = tmp_path / "log.sqlite"
    status, out, err = run_cli(capsys, "measure", photo_set.good_png, *W, "--aperture",
                               "320,240,5000", "--log", log)
    assert status == 2 and out == ""
    assert_one_line_error(err, "5000", "does not fit", "640x480")
    assert not log.exists()


@pytest.mark.parametrize("argv, words", [
    (["report", "1180591620717411303424", "-o", "x.html"], ["record id", "out of range"]),
    (["history", "--limit", "1" * 30], ["count", "out of range"]),
    (["trend", "--height", "99999999999"], ["--height", "out of range"]),
    (["absolute", "--ab", "a.png", "--ac", "b.png", "--bc", "c.png", "--rotated", "d.png",
      "--angle", "nan", "-w", "hene"], ["angle", "out of range"]),
    (["stack", "a.png", "b.png", "c.png", "-w", "hene", "--diameter", "inf"], ["diameter"]),
    (["stack", "a.png", "b.png", "c.png", "-w", "hene", "--save-map", "m.jpg"],
     ["height map", ".npy"]),
    (["watch", ".", "-w", "hene", "--interval", "inf"], ["seconds", "out of range"]),
    (["watch", ".", "-w", "hene", "--save-map", "maps/{name}.bmp", "--timeout", "5",
      "--no-log"], ["height map", ".npy"]),
])
def test_other_commands_refuse_bad_numbers_with_one_line(argv, words, capsys, tmp_path,
                                                         monkeypatch):
    monkeypatch.chdir(tmp_path)
    status, out, err = run_cli(capsys, *argv)
    assert status == 2 and out == ""
    assert_one_line_error(err, *words)


def test_save_map_never_overwrites_a_map_of_the_same_batch(quick_measure, photo_set, tmp_path,
                                                           capsys):
    # a/BW-1.png and b/BW-1.png, and part.png with part.tif: one stem, two photos
    photos = [tmp_path / "a" / "BW-1.png", tmp_path / "b" / "BW-1.png",
              tmp_path / "part.png", tmp_path / "part.tif"]
    for p in photos:
        p.parent.mkdir(exist_ok=True)
        p.write_bytes(b"stand-in: the analysis is replaced in this test")
    maps = tmp_path / "maps"
    maps.mkdir()
    status, out, err = run_cli(capsys, "measure", *photos, *W, "--json", "--no-log",
                               "--save-map", maps / "{name}.npy")
    assert status == 0, err
    paths = [r["height_map_path"] for r in json_lines(out)]
    assert [Path(p).name for p in paths] == ["BW-1.npy", "BW-1-2.npy", "part.npy",
                                             "part-2.npy"]
    assert sorted(p.name for p in maps.iterdir()) == sorted(Path(p).name for p in paths)


@pytest.mark.parametrize("mode", ["table", "--json"])
def test_a_map_that_cannot_be_written_keeps_the_photos_figures(mode, quick_measure, photo_set,
                                                               tmp_path, capsys):
    # issue 9: a --save-map write failure dropped that photo's result. Root writes into a
    # read-only folder, so the failures here stop root too: a "folder" that is a regular
    # file (ENOTDIR), and a map whose name is taken by a folder (EISDIR on the rename)
    photos = three_photos(tmp_path, photo_set)
    maps = tmp_path / "maps"
    maps.mkdir()
    (maps / "BW-FL-0413.npy").mkdir()  # the second photo's map cannot be put in place
    log = tmp_path / "log.sqlite"
    flags = [mode] if mode != "table" else []
    status, out, err = run_cli(capsys, "measure", *photos, *W, "--log", log, *flags,
                               "--save-map", maps / "{name}.npy")
    assert status == 2
    line = assert_one_line_error(err, "cannot write the height map",
                                 str(maps / "BW-FL-0413.npy"), "shown and logged")
    assert "internal error" not in line
    logged = {Path(r["photo"]).name: r for r in inspection_log.query(log)}
    assert sorted(logged) == [p.name for p in photos]  # every photo's figures are in the log
    assert "height_map_path" not in logged["BW-FL-0413.png"]  # the record names no map
    assert Path(logged["BW-FL-0412.png"]["height_map_path"]).is_file()
    assert sorted(p.name for p in maps.iterdir() if p.is_file()) == ["BW-FL-0412.npy",
                                                                      "BW-FL-0588.npy"]
    if mode == "--json":
        assert [Path(r["photo"]).name for r in json_lines(out)] == [p.name for p in photos]
    else:
        for p in photos:
            assert p.name in out

    file_not_folder = tmp_path / "not-a-folder"
    file_not_folder.write_text("a file where the maps folder should be")
    status, out, err = run_cli(capsys, "measure", photos[0], *W, "--no-log", "--json",
                               "--save-map", file_not_folder / "map.npy")
    assert status == 2
    assert_one_line_error(err, "cannot write the height map", str(file_not_folder / "map.npy"))
    assert "shown and logged" not in err and "shown without the map" in err
    assert len(json_lines(out)) == 1 and "height_map_path" not in json_lines(out)[0]


def test_a_read_only_map_folder_keeps_the_photos_figures(photo_set, shared_folder,
                                                         run_as_reader):
    # the same with a folder the user may not write: as 'nobody' when the tests run as root
    photo = shared_folder / "BW-FL-0412.png"
    photo.write_bytes(photo_set.good_png.read_bytes())
    code = "import sys; from flatsight.tui.cli import main; sys.exit(main(sys.argv[1:]))"
    done = run_as_reader(shared_folder, code, "measure", str(photo), *W, "--json", "--no-log",
                         "--save-map", str(shared_folder / "{name}.npy"))
    assert done.returncode == 2, done.stderr
    assert_one_line_error(done.stderr, "cannot write the height map",
                          str(shared_folder / "BW-FL-0412.npy"))
    records = json_lines(done.stdout)
    assert len(records) == 1 and records[0]["pv_nm"] > 0
    assert "height_map_path" not in records[0]
    assert not (shared_folder / "BW-FL-0412.npy").exists()


def test_a_multi_page_tiff_is_measured_from_its_first_page_and_says_so(photo_set, tmp_path,
                                                                      capsys):
    first = Image.open(photo_set.good_png)
    path = tmp_path / "BW-FL-0412-pages.tif"
    first.save(path, save_all=True, append_images=[first.rotate(90)])
    status, out, err = run_cli(capsys, "measure", path, *W, "--json", "--no-log")
    assert status == 0, err
    warnings = json_lines(out)[0]["warnings"]
    assert any("2 frames" in w and "only the first frame" in w for w in warnings), warnings


def test_ctrl_c_in_the_table_view_shows_every_finished_result(photo_set, tmp_path):
    photos = []
    for k in range(20):  # far more than can finish between the first record and ctrl+c
        photos.append(tmp_path / f"BW-FL-{412 + k:04d}.png")
        photos[-1].write_bytes(photo_set.good_png.read_bytes())
    log = tmp_path / "log.sqlite"
    status, out, err = interrupt_once_logged(["measure", *photos, *W, "--log", log], log)
    assert status == 130, err
    assert "interrupted" in err and "Traceback" not in err
    shown = [p.name for p in photos if p.name in out]
    records = [Path(r["photo"]).name for r in inspection_log.query(log)]
    assert records and sorted(records) == sorted(shown)  # every logged result was shown


@pytest.mark.parametrize("mode", ["table", "--json"])
def test_an_average_shows_its_photos_carriers_not_a_made_up_one(mode, measured, photo_set,
                                                                 tmp_path, capsys, monkeypatch):
    # issue 9 item 4: "0.0 tilt fringes, period 0.0 px, visibility 1.00" for an average
    import dataclasses

    import flatsight.analysis.pipeline as pipeline

    def quick(photo, settings, **_):
        fringes = 14.0 if "0412" in str(photo) else 18.0
        q = dataclasses.replace(measured.quality, carrier_fringes=fringes,
                                fringe_period_px=576.0 / fringes, mean_modulation=0.55)
        return dataclasses.replace(measured, photo=str(photo), quality=q)

    monkeypatch.setattr(pipeline, "measure", quick)
    photos = three_photos(tmp_path, photo_set)[:2]
    flags = [mode] if mode != "table" else []
    # --jobs 1: the stand-in analysis lives in this process, not in worker processes
    status, out, err = run_cli(capsys, "measure", *photos, *W, "--average", "--no-log",
                               "--jobs", "1", *flags)
    assert status == 0, err
    if mode == "--json":
        q = json_lines(out)[0]["quality"]
        assert q["carrier_fringes"] is None and q["fringe_period_px"] is None
        assert [p["carrier_fringes"] for p in q["per_photo"]] == [14.0, 18.0]
        return
    assert "0.0 across" not in out and "visibility 1.00" not in out
    # an average has no demodulation window of its own: its figures are taken at the
    # coarsest of its photos' (here both are the stand-in's), which it says
    window = measured.quality.resolution_cycles_per_aperture
    assert ("2 photos, each its own carrier: tilt fringes 14.0–18.0, period 32.0–41.1 px; "
            f"resolution {window:.1f} cycles/aperture; visibility 0.55; masked"
            ) in " ".join(out.split())  # the console wraps the line at its width


@pytest.mark.slow
def test_closed_fringes_are_refused_without_a_stated_sign_and_measured_with_it(capsys):
    # issue 10: a closed-ring sample (sample_images, BW-FL-0440): refused with one line
    # naming --ring-sign (exit 3), measured by the intensity fit when the sign is stated,
    # and the JSON says the method, why, and that the sign was stated
    photo = Path(__file__).resolve().parents[2] / "sample_images" / "BW-FL-0440_sodium.png"
    status, _, err = run_cli(capsys, "measure", photo, "-w", "sodium", "--no-log")
    assert status == 3
    assert_one_line_error(err, "closed fringes", "--ring-sign")
    status, out, _ = run_cli(capsys, "measure", photo, "-w", "sodium", "--no-log", "--json",
                             "--ring-sign", "convex")
    assert status == 0
    q = json_lines(out)[0]["quality"]
    assert (q["method"], q["method_reason"], q["sign"]) == (
        "intensity-fit", "closed fringes", "stated")
    assert json_lines(out)[0]["power_nm"] > 0  # convex: centre high (README, "Sign")
