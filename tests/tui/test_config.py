"""Tests of the station's remembered settings (tui/config.py) and height units."""

from __future__ import annotations

import tomllib
from dataclasses import replace

import pytest
from flatsight.analysis.errors import SettingsError
from flatsight.tui.config import (
    StationSettings,
    configured_log,
    load_settings,
    save_settings,
    settings_from_toml,
    settings_to_toml,
    validate,
)
from flatsight.tui.render.units import convert, fmt_height, next_units


def test_missing_file_gives_defaults(tmp_path):
    settings, notice = load_settings(tmp_path / "nothing.toml")
    assert settings == StationSettings() and notice is None
    assert settings.wavelength_nm == 632.8  # He-Ne (common practice)


def test_round_trip_through_the_file(tmp_path):
    path = tmp_path / "sub" / "station.toml"
    s = StationSettings(
        wavelength_nm=589.3,
        invert=True,
        diameter_mm=150.0,
        n_terms=28,
        units="fringes",
        removed_terms=(4, 5, 6),
        colour="mono",
        decision="guarded",
        wavelength_uncertainty_nm=0.05,
        reference_uncertainty_nm=6.0,
    )
    assert save_settings(s, path) == path
    loaded, notice = load_settings(path)
    assert loaded == replace(s, diameter_mm=None) and notice is None  # a part's, not kept
    # a plain TOML reader sees the same values (tomllib, Python's standard library)
    table = tomllib.loads(path.read_text(encoding="utf-8"))["station"]
    assert table["wavelength_nm"] == 589.3 and table["removed_terms"] == [4, 5, 6]
    assert table["decision"] == "guarded" and table["reference_uncertainty_nm"] == 6.0
    # the rule and the uncertainties stay as they are when the file does not give them
    assert StationSettings().decision == "simple"
    assert StationSettings().reference_uncertainty_nm == 0.0


def test_unset_diameter_is_left_out_and_read_back_as_none(tmp_path):
    text = settings_to_toml(StationSettings(diameter_mm=None))
    assert "diameter_mm" not in text
    assert settings_from_toml(text).diameter_mm is None


def test_the_diameter_is_not_carried_to_the_next_session(tmp_path):
    # issue 9 item 9: a 50 mm part's diameter came back for a 100 mm flat opened the next
    # day, with a wrong radius of curvature and no notice; it belongs to the part
    path = tmp_path / "station.toml"
    save_settings(StationSettings(diameter_mm=50.0), path)
    assert "diameter" not in path.read_text(encoding="utf-8")
    # a file written before this rule: its diameter is not taken either
    path.write_text("[station]\nwavelength_nm = 546.07\ndiameter_mm = 50.0\n", "utf-8")
    loaded, notice = load_settings(path)
    assert loaded.diameter_mm is None and loaded.wavelength_nm == 546.07 and notice is None


def test_write_is_atomic_and_leaves_no_temporary_files(tmp_path):
    path = tmp_path / "station.toml"
    path.write_text("[station]\nwavelength_nm = 546.07\n", encoding="utf-8")
    save_settings(StationSettings(wavelength_nm=587.56), path)
    assert [p.name for p in tmp_path.iterdir()] == ["station.toml"]
    assert load_settings(path)[0].wavelength_nm == 587.56


def test_a_bad_value_is_not_written(tmp_path):
    path = tmp_path / "station.toml"
    save_settings(StationSettings(), path)
    before = path.read_bytes()
    with pytest.raises(SettingsError, match="wavelength"):
        save_settings(StationSettings(wavelength_nm=-5.0), path)
    assert path.read_bytes() == before


def test_broken_or_out_of_range_file_falls_back_with_a_note(tmp_path):
    path = tmp_path / "station.toml"
    path.write_text("[station\nwavelength_nm = ", encoding="utf-8")
    settings, notice = load_settings(path)
    assert settings == StationSettings()
    assert str(path) in notice and "TOML" in notice and "defaults" in notice
    path.write_text("[station]\nn_terms = 3\n", encoding="utf-8")
    settings, notice = load_settings(path)
    assert settings == StationSettings() and "Zernike terms" in notice
    path.write_text('[station]\ninvert = "yes"\n', encoding="utf-8")
    assert "invert" in load_settings(path)[1]
    path.write_text('[station]\nreference_uncertainty_nm = "six"\n', encoding="utf-8")
    assert "bad value" in load_settings(path)[1]


def test_unknown_keys_are_ignored():
    s = settings_from_toml("[station]\nwavelength_nm = 546.07\nshoe_size = 44\n")
    assert s.wavelength_nm == 546.07


@pytest.mark.parametrize(
    "change, words",
    [
        ({"wavelength_nm": 0.0}, "wavelength"),
        ({"wavelength_nm": float("nan")}, "wavelength"),
        ({"diameter_mm": -10.0}, "diameter"),
        ({"n_terms": 200}, "Zernike terms"),
        ({"units": "furlongs"}, "units"),
        ({"colour": "sepia"}, "colour"),
        ({"removed_terms": (2,)}, "removed terms"),
        ({"decision": "lenient"}, "decision rule"),
        ({"reference_uncertainty_nm": -1.0}, "reference flat uncertainty"),
        ({"wavelength_uncertainty_nm": float("inf")}, "wavelength uncertainty"),
    ],
)
def test_validation_names_what_to_change(change, words):
    with pytest.raises(SettingsError, match=words):
        validate(replace(StationSettings(), **change))


def test_heights_in_waves_and_fringes():
    # one fringe is half a wavelength of height in reflection (double pass: D. Malacara,
    # ed., Optical Shop Testing, 3rd ed., Wiley, 2007, ch. 1, from memory); at He-Ne one
    # fringe = 316.40 nm and lambda/10 = 63.28 nm (arithmetic)
    assert convert(316.4, "fringes", 632.8) == pytest.approx(1.0)
    assert convert(63.28, "waves", 632.8) == pytest.approx(0.1)
    assert convert(273.035, "fringes", 546.07) == pytest.approx(1.0)
    assert fmt_height(63.28, "waves", 632.8) == "0.100 λ"
    assert fmt_height(316.4, "fringes", 632.8) == "1.00 fr"
    assert fmt_height(-12.34, "nm", 632.8, signed=True) == "-12.3 nm"
    assert fmt_height(float("nan"), "nm", 632.8) == "—"
    assert [next_units(u) for u in ("nm", "waves", "fringes")] == ["waves", "fringes", "nm"]


def test_a_station_toml_that_cannot_be_read_stops_a_command_rather_than_log_elsewhere(
        tmp_path, monkeypatch, capsys):
    from flatsight.tui.cli import main

    monkeypatch.setenv("XDG_CONFIG_HOME", str(tmp_path))
    config = tmp_path / "flatsight" / "station.toml"
    config.parent.mkdir()
    config.write_text('[station\nlog = "postgresql://flatsight_station@qa-server/flatsight"\n')
    assert main(["history"]) == 2
    err = capsys.readouterr().err
    assert "not valid TOML" in err and "give --log" in err and len(err.splitlines()) == 1
    log = tmp_path / "local.sqlite"  # --log still works, the file aside
    assert main(["history", "--log", str(log)]) == 2
    assert "no inspection log at" in capsys.readouterr().err
    config.write_text('[station]\nlog = "postgresql://flatsight_station@qa-server/flatsight"\n')
    assert configured_log() == "postgresql://flatsight_station@qa-server/flatsight"
    settings, note = load_settings(config)
    assert note is None and settings.log == configured_log()
    # the settings screen writes the file anew: the log the shop set stays in it
    save_settings(settings, config)
    assert configured_log() == "postgresql://flatsight_station@qa-server/flatsight"
