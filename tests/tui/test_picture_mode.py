"""Choosing pictures or half-block cells: --images, FLATSIGHT_IMAGES, NO_COLOR, the terminal."""

from __future__ import annotations

import io

import pytest
from flatsight.tui import picture_mode
from flatsight.tui.cli import main
from flatsight.tui.picture_mode import detect_protocol, picture_protocol


def never_asked():
    raise AssertionError("the terminal was asked")


@pytest.mark.parametrize(
    ("choice", "env", "terminal", "expected"),
    [
        ("auto", {}, "sixel", "sixel"),
        ("auto", {}, "kitty", "kitty"),
        ("auto", {}, None, None),  # a terminal that does not answer: cells
        ("on", {}, "kitty", "kitty"),
        ("on", {}, None, "sixel"),  # behind tmux, which does not answer
        ("on", {"TERM": "xterm-kitty"}, None, "kitty"),
        ("on", {"KITTY_WINDOW_ID": "1"}, None, "kitty"),
    ],
)
def test_the_terminals_answer_decides_unless_told(choice, env, terminal, expected):
    assert picture_protocol(choice, env, detect=lambda: terminal) == expected


@pytest.mark.parametrize(
    ("choice", "env", "expected"),
    [
        ("auto", {"NO_COLOR": "1"}, None),  # no-color.org: no pictures, and no questions
        ("off", {}, None),
        ("sixel", {}, "sixel"),
        ("kitty", {"NO_COLOR": "1"}, "kitty"),
    ],
)
def test_no_color_and_an_explicit_choice_do_not_ask_the_terminal(choice, env, expected):
    assert picture_protocol(choice, env, detect=never_asked) == expected


def test_without_a_terminal_nothing_is_asked(monkeypatch):
    # tests, pipes, cron: the answer would never come; the graphics module is not imported
    monkeypatch.setattr("sys.__stdout__", io.StringIO())
    assert detect_protocol() is None


def test_the_widget_draws_with_the_chosen_protocol():
    from textual_image.widget import SixelImage, TGPImage

    assert isinstance(picture_mode.picture_widget("sixel"), SixelImage)
    assert isinstance(picture_mode.picture_widget("kitty"), TGPImage)


def run_inspect(tmp_path, monkeypatch, argv, env=None):
    """``flatsight inspect`` up to the station's start; returns (status, the station or None)."""
    from flatsight.tui.app import FlatsightStation

    started = []
    monkeypatch.setattr(FlatsightStation, "run", lambda self: started.append(self))
    monkeypatch.setattr(picture_mode, "detect_protocol", lambda: "sixel")
    for key in ("NO_COLOR", picture_mode.ENV_VAR):
        monkeypatch.delenv(key, raising=False)
    for key, value in (env or {}).items():
        monkeypatch.setenv(key, value)
    photo = tmp_path / "BW-FL-0412.png"
    photo.write_bytes(b"stand-in")
    status = main(["inspect", "--no-log", "--config", str(tmp_path / "station.toml"),
                   *argv, str(photo)])
    return status, (started[0] if started else None)


@pytest.mark.parametrize(
    ("argv", "env", "expected"),
    [
        ([], {}, "sixel"),  # auto: what the terminal answered
        ([], {"NO_COLOR": "1"}, None),
        (["--images", "off"], {}, None),
        ([], {"FLATSIGHT_IMAGES": "off"}, None),
        (["--images", "kitty"], {"FLATSIGHT_IMAGES": "off"}, "kitty"),  # the option wins
    ],
)
def test_inspect_hands_the_station_its_pictures(tmp_path, monkeypatch, argv, env, expected):
    status, station = run_inspect(tmp_path, monkeypatch, argv, env)
    assert status == 0 and station is not None
    assert station.pictures == expected
    assert len(station.cell_px) == 2 and min(station.cell_px) >= 1


def test_a_bad_flatsight_images_is_one_line_and_status_2(tmp_path, monkeypatch, capsys):
    status, station = run_inspect(tmp_path, monkeypatch, [], {"FLATSIGHT_IMAGES": "maybe"})
    err = capsys.readouterr().err
    assert status == 2 and station is None
    assert err.count("\n") == 1 and "FLATSIGHT_IMAGES=maybe" in err and "auto, on" in err
