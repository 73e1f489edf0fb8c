"""Tests of the `measure --json` record and the saved height map (analysis/record.py)."""

from __future__ import annotations

import hashlib
import json
import math
import os
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from flatsight.analysis import record as record_module
from flatsight.analysis.aperture import Aperture
from flatsight.analysis.errors import SettingsError
from flatsight.analysis.pipeline import MeasureSettings, measure
from flatsight.analysis.record import (
    flat_fields,
    measurement_to_record,
    outline_fields,
    save_height_map,
)
from flatsight.analysis.shapes import Ellipse, Polygon, parse_shape
from flatsight.analysis.version import flatsight_version
from flatsight.analysis.zernike import noll_to_osa
from PIL import Image

LAM = 632.8


@pytest.fixture(scope="module")
def measured(photo_set):
    settings = MeasureSettings(wavelength_nm=LAM, diameter_mm=100.0, report_wavelength_nm=546.07)
    return measure(photo_set.good_png, settings)


@pytest.fixture(scope="module")
def rec(measured):
    return measurement_to_record(measured)


def test_record_has_every_field_the_issue_lists(rec, photo_set):
    # issue 2, item 9: the fields a script can rely on
    assert rec["photo"] == str(photo_set.good_png)
    assert rec["wavelength_nm"] == LAM
    assert set(rec["aperture"]) >= {"center_x_px", "center_y_px", "radius_px"}
    for name in ("pv", "rms", "pvr", "power", "irregularity"):
        assert isinstance(rec[f"{name}_nm"], float), name
        assert isinstance(rec[f"{name}_waves"], float), name
    z = rec["zernike"]
    assert z["ordering"] == "noll" and z["first_index"] == 1
    assert len(z["coefficients_nm"]) == 36
    q = rec["quality"]
    assert set(q) >= {"carrier_fringes", "resolution_cycles_per_aperture", "mean_modulation",
                      "masked_fraction"}
    assert isinstance(rec["warnings"], list)
    assert rec["flatsight_version"] == flatsight_version()


def test_record_values_agree_with_the_measurement(rec, measured):
    m = measured
    f = m.figures
    for name in ("pv", "rms", "pvr", "power", "irregularity", "astigmatism"):
        nm = getattr(f, f"{name}_nm")
        assert rec[f"{name}_nm"] == pytest.approx(nm, abs=1e-3)
        # waves = nm / wavelength, fringes = nm / (wavelength / 2) (common practice)
        assert rec[f"{name}_waves"] == pytest.approx(nm / LAM, abs=1e-5)
        assert rec[f"{name}_waves"] == pytest.approx(rec[f"{name}_nm"] / LAM, abs=1e-5)
        assert rec["report_waves"][f"{name}_waves"] == pytest.approx(nm / 546.07, abs=1e-5)
    for name in ("pv", "power", "irregularity"):
        assert rec[f"{name}_fringes"] == pytest.approx(2 * rec[f"{name}_nm"] / LAM, abs=1e-4)
    assert rec["aperture"]["radius_px"] == pytest.approx(m.aperture.radius_px, abs=0.01)
    assert rec["aperture"]["center_x_px"] == pytest.approx(m.aperture.center_x_px, abs=0.01)
    assert rec["aperture"]["source"] == "found"
    np.testing.assert_allclose(rec["zernike"]["coefficients_nm"], m.zernike.coefficients_nm,
                               atol=1e-4)
    # the known surface of the good photo (conftest): Noll 4 = +40, 6 = -12, 8 = +6 nm
    a = rec["zernike"]["coefficients_nm"]
    assert a[3] == pytest.approx(40.0, abs=1.5)
    assert a[5] == pytest.approx(-12.0, abs=1.0)
    assert a[7] == pytest.approx(6.0, abs=1.0)
    # radius of curvature from the power and the 100 mm diameter (R = (r^2 + s^2) / 2s)
    s = rec["power_nm"] * 1e-9
    assert rec["radius_of_curvature_m"] == pytest.approx((0.05**2 + s * s) / (2 * s), rel=1e-3)
    assert rec["quality"]["carrier_fringes"] == pytest.approx(18.0, rel=0.01)
    assert 0.0 <= rec["quality"]["masked_fraction"] <= 1.0
    # "mean fringe visibility over the aperture, 0..1" (pipeline.Quality)
    assert 0.0 < rec["quality"]["mean_modulation"] <= 1.0
    assert rec["settings"]["wavelength_nm"] == LAM and rec["settings"]["n_terms"] == 36


def test_record_names_the_exact_file(rec, photo_set):
    # reference: hashlib's SHA-256 of the file's bytes, so a record can be traced to its photo
    assert rec["photo_sha256"] == hashlib.sha256(photo_set.good_png.read_bytes()).hexdigest()


def test_record_is_strict_json(rec):
    text = json.dumps(rec, allow_nan=False)
    assert "\n" not in text  # one line of JSON Lines
    assert json.loads(text) == rec


def test_missing_values_become_null(measured):
    nan = float("nan")
    figures = replace(measured.figures, pv_nm=nan, radius_of_curvature_m=None)
    rec = measurement_to_record(replace(measured, figures=figures))
    assert rec["pv_nm"] is None and rec["pv_waves"] is None and rec["pv_fringes"] is None
    assert rec["radius_of_curvature_m"] is None
    json.dumps(rec, allow_nan=False)


def test_osa_ordering(measured):
    # OSA/ANSI single index from 0 (Thibos et al. 2002; ISO 24157)
    noll = measurement_to_record(measured)["zernike"]["coefficients_nm"]
    z = measurement_to_record(measured, ordering="osa")["zernike"]
    assert z["ordering"] == "osa" and z["first_index"] == 0
    for j in range(1, 37):
        assert z["coefficients_nm"][noll_to_osa(j)] == noll[j - 1]
    filled = {noll_to_osa(j) for j in range(1, 37)}
    assert all(c == 0.0 for k, c in enumerate(z["coefficients_nm"]) if k not in filled)
    with pytest.raises(SettingsError):
        measurement_to_record(measured, ordering="fringe")


def test_given_aperture_is_marked(measured):
    settings = replace(measured.settings, aperture=measured.aperture)
    rec = measurement_to_record(replace(measured, settings=settings))
    assert rec["aperture"]["source"] == "given"


def test_flat_fields_for_csv(rec):
    row = flat_fields(rec)
    assert all(not isinstance(v, (dict, list)) for v in row.values())
    assert row["z1_nm"] == rec["zernike"]["coefficients_nm"][0]
    assert row["z36_nm"] == rec["zernike"]["coefficients_nm"][35]
    assert row["aperture.radius_px"] == rec["aperture"]["radius_px"]
    assert row["quality.masked_fraction"] == rec["quality"]["masked_fraction"]
    assert row["pv_nm"] == rec["pv_nm"] and row["zernike_ordering"] == "noll"
    # each figure's expanded uncertainty U stands in the column beside it
    keys = list(row)
    for figure in ("pv_nm", "rms_nm", "pvr_nm", "power_nm", "irregularity_nm"):
        assert row[f"u_{figure}"] == rec["uncertainty"][figure] > 0
        assert keys.index(f"u_{figure}") == keys.index(figure) + 1
    assert not any(k.startswith("uncertainty.") for k in keys)


def test_every_csv_row_names_the_parts_outline(rec, measured):
    # issue 10: the CSV lacked the aperture's shape. A round part seen square-on has no
    # aperture.shape in the JSON: "circle", and the --aperture text that gives it back
    row = flat_fields(rec)
    ap = rec["aperture"]
    assert (row["aperture.shape"], row["aperture.view_angle_deg"]) == ("circle", None)
    assert parse_shape(row["aperture.outline"]) == pytest.approx(
        (ap["center_x_px"], ap["center_y_px"], ap["radius_px"]), abs=0.005)
    keys = list(row)
    assert keys.index("aperture.shape") + 1 == keys.index("aperture.outline")
    # an ellipse: its kind, its text and its viewing angle, as aperture.shape holds them;
    # a round part seen at 36.87 deg shows semi-axes 200 and 160 (cos = b / a = 0.8)
    ellipse = Ellipse(320.0, 240.0, 200.0, 160.0, 30.0)
    row = flat_fields(measurement_to_record(replace(measured,
                                                    aperture=Aperture.of_shape(ellipse))))
    assert (row["aperture.shape"], row["aperture.outline"]) == (
        "ellipse", "ellipse:320,240,200,160,30")
    assert row["aperture.view_angle_deg"] == pytest.approx(math.degrees(math.acos(0.8)),
                                                           abs=0.01)
    corners = ((100.0, 100.0), (300.0, 100.0), (200.0, 300.0))
    shaped = measurement_to_record(replace(measured, aperture=Aperture.of_shape(
        Polygon(corners))))
    row = flat_fields(shaped)
    assert (row["aperture.shape"], row["aperture.outline"]) == (
        "poly", "poly:100,100;300,100;200,300")
    assert parse_shape(row["aperture.outline"]).corners_px == corners
    # a record without an aperture (an old or foreign one): empty cells, not an error
    assert outline_fields({"pv_nm": 1.0}) == (None, None, None)


# --- the height map ----------------------------------------------------------------------


def only_file(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir())


def test_save_npy_round_trip(measured, tmp_path):
    target = tmp_path / "BW-FL-0412.npy"
    target.write_bytes(b"an older, longer file " * 10000)
    assert save_height_map(measured, target) == target
    back = np.load(target)
    assert back.dtype == np.float32 and back.shape == measured.height_nm.shape
    np.testing.assert_array_equal(np.isnan(back), ~measured.valid)
    np.testing.assert_allclose(back[measured.valid], measured.height_nm[measured.valid],
                               rtol=1e-6, atol=1e-4)
    assert only_file(tmp_path) == ["BW-FL-0412.npy"]  # no temporary file left


@pytest.mark.parametrize("suffix", [".tif", ".TIFF"])
def test_save_tif_round_trip(measured, tmp_path, suffix):
    target = tmp_path / f"BW-FL-0412{suffix}"
    save_height_map(measured, target)
    with Image.open(target) as im:
        assert im.format == "TIFF" and im.mode == "F"  # 32-bit float
        back = np.asarray(im)
    np.testing.assert_array_equal(np.isnan(back), ~measured.valid)
    np.testing.assert_allclose(back[measured.valid], measured.height_nm[measured.valid],
                               rtol=1e-6, atol=1e-4)
    assert only_file(tmp_path) == [target.name]


def test_save_refuses_other_types(measured, tmp_path):
    with pytest.raises(SettingsError, match="npy or .tif"):
        save_height_map(measured, tmp_path / "map.png")
    assert only_file(tmp_path) == []


def test_failed_tif_write_leaves_the_old_file(measured, tmp_path, monkeypatch):
    target = tmp_path / "map.tif"
    target.write_bytes(b"the previous map")

    def half_then_fail(self, fp, *args, **kwargs):
        Path(fp).write_bytes(b"II*\x00 half a TIFF")
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(Image.Image, "save", half_then_fail)
    with pytest.raises(OSError):
        save_height_map(measured, target)
    assert target.read_bytes() == b"the previous map"
    assert only_file(tmp_path) == ["map.tif"]


def test_failed_npy_write_leaves_the_old_file(measured, tmp_path, monkeypatch):
    target = tmp_path / "map.npy"
    target.write_bytes(b"the previous map")
    real_write = Path.write_bytes

    def half_then_fail(self, data):
        real_write(self, data[: len(data) // 2])
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(Path, "write_bytes", half_then_fail)
    with pytest.raises(OSError):
        save_height_map(measured, target)
    monkeypatch.undo()
    assert target.read_bytes() == b"the previous map"
    assert only_file(tmp_path) == ["map.npy"]


def test_the_map_appears_whole_or_not_at_all(measured, tmp_path, monkeypatch):
    # the only way the target changes is one os.replace of a complete temporary file
    target = tmp_path / "map.npy"
    seen = []
    real_replace = os.replace

    def watch(src, dst):
        seen.append((Path(src).parent, Path(dst), np.load(src).shape))
        return real_replace(src, dst)

    monkeypatch.setattr(os, "replace", watch)
    save_height_map(measured, target)
    assert seen == [(tmp_path, target, measured.height_nm.shape)]


def test_sign_convention_is_stated(rec):
    assert rec["sign_convention"] == record_module.SIGN_CONVENTION
    assert "positive" in rec["sign_convention"]
    assert not math.isnan(rec["pv_nm"])
