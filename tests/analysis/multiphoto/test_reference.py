"""Tests of loading a stored reference map and subtracting it, scaled to the aperture."""

from __future__ import annotations

import math

import numpy as np
import pytest
from flatsight.analysis.aperture import Aperture
from flatsight.analysis.errors import UnreadablePhotoError
from flatsight.analysis.multiphoto.reference import load_reference_map, subtract_reference
from flatsight.analysis.pipeline import MapGeometry, MeasureSettings, measurement_from_height
from flatsight.analysis.synthetic import SyntheticSurface
from PIL import Image

PART = SyntheticSurface(zernike_nm={4: -25.0, 5: 8.0, 8: 4.0, 11: 3.0})
REFERENCE = SyntheticSurface(zernike_nm={4: 6.0, 6: -5.0, 7: 3.0, 9: 2.5, 12: 1.5})


def stored_map(shape=(150, 170), center=(88.4, 73.2), radius=64.0):
    """A reference map as --save-map stores it: heights on its grid, NaN outside the disk."""
    y, x = np.mgrid[0 : shape[0], 0 : shape[1]].astype(float)
    xu, yu = (x - center[0]) / radius, (center[1] - y) / radius
    h = REFERENCE.height_nm(xu, yu)
    return np.where(np.hypot(xu, yu) <= 1.0, h, np.nan)


def measured_pair(shape=(231, 240), center=(250.0, 190.0), radius=180.0, step=1.6,
                  method="carrier"):
    """What a photo of the part against that reference measures: the sum of both."""
    ox = center[0] - step * (shape[1] - 1) / 2
    oy = center[1] - step * (shape[0] - 1) / 2
    geometry = MapGeometry(ox, oy, step, shape)
    aperture = Aperture(*center, radius)
    xu, yu = geometry.unit_xy(aperture)
    valid = np.hypot(xu, yu) <= 1.0
    h = PART.height_nm(xu, yu) + REFERENCE.height_nm(xu, yu)
    return measurement_from_height(
        np.where(valid, h, np.nan),
        valid,
        aperture=aperture,
        geometry=geometry,
        settings=MeasureSettings(),
        photo="BW-FL-0412.png",
        quality_fields={"method": method},
    )


def test_disk_of_a_stored_map_is_found(tmp_path):
    path = tmp_path / "ref.npy"
    np.save(path, stored_map())
    ref = load_reference_map(path)
    assert ref.center_x_px == pytest.approx(88.4, abs=0.1)
    assert ref.center_y_px == pytest.approx(73.2, abs=0.1)
    assert ref.radius_px == pytest.approx(64.0, abs=0.2)
    assert len(ref.sha256) == 64


@pytest.mark.parametrize("suffix", [".npy", ".tif"])
def test_subtracting_the_reference_leaves_the_part(tmp_path, suffix):
    path = tmp_path / f"bench-2-reference{suffix}"
    arr = stored_map()
    if suffix == ".npy":
        np.save(path, arr)
    else:
        Image.fromarray(arr.astype(np.float32), mode="F").save(path)
    m = measured_pair()
    out = subtract_reference(m, load_reference_map(path))
    coef = out.measurement.zernike.coefficients_nm
    for j in range(4, 16):
        # the part's own terms (the map of the pair held both surfaces)
        assert coef[j - 1] == pytest.approx(PART.zernike_nm.get(j, 0.0), abs=0.25), j
    assert out.reference.path == str(path)
    assert out.covered_fraction > 0.97
    assert out.measurement.photo == m.photo
    # the pair's own fit still carried the reference's terms
    assert m.zernike.coefficients_nm[5] == pytest.approx(-5.0, abs=0.25)


def test_the_photo_keeps_its_method_and_its_share_of_u(tmp_path):
    # The map left after the reference is taken out is still the photo's: an intensity
    # fit's aperture sets its height scale as before, so its figures keep that share of
    # U (GUM, JCGM 100:2008, 5.1: the parts add in quadrature) and the record its method.
    from flatsight.analysis.uncertainty import INTENSITY_FIT_SCALE

    path = tmp_path / "r.npy"
    np.save(path, stored_map())
    ref = load_reference_map(path)
    fit = subtract_reference(measured_pair(method="intensity-fit"), ref).measurement
    carrier = subtract_reference(measured_pair(method="carrier"), ref).measurement
    assert fit.quality.method == "intensity-fit" and carrier.quality.method == "carrier"
    for name in ("rms_nm", "power_nm"):
        value = abs(getattr(carrier.figures, name))
        assert fit.figures.uncertainty_budget[name]["method_nm"] == pytest.approx(math.hypot(
            carrier.figures.uncertainty_budget[name]["method_nm"],
            INTENSITY_FIT_SCALE * value), rel=1e-6)


def test_input_measurement_is_left_alone(tmp_path):
    path = tmp_path / "r.npy"
    np.save(path, stored_map())
    m = measured_pair()
    before = m.height_nm.copy()
    subtract_reference(m, load_reference_map(path))
    assert np.array_equal(before, m.height_nm, equal_nan=True)


def test_bad_reference_files_give_one_line_errors(tmp_path):
    with pytest.raises(UnreadablePhotoError, match="no such reference map"):
        load_reference_map(tmp_path / "missing.npy")
    corrupt = tmp_path / "corrupt.npy"
    corrupt.write_bytes(b"\x93NUMPY garbage that is not an array header")
    with pytest.raises(UnreadablePhotoError, match="not a readable .npy height map"):
        load_reference_map(corrupt)
    flat = tmp_path / "line.npy"
    np.save(flat, np.zeros(100))
    with pytest.raises(UnreadablePhotoError, match="not a 2-D float height map"):
        load_reference_map(flat)
    square = tmp_path / "square.npy"
    np.save(square, np.zeros((80, 80)))
    with pytest.raises(UnreadablePhotoError, match="not a disk"):
        load_reference_map(square)
    photo = tmp_path / "photo.tif"
    Image.fromarray(np.zeros((40, 40), np.uint8)).save(photo)
    with pytest.raises(UnreadablePhotoError, match="not a 32-bit float height map"):
        load_reference_map(photo)
    wrong = tmp_path / "ref.png"
    wrong.write_bytes(b"x")
    with pytest.raises(UnreadablePhotoError, match=r"must be a \.npy or 32-bit float"):
        load_reference_map(wrong)
    for exc_path in (corrupt, flat, square, photo, wrong):
        try:
            load_reference_map(exc_path)
        except UnreadablePhotoError as exc:
            assert "\n" not in str(exc) and str(exc_path) in str(exc)
