"""Text a user, a file name or a stored record controls is shown escaped and never as markup.

Sources for the characters checked:
* ECMA-48 (5th edition, 1991), section 5: the C0 set is 00-1F, DEL is 7F, the C1 set
  80-9F; ESC 1B starts escape sequences, CSI (9B) control sequences (from memory).
* Unicode UAX #9 (the bidirectional algorithm), table 4: the explicit formatting
  characters LRE, RLE, PDF, LRO, RLO (U+202A-U+202E) and LRI, RLI, FSI, PDI
  (U+2066-U+2069); the implicit marks LRM, RLM, ALM (from memory). The test compares
  against Python's ``unicodedata`` rather than a hand-made list where it can.
* OWASP, "CSV Injection": cells that begin with = + - @ tab or carriage return may be
  run as formulas by a spreadsheet; prefix them with a single quote (from memory).
"""

from __future__ import annotations

import argparse
import csv
import dataclasses
import io
import re
import unicodedata

import pytest
from flatsight.analysis.record import measurement_to_record
from flatsight.tui import cmd_watch, record_options
from flatsight.tui.cli import main
from flatsight.tui.safe_text import csv_cell, literal, shown

EXPLICIT_BIDI = {"LRE", "RLE", "PDF", "LRO", "RLO", "LRI", "RLI", "FSI", "PDI"}
BIDI_MARKS = {"\u200e", "\u200f", "\u061c"}  # LRM, RLM, ALM


def must_escape(ch: str) -> bool:
    """The slow reference: what no terminal may receive raw, from unicodedata."""
    return (unicodedata.category(ch) in ("Cc", "Cs", "Zl", "Zp")
            or unicodedata.bidirectional(ch) in EXPLICIT_BIDI or ch in BIDI_MARKS)


def raw_controls(text: str) -> list[str]:
    return sorted({ch for ch in text if must_escape(ch) and ch != "\n"})


# a part name that clears the screen, sets the window title, opens a CSI, reverses the
# line, and carries Rich markup and a link (the demo shop's serials, abused)
HOSTILE_PART = "BW\x1b[2J\x1b]0;x\x07\x9b6n\u202e lot[/]7 [link=http://x]BW-FL-0412[/link]"


# --- the helpers --------------------------------------------------------------------------


def test_shown_escapes_exactly_the_control_characters():
    wrong = []
    for code in [*range(0, 0x3000), *range(0xD800, 0xE000, 7), 0xFEFF, 0x1F600]:
        ch = chr(code)
        escaped = shown(ch) != ch
        if escaped != must_escape(ch):
            wrong.append(hex(code))
    assert wrong == []


def test_shown_is_visible_idempotent_and_keeps_ordinary_text():
    text = "BW\x1b[2J\x9b\u202e\t\r\n\udcff ⌀100 mm é C:\\shots\\a.png"
    once = shown(text)
    assert raw_controls(once) == [] and "\n" not in once
    assert once == ("BW\\x1b[2J\\x9b\\u202e\\t\\r\\n\\udcff ⌀100 mm é C:\\shots\\a.png")
    assert shown(once) == once
    once.encode("utf-8")  # a lone surrogate (undecodable file name byte) no longer breaks it


def test_literal_is_never_markup():
    text = literal("lot[/]7 [b]x[/b] :smile: [link=http://x]y[/link]")
    assert text.plain == "lot[/]7 [b]x[/b] :smile: [link=http://x]y[/link]"
    assert not text.spans


@pytest.mark.parametrize("value, cell", [
    ("=HYPERLINK(\"http://x\")", "'=HYPERLINK(\"http://x\")"),
    ("+1+1", "'+1+1"), ("-2+3", "'-2+3"), ("@SUM(A1)", "'@SUM(A1)"),
    ("\t=1", "'\\t=1"), ("\r=1", "'\\r=1"),
    ("BW-FL-0412", "BW-FL-0412"), ("a=b", "a=b"), ("", ""),
    (-12.5, -12.5), (3, 3), (None, None), (True, True),
])
def test_csv_cells_follow_the_owasp_defence_for_text_only(value, cell):
    assert csv_cell(value) == cell


# --- the command line ---------------------------------------------------------------------


def run_cli(capsys, *argv):
    status = main([str(a) for a in argv])
    captured = capsys.readouterr()
    return status, captured.out, captured.err


def hostile_photo(tmp_path, photo_set):
    path = tmp_path / "BW-FL-0412 [b]\x1b[31m\u202e.png"
    path.write_bytes(photo_set.good_png.read_bytes())
    return path


@pytest.mark.parametrize("mode", ["table", "detail"])
def test_measure_tables_show_names_and_parts_literally(mode, quick_measure, photo_set, tmp_path,
                                                      capsys):
    photo = hostile_photo(tmp_path, photo_set)
    # --part names one photo's part: the detail view of the one photo shows it; the
    # table of two photos names each part after its file
    photos = [photo] if mode == "detail" else [photo, photo_set.good_png]
    extra = ["--detail", "--part", HOSTILE_PART] if mode == "detail" else []
    status, out, err = run_cli(capsys, "measure", *photos, "-w", "632.8",
                               "--spec", "pv<=900nm", "--no-log", *extra)
    assert status == 0, err
    assert raw_controls(out + err) == []
    flat = out.replace("\n", "")
    assert "BW-FL-0412 [b]\\x1b[31m\\u202e.png" in flat
    if mode == "detail":
        assert "lot[/]7 [link=http://x]BW-FL-0412[/link]" in flat
        assert "\\x1b]0;x\\x07\\x9b6n" in flat


def test_measure_csv_escapes_and_defends_text_cells(quick_measure, photo_set, tmp_path, capsys):
    photo = hostile_photo(tmp_path, photo_set)
    status, out, err = run_cli(capsys, "measure", photo, "-w", "632.8", "--csv", "--no-log",
                               "--part", "=HYPERLINK(\"http://x\",\"BW\r\n-FL\")",
                               "--operator=-Tamsin\x1b[2J", "--station", "@bench-2")
    assert status == 0, err
    assert raw_controls(out) == [] and "\r" not in out
    rows = list(csv.DictReader(io.StringIO(out)))
    assert len(rows) == 1 and len(out.splitlines()) == 2  # the CR/LF did not split the row
    row = rows[0]
    assert row["part"] == "'=HYPERLINK(\"http://x\",\"BW\\r\\n-FL\")"
    assert row["operator"] == "'-Tamsin\\x1b[2J"
    assert row["station"] == "'@bench-2"
    assert row["photo"].endswith("BW-FL-0412 [b]\\x1b[31m\\u202e.png")
    # numbers stay numbers, negative ones included (the known surface is concave)
    assert float(row["power_nm"]) < 0 and row["power_nm"].startswith("-")


def test_error_lines_on_stderr_are_escaped(tmp_path, capsys):
    missing = tmp_path / "BW\x1b[2J\u202e.png"
    status, out, err = run_cli(capsys, "measure", missing, "-w", "632.8", "--no-log")
    assert status == 2 and out == ""
    assert raw_controls(err) == [] and len(err.strip().splitlines()) == 1
    assert "BW\\x1b[2J\\u202e.png" in err
    status, _, err = run_cli(capsys, "history", "--log", tmp_path / "x.sqlite", "\x1b]0;x\x07")
    assert status == 2 and raw_controls(err) == [] and "\\x1b]0;x\\x07" in err


@pytest.fixture(scope="module")
def hostile_log(measured, tmp_path_factory):
    """A log whose record carries hostile text in every field a person typed or named."""
    log = tmp_path_factory.mktemp("hostile") / "log.sqlite"
    record = measurement_to_record(
        dataclasses.replace(measured, photo="shots/BW-FL-0412 [b]\x1b[31m.png"))
    args = argparse.Namespace(
        spec="pv<=900nm", spec_wavelength=None, part=HOSTILE_PART,
        operator="Tamsin\x1b[2J", station="=bench-2\u202e", log=str(log), no_log=False)
    record_options.finish_record(args, record)
    return log


def test_history_shows_stored_text_literally_and_never_exits_4(hostile_log, capsys,
                                                                monkeypatch):
    monkeypatch.setenv("COLUMNS", "200")  # room for operator and station
    status, out, err = run_cli(capsys, "history", "--log", hostile_log)
    assert status == 0, err
    assert raw_controls(out + err) == []
    flat = re.sub(r"\s+", "", out)
    assert "lot[/]7[link=http://x]BW-FL-0412[/link]" in flat
    assert "Tamsin\\x1b[2J" in flat and "=bench-2\\u202e" in flat
    status, out, err = run_cli(capsys, "history", "--log", hostile_log, "--csv")
    assert status == 0 and raw_controls(out) == []
    row = next(csv.DictReader(io.StringIO(out)))
    assert row["station"] == "'=bench-2\\u202e"
    assert row["part"].startswith("BW\\x1b[2J")


def test_trend_and_report_lines_are_escaped(hostile_log, tmp_path, capsys):
    status, out, err = run_cli(capsys, "trend", "--log", hostile_log, "--part", HOSTILE_PART)
    assert status == 0, err
    assert raw_controls(out + err) == [] and "lot[/]7" in out
    target = tmp_path / "cert\x1b[2J.html"
    status, out, err = run_cli(capsys, "report", "1", "--log", hostile_log, "--output", target)
    assert status == 0, err
    assert raw_controls(out + err) == []
    assert "cert\\x1b[2J.html" in out and "lot[/]7 [link=http://x]BW-FL-0412[/link]" in out


def test_watch_lines_are_escaped(tmp_path, capsys):
    bad = tmp_path / "BW\x1b[2J\u202e.png"
    bad.write_bytes(b"not a photo")
    args = argparse_watch(tmp_path)
    tally = cmd_watch.Tally()
    cmd_watch._handle(bad, args, tally)
    line = capsys.readouterr().out
    assert tally.counts["error"] == 1 and raw_controls(line) == []
    assert "BW\\x1b[2J\\u202e.png: error:" in line
    record = {"part": HOSTILE_PART, "pv_nm": 1.0, "pvr_nm": 1.0, "power_nm": 1.0}
    shown_line = cmd_watch._line(record, bad)
    assert raw_controls(shown_line) == [] and "lot[/]7" in shown_line


def argparse_watch(folder):
    p = argparse.ArgumentParser()
    cmd_watch.add_parser(p.add_subparsers())
    return p.parse_args(["watch", str(folder), "-w", "632.8", "--no-log"])


def test_the_json_output_was_safe_already(quick_measure, photo_set, tmp_path, capsys):
    photo = hostile_photo(tmp_path, photo_set)
    status, out, _ = run_cli(capsys, "measure", photo, "-w", "632.8", "--json", "--no-log",
                             "--part", HOSTILE_PART)
    assert status == 0 and raw_controls(out) == []
    assert out.isascii()  # json.dumps escapes everything outside ASCII



# --- the station ---------------------------------------------------------------------------


def station_sync(scenario):
    """Run an async Pilot scenario as a plain test (the suite has no asyncio plugin)."""
    import asyncio
    import functools

    @functools.wraps(scenario)
    def test(*args, **kwargs):
        asyncio.run(scenario(*args, **kwargs))

    return test


@station_sync
async def test_the_station_shows_names_parts_and_errors_literally(tmp_path):
    from flatsight.tui.app import FlatsightStation
    from flatsight.tui.config import StationSettings
    from flatsight.tui.screens.open_screen import PhotoTree
    from flatsight.tui.station_log import StationRecorder
    from station_fakes import fake_backend, write_photos

    names = ["BW-FL-0412 [b]\x1b[2J\u202e.png", "bad [i]\x1b]0;x\x07.png"]
    photos = write_photos(tmp_path, names)
    backend, _ = fake_backend()
    recorder = StationRecorder(tmp_path / "log.sqlite", {"part": HOSTILE_PART})
    app = FlatsightStation(photos, settings=StationSettings(colour="truecolor"),
                           backend=backend, recorder=recorder)
    async with app.run_test(size=(100, 30)) as pilot:
        for _ in range(4):  # the measurement, its record, the log read
            await pilot.pause()
            await app.workers.wait_for_complete()
        bench = app.screen
        queue = bench.query_one("#queue")
        lines = [queue.get_option_at_index(i).prompt.plain for i in range(queue.option_count)]
        status_line = str(bench.query_one("#status-text").render())
        assert bench.entries[0].name == "BW-FL-0412 [b]\\x1b[2J\\u202e.png"
        assert lines[0].startswith("✓ BW-FL-0412")  # cut to the queue's width
        assert "BW-FL-0412 [b]\\x1b[2J\\u202e.png" in status_line
        await pilot.press("6")  # the trend of the part in hand
        await pilot.pause()
        trend = bench.query_one("#trend-view").render().plain
        assert "lot[/]7 [link=http://x]BW-FL-0412[/link]" in trend
        await pilot.press("right_square_bracket")  # the unreadable photo
        for _ in range(3):
            await pilot.pause()
            await app.workers.wait_for_complete()
        status_line = str(bench.query_one("#status-text").render())
        assert "bad [i]\\x1b]0;x\\x07.png" in status_line and "✗" in status_line
        app.notify("saved in shots/[b]x\x1b[2J", title="\u202e")
        await pilot.pause()
        shown_notes = [(n.message, n.title) for n in app._notifications]
        assert ("saved in shots/[b]x\\x1b[2J", "\\u202e") in shown_notes
        await pilot.press("o")  # the photo picker lists the folder's photos
        tree = app.screen.query_one(PhotoTree)
        for _ in range(50):
            await pilot.pause(0.05)
            labels = [node.label.plain for node in tree.root.children]
            if labels:
                break
        assert "BW-FL-0412 [b]\\x1b[2J\\u202e.png" in labels
        assert "bad [i]\\x1b]0;x\\x07.png" in labels
        for text in [*lines, status_line, trend, *labels, *(m for m, _ in shown_notes)]:
            assert raw_controls(text) == []
