"""Parts that are not a circle seen square-on, judged against the independent generator.

The photos and the truth come from ``tests/refset/shaped.py`` (no project code: a round
part seen at an angle is the surface on its circle, foreshortened; a rectangle's truth is
Gauss-Legendre quadrature over its area). The outline is found automatically. Target
(issue 10): RMS within max(2 nm, 5 %) on ellipses up to 35 deg of view and on
rectangles from 1:1 to 4:1 at any rotation; power within max(3 nm, 5 %) is ours, and so
are the same limits on convex polygons, on rings with a centre hole and on round parts
with flats ground on them (their truth a direct sum on a fine grid over the part).
"""

import math

import numpy as np
import pytest
from flatsight.analysis.pipeline import MeasureSettings, measure
from flatsight.analysis.record import measurement_to_record
from flatsight.analysis.records.certificate import certificate_document

from tests.refset.shaped import random_shaped_case


def _allowed(true_nm: float, floor: float) -> float:
    return max(floor, 0.05 * abs(true_nm))


@pytest.fixture(scope="module", params=[
    ("ellipse", 1, {"view_deg": 35.0}),
    ("ellipse", 2, {"view_deg": 15.0}),
    ("rect", 1, {"aspect": 1.0}),
    ("rect", 2, {"aspect": 4.0}),
    ("poly", 6, {}),
    ("annulus", 3, {}),
    ("cut", 2, {}),
], ids=["ellipse-35deg", "ellipse-15deg", "rect-1to1", "rect-4to1", "octagon", "ring",
        "two-flats"])
def measured(request):
    kind, seed, fixed = request.param
    case = random_shaped_case(seed, kind, scale=0.75, **fixed)
    m = measure(case.pixels.astype(np.float64) / 255.0,
                MeasureSettings(wavelength_nm=case.wavelength_nm))
    return case, m


def test_the_outline_is_found_and_named(measured):
    case, m = measured
    assert m.aperture.kind == case.kind
    if case.kind == "ellipse":
        # the viewing angle acos(b / a) of the found ellipse, within a degree
        assert m.aperture.shape.view_angle_deg == pytest.approx(case.part["view_deg"], abs=1.0)
    elif case.kind == "poly":
        # seed 6 is a near-round octagon, once taken for an ellipse seen 21 deg off axis:
        # the found polygon covers the true one's area (shoelace formula, common
        # practice) to 1 %, and its sides lie on the true ones (a rounded corner may be
        # cut by a short side: within 6 px there)
        from flatsight.analysis.shapes import Polygon

        true = np.asarray(case.part["corners_px"])
        area = 0.5 * abs(np.sum(true[:, 0] * np.roll(true[:, 1], -1)
                                - np.roll(true[:, 0], -1) * true[:, 1]))
        assert isinstance(m.aperture.shape, Polygon)
        assert m.aperture.shape.area_px == pytest.approx(area, rel=0.01)
        cx, cy = case.center_px
        for u, v in true:
            assert abs(m.aperture.shape.edge_distance_px(cx + u, cy - v)) < 6.0
        # and it has the part's eight corners: the edge's approximation once left two more
        # where the sides hardly turn (ten), which bent a side a few pixels out of the part
        assert len(m.aperture.shape.corners_px) == len(true)
    elif case.kind == "annulus":
        # the hole is found as dark as the surround, centred, its edge to half a pixel
        shape = m.aperture.shape
        assert shape.inner_radius_px == pytest.approx(case.part["inner_px"], abs=0.5)
        assert shape.radius_px == pytest.approx(case.part["radius_px"], abs=1.0)
    elif case.kind == "cut":
        # seed 2 has two flats 142 deg apart, once read as a full circle (RMS 74 nm
        # against a true 26): each is found within a degree and a pixel, the circle too
        shape = m.aperture.shape
        assert shape.radius_px == pytest.approx(case.part["radius_px"], abs=1.0)
        assert len(shape.flats) == len(case.part["flats"])
        for angle, dist in case.part["flats"]:
            near = min(shape.flats, key=lambda f: abs((f[0] - angle + 180.0) % 360.0 - 180.0))
            assert abs((near[0] - angle + 180.0) % 360.0 - 180.0) < 1.0
            assert near[1] == pytest.approx(dist, abs=1.0)
    else:
        assert m.aperture.shape.width_px == pytest.approx(case.part["width_px"], abs=4.0)
        assert m.aperture.shape.height_px == pytest.approx(case.part["height_px"], abs=4.0)
        turn = (m.aperture.shape.angle_deg - case.part["angle_deg"]) % 180.0
        if case.part["width_px"] > 1.2 * case.part["height_px"]:
            assert min(turn, 180.0 - turn) < 1.0


def test_rms_and_power_over_the_parts_real_area(measured):
    case, m = measured
    truth = case.truth
    assert abs(m.figures.rms_nm - truth["rms_nm"]) <= _allowed(truth["rms_nm"], 2.0)
    assert abs(m.figures.power_nm - truth["power_nm"]) <= _allowed(truth["power_nm"], 3.0)


def test_astigmatism_c_and_rmsa_over_the_parts_real_area(measured):
    # Astigmatism over every outline: the truth is the PV over the part of what the
    # best-fit quadratic holds beyond {1, x, y, rho^2} (least squares by numpy over the
    # generator's own points), so it checks the terms made orthonormal over the found
    # outline. C and RMSa where the part holds whole rings (a ring, an ellipse's circle):
    # the truth from the means around thin rings of the generator's points, or its polar
    # quadrature. Ours: astigmatism and RMSa within max(2 nm, 5 %), C within max(6 nm,
    # 10 %), as benchmarks/shape_accuracy.py scores them.
    case, m = measured
    truth = case.truth
    assert abs(m.figures.astigmatism_nm - truth["astigmatism_nm"]) <= _allowed(
        truth["astigmatism_nm"], 2.0)
    if case.kind in ("annulus", "ellipse"):
        c = truth["symmetric_irregularity_nm"]
        assert abs(m.figures.symmetric_irregularity_nm - c) <= max(6.0, 0.1 * c)
        assert abs(m.figures.rms_asymmetric_nm - truth["rms_asymmetric_nm"]) <= _allowed(
            truth["rms_asymmetric_nm"], 2.0)
    else:
        assert "symmetric_irregularity_nm" not in truth


def test_the_record_and_certificate_name_the_shape(measured):
    case, m = measured
    record = measurement_to_record(m)
    shape = record["aperture"]["shape"]
    assert shape["kind"] == case.kind and shape["text"].startswith(case.kind + ":")
    # a circle's fields stay as they were: the bounding circle's centre and radius
    assert record["aperture"]["radius_px"] == pytest.approx(m.aperture.radius_px, abs=0.01)
    facts = dict(certificate_document(record).facts)
    assert "Outline" in facts
    if case.kind == "ellipse":
        assert math.isfinite(shape["view_angle_deg"])
        assert "off its axis" in facts["Outline"]
        assert record["zernike"]["normalisation"].startswith("Noll: orthonormal over the unit")
    else:
        assert "orthonormal over the part" in record["zernike"]["normalisation"]


@pytest.mark.parametrize("outline", ["annulus:360,270,200,70",
                                     "poly:560,270;422,460;198,388;198,152;422,80"])
def test_annulus_and_polygon_figures_follow_their_outline(outline):
    # A consistency check, not an accuracy one: photo and truth both come from the
    # project's own demo generator (analysis.synthetic), whose truth samples the surface
    # over the outline's area with the same orthonormal terms. The accuracy checks
    # against independent truth are the "octagon" and "ring" cases above.
    from flatsight.analysis.aperture import Aperture
    from flatsight.analysis.shapes import parse_shape
    from flatsight.analysis.synthetic import SyntheticSurface, make_fringe_photo

    surface = SyntheticSurface(zernike_nm={4: 12.0, 5: 4.0, 6: -3.0, 8: 2.0, 11: 1.5})
    photo = make_fringe_photo(surface, shape=(540, 720), center_xy=(360, 270),
                              radius_px=215, fringes=18, dust=0, bad_pixels=0, seed=3)
    aperture = Aperture.of_shape(parse_shape(outline))
    truth = photo.truth(reported=aperture)
    m = measure(photo.image, MeasureSettings(wavelength_nm=632.8, aperture=aperture))
    assert m.aperture.kind == aperture.kind
    assert abs(m.figures.rms_nm - truth.rms_nm) <= _allowed(truth.rms_nm, 1.0)


@pytest.mark.parametrize("carrier_deg, rms_max, pv_max", [(100.6, 1.5, 8.0), (95.0, 0.5, 4.0)],
                         ids=["fringes-along-the-long-sides", "fringes-5deg-off-them"])
def test_a_flat_rectangle_reads_flat_when_fringes_run_along_its_sides(carrier_deg, rms_max,
                                                                      pv_max):
    # A perfect flat: the truth is zero, whatever generator drew it (the independent one,
    # tests/refset/shaped.py). Fringes along a long straight side once read it 19 nm RMS
    # and 182 nm PV: the fringe envelope, read ring by ring from percentiles, followed
    # the fringes on the side (one phase all along it) instead of the light. Limits: the
    # issue's RMS target floor (2 nm) and our PV floor (8 nm), tightened where the fringes
    # cross the sides slightly (then 0.5 and 11 nm before the sides were placed exactly).
    from tests.refset.shaped import render_shaped
    from tests.refset.surface import RefSurface

    part = {"width_px": 415.0, "height_px": 183.5, "angle_deg": 10.6}
    pixels = render_shaped(RefSurface(zernike_nm={}), "rect", part, shape=(540, 720),
                           fringes=17, angle_deg=carrier_deg, wavelength_nm=632.8,
                           visibility=0.7, noise=0.01, illumination=0.2,
                           edge_width_px=2.7, seed=5)
    m = measure(pixels.astype(np.float64) / 255.0, MeasureSettings(wavelength_nm=632.8))
    assert m.aperture.kind == "rect"
    assert m.figures.rms_nm < rms_max
    assert m.figures.pv_nm < pv_max
