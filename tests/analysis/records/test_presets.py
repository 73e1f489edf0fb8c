"""Station presets from TOML: reading, defaults, and the one-line errors."""

from __future__ import annotations

import tomllib

import pytest
from flatsight.analysis.errors import SettingsError
from flatsight.analysis.records import presets

GOOD = """
# Brindlewick Optical Works, bench 2 (demo data)
[presets.bench-2-hene]
wavelength_nm = 632.8
diameter_mm = 100
tolerance = "3/1(0.25)"
zernike_terms = 36
operator = "Tamsin Ode"
station = "bench-2"

[presets."sodium window"]
wavelength_nm = 589.3
tolerance = "pv<=0.1w"
spec_wavelength_nm = 589.3
decision = "guarded"
wavelength_uncertainty_nm = 0.02
reference_uncertainty_nm = 6
"""


def write(tmp_path, text, name="presets.toml"):
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


def test_reads_presets(tmp_path):
    p = write(tmp_path, GOOD)
    got = presets.load_presets(p)
    assert sorted(got) == ["bench-2-hene", "sodium window"]
    hene = got["bench-2-hene"]
    assert hene == presets.Preset(
        name="bench-2-hene",
        wavelength_nm=632.8,
        diameter_mm=100.0,
        tolerance="3/1(0.25)",
        zernike_terms=36,
        operator="Tamsin Ode",
        station="bench-2",
    )
    assert got["sodium window"].diameter_mm is None
    sodium = presets.get_preset("sodium window", path=p)
    assert sodium.spec_wavelength_nm == 589.3 and sodium.decision == "guarded"
    assert sodium.wavelength_uncertainty_nm == 0.02 and sodium.reference_uncertainty_nm == 6.0
    assert hene.decision is None and hene.reference_uncertainty_nm is None  # not set: default
    # agrees with the standard library's own reading of the file (tomllib)
    raw = tomllib.loads(GOOD)["presets"]["bench-2-hene"]
    assert {k: getattr(hene, k) for k in raw} == raw


def test_default_path_is_in_the_user_config_dir(monkeypatch, tmp_path):
    import platformdirs

    assert presets.default_presets_path() == (
        tmp_path.__class__(platformdirs.user_config_dir("flatsight")) / "presets.toml"
    )
    monkeypatch.setattr(presets, "default_presets_path", lambda: tmp_path / "none.toml")
    assert presets.load_presets() == {}  # no file yet: no presets, no error
    with pytest.raises(SettingsError, match=r"no preset 'x' in .*\(known: none\)"):
        presets.get_preset("x")


@pytest.mark.parametrize(
    ("text", "message"),
    [
        ("[presets.a]\nwavelength_nm = = 3\n", r"not valid TOML: .*line 2"),
        ("[presets.a]\nwavelenght_nm = 632.8\n", r"unknown key 'wavelenght_nm'"),
        ("[presets.a]\nwavelength_nm = -5\n", r"wavelength_nm = -5 is out of range"),
        ('[presets.a]\nwavelength_nm = "red"\n', r"must be a number"),
        ("[presets.a]\nzernike_terms = 3\n", r"zernike_terms must be a whole number"),
        ('[presets.a]\ntolerance = "3/1(0.5"\n', r"preset 'a': tolerance .*at character 8"),
        ("[bench]\nwavelength_nm = 632.8\n", r"unknown top-level key 'bench'"),
        ("presets = 3\n", r"must be tables"),
        ('[presets.a]\ndecision = "lenient"\n', r"decision must be 'simple' or 'guarded'"),
        ("[presets.a]\ndecision = 1\n", r"decision must be a non-empty string"),
        ("[presets.a]\nreference_uncertainty_nm = -2\n", r"= -2 is out of range \(0 to 1000\)"),
        ('[presets.a]\nwavelength_uncertainty_nm = "0.1"\n', r"must be a number"),
    ],
)
def test_bad_files_give_one_line(tmp_path, text, message):
    p = write(tmp_path, text)
    with pytest.raises(SettingsError, match=message) as info:
        presets.load_presets(p)
    assert "\n" not in str(info.value)
    assert str(p) in str(info.value)


def test_unknown_name_lists_the_known_ones(tmp_path):
    p = write(tmp_path, GOOD)
    with pytest.raises(SettingsError, match=r"no preset 'bench-3'.*known: bench-2-hene, sodium"):
        presets.get_preset("bench-3", path=p)
    with pytest.raises(SettingsError, match="no presets file"):
        presets.load_presets(tmp_path / "nope.toml")


def test_record_keeping_modules_stay_free_of_the_terminal_libraries():
    # house style: analysis/ never imports textual or rich (checked in a fresh interpreter)
    import subprocess
    import sys

    code = ("import sys\n"
            "import flatsight.analysis.records.tolerances, flatsight.analysis.records.log\n"
            "import flatsight.analysis.records.presets, flatsight.analysis.records.certificate\n"
            "print(sorted(m for m in sys.modules if m.split('.')[0] in ('rich', 'textual')))")
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                         check=True).stdout
    assert out.strip() == "[]"
