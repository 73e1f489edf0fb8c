"""The synthetic photo generator obeys its own physics, and its truth is right."""

from __future__ import annotations

import numpy as np
import pytest
from flatsight.analysis.aperture import Aperture
from flatsight.analysis.errors import SettingsError
from flatsight.analysis.synthetic import (
    SyntheticSurface,
    check_accuracy,
    make_fringe_photo,
    random_photo,
    write_photo,
)
from PIL import Image

SQRT3, SQRT6, SQRT8 = np.sqrt(3.0), np.sqrt(6.0), np.sqrt(8.0)

# Everything a camera adds switched off, so the photo is the bare two-beam model.
CLEAN = dict(
    gamma=1.0,
    noise=0.0,
    dust=0,
    bad_pixels=0,
    illumination=0.0,
    mount_ring=False,
    bit_depth=16,
    edge_px=2.0,
)


def _explicit_height(x, y, a4, a6, a8):
    """Noll terms 4, 6, 8 written out in Cartesian form (Noll 1976, table I, from memory):
    Z4 = sqrt3 (2 rho^2 - 1), Z6 = sqrt6 (x^2 - y^2), Z8 = sqrt8 (3 rho^2 - 2) x."""
    r2 = x * x + y * y
    return a4 * SQRT3 * (2 * r2 - 1) + a6 * SQRT6 * (x * x - y * y) + a8 * SQRT8 * (3 * r2 - 2) * x


def test_intensity_matches_the_two_beam_closed_form():
    # Takeda et al., JOSA 72, 156 (1982): I = a + b cos(2 pi f0.r + phi), with
    # phi = 4 pi h / lambda for double-pass reflection (common practice).
    a4, a6, a8 = 40.0, -25.0, 12.0
    surface = SyntheticSurface({4: a4, 6: a6, 8: a8})
    lam, fringes, angle, vis, level = 589.3, 17.0, 37.0, 0.8, 0.45
    photo = make_fringe_photo(
        surface,
        shape=(300, 400),
        center_xy=(210.0, 140.0),
        radius_px=120.0,
        wavelength_nm=lam,
        fringes=fringes,
        angle_deg=angle,
        visibility=vis,
        level=level,
        **CLEAN,
    )
    rng = np.random.default_rng(1)
    px = rng.uniform(210 - 100, 210 + 100, 400).round()
    py = rng.uniform(140 - 100, 140 + 100, 400).round()
    inner = np.hypot(px - 210, py - 140) < 100  # well inside the soft edge
    px, py = px[inner], py[inner]
    xu, yu = (px - 210.0) / 120.0, (140.0 - py) / 120.0  # Zernike axes: y up
    f = fringes / 240.0
    carrier = 2 * np.pi * f * (np.cos(np.radians(angle)) * px + np.sin(np.radians(angle)) * py)
    expected = level * (
        1 + vis * np.cos(carrier + 4 * np.pi * _explicit_height(xu, yu, a4, a6, a8) / lam)
    )
    got = photo.image[py.astype(int), px.astype(int)]
    np.testing.assert_allclose(got, expected, atol=1.0 / 65535)


def test_quarter_wave_of_height_turns_bright_fringes_dark():
    # Common practice: moving a mirror by lambda/4 changes the path by lambda/2 and turns
    # a bright fringe dark; lambda/2 of height is one whole fringe (no change).
    lam, level = 632.8, 0.4
    base = {4: 30.0, 5: -20.0}
    kw = dict(
        shape=(200, 240), radius_px=80.0, wavelength_nm=lam, visibility=0.9, level=level, **CLEAN
    )
    p0 = make_fringe_photo(SyntheticSurface(base), **kw)
    p_quarter = make_fringe_photo(SyntheticSurface({1: lam / 4, **base}), **kw)
    p_half = make_fringe_photo(SyntheticSurface({1: lam / 2, **base}), **kw)
    yy, xx = np.mgrid[:200, :240]
    inner = p0.aperture.inside(xx, yy) & (np.hypot(xx - 119.5, yy - 99.5) < 70)
    i0, iq, ih = p0.image[inner], p_quarter.image[inner], p_half.image[inner]
    np.testing.assert_allclose(i0 + iq, 2 * level, atol=2.0 / 65535)
    np.testing.assert_allclose(ih, i0, atol=2.0 / 65535)
    brightest = np.argmax(i0)
    assert i0[brightest] > level * 1.85 and iq[brightest] < level * 0.15


@pytest.mark.parametrize(("angle", "term", "sign"), [(0.0, 2, +1), (90.0, 3, -1), (90.0, 2, 0)])
def test_tilt_changes_the_fringe_count_with_flatsights_sign(angle, term, sign):
    # A tilt term of a nm (Z2 = 2x, Z3 = 2y, Noll 1976) is 4a nm of height across the
    # diameter, i.e. 8a/lambda fringes (one fringe = lambda/2, common practice). With the
    # carrier pointing right (0 deg) a surface rising to the right adds fringes; with it
    # pointing down (90 deg) a surface rising toward the top removes them
    # (DEVELOPERS.md, "Sign"). Counted with numpy.fft on a line through the centre.
    lam, fringes, a = 632.8, 20.0, 632.8 / 2  # a = lambda/2 -> 4 fringes
    photo = make_fringe_photo(
        SyntheticSurface({term: a}),
        shape=(512, 512),
        center_xy=(255.5, 255.5),
        radius_px=240.0,
        wavelength_nm=lam,
        fringes=fringes,
        angle_deg=angle,
        visibility=0.8,
        level=0.4,
        **CLEAN,
    )
    line = photo.image[256, 16:496] if angle == 0.0 else photo.image[16:496, 256]
    line = (line - line.mean()) * np.hanning(line.size)
    spec = np.abs(np.fft.rfft(line, n=line.size * 32))
    cycles_per_px = np.fft.rfftfreq(line.size * 32)[np.argmax(spec)]
    measured = cycles_per_px * 2 * 240.0
    assert measured == pytest.approx(fringes + sign * 8 * a / lam, abs=0.3)


def test_soft_edge_is_half_way_at_the_true_radius_and_the_surround_is_dark_or_grey():
    level = 0.5
    kw = dict(CLEAN, visibility=0.0, level=level, edge_px=6.0)
    dark = make_fringe_photo(
        SyntheticSurface({}),
        shape=(200, 300),
        center_xy=(140.0, 100.0),
        radius_px=70.3,
        surround="dark",
        **kw,
    )
    row = dark.image[100]
    edge_value = np.interp(140.0 + 70.3, np.arange(300), row)
    assert edge_value == pytest.approx((level + 0.02) / 2, abs=0.01)
    assert row[int(140 + 70.3 + 40)] == pytest.approx(0.02, abs=1e-4)
    assert row[140] == pytest.approx(level, abs=1e-4)
    grey = make_fringe_photo(
        SyntheticSurface({4: 50.0}),
        shape=(200, 300),
        center_xy=(140.0, 100.0),
        radius_px=70.3,
        surround="grey",
        **dict(kw, visibility=0.8),
    )
    outside = grey.image[:, 240:]
    # flat grey of 30-40 %, and no fringes there
    assert 0.30 <= outside.mean() <= 0.40 and outside.std() < 1e-4


def test_dust_only_darkens_small_patches_inside_the_aperture():
    kw = dict(CLEAN, noise=0.0, shape=(400, 400), radius_px=160.0, visibility=0.6, level=0.5)
    clean = make_fringe_photo(SyntheticSurface({4: 20.0}), **kw)
    dusty = make_fringe_photo(SyntheticSurface({4: 20.0}), **dict(kw, dust=6))
    diff = dusty.image - clean.image
    changed = np.abs(diff) > 1e-3
    yy, xx = np.nonzero(changed)
    assert changed.sum() > 6 * np.pi * 1.5**2  # at least six small specks
    assert changed.sum() < 6 * np.pi * 30**2  # and never big ones
    assert np.all(np.hypot(xx - 199.5, yy - 199.5) < 160 + 30)
    # dark blobs; a halo brightens by at most 20 %, so the specks take light away overall
    assert diff.min() < -0.15 and diff.max() <= 0.2 * clean.image.max() and diff.sum() < 0


def test_quantisation_and_file_round_trips(tmp_path):
    surface = SyntheticSurface({4: 30.0, 7: 10.0}, ripple_nm=1.0)
    for depth, levels in ((8, 255), (16, 65535)):
        photo = make_fringe_photo(surface, shape=(120, 160), bit_depth=depth, seed=3)
        counts = photo.image * levels
        np.testing.assert_allclose(counts, np.round(counts), atol=1e-6)
        assert photo.image.min() >= 0.0 and photo.image.max() <= 1.0
        for suffix in (".png", ".tif"):
            path = tmp_path / f"p{depth}{suffix}"
            write_photo(photo, path)
            # Pillow is the reference reader: lossless formats give back every count exactly
            back = np.asarray(Image.open(path)).astype(float)
            np.testing.assert_array_equal(back, np.round(counts))
    photo8 = make_fringe_photo(surface, shape=(120, 160), bit_depth=8, seed=3)
    write_photo(photo8, tmp_path / "p.jpg")
    back = np.asarray(Image.open(tmp_path / "p.jpg")).astype(float) / 255
    assert np.mean(np.abs(back - photo8.image)) < 3.0 / 255  # quality 92 JPEG: a few counts
    with pytest.raises(SettingsError, match="16-bit"):
        write_photo(photo8, tmp_path / "q.jpg", bit_depth=16)
    with pytest.raises(SettingsError, match=".bmpx"):
        write_photo(photo8, tmp_path / "q.bmpx")
    # written through a temporary file renamed into place: nothing else left behind
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(
        ["p8.png", "p8.tif", "p16.png", "p16.tif", "p.jpg"]
    )


def test_bad_settings_are_refused_with_a_clear_message():
    s = SyntheticSurface({})
    with pytest.raises(SettingsError, match="does not fit"):
        make_fringe_photo(s, shape=(100, 100), center_xy=(20.0, 50.0), radius_px=40.0)
    with pytest.raises(SettingsError, match="angle"):
        make_fringe_photo(s, shape=(100, 100), angle_deg=200.0)


@pytest.mark.parametrize("seed", range(12))
def test_random_photos_cover_the_hard_range_with_the_disk_in_frame(seed):
    photo = random_photo(seed, megapixels=(0.3, 0.6))
    p = photo.params
    rows, cols = photo.image.shape
    ap = photo.aperture
    assert 0.3 * 0.97 <= rows * cols / 1e6 <= 0.6 * 1.03
    assert 0.30 <= ap.radius_px / min(rows, cols) <= 0.48
    assert ap.center_x_px - ap.radius_px >= 0 and ap.center_x_px + ap.radius_px <= cols - 1
    assert ap.center_y_px - ap.radius_px >= 0 and ap.center_y_px + ap.radius_px <= rows - 1
    assert 12.0 <= p["fringes"] <= 35.0 and 0.0 <= p["angle_deg"] < 180.0
    assert 0.35 <= p["visibility"] <= 0.9 and p["noise"] <= 0.03
    assert 546.0 <= photo.wavelength_nm <= 633.0
    assert set(p["zernike_nm"]) <= set(range(4, 16))
    truth = photo.truth()
    assert photo.wavelength_nm / 20 * 0.8 <= truth.pv_nm <= photo.wavelength_nm * 1.1
    # fringe period of at least 5 px where the carrier is steepest (common practice: 4-5 px)
    assert 2 * ap.radius_px / p["fringes"] >= 5.0
    # deterministic: the same seed makes the same photo
    np.testing.assert_array_equal(random_photo(seed, megapixels=(0.3, 0.6)).image, photo.image)


def test_truth_of_pure_power_has_the_closed_form_pv_to_rms_ratio():
    # PV/RMS of power over the full disk is 2 sqrt(3): Noll's Z4 = sqrt(3)(2 rho^2 - 1)
    # (Noll, JOSA 66(3), 207, 1976) runs from -sqrt(3) to sqrt(3) with unit RMS.
    a4 = 25.0
    photo = make_fringe_photo(SyntheticSurface({4: a4}), shape=(500, 500), radius_px=220.0, **CLEAN)
    truth = photo.truth()
    assert truth.pv_nm / truth.rms_nm == pytest.approx(2 * SQRT3, rel=5e-3)
    # Noll terms are orthonormal (Noll 1976), so the RMS is the coefficient itself
    assert truth.rms_nm == pytest.approx(a4, rel=5e-3)
    assert truth.zernike_nm[3] == pytest.approx(a4, rel=1e-6)
    assert np.max(np.abs(np.delete(truth.zernike_nm, 3)[1:])) < 1e-6 * a4
    assert truth.pvr_nm == pytest.approx(
        truth.pv_nm, rel=1e-3
    )  # no residual: PVr = PV (Evans 2009)
    # Over a disk of 0.9 R, sqrt3 (2 (0.9 rho')^2 - 1) = 0.81 Z4(rho') + const (computed)
    smaller = photo.aperture.moved(dr=-0.1 * photo.aperture.radius_px)
    assert photo.truth(smaller).zernike_nm[3] == pytest.approx(0.81 * a4, rel=1e-6)


def test_truth_removes_only_piston_and_tilt_over_the_reported_disk():
    # Slow obvious reference written here: sample every photo pixel in the reported disk,
    # remove a plane by numpy.linalg.lstsq, take RMS and PV.
    surface = SyntheticSurface({4: 20.0, 6: -15.0, 9: 8.0}, ripple_nm=1.5, ripple_cycles=6.0)
    photo = make_fringe_photo(surface, shape=(300, 300), radius_px=110.0, **CLEAN)
    reported = Aperture(151.0, 148.5, 106.0)
    yy, xx = np.mgrid[:300, :300].astype(float)
    keep = reported.inside(xx, yy)
    h = photo.true_height_nm(xx[keep], yy[keep])
    design = np.stack([np.ones_like(h), xx[keep], yy[keep]], axis=1)
    plane, *_ = np.linalg.lstsq(design, h, rcond=None)
    rest = h - design @ plane
    truth = photo.truth(reported)
    assert truth.rms_nm == pytest.approx(np.std(rest), rel=1e-3)
    assert truth.pv_nm == pytest.approx(np.ptp(rest), rel=2e-3)
    assert truth.aperture == reported


def test_accuracy_check_applies_the_issue_targets():
    photo = make_fringe_photo(
        SyntheticSurface({4: 40.0, 6: 10.0}), shape=(200, 200), radius_px=80.0, **CLEAN
    )
    t = photo.truth()
    exact = check_accuracy(
        photo, aperture=photo.aperture, rms_nm=t.rms_nm, pvr_nm=t.pvr_nm, zernike_nm=t.zernike_nm
    )
    assert exact.ok and exact.worst_ratio == pytest.approx(0.0, abs=1e-9)
    # limits: RMS max(1.5 nm, 2 %), PVr max(5 nm, 5 %), terms 4-15 max(1.5 nm, 3 %)
    assert exact.rms_limit_nm == pytest.approx(max(1.5, 0.02 * t.rms_nm))
    assert exact.pvr_limit_nm == pytest.approx(max(5.0, 0.05 * t.pvr_nm))
    terms_rms = np.sqrt(np.mean(t.zernike_nm[3:15] ** 2))
    assert exact.zernike_limit_nm == pytest.approx(max(1.5, 0.03 * terms_rms))
    shifted = photo.aperture.moved(dx=0.02 * 80.0)  # 2 % of the radius: over the 1.5 % limit
    ts = photo.truth(shifted)
    off = ts.zernike_nm.copy()
    off[3] += 1.1 * exact.zernike_limit_nm * np.sqrt(12)  # one term off: RMS of 12 just over
    bad = check_accuracy(
        photo, aperture=shifted, rms_nm=ts.rms_nm + 1.6, pvr_nm=ts.pvr_nm - 4.9, zernike_nm=off
    )
    assert bad.passed == {"rms": False, "pvr": True, "zernike": False, "aperture": False}
    assert bad.rms_error_nm == pytest.approx(1.6) and bad.truth.aperture == shifted
    assert "RMS" in bad.describe() and "vs true" in bad.describe()


def test_tone_curve_and_noise_follow_their_definitions():
    # Flat lamp (no fringes): the camera maps level L to L ** gamma, then adds Gaussian
    # noise of sigma = noise * full scale (numpy's normal generator), quantised to 8 bits
    # (uniform rounding error of 1/255/sqrt(12) per photo, common practice).
    level, gamma, sigma = 0.4, 0.6, 0.02
    kw = dict(CLEAN, visibility=0.0, level=level, gamma=gamma, bit_depth=8, shape=(300, 300))
    smooth = make_fringe_photo(SyntheticSurface({}), **kw)
    noisy = make_fringe_photo(SyntheticSurface({}), **dict(kw, noise=sigma))
    centre = (slice(100, 200), slice(100, 200))
    assert smooth.image[centre] == pytest.approx(round(level**gamma * 255) / 255, abs=1e-12)
    diff = (noisy.image - smooth.image)[centre]
    expected = np.sqrt(sigma**2 + 1 / (255**2 * 12))
    assert np.std(diff) == pytest.approx(expected, rel=0.05)
    assert abs(np.mean(diff)) < 0.002


def test_multiple_beam_fringes_are_thin_and_dark():
    # the Airy function's dark fringes in reflection are 4 asin(1 / sqrt(F)) wide in
    # phase at half depth (Born & Wolf, Principles of Optics, multiple-beam fringes, from
    # memory): with F = 25, 0.81 rad of 2 pi, so about 13 % of the part lies darker than
    # halfway, where two-beam fringes leave half of it
    flat = SyntheticSurface(zernike_nm={})
    shares = []
    for finesse in (0.0, 25.0):
        photo = make_fringe_photo(flat, shape=(200, 200), fringes=12, finesse=finesse,
                                  **CLEAN)
        yy, xx = np.mgrid[0:200, 0:200]
        core = np.hypot(xx - 99.5, yy - 99.5) < 60
        values = photo.image[core]
        shares.append(float(np.mean(values < 0.5 * (values.min() + values.max()))))
    assert shares[0] == pytest.approx(0.5, abs=0.05)
    assert shares[1] == pytest.approx(4 * np.arcsin(1 / 5) / (2 * np.pi), abs=0.03)
    with pytest.raises(SettingsError):
        make_fringe_photo(flat, shape=(64, 64), finesse=-1.0)
