"""Fringe photos of parts that are not a circle square-on, and their truth figures.

Five kinds, rendered and judged with no project code:

* ``ellipse``: a round part photographed ``view_deg`` off its axis. The surface is defined
  on the part's unit circle; a photo point is taken back to the part by undoing the
  foreshortening (the part's circle seen at an angle is an ellipse whose minor axis is
  ``cos(view)`` of its major, an affine projection). Fringes seen at that angle come from
  light crossing the air gap obliquely, so a height ``h`` gives a phase of
  ``4 pi h cos(view) / lambda`` (the thin-film path ``2 t cos(angle)``, common practice).
  The truth is :func:`surface.truth` over the part's circle.
* ``rect``: a rectangular part of any aspect and rotation. The surface is the reference
  surface over the unit disk that circumscribes the rectangle (photo axes, scaled by the
  half-diagonal), and the truth is direct Gauss-Legendre quadrature over the rectangle
  (:func:`rect_truth`): RMS with piston and tilt removed, RMSi with the best-fit
  ``{1, x, y, rho^2}`` removed, power as that fit's ``rho^2`` sag from the centre to the
  corners (the farthest point), PV over the quadrature nodes.

* ``poly``: a convex polygon of 5 to 8 corners (``corners_px``: offsets from the photo
  centre, y up). The surface is defined over the disk through its farthest corner.
* ``annulus``: a ring (``radius_px``, ``inner_px``), the surface over its outer disk.
* ``cut``: a round part with one or two flats ground on its edge (``radius_px``;
  ``flats``, each the outward direction of its normal in degrees, y up, and its distance
  from the circle's centre), the surface over the circle. Its power is taken from the
  circle's centre to its rim (the part before the flats were ground); the others' from
  the part's centre of area.

The polygon's and the annulus' truth is a direct sum over a fine square grid of points
on the part (:func:`area_truth`, about 1.7 million points, each standing for its small
square): the same figures as the rectangle's, about the part's own centre of area.
Every outline's truth also holds the astigmatism: the PV over the part of what the
best-fit quadratic ``{1, x, y, rho^2, xy, x^2 - y^2}`` holds beyond the best-fit
``{1, x, y, rho^2}`` (Noll 5 and 6 made orthonormal over the part after 1-4). A ring's
and an ellipse's circle hold whole rings about the centre, and their truth holds C and
RMSa too (from the means around thin rings); the others' rings are cut by the outline
and have none.

:func:`render_shaped_stack` renders a phase-shifted stack of a case's part: the same
surface, outline and lamp, a few tilt fringes, the phase stepped between frames; and
:func:`outline_text` writes the part's true outline as an operator gives it with
``--aperture``.

Pixel coordinates as in :mod:`photo`: x right, y down, from pixel centres.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from .cases import random_surface
from .photo import carrier_for
from .surface import FRINGE36_NOLL, RefSurface, truth, zernike

__all__ = ["ShapedCase", "area_truth", "outline_text", "random_shaped_case", "rect_truth",
           "render_shaped", "render_shaped_stack"]


def _turn(px, py, angle_deg):
    c, s = math.cos(math.radians(angle_deg)), math.sin(math.radians(angle_deg))
    return px * c - py * s, px * s + py * c


def _part_coordinates(kind: str, part: dict, px: np.ndarray, py: np.ndarray):
    """Part unit coordinates and a signed distance to the outline (px, positive outside)
    of photo offsets ``(px, py)`` from the centre, y up."""
    if kind == "ellipse":
        r, view, axis = part["radius_px"], part["view_deg"], part["axis_deg"]
        b = r * math.cos(math.radians(view))
        u, v = _turn(px, py, -axis)  # u along the major axis (the tilt axis)
        xu, yu = _turn(u / r, v / b, axis)
        rho_e = np.hypot(u / r, v / b)
        # first-order distance to the ellipse: (rho_e - 1) / |grad rho_e|
        grad = np.hypot(u / (r * r), v / (b * b)) / np.maximum(rho_e, 1e-9)
        return xu, yu, (rho_e - 1.0) / np.maximum(grad, 1e-12)
    if kind == "poly":
        corners = np.asarray(part["corners_px"], dtype=float)
        reach = float(np.max(np.hypot(corners[:, 0], corners[:, 1])))
        return px / reach, py / reach, _polygon_distance(corners, px, py)
    if kind == "annulus":
        r, inner = part["radius_px"], part["inner_px"]
        rho = np.hypot(px, py)
        return px / r, py / r, np.maximum(rho - r, inner - rho)
    if kind == "cut":
        r = part["radius_px"]
        dist = np.hypot(px, py) - r
        for angle, off in part["flats"]:
            a = math.radians(angle)
            dist = np.maximum(dist, px * math.cos(a) + py * math.sin(a) - off)
        return px / r, py / r, dist
    w, h, angle = part["width_px"], part["height_px"], part["angle_deg"]
    half_diag = 0.5 * math.hypot(w, h)
    u, v = _turn(px, py, -angle)
    dist = np.maximum(np.abs(u) - 0.5 * w, np.abs(v) - 0.5 * h)
    return px / half_diag, py / half_diag, dist


def _polygon_distance(corners: np.ndarray, px, py):
    """Signed distance (px, positive outside) to a convex polygon whose corners run
    counter-clockwise, y up: the largest of the distances beyond each side's line
    (exact inside and along the sides, a little short beyond a corner)."""
    out = np.full(np.shape(px), -np.inf)
    for a, b in zip(corners, np.roll(corners, -1, axis=0), strict=True):
        t = (b - a) / math.hypot(*(b - a))
        n = np.array([t[1], -t[0]])  # outward for counter-clockwise corners
        out = np.maximum(out, (px - a[0]) * n[0] + (py - a[1]) * n[1])
    return out


def _extent(kind: str, part: dict, angle_deg: float) -> float:
    """The part's width in the photo along the direction ``angle_deg`` (px)."""
    if kind == "ellipse":
        a = part["radius_px"]
        b = a * math.cos(math.radians(part["view_deg"]))
        t = math.radians(angle_deg - part["axis_deg"])
        return 2.0 * math.hypot(a * math.cos(t), b * math.sin(t))
    if kind in ("annulus", "cut"):
        return 2.0 * part["radius_px"]
    if kind == "poly":
        c = np.asarray(part["corners_px"], dtype=float)
        along = c[:, 0] * math.cos(math.radians(angle_deg)) + c[:, 1] * math.sin(
            math.radians(angle_deg))
        return float(np.ptp(along))
    t = math.radians(angle_deg - part["angle_deg"])
    return abs(part["width_px"] * math.cos(t)) + abs(part["height_px"] * math.sin(t))


def render_shaped(surface: RefSurface, kind: str, part: dict, *, shape=(720, 960),
                  center_px=None, fringes: float = 20.0, angle_deg: float = 30.0,
                  wavelength_nm: float = 632.8, visibility: float = 0.7, level: float = 0.45,
                  noise: float = 0.01, illumination: float = 0.2,
                  edge_width_px: float = 2.0, seed: int | Sequence[int] = 0,
                  phase_deg: float = 0.0) -> np.ndarray:
    """An 8-bit photo of a shaped part (see the module docstring); ``part`` holds
    ``radius_px, view_deg, axis_deg`` (ellipse) or ``width_px, height_px, angle_deg``
    (rect). ``fringes`` is the count across the part along the carrier, as the
    operator sees it. ``phase_deg`` is added to the fringe phase everywhere (a frame of
    a phase-shifted stack, :func:`render_shaped_stack`; 0 leaves the photo as it was)."""
    rows, cols = shape
    cx, cy = center_px if center_px is not None else ((cols - 1) / 2.0, (rows - 1) / 2.0)
    span = _reach(kind, part)
    fx, fy = carrier_for(fringes, angle_deg, 0.5 * _extent(kind, part, angle_deg))
    yy, xx = np.mgrid[0:rows, 0:cols].astype(float)
    px, py = xx - cx, cy - yy
    xu, yu, dist = _part_coordinates(kind, part, px, py)
    near = dist <= 4.0 * edge_width_px + 2.0
    h = np.zeros((rows, cols))
    h[near] = surface.height_nm(np.clip(xu[near], -1.5, 1.5), np.clip(yu[near], -1.5, 1.5))
    oblique = math.cos(math.radians(part.get("view_deg", 0.0)))
    phase = 2.0 * math.pi * (fx * (xx - cx) + fy * (yy - cy)) + 4.0 * math.pi * h * oblique \
        / wavelength_nm
    phase = phase + math.radians(phase_deg)  # adding 0.0 changes no bit
    edge = np.clip(0.5 - dist / (edge_width_px / 0.8), 0.0, 1.0)  # a linear ramp
    light = 1.0 + illumination * 0.5 * (px * 0.8 - py * 0.6) / span
    img = level * light * (0.02 + edge * (1.0 + visibility * np.cos(phase)))
    rng = np.random.default_rng(seed)
    img = img + noise * rng.standard_normal(img.shape)
    return np.clip(np.rint(np.clip(img, 0.0, 1.0) * 255.0), 0, 255).astype(np.uint8)


def _reach(kind: str, part: dict) -> float:
    """The radius of the disk the surface is defined over (px)."""
    if kind in ("ellipse", "annulus", "cut"):
        return part["radius_px"]
    if kind == "poly":
        c = np.asarray(part["corners_px"], dtype=float)
        return float(np.max(np.hypot(c[:, 0], c[:, 1])))
    return 0.5 * math.hypot(part["width_px"], part["height_px"])


def _figures(x, y, values, weight, centre) -> dict:
    """RMS, PV, RMSi, irregularity and power of ``values`` at points ``(x, y)`` (the
    surface's unit coordinates) weighted by ``weight``; power is the best-fit
    ``{1, x, y, rho^2}``'s sag from ``centre`` to the farthest point."""
    def residual(columns):
        design = np.column_stack(columns) * np.sqrt(weight)[:, None]
        coef = np.linalg.lstsq(design, values * np.sqrt(weight), rcond=None)[0]
        return values - np.column_stack(columns) @ coef, coef

    def rms(r):
        return float(np.sqrt(np.sum(weight * r * r) / weight.sum()))

    one = np.ones_like(x)
    res_t, _ = residual([one, x, y])
    res_p, c_p = residual([one, x, y, x * x + y * y])
    far = float(np.max((x - centre[0]) ** 2 + (y - centre[1]) ** 2))
    # PVr (Evans, Opt. Eng. 48(4), 043605, 2009): the PV of the least-squares fit by the
    # 36 FRINGE terms over the part, its own plane taken out, plus three times the RMS of
    # what the fit leaves (least squares by numpy.linalg.lstsq: on a narrow rectangle the
    # terms are far from orthogonal, so no normal equations)
    terms = np.column_stack([zernike(j, x, y) for j in FRINGE36_NOLL])
    root = np.sqrt(weight)
    fit = terms @ np.linalg.lstsq(terms * root[:, None], values * root, rcond=None)[0]
    plane = np.linalg.lstsq(np.column_stack([one, x, y]) * np.sqrt(weight)[:, None],
                            fit * np.sqrt(weight), rcond=None)[0]
    fit_pv = float(np.ptp(fit - (plane[0] + plane[1] * x + plane[2] * y)))
    # astigmatism: what the full quadratic fit {1, x, y, rho^2, xy, x^2 - y^2} holds beyond
    # {1, x, y, rho^2}, its PV over the part. That is the part of the surface in Noll 5
    # and 6 made orthonormal over the part after 1-4 (Gram-Schmidt in Noll order,
    # Mahajan & Dai, JOSA A 24(9), 2994, 2007); it depends on neither the origin nor the
    # scale nor the turn of the coordinates, so no outline centre has to agree
    res_q, _ = residual([one, x, y, x * x + y * y, x * y, x * x - y * y])
    return {"rms_nm": rms(res_t), "pv_nm": float(np.ptp(res_t)),
            "rms_irregularity_nm": rms(res_p), "irregularity_nm": float(np.ptp(res_p)),
            "power_nm": float(-c_p[3] * far), "pvr_nm": fit_pv + 3.0 * rms(values - fit),
            "astigmatism_nm": float(np.ptp(res_p - res_q))}


def _ring_figures(x, y, values, *, inner: float, rings: int = 600) -> dict:
    """C and RMSa of ``values`` at points ``(x, y)`` on an annulus about the origin from
    radius ``inner`` to 1, each point weighing alike (ISO 10110-5's C and RMSa as
    ISO 14999-4 describes them, from memory): the mean around each thin ring is the
    rotationally symmetric part; C is its PV after its best ``a + b rho^2`` (by area) is
    taken out; RMSa is the RMS of what the ring means leave, its plane taken out."""
    rho = np.hypot(x, y)
    ring = np.minimum(((rho - inner) / (1.0 - inner) * rings).astype(int), rings - 1)
    count = np.bincount(ring, minlength=rings).astype(float)
    mean = np.bincount(ring, weights=values, minlength=rings) / np.maximum(count, 1.0)
    r2 = np.bincount(ring, weights=rho * rho, minlength=rings) / np.maximum(count, 1.0)
    used = count > 0
    design = np.column_stack([np.ones(used.sum()), r2[used]]) * np.sqrt(count[used])[:, None]
    ab = np.linalg.lstsq(design, mean[used] * np.sqrt(count[used]), rcond=None)[0]
    symmetric = mean[used] - (ab[0] + ab[1] * r2[used])
    left = values - mean[ring]
    plane = np.column_stack([np.ones_like(x), x, y])
    left = left - plane @ np.linalg.lstsq(plane, left, rcond=None)[0]
    return {"symmetric_irregularity_nm": float(np.ptp(symmetric)),
            "rms_asymmetric_nm": float(np.sqrt(np.mean(left * left)))}


def area_truth(surface: RefSurface, kind: str, part: dict, points: int = 1500) -> dict:
    """Figures of ``surface`` over a polygon, annulus or cut circle by a direct sum on a
    fine grid (``points`` across the part's disk; each inside point weighs alike), about
    the part's centre of area (a cut circle's: its circle's centre)."""
    reach = _reach(kind, part)
    step = 2.0 * reach / points
    g = (np.arange(points) + 0.5) * step - reach
    px, py = np.meshgrid(g, g)
    xu, yu, dist = _part_coordinates(kind, part, px, py)
    on = dist <= 0.0
    x, y = xu[on], yu[on]
    values = surface.height_nm(x, y)
    centre = (0.0, 0.0) if kind == "cut" else (float(x.mean()), float(y.mean()))
    answer = _figures(x, y, values, np.ones_like(x), centre)
    if kind == "annulus":  # whole rings about the part's centre
        answer.update(_ring_figures(x, y, values, inner=part["inner_px"] / reach))
    return answer


def rect_truth(surface: RefSurface, part: dict, nodes: int = 160) -> dict:
    """Figures of ``surface`` over a rectangle by Gauss-Legendre quadrature
    (``numpy.polynomial.legendre.leggauss``), in the rectangle's own axes."""
    w, h, angle = part["width_px"], part["height_px"], part["angle_deg"]
    half_diag = 0.5 * math.hypot(w, h)
    t, wt = np.polynomial.legendre.leggauss(nodes)
    u = 0.5 * w * t[None, :]
    v = 0.5 * h * t[:, None]
    weight = (wt[:, None] * wt[None, :]).ravel()
    px, py = _turn(*np.broadcast_arrays(u, v), angle)
    x, y = (px / half_diag).ravel(), (py / half_diag).ravel()
    values = surface.height_nm(x, y)
    return _figures(x, y, values, weight, (0.0, 0.0))


@dataclass(frozen=True)
class ShapedCase:
    """One photo of a shaped part, with what a measurement of it should find."""

    kind: str
    pixels: np.ndarray
    part: dict
    center_px: tuple[float, float]
    wavelength_nm: float
    truth: dict
    settings: dict = field(default_factory=dict)
    surface: RefSurface | None = None  # the surface photographed (for more frames of it)


def random_shaped_case(seed: int, kind: str, *, view_deg: float | None = None,
                       aspect: float | None = None, scale: float = 1.0) -> ShapedCase:
    """A random ellipse (15-35 deg of view), rectangle (1:1 to 4:1, any rotation), convex
    polygon (5 to 8 corners), annulus (hole 20-45 % of the diameter) or circle with one
    or two flats (each 75-95 % of the radius from the centre) on a 720 x 960
    photo (times ``scale``); ``view_deg`` or ``aspect`` fix that one draw."""
    rng = np.random.default_rng([seed, {"ellipse": 1, "rect": 2, "poly": 3, "annulus": 4,
                                  "cut": 5}[kind]])
    wavelength = float(rng.choice([632.8, 589.3, 546.07]))
    fringes = float(rng.uniform(12.0, 24.0))
    surface = random_surface(rng, wavelength_nm=wavelength, fringes=fringes)
    rows, cols = int(round(720 * scale)), int(round(960 * scale))
    cx = (cols - 1) / 2.0 + scale * rng.uniform(-30, 30)
    cy = (rows - 1) / 2.0 + scale * rng.uniform(-20, 20)
    if kind == "ellipse":
        part = {"radius_px": scale * float(rng.uniform(230, 320)),
                "view_deg": float(rng.uniform(15, 35)), "axis_deg": float(rng.uniform(0, 180))}
        if view_deg is not None:
            part["view_deg"] = float(view_deg)
        answer = truth(surface, wavelength)
    elif kind == "annulus":
        radius = scale * float(rng.uniform(230, 320))
        part = {"radius_px": radius, "inner_px": radius * float(rng.uniform(0.2, 0.45))}
        answer = area_truth(surface, kind, part)
    elif kind == "cut":
        radius = scale * float(rng.uniform(230, 320))
        first = float(rng.uniform(0, 360))
        flats = [(first, radius * float(rng.uniform(0.75, 0.95)))]
        if rng.uniform() < 0.6:  # a second flat: opposite the first, or anywhere apart
            second = first + (180.0 if rng.uniform() < 0.5 else float(rng.uniform(70, 290)))
            flats.append((second % 360.0, radius * float(rng.uniform(0.75, 0.95))))
        part = {"radius_px": radius, "flats": tuple(flats)}
        answer = area_truth(surface, kind, part)
    elif kind == "poly":
        from scipy.spatial import ConvexHull

        count = int(rng.integers(5, 9))
        reach = scale * float(rng.uniform(240, 320))
        turn = 2.0 * math.pi * (np.arange(count) + rng.uniform(-0.25, 0.25, count)) / count
        turn += rng.uniform(0.0, 2.0 * math.pi)
        radii = reach * rng.uniform(0.85, 1.0, count)
        points = np.column_stack([radii * np.cos(turn), radii * np.sin(turn)])
        hull = ConvexHull(points)  # counter-clockwise in 2-D (scipy.spatial)
        part = {"corners_px": tuple((float(a), float(b)) for a, b in points[hull.vertices])}
        answer = area_truth(surface, kind, part)
    else:
        drawn = float(rng.uniform(1.0, 4.0))
        aspect = drawn if aspect is None else float(aspect)
        diag = scale * float(rng.uniform(520, 660))
        height = diag / math.hypot(aspect, 1.0)
        part = {"width_px": aspect * height, "height_px": height,
                "angle_deg": float(rng.uniform(0, 180))}
        # the rectangle stays inside the frame whatever its turn
        u, v = _turn(np.array([1, -1, -1, 1]) * part["width_px"] / 2,
                     np.array([1, 1, -1, -1]) * part["height_px"] / 2, part["angle_deg"])
        shrink = min(1.0, 0.95 * min((cols / 2 - 32 * scale) / np.max(np.abs(u)),
                                     (rows / 2 - 24 * scale) / np.max(np.abs(v))))
        part["width_px"] *= shrink
        part["height_px"] *= shrink
        answer = rect_truth(surface, part)
    settings = {"fringes": fringes, "angle_deg": float(rng.uniform(0, 180)),
                "noise": float(rng.uniform(0.003, 0.02)),
                "illumination": float(rng.uniform(0.0, 0.4)),
                "visibility": float(rng.uniform(0.5, 0.9)),
                "edge_width_px": float(rng.uniform(1.0, 4.0))}
    pixels = render_shaped(surface, kind, part, shape=(rows, cols), center_px=(cx, cy),
                           wavelength_nm=wavelength, seed=seed, **settings)
    return ShapedCase(kind=kind, pixels=pixels, part=part, center_px=(cx, cy),
                      wavelength_nm=wavelength, truth=answer, settings=settings,
                      surface=surface)


def outline_text(case: ShapedCase) -> str:
    """The part's true outline as an operator types it for ``--aperture`` (the form the
    README documents: photo pixels, x right, y down; angles counter-clockwise as seen)."""
    cx, cy = case.center_px
    p = case.part

    def nums(*values):
        return ",".join(f"{v:.6f}" for v in values)

    if case.kind == "ellipse":
        b = p["radius_px"] * math.cos(math.radians(p["view_deg"]))
        return "ellipse:" + nums(cx, cy, p["radius_px"], b, p["axis_deg"])
    if case.kind == "rect":
        return "rect:" + nums(cx, cy, p["width_px"], p["height_px"], p["angle_deg"])
    if case.kind == "poly":  # offsets with y up to photo pixels with y down
        return "poly:" + ";".join(nums(cx + a, cy - b) for a, b in p["corners_px"])
    if case.kind == "annulus":
        return "annulus:" + nums(cx, cy, p["radius_px"], p["inner_px"])
    # the flats' directions are already counter-clockwise with y up, as --aperture takes them
    return "cut:" + nums(cx, cy, p["radius_px"]) + "".join(
        ";" + nums(a, d) for a, d in p["flats"])


def render_shaped_stack(case: ShapedCase, count: int, step_deg: float, *,
                        fringes: float | None = None, seed: int = 0) -> list[np.ndarray]:
    """``count`` 8-bit frames of ``case``'s part taken with the gap widening by
    ``step_deg`` of fringe phase between frames.

    The surface, part, lamp, edge, visibility and noise level are the case's (as
    :func:`render_shaped` draws its photo); only the tilt differs: ``fringes`` across the
    part (by default 2 to 6, drawn from ``seed``), as an operator leaves a few in a
    stack. The photo's phase rises with height, that is as the gap narrows, so with the gap
    widening frame ``k``'s phase is the photo's less ``k * step_deg``. Each frame has its
    own camera noise (from ``seed`` and ``k``).
    """
    if case.surface is None:
        raise ValueError("the case carries no surface to render more frames of")
    if fringes is None:
        fringes = float(np.random.default_rng([seed, 1]).uniform(2.0, 6.0))
    settings = {**case.settings, "fringes": float(fringes)}
    return [render_shaped(case.surface, case.kind, case.part, shape=case.pixels.shape,
                          center_px=case.center_px, wavelength_nm=case.wavelength_nm,
                          seed=[seed, 2, k], phase_deg=-k * step_deg, **settings)
            for k in range(count)]
