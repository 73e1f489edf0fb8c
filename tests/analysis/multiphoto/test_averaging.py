"""Tests of averaging several measurements: alignment, sign check, spread falling as 1/sqrt(N)."""

from __future__ import annotations

import numpy as np
import pytest
from flatsight.analysis.aperture import Aperture
from flatsight.analysis.errors import SettingsError, UnanalysablePhotoError
from flatsight.analysis.multiphoto.averaging import (
    average_measurements,
    check_signs,
    resample_to_unit_disk,
    unit_grid,
)
from flatsight.analysis.pipeline import MapGeometry, MeasureSettings, measurement_from_height
from flatsight.analysis.synthetic import SyntheticSurface
from flatsight.analysis.zernike import fit_zernike

TRUTH = {4: -30.0, 5: 10.0, 6: -6.0, 7: 5.0, 9: 3.0, 11: 4.0}
SURFACE = SyntheticSurface(zernike_nm=TRUTH)


def synthetic_measurement(
    *, center, radius, step, shape, noise_nm=0.0, seed=0, name="p.png", tilt_nm=(0.0, 0.0), sign=1.0
):
    """A measurement of SURFACE as the single-photo engine would hand it over."""
    rng = np.random.default_rng(seed)
    ox = center[0] - step * ((shape[1] - 1) / 2)
    oy = center[1] - step * ((shape[0] - 1) / 2)
    geometry = MapGeometry(ox, oy, step, shape)
    aperture = Aperture(center[0], center[1], radius)
    xu, yu = geometry.unit_xy(aperture)
    h = sign * SURFACE.height_nm(xu, yu) + tilt_nm[0] * xu + tilt_nm[1] * yu + 7.0
    h = h + rng.normal(0.0, noise_nm, h.shape) if noise_nm else h
    valid = np.hypot(xu, yu) <= 1.0
    return measurement_from_height(
        np.where(valid, h, np.nan),
        valid,
        aperture=aperture,
        geometry=geometry,
        settings=MeasureSettings(),
        photo=name,
    )


def on_grid(size, *, noise_nm, seed, name):
    """A map whose pixels fall exactly on the common grid, so resampling adds nothing."""
    radius = 100.0
    return synthetic_measurement(
        center=(300.0, 200.0),
        radius=radius,
        step=2 * radius / (size - 1),
        shape=(size, size),
        noise_nm=noise_nm,
        seed=seed,
        name=name,
        tilt_nm=(seed % 7 - 3.0, seed % 5 - 2.0),
    )


def test_error_of_the_average_falls_as_one_over_root_n():
    # independent errors average down as 1/sqrt(N): the standard deviation of the mean
    # (JCGM 100:2008, the GUM, 4.2.3, from memory); the spread between photos stays at
    # the single-photo noise
    size, sigma = 81, 3.0
    xu, yu = unit_grid(size)
    disk = np.hypot(xu, yu) <= 1
    truth = SURFACE.height_nm(xu, yu)
    plane = fit_zernike(truth[disk], xu[disk], yu[disk], n_terms=3).coefficients_nm
    truth = truth - plane[0] - 2 * plane[1] * xu - 2 * plane[2] * yu  # Noll 2, 3 are 2x, 2y
    for n in (2, 8):
        ms = [on_grid(size, noise_nm=sigma, seed=100 * n + k, name=f"p{k}.png") for k in range(n)]
        avg = average_measurements(ms)
        m = avg.measurement
        assert m.height_nm.shape == (size, size)
        err = m.height_nm[m.valid] - truth[m.valid]
        err -= err.mean()
        actual = float(np.sqrt(np.mean(err**2)))
        assert actual * np.sqrt(n) == pytest.approx(sigma, rel=0.12), n
        assert avg.rms_standard_error_nm == pytest.approx(sigma / np.sqrt(n), rel=0.12), n
        assert avg.rms_spread_nm == pytest.approx(sigma, rel=0.12), n
        assert avg.rms_standard_error_nm == pytest.approx(actual, rel=0.2), n


def test_spread_map_equals_a_per_pixel_loop():
    # slow obvious reference: numpy.std with ddof=1 of each pixel's values, after the
    # same piston-and-tilt removal, in a Python loop
    size = 41
    ms = [on_grid(size, noise_nm=2.0, seed=k, name=f"p{k}.png") for k in range(4)]
    avg = average_measurements(ms)
    xu, yu = unit_grid(size)
    maps = [resample_to_unit_disk(m, size=size) for m in ms]
    common = np.logical_and.reduce([v for _, v in maps])
    planes = []
    for h, _ in maps:
        a = np.stack([np.ones(common.sum()), xu[common], yu[common]], axis=1)
        c = np.linalg.lstsq(a, h[common], rcond=None)[0]
        planes.append(h - c[0] - c[1] * xu - c[2] * yu)
    for i in range(size):
        for j in range(size):
            if common[i, j]:
                values = [p[i, j] for p in planes]
                assert avg.spread_nm[i, j] == pytest.approx(np.std(values, ddof=1), abs=1e-9)


def test_photos_at_different_places_and_scales_line_up():
    ms = [
        synthetic_measurement(
            center=(320.0, 240.0),
            radius=150.0,
            step=3.0,
            shape=(105, 110),
            name="a.png",
            tilt_nm=(40.0, -10.0),
        ),
        synthetic_measurement(
            center=(280.5, 260.2),
            radius=131.0,
            step=2.4,
            shape=(115, 115),
            name="b.png",
            tilt_nm=(-25.0, 5.0),
        ),
        synthetic_measurement(
            center=(355.1, 201.7), radius=170.3, step=4.0, shape=(90, 91), name="c.png"
        ),
    ]
    avg = average_measurements(ms)
    coef = avg.measurement.zernike.coefficients_nm
    for j in range(4, 16):
        assert coef[j - 1] == pytest.approx(TRUTH.get(j, 0.0), abs=0.2), j
    assert avg.rms_spread_nm < 0.3  # noise-free: only interpolation differences remain
    assert avg.figure_spread_nm["power_nm"] < 0.5
    assert avg.measurement.aperture == ms[0].aperture  # the average sits on the first photo
    assert avg.photos == ("a.png", "b.png", "c.png")
    assert all(c > 0.99 for c in avg.sign_correlations)


def test_an_inverted_photo_is_refused_with_its_name():
    ms = [on_grid(81, noise_nm=1.0, seed=k, name=f"p{k}.png") for k in range(3)]
    flipped = synthetic_measurement(
        center=(300.0, 200.0),
        radius=100.0,
        step=2.5,
        shape=(81, 81),
        name="upside_down.png",
        sign=-1.0,
    )
    with pytest.raises(
        UnanalysablePhotoError, match="upside_down.png: reads the part with the opposite sign"
    ):
        average_measurements([*ms, flipped])
    with pytest.raises(UnanalysablePhotoError, match="p0.png and upside_down.png"):
        average_measurements([ms[0], flipped])


def test_sign_check_warns_when_there_is_nothing_to_compare():
    corr, warnings = check_signs([np.zeros(15), np.full(15, 0.1)], ["a", "b"])
    assert all(np.isnan(c) for c in corr)
    assert "too small to check" in warnings[0]


def test_one_photo_is_not_an_average():
    with pytest.raises(SettingsError, match="at least two photos"):
        average_measurements([on_grid(41, noise_nm=0.0, seed=0, name="a.png")])


def test_an_average_has_no_carrier_of_its_own_and_keeps_each_photos():
    # issue 9 item 4: an average showed "0.0 tilt fringes, period 0.0 px, visibility 1.00"
    import dataclasses
    import math

    from flatsight.analysis.record import measurement_to_record

    ms = []
    for k, fringes in enumerate((14.0, 18.0)):
        m = on_grid(41, noise_nm=1.0, seed=k, name=f"p{k}.png")
        q = dataclasses.replace(m.quality, carrier_fringes=fringes, carrier_angle_deg=90.0,
                                fringe_period_px=600.0 / fringes, mean_modulation=0.5 + 0.1 * k)
        ms.append(dataclasses.replace(m, quality=q))
    q = average_measurements(ms).measurement.quality
    assert math.isnan(q.carrier_fringes) and math.isnan(q.fringe_period_px)
    assert math.isnan(q.mean_modulation)  # no visibility map of its own: not a made-up 1.0
    assert [p.carrier_fringes for p in q.per_photo] == [14.0, 18.0]
    rec = measurement_to_record(average_measurements(ms).measurement)["quality"]
    assert rec["carrier_fringes"] is None and rec["mean_modulation"] is None
    assert rec["resolution_cycles_per_aperture"] is None  # no window of its own, not 0
    assert [p["carrier_fringes"] for p in rec["per_photo"]] == [14.0, 18.0]
    assert [p["mean_modulation"] for p in rec["per_photo"]] == [0.5, 0.6]


def test_averaging_shrinks_the_noise_part_of_u_as_the_mean_of_n_photos():
    # GUM (JCGM 100:2008) 4.2.3: the mean of N independent readings has 1/sqrt(N) of one
    # reading's standard deviation. Four maps of one surface with independent white noise:
    # the average's noise, and the noise part of its U, fall by about 2; the record says
    # four photos; and the method part (a bias the photos share) is not divided.
    from flatsight.analysis.record import measurement_to_record

    ms = [on_grid(121, noise_nm=4.0, seed=k, name=f"p{k}.png") for k in range(4)]
    avg = average_measurements(ms).measurement
    single_noise = np.mean([m.figures.noise_nm for m in ms])
    assert avg.figures.noise_nm == pytest.approx(single_noise / 2, rel=0.15)
    for name in ("rms_nm", "pv_nm", "irregularity_nm"):
        one = np.mean([m.figures.uncertainty_budget[name]["noise_nm"] for m in ms])
        assert avg.figures.uncertainty_budget[name]["noise_nm"] < 0.75 * one, name
    budget = measurement_to_record(avg)["uncertainty_budget"]
    assert budget["photos"] == 4


@pytest.mark.slow
def test_averaged_speckled_photos_meet_the_targets_a_single_one_cannot(tmp_path):
    # tests/refset's dev seed 44 (a 1 MP 16-bit photo of 14 fringes under laser speckle
    # of contrast 0.45, a surface of 60 nm PV with terms to Noll 37), photographed eight
    # times, each with a speckle field of its own (as a moved or rotating diffuser
    # gives): one photo reads PV 1.6 times its target low or 2.5 times high and the
    # astigmatism up to 6 times, by the speckle drawn. Averaged, the map is taken at the
    # resolution the photos' windows passed (it was taken unsmoothed, and the noise left
    # in its finest detail read PV 1.6 and B 1.3 times their targets, beyond every
    # photo's own spread), with the photos' own noise carried into U.
    from flatsight.analysis.pipeline import measure
    from flatsight.analysis.record import measurement_to_record

    from tests.refset.cases import draw_settings
    from tests.refset.photo import render, write
    from tests.refset.score import score
    from tests.refset.surface import truth

    drawn = draw_settings(44, megapixels=(0.3, 3.0))
    kw = dict(drawn["render"])
    wavelength = kw["wavelength_nm"]
    ms = []
    for i in range(8):
        kw["seed"] = 1000 + i
        path = write(render(drawn["surface"], **kw), tmp_path / f"p{i}.png", "png",
                     bit_depth=kw["bit_depth"])
        ms.append(measure(str(path), MeasureSettings(wavelength_nm=wavelength)))
    avg = average_measurements(ms)
    assert avg.measurement.quality.resolution_cycles_per_aperture == min(
        m.quality.resolution_cycles_per_aperture for m in ms)
    sc = score(measurement_to_record(avg.measurement), truth(drawn["surface"], wavelength))
    for f in ("pv_nm", "pvr_nm", "rms_nm", "power_nm", "irregularity_nm", "astigmatism_nm"):
        assert sc[f]["ok"] and sc[f]["covered"], (f, sc[f])
