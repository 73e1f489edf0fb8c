"""Which method measures a photo, and why: ``analysis/methods`` and the pipeline's choice."""

from __future__ import annotations

import numpy as np
import pytest
from flatsight.analysis.aperture import Aperture
from flatsight.analysis.errors import (
    RingSignNeededError,
    SettingsError,
    UnanalysablePhotoError,
)
from flatsight.analysis.pipeline import MeasureSettings, measure

from tests.refset.cases import few_fringe_case, random_case


def test_tilt_fringes_keep_the_carrier_method(tmp_path):
    # a reference photo of 15 tilt fringes (tests/refset): the carrier method, as before
    case = random_case(0, megapixels=(0.3, 1.0))
    m = measure(case.save(tmp_path), MeasureSettings(wavelength_nm=case.photo.wavelength_nm))
    assert (m.quality.method, m.quality.method_reason) == ("carrier", "carrier found")
    assert m.quality.sign == "measured" and m.quality.terms_fitted == 0


@pytest.mark.slow
def test_forcing_the_carrier_method_refuses_closed_fringes(tmp_path):
    case = few_fringe_case("closed", 4, megapixels=(0.3, 0.6))
    path = case.save(tmp_path)
    with pytest.raises(UnanalysablePhotoError):
        measure(path, MeasureSettings(wavelength_nm=case.photo.wavelength_nm,
                                      method="carrier", ring_sign="convex"))


def test_blank_and_noise_are_refused_by_every_method():
    aperture = Aperture(319.5, 239.5, 192.0)
    for image in (np.full((480, 640), 0.5), np.random.default_rng(2).uniform(0, 1, (480, 640))):
        with pytest.raises(UnanalysablePhotoError) as info:
            measure(image, MeasureSettings(aperture=aperture))
        assert "\n" not in str(info.value)
        assert not isinstance(info.value, RingSignNeededError)  # a sign would not help


def test_closed_rings_without_a_sign_are_refused_as_needing_one(photo_set):
    # the suite's closed rings (tests/conftest.py): a refusal of its own kind, so the
    # station can ask for the sign; still an UnanalysablePhotoError (exit 3), naming the
    # option that states it
    with pytest.raises(RingSignNeededError, match="--ring-sign") as info:
        measure(photo_set.bad["rings.png"], MeasureSettings(wavelength_nm=632.8))
    assert isinstance(info.value, UnanalysablePhotoError) and "\n" not in str(info.value)


@pytest.mark.parametrize("bad", [dict(method="takeda"), dict(ring_sign="flat")])
def test_unknown_method_or_ring_sign_is_a_settings_error(bad):
    with pytest.raises(SettingsError):
        measure(np.full((480, 640), 0.5), MeasureSettings(**bad))


def test_the_intensity_fit_refuses_an_outline_it_cannot_map():
    # the fit works on a round part seen square-on; on a rectangle it says so in one line
    from flatsight.analysis.shapes import parse_shape

    yy, xx = np.mgrid[0:480, 0:640].astype(float)
    image = 0.5 + 0.4 * np.cos(2 * np.pi * 3.0 * xx / 400.0)
    aperture = Aperture.of_shape(parse_shape("rect:320,240,400,200,10"))
    with pytest.raises(UnanalysablePhotoError, match="round parts") as info:
        measure(image, MeasureSettings(aperture=aperture, method="intensity-fit"))
    assert "\n" not in str(info.value)


@pytest.mark.slow
def test_an_outline_misread_on_closed_rings_falls_back_to_the_lit_disk(tmp_path, monkeypatch):
    # with few fringes the outline finder can draw a round part as a mild ellipse (seen
    # on held-out reference photos at 12-17 degrees); the intensity fit cannot map one,
    # so the pipeline measures the lit disk when its edge is round
    import flatsight.analysis.outline as outline
    from flatsight.analysis.shapes import parse_shape

    case = few_fringe_case("closed", 4, megapixels=(0.3, 0.6))
    path = case.save(tmp_path)
    cx, cy = case.photo.center_px
    r = case.photo.radius_px
    ellipse = parse_shape(f"ellipse:{cx},{cy},{1.02 * r},{0.98 * r},30")
    monkeypatch.setattr(outline, "find_part_aperture",
                        lambda image, **kw: Aperture.of_shape(ellipse))
    sign = "convex" if case.truth["power_nm"] > 0 else "concave"
    m = measure(path, MeasureSettings(wavelength_nm=case.photo.wavelength_nm,
                                      ring_sign=sign))
    assert m.aperture.shape is None and m.quality.method == "intensity-fit"
    assert abs(m.aperture.radius_px / r - 1.0) < 0.02  # the lit disk's own limit


@pytest.mark.slow
def test_a_contrast_circle_the_lit_edge_disputes_is_warned(tmp_path, monkeypatch):
    # closed rings (tests/refset, an independent generator): the circle found by fringe
    # contrast agrees with the lit disk's edge, and no warning is given; a circle 4 %
    # small (as on a wide soft edge where no fringe crosses the rim) is warned about,
    # since power scales with the radius squared
    from flatsight.analysis import outline

    case = few_fringe_case("closed", 4, megapixels=(0.3, 0.6))
    path = case.save(tmp_path)
    settings = MeasureSettings(wavelength_nm=case.photo.wavelength_nm, ring_sign="convex")
    m = measure(path, settings)
    assert m.quality.method == "intensity-fit"
    assert not any("lit disk" in w for w in m.warnings)
    found = outline.find_part_aperture

    def small(image, **kw):
        a = found(image, **kw)
        return Aperture(a.center_x_px, a.center_y_px, 0.96 * a.radius_px)

    monkeypatch.setattr(outline, "find_part_aperture", small)
    m = measure(path, settings)
    assert any("lit disk" in w and "--aperture" in w for w in m.warnings)
