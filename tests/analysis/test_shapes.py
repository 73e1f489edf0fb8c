"""Part outlines: reading and writing them, their areas and coordinates, and the fit's
polynomials over them."""

import math

import numpy as np
import pytest
from flatsight.analysis.aperture import Aperture
from flatsight.analysis.shapes import (
    Annulus,
    CutCircle,
    Ellipse,
    Polygon,
    Rectangle,
    parse_shape,
    shape_from_dict,
)
from flatsight.analysis.zernike import aperture_basis, orthonormalized, zernike_basis


@pytest.mark.parametrize("text", [
    "ellipse:400,300,250,200,30", "rect:400,300,500,125,112.5",
    "poly:100,100;500,120;480,400;90,380", "annulus:400,300,250,60",
    "cut:400,300,250;30,220;210,230.5",
])
def test_text_and_record_forms_round_trip(text):
    shape = parse_shape(text)
    assert parse_shape(shape.to_text()) == shape
    assert shape_from_dict(shape.to_dict()) == shape


def test_a_plain_circle_keeps_todays_form():
    assert parse_shape("640,480,400") == (640.0, 480.0, 400.0)
    assert parse_shape("circle:640,480,400") == (640.0, 480.0, 400.0)


@pytest.mark.parametrize("text, words", [
    ("ellipse:1,2,3", "ellipse:CX,CY,A,B,ANGLE"),
    ("rect:1,2,0,4,5", "positive"),
    ("poly:1,2;3,4", "three corners"),
    ("poly:0,0;1,1;2,2", "no area"),
    ("annulus:100,100,50,60", "inner radius"),
    ("cut:100,100,50", "at least one flat"),
    ("cut:100,100,50;0,60", "less than the radius"),
    ("cut:100,100,50;0", "cut:CX,CY,R;ANGLE,DIST"),
    ("hexagon:1,2,3", "unknown aperture shape"),
    ("ellipse:1,2,3,x,5", "numbers"),
    ("rect:1,2,3,4,nan", "at most"),
])
def test_malformed_values_say_what_is_wrong_on_one_line(text, words):
    with pytest.raises(ValueError) as err:
        parse_shape(text)
    assert words in str(err.value) and "\n" not in str(err.value)


def test_an_ellipse_maps_onto_the_parts_unit_circle():
    e = Ellipse(300.0, 200.0, 150.0, 120.0, 35.0)
    # points on the outline (photo y down) land on the unit circle
    (line,) = e.outline(64)
    xu, yu = e.unit_xy(line[:, 0], line[:, 1])
    np.testing.assert_allclose(np.hypot(xu, yu), 1.0, atol=1e-12)
    # the viewing angle is acos(minor / major) (the foreshortening of a tilted circle)
    assert e.view_angle_deg == pytest.approx(math.degrees(math.acos(0.8)))
    # a minor axis given first is swapped, and the angle turns with it
    assert Ellipse(0, 0, 100, 150, 10).angle_deg == pytest.approx(100.0)


def test_inside_and_edge_distance_agree_for_every_shape():
    yy, xx = np.mgrid[0:200, 0:300].astype(float)
    for shape in (Ellipse(150, 100, 90, 60, 20), Rectangle(150, 100, 200, 60, 30),
                  Polygon(((40, 40), (260, 60), (200, 170), (60, 150))),
                  Annulus(150, 100, 90, 30), CutCircle(150, 100, 90, ((20, 70), (250, 80)))):
        inside = shape.inside(xx, yy)
        d = shape.edge_distance_px(xx, yy)
        assert inside.any() and not inside.all()
        assert np.all(d[inside] <= 1e-9) and np.all(d[~inside] >= -1e-9)


def test_a_circle_with_a_flat_has_the_segment_area_cut_off():
    # a circle of radius R with a flat d from the centre loses the circular segment
    # R^2 acos(d / R) - d sqrt(R^2 - d^2) (the segment's area, handbook geometry, common
    # practice); counted over pixel centres to within 0.5 %
    r, d = 100.0, 60.0
    cut = CutCircle(150.0, 150.0, r, ((90.0, d),))  # the flat across the top (y up)
    yy, xx = np.mgrid[0:300, 0:300].astype(float)
    segment = r * r * math.acos(d / r) - d * math.sqrt(r * r - d * d)
    assert cut.inside(xx, yy).sum() == pytest.approx(math.pi * r * r - segment, rel=0.005)
    # the flat is at the top of the photo: y = 150 - 60 = 90 px, the rows above it out
    assert not cut.inside(150.0, 89.0) and cut.inside(150.0, 91.0)
    # the drawn outline runs along the flat between its two corners
    (line,) = cut.outline(128)
    on_flat = np.isclose(line[:, 1], 90.0)
    assert np.ptp(line[on_flat, 0]) == pytest.approx(2 * math.sqrt(r * r - d * d), abs=1e-6)


def test_a_circle_with_flats_is_moved_grown_turned_and_its_flats_shifted():
    cut = CutCircle(300.0, 200.0, 150.0, ((90.0, 120.0), (200.0, 140.0)))
    moved = cut.moved(dx=5, dy=-5, grow=1.1, turn_deg=30.0)
    assert (moved.center_x_px, moved.center_y_px) == pytest.approx((305.0, 195.0))
    assert moved.radius_px == pytest.approx(165.0)
    assert np.ravel(moved.flats) == pytest.approx([120.0, 132.0, 230.0, 154.0])
    # the station's narrow / widen keys move the flats in and out, never off the part
    assert cut.moved(stretch=1 / 1.02).flats[0][1] == pytest.approx(120.0 / 1.02)
    assert cut.moved(stretch=1.5).flats[1][1] == pytest.approx(0.999 * 150.0)
    assert Aperture.of_shape(cut).reshaped(turn_deg=-90.0).shape.flats[0][0] == pytest.approx(0.0)


def test_polygon_area_and_centre_by_shoelace():
    # a 200 x 100 rectangle given by its corners (shoelace formula, common practice)
    p = Polygon(((10, 20), (210, 20), (210, 120), (10, 120)))
    assert p.area_px == pytest.approx(20000.0)
    assert (p.center_x_px, p.center_y_px) == pytest.approx((110.0, 70.0))
    yy, xx = np.mgrid[0:150, 0:250].astype(float)
    # pixel centres strictly inside: x 11..209, y 21..119 (the edges on the lines are
    # split by the crossing rule)
    assert p.inside(xx, yy).sum() == pytest.approx(200 * 100, rel=0.02)


def test_aperture_of_a_shape_is_its_bounding_circle():
    r = Rectangle(300, 200, 160, 120, 0)
    a = Aperture.of_shape(r)
    assert (a.center_x_px, a.center_y_px, a.radius_px) == pytest.approx((300, 200, 100))
    assert a.kind == "rect" and not a.maps_to_disk
    moved = a.moved(5, -5, 10)
    assert moved.shape.width_px == pytest.approx(160 * 1.1)
    assert moved.center_x_px == pytest.approx(305)
    turned = a.reshaped(turn_deg=30)
    assert turned.shape.angle_deg == pytest.approx(30)
    # a circle has no outline to turn, and keeps today's fields and form
    c = Aperture(10.0, 20.0, 30.0)
    assert c.reshaped(turn_deg=30) is c and c.kind == "circle" and c.maps_to_disk
    # narrowed, a circle becomes the ellipse of a round part seen at an angle
    seen = c.reshaped(stretch=0.9)
    assert seen.kind == "ellipse" and seen.shape.b_px == pytest.approx(27.0)
    assert c.edge_rho(np.array([10.0 + 30.0]), np.array([20.0])) == pytest.approx(1.0)


def _rectangle_points(half_w, half_h, n=240):
    """Midpoints of an n x n grid over [-half_w, half_w] x [-half_h, half_h]."""
    t = (np.arange(n) + 0.5) / n * 2.0 - 1.0
    x, y = np.meshgrid(half_w * t, half_h * t)
    return x.ravel(), y.ravel()


def test_orthonormal_terms_over_a_rectangle_match_legendre_products():
    # A 4:1 rectangle in the unit disk. Polynomials orthonormal over a rectangle are
    # products of normalised Legendre polynomials sqrt(2i+1) P_i (numpy.polynomial.legendre;
    # Mahajan & Dai, JOSA A 24, 2994 (2007), from memory): the tilt terms must be
    # sqrt(3) x / a and sqrt(3) y / b, and the first 15 terms (radial orders 0..4, every
    # polynomial of degree <= 4) must span exactly the Legendre products P_i P_j, i + j <= 4.
    half_w, half_h = 4.0 / math.hypot(4, 1), 1.0 / math.hypot(4, 1)
    x, y = _rectangle_points(half_w, half_h)
    g = aperture_basis(15, x, y, orthonormal=True)
    # orthonormal over the points, compared with numpy's own inner products
    np.testing.assert_allclose(g.T @ g / x.size, np.eye(15), atol=1e-9)
    np.testing.assert_allclose(g[:, 0], 1.0, atol=1e-9)
    np.testing.assert_allclose(g[:, 1], math.sqrt(3) * x / half_w, atol=2e-4)
    np.testing.assert_allclose(g[:, 2], math.sqrt(3) * y / half_h, atol=2e-4)
    leg = np.polynomial.legendre
    products = []
    for i in range(5):
        for j in range(5 - i):
            ci = np.zeros(i + 1)
            ci[i] = math.sqrt(2 * i + 1)
            cj = np.zeros(j + 1)
            cj[j] = math.sqrt(2 * j + 1)
            products.append(leg.legval(x / half_w, ci) * leg.legval(y / half_h, cj))
    products = np.column_stack(products)
    # each product lies in the span of the 15 terms, and is (nearly) unit RMS over it
    coef = g.T @ products / x.size
    np.testing.assert_allclose(g @ coef, products, atol=1e-8)
    np.testing.assert_allclose(np.mean(products**2, axis=0), 1.0, atol=2e-3)


def test_fourth_term_is_the_best_fit_sphere_over_the_part():
    # Gram-Schmidt keeps power meaningful: the fourth term is rho^2 less its least-squares
    # plane over the part (numpy.linalg.lstsq), scaled to unit RMS
    x, y = _rectangle_points(0.9, 0.3)
    turn = math.radians(25)
    x, y = x * math.cos(turn) - y * math.sin(turn), x * math.sin(turn) + y * math.cos(turn)
    g = orthonormalized(zernike_basis(6, x, y))
    design = np.column_stack([np.ones_like(x), x, y])
    rho2 = x * x + y * y
    left = rho2 - design @ np.linalg.lstsq(design, rho2, rcond=None)[0]
    np.testing.assert_allclose(g[:, 3], left / np.sqrt(np.mean(left**2)), atol=1e-9)


def test_on_the_full_disk_the_terms_barely_change():
    # Zernike terms are already orthonormal over the disk (Noll 1976): made orthonormal
    # over a fine grid of it, they move only by the grid's sampling
    t = (np.arange(400) + 0.5) / 200 - 1.0
    x, y = np.meshgrid(t, t)
    on = np.hypot(x, y) <= 1
    z = zernike_basis(21, x[on], y[on])
    np.testing.assert_allclose(orthonormalized(z), z, atol=0.02)
