"""Part outlines other than a plain circle: ellipse, rectangle, polygon, annulus, flats.

A circular part needs none of this: ``Aperture`` alone describes it. Any other outline
is one of the classes below, carried by ``Aperture.shape``; the aperture's own centre
and radius are then the outline's bounding circle, which the demodulation crops and
bins by, and everything outside the outline (but inside that circle) is left out of
the measurement as an exclusion is.

Each shape gives, in photo pixels (x right, y down, from pixel centres):

* ``inside(x, y)``: the part's area;
* ``unit_xy(x, y)``: coordinates for the fit (x right, y toward the top of the photo).
  An ellipse is a round part seen at an angle, and its ``unit_xy`` is the affine map
  that takes the photo's ellipse back to the part's unit circle, so plain Zernike
  terms and every figure are over the part's real circle (``maps_to_disk``). The
  other outlines are scaled into the unit disk about their centre, and the fit uses
  polynomials made orthonormal over the outline itself (``zernike.orthonormal_basis``);
* ``outline()``: closed polylines to draw;
* ``to_text()`` / ``parse_shape(text)``: the command line's form, and ``to_dict()`` /
  ``shape_from_dict()``: the record's.

The command-line form (``--aperture``): ``X,Y,R`` or ``circle:X,Y,R`` (today's circle),
``ellipse:CX,CY,A,B,ANGLE`` (semi-axes A >= B, ANGLE of the A axis in degrees
counter-clockwise as the photo is seen), ``rect:CX,CY,W,H,ANGLE`` (full width W along
ANGLE, height H across it), ``poly:X1,Y1;X2,Y2;X3,Y3;...`` (corners in order, at
least three), ``annulus:CX,CY,R,RIN`` (outer and inner radius) and
``cut:CX,CY,R;ANGLE,DIST;...`` (a circle with flats: each flat's outward direction in
degrees and its distance from the centre), all in photo pixels.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = ["SHAPE_FORMS", "Annulus", "CutCircle", "Ellipse", "Polygon", "Rectangle", "Shape",
           "circle_text", "parse_shape", "shape_from_dict", "shape_words"]

#: the forms ``--aperture`` takes, for help texts and error messages
SHAPE_FORMS = ("X,Y,R", "circle:X,Y,R", "ellipse:CX,CY,A,B,ANGLE", "rect:CX,CY,W,H,ANGLE",
               "poly:X1,Y1;X2,Y2;X3,Y3;...", "annulus:CX,CY,R,RIN",
               "cut:CX,CY,R;ANGLE,DIST;...")
_MAX_PX = 1_000_000  # no photo Flatsight reads is wider


def _fmt(v: float) -> str:
    """A number as the command line takes it back: no exponent, no signed zero."""
    text = f"{v:.2f}".rstrip("0").rstrip(".")
    return "0" if text in ("-0", "") else text


def _up(x, y, cx: float, cy: float) -> tuple[np.ndarray, np.ndarray]:
    """Photo pixels to offsets from ``(cx, cy)`` with y toward the top of the photo."""
    return np.asarray(x, dtype=float) - cx, cy - np.asarray(y, dtype=float)


def _turn(px, py, angle_deg: float) -> tuple[np.ndarray, np.ndarray]:
    """Offsets (y up) turned counter-clockwise by ``angle_deg``."""
    c, s = math.cos(math.radians(angle_deg)), math.sin(math.radians(angle_deg))
    return px * c - py * s, px * s + py * c


class Shape:
    """What every outline offers (see the module docstring)."""

    kind = ""
    #: the fit's coordinates fill the unit disk exactly: plain Zernike terms apply
    maps_to_disk = False
    center_x_px: float
    center_y_px: float

    @property
    def bounding_radius_px(self) -> float:
        raise NotImplementedError

    @property
    def view_angle_deg(self) -> float | None:
        """How far off the part's axis the photo was taken (ellipses only)."""
        return None

    def inside(self, x, y) -> np.ndarray:
        raise NotImplementedError

    def edge_distance_px(self, x, y) -> np.ndarray:
        """Signed distance to the outline in photo pixels: negative inside, positive out
        (exact for straight sides and circles, to first order near an ellipse)."""
        raise NotImplementedError

    def unit_xy(self, x, y) -> tuple[np.ndarray, np.ndarray]:
        """Fit coordinates: offsets from the centre over the bounding radius, y up."""
        px, py = _up(x, y, self.center_x_px, self.center_y_px)
        r = self.bounding_radius_px
        return px / r, py / r

    def outline(self, points: int = 256) -> list[np.ndarray]:
        """Closed polylines ``(K, 2)`` of photo ``(x, y)`` along the outline."""
        raise NotImplementedError

    def params(self) -> dict[str, float]:
        raise NotImplementedError

    def to_text(self) -> str:
        return f"{self.kind}:" + ",".join(_fmt(v) for v in self.params().values())

    def to_dict(self) -> dict:
        return {"kind": self.kind, **{k: float(v) for k, v in self.params().items()}}

    def moved(self, dx: float = 0.0, dy: float = 0.0, grow: float = 1.0,
              turn_deg: float = 0.0, stretch: float = 1.0) -> Shape:
        """A copy shifted by ``(dx, dy)`` px, scaled by ``grow``, turned counter-clockwise
        by ``turn_deg`` and with its second dimension scaled by ``stretch``."""
        raise NotImplementedError

    def describe(self) -> str:
        """A few words for people: the shape and its size."""
        raise NotImplementedError


@dataclass(frozen=True)
class Ellipse(Shape):
    """A round part photographed at an angle: semi-axes ``a_px >= b_px``.

    The part's circle is the ellipse stretched along its minor axis by ``a / b``; the
    viewing angle is ``acos(b / a)``.
    """

    center_x_px: float
    center_y_px: float
    a_px: float
    b_px: float
    angle_deg: float  # direction of the major axis, counter-clockwise as seen
    kind = "ellipse"
    maps_to_disk = True

    def __post_init__(self):
        if self.b_px > self.a_px:  # keep a the major axis
            a, b = self.b_px, self.a_px
            object.__setattr__(self, "a_px", a)
            object.__setattr__(self, "b_px", b)
            object.__setattr__(self, "angle_deg", self.angle_deg + 90.0)
        object.__setattr__(self, "angle_deg", float(self.angle_deg) % 180.0)

    @property
    def bounding_radius_px(self) -> float:
        return self.a_px

    @property
    def view_angle_deg(self) -> float:
        return math.degrees(math.acos(min(1.0, self.b_px / self.a_px)))

    def _axes(self, x, y):
        px, py = _up(x, y, self.center_x_px, self.center_y_px)
        u, v = _turn(px, py, -self.angle_deg)
        return u / self.a_px, v / self.b_px

    def inside(self, x, y):
        u, v = self._axes(x, y)
        return u * u + v * v <= 1.0

    def edge_distance_px(self, x, y):
        u, v = self._axes(x, y)
        rho = np.hypot(u, v)
        # (rho - 1) over the gradient of rho, in pixels
        grad = np.hypot(u / self.a_px, v / self.b_px) / np.maximum(rho, 1e-12)
        return np.where(rho > 1e-9, (rho - 1.0) / np.maximum(grad, 1e-12), -self.b_px)

    def unit_xy(self, x, y):
        # the affine map to the unit disk that keeps the axes where the photo has them
        u, v = self._axes(x, y)
        return _turn(u, v, self.angle_deg)

    def outline(self, points: int = 256):
        t = np.linspace(0.0, 2.0 * np.pi, points + 1)
        u, v = _turn(self.a_px * np.cos(t), self.b_px * np.sin(t), self.angle_deg)
        return [np.column_stack([self.center_x_px + u, self.center_y_px - v])]

    def params(self):
        return {"center_x_px": self.center_x_px, "center_y_px": self.center_y_px,
                "a_px": self.a_px, "b_px": self.b_px, "angle_deg": self.angle_deg}

    def moved(self, dx=0.0, dy=0.0, grow=1.0, turn_deg=0.0, stretch=1.0):
        return Ellipse(self.center_x_px + dx, self.center_y_px + dy, self.a_px * grow,
                       min(self.a_px * grow, self.b_px * grow * stretch),
                       self.angle_deg + turn_deg)

    def describe(self):
        return (f"ellipse {_fmt(2 * self.a_px)} x {_fmt(2 * self.b_px)} px, seen "
                f"{self.view_angle_deg:.1f} deg off axis")


@dataclass(frozen=True)
class Rectangle(Shape):
    """A rectangular part: full width along ``angle_deg`` and height across it."""

    center_x_px: float
    center_y_px: float
    width_px: float
    height_px: float
    angle_deg: float
    kind = "rect"

    def __post_init__(self):
        object.__setattr__(self, "angle_deg", float(self.angle_deg) % 180.0)

    @property
    def bounding_radius_px(self) -> float:
        return 0.5 * math.hypot(self.width_px, self.height_px)

    def inside(self, x, y):
        px, py = _up(x, y, self.center_x_px, self.center_y_px)
        u, v = _turn(px, py, -self.angle_deg)
        return (np.abs(u) <= 0.5 * self.width_px) & (np.abs(v) <= 0.5 * self.height_px)

    def edge_distance_px(self, x, y):
        px, py = _up(x, y, self.center_x_px, self.center_y_px)
        u, v = _turn(px, py, -self.angle_deg)
        du = np.abs(u) - 0.5 * self.width_px
        dv = np.abs(v) - 0.5 * self.height_px
        outside = np.hypot(np.maximum(du, 0.0), np.maximum(dv, 0.0))
        return np.where((du > 0) | (dv > 0), outside, np.maximum(du, dv))

    def corners(self) -> np.ndarray:
        """The four corners, photo ``(x, y)``, counter-clockwise as seen."""
        w, h = 0.5 * self.width_px, 0.5 * self.height_px
        u, v = _turn(np.array([w, -w, -w, w]), np.array([h, h, -h, -h]), self.angle_deg)
        return np.column_stack([self.center_x_px + u, self.center_y_px - v])

    def outline(self, points: int = 256):
        c = self.corners()
        return [np.vstack([c, c[:1]])]

    def params(self):
        return {"center_x_px": self.center_x_px, "center_y_px": self.center_y_px,
                "width_px": self.width_px, "height_px": self.height_px,
                "angle_deg": self.angle_deg}

    def moved(self, dx=0.0, dy=0.0, grow=1.0, turn_deg=0.0, stretch=1.0):
        return Rectangle(self.center_x_px + dx, self.center_y_px + dy, self.width_px * grow,
                         self.height_px * grow * stretch, self.angle_deg + turn_deg)

    def describe(self):
        return f"rectangle {_fmt(self.width_px)} x {_fmt(self.height_px)} px"


@dataclass(frozen=True)
class Polygon(Shape):
    """A part outlined by its corners (photo ``(x, y)``, in order around it)."""

    corners_px: tuple[tuple[float, float], ...]
    kind = "poly"

    @property
    def center_x_px(self) -> float:
        return self._centroid()[0]

    @property
    def center_y_px(self) -> float:
        return self._centroid()[1]

    def _centroid(self) -> tuple[float, float]:
        # the area centroid (shoelace formula), common practice
        p = np.asarray(self.corners_px, dtype=float)
        q = np.roll(p, -1, axis=0)
        cross = p[:, 0] * q[:, 1] - q[:, 0] * p[:, 1]
        area = 0.5 * cross.sum()
        if abs(area) < 1e-9:
            return float(p[:, 0].mean()), float(p[:, 1].mean())
        return (float(((p[:, 0] + q[:, 0]) * cross).sum() / (6 * area)),
                float(((p[:, 1] + q[:, 1]) * cross).sum() / (6 * area)))

    @property
    def area_px(self) -> float:
        p = np.asarray(self.corners_px, dtype=float)
        q = np.roll(p, -1, axis=0)
        return float(0.5 * abs((p[:, 0] * q[:, 1] - q[:, 0] * p[:, 1]).sum()))

    @property
    def bounding_radius_px(self) -> float:
        p = np.asarray(self.corners_px, dtype=float)
        return float(np.max(np.hypot(p[:, 0] - self.center_x_px, p[:, 1] - self.center_y_px)))

    def inside(self, x, y):
        # even-odd crossing test along +x (common practice)
        x = np.asarray(x, dtype=float)
        y = np.asarray(y, dtype=float)
        out = np.zeros(np.broadcast(x, y).shape, dtype=bool)
        p = self.corners_px
        for (x1, y1), (x2, y2) in zip(p, p[1:] + p[:1], strict=True):
            if y1 == y2:
                continue
            spans = (y1 > y) != (y2 > y)
            at = x1 + (y - y1) * (x2 - x1) / (y2 - y1)
            out ^= spans & (x < at)
        return out

    def edge_distance_px(self, x, y):
        x = np.asarray(x, dtype=float)
        y = np.asarray(y, dtype=float)
        best = np.full(np.broadcast(x, y).shape, np.inf)
        p = self.corners_px
        for (x1, y1), (x2, y2) in zip(p, p[1:] + p[:1], strict=True):
            ex, ey = x2 - x1, y2 - y1
            t = np.clip(((x - x1) * ex + (y - y1) * ey) / max(ex * ex + ey * ey, 1e-12), 0, 1)
            best = np.minimum(best, np.hypot(x - x1 - t * ex, y - y1 - t * ey))
        return np.where(self.inside(x, y), -best, best)

    def outline(self, points: int = 256):
        p = np.asarray(self.corners_px, dtype=float)
        return [np.vstack([p, p[:1]])]

    def params(self):
        return {}

    def to_text(self):
        return "poly:" + ";".join(f"{_fmt(x)},{_fmt(y)}" for x, y in self.corners_px)

    def to_dict(self):
        return {"kind": self.kind,
                "corners_px": [[float(x), float(y)] for x, y in self.corners_px]}

    def moved(self, dx=0.0, dy=0.0, grow=1.0, turn_deg=0.0, stretch=1.0):
        cx, cy = self.center_x_px, self.center_y_px
        p = np.asarray(self.corners_px, dtype=float)
        u, v = _turn((p[:, 0] - cx) * grow, (cy - p[:, 1]) * grow, turn_deg)
        return Polygon(tuple((float(cx + dx + a), float(cy + dy - b)) for a, b in zip(u, v,
                                                                                      strict=True)))

    def describe(self):
        return f"polygon of {len(self.corners_px)} corners"


@dataclass(frozen=True)
class Annulus(Shape):
    """A ring: outer radius ``radius_px``, inner ``inner_radius_px`` (a centre hole)."""

    center_x_px: float
    center_y_px: float
    radius_px: float
    inner_radius_px: float
    kind = "annulus"

    @property
    def bounding_radius_px(self) -> float:
        return self.radius_px

    def inside(self, x, y):
        px, py = _up(x, y, self.center_x_px, self.center_y_px)
        r2 = px * px + py * py
        return (r2 <= self.radius_px**2) & (r2 >= self.inner_radius_px**2)

    def edge_distance_px(self, x, y):
        px, py = _up(x, y, self.center_x_px, self.center_y_px)
        r = np.hypot(px, py)
        return np.maximum(r - self.radius_px, self.inner_radius_px - r)

    def outline(self, points: int = 256):
        t = np.linspace(0.0, 2.0 * np.pi, points + 1)
        return [np.column_stack([self.center_x_px + r * np.cos(t),
                                 self.center_y_px + r * np.sin(t)])
                for r in (self.radius_px, self.inner_radius_px)]

    def params(self):
        return {"center_x_px": self.center_x_px, "center_y_px": self.center_y_px,
                "radius_px": self.radius_px, "inner_radius_px": self.inner_radius_px}

    def moved(self, dx=0.0, dy=0.0, grow=1.0, turn_deg=0.0, stretch=1.0):
        r = self.radius_px * grow
        return Annulus(self.center_x_px + dx, self.center_y_px + dy, r,
                       min(0.95 * r, self.inner_radius_px * grow * stretch))

    def describe(self):
        return (f"annulus {_fmt(2 * self.radius_px)} px across, hole "
                f"{_fmt(2 * self.inner_radius_px)} px")


@dataclass(frozen=True)
class CutCircle(Shape):
    """A round part with straight flats ground on its edge (or a straight cut-off).

    Each flat is ``(angle_deg, distance_px)``: the chord whose outward normal points
    ``angle_deg`` counter-clockwise from x as seen (y up), ``distance_px`` from the
    circle's centre. The fit's coordinates and power are the circle's own: power is the
    best-fit sphere's sag from the circle's centre to its rim, as for the round part
    before the flats were ground.
    """

    center_x_px: float
    center_y_px: float
    radius_px: float
    flats: tuple[tuple[float, float], ...]
    kind = "cut"

    def __post_init__(self):
        object.__setattr__(self, "flats", tuple(
            (float(a) % 360.0, float(d)) for a, d in self.flats))

    @property
    def bounding_radius_px(self) -> float:
        return self.radius_px

    def _beyond(self, x, y) -> np.ndarray:
        """How far (px) each point lies beyond the circle or a flat's line, the largest."""
        px, py = _up(x, y, self.center_x_px, self.center_y_px)
        out = np.hypot(px, py) - self.radius_px
        for angle, dist in self.flats:
            a = math.radians(angle)
            out = np.maximum(out, px * math.cos(a) + py * math.sin(a) - dist)
        return out

    def inside(self, x, y):
        return self._beyond(x, y) <= 0.0

    def edge_distance_px(self, x, y):
        # exact inside and along the arcs and flats, a little short beyond a corner
        return self._beyond(x, y)

    def outline(self, points: int = 256):
        # the edge seen from the centre: the circle, or a flat's line where nearer
        t = np.linspace(0.0, 2.0 * np.pi, points + 1)
        ends = [math.radians(a) + side * math.acos(min(d / self.radius_px, 1.0))
                for a, d in self.flats for side in (-1.0, 1.0)]
        t = np.sort(np.concatenate([t, np.mod(ends, 2.0 * np.pi)]))  # the corners too
        reach = np.full_like(t, self.radius_px)
        for angle, dist in self.flats:
            c = np.cos(t - math.radians(angle))
            with np.errstate(divide="ignore"):
                reach = np.where(c > 0, np.minimum(reach, dist / np.where(c > 0, c, 1.0)),
                                 reach)
        return [np.column_stack([self.center_x_px + reach * np.cos(t),
                                 self.center_y_px - reach * np.sin(t)])]

    def params(self):
        return {"center_x_px": self.center_x_px, "center_y_px": self.center_y_px,
                "radius_px": self.radius_px}

    def to_text(self):
        return ("cut:" + ",".join(_fmt(v) for v in self.params().values()) + "".join(
            f";{_fmt(a)},{_fmt(d)}" for a, d in self.flats))

    def to_dict(self):
        return {"kind": self.kind, **{k: float(v) for k, v in self.params().items()},
                "flats": [{"angle_deg": float(a), "distance_px": float(d)}
                          for a, d in self.flats]}

    def moved(self, dx=0.0, dy=0.0, grow=1.0, turn_deg=0.0, stretch=1.0):
        # stretched, the flats move out (or in) across the part; they stay on it
        r = self.radius_px * grow
        return CutCircle(self.center_x_px + dx, self.center_y_px + dy, r,
                         tuple((a + turn_deg, min(max(d * grow * stretch, 0.05 * r),
                                                  0.999 * r))
                               for a, d in self.flats))

    def describe(self):
        count = len(self.flats)
        return f"circle {2 * self.radius_px:.0f} px, {count} flat{'s' if count != 1 else ''}"


# --- reading and writing ---------------------------------------------------------------


def _numbers(text: str, body: str, count: int | None, form: str) -> list[float]:
    parts = body.replace(" ", "").split(",")
    if count is not None and len(parts) != count:
        raise ValueError(f"{text!r} is not {form} ({count} numbers in pixels and degrees)")
    try:
        values = [float(p) for p in parts]
    except ValueError:
        raise ValueError(f"{text!r} is not {form} (numbers in pixels and degrees)") from None
    if not all(math.isfinite(v) and abs(v) <= _MAX_PX for v in values):
        raise ValueError(f"{text!r}: the numbers of {form} are photo pixels, at most "
                         f"{_MAX_PX:,} in size")
    return values


def parse_shape(text: str) -> tuple[float, float, float] | Shape:
    """Read an ``--aperture`` value: ``(x, y, r)`` for a circle, else a :class:`Shape`.

    Raises
    ------
    ValueError
        With a one-line message naming the form expected.
    """
    raw = text.strip()
    kind, sep, body = raw.partition(":")
    kind = kind.lower() if sep else "circle"
    body = body if sep else raw
    if kind == "circle":
        x, y, r = _numbers(text, body, 3, "X,Y,R")
        if r <= 0:
            raise ValueError(f"radius in {text!r} must be positive")
        return x, y, r
    if kind == "ellipse":
        cx, cy, a, b, angle = _numbers(text, body, 5, "ellipse:CX,CY,A,B,ANGLE")
        if a <= 0 or b <= 0:
            raise ValueError(f"semi-axes in {text!r} must be positive")
        return Ellipse(cx, cy, a, b, angle)
    if kind in ("rect", "rectangle"):
        cx, cy, w, h, angle = _numbers(text, body, 5, "rect:CX,CY,W,H,ANGLE")
        if w <= 0 or h <= 0:
            raise ValueError(f"width and height in {text!r} must be positive")
        return Rectangle(cx, cy, w, h, angle)
    if kind in ("poly", "polygon"):
        form = "poly:X1,Y1;X2,Y2;X3,Y3;..."
        corners = tuple(tuple(_numbers(text, c, 2, form)) for c in body.split(";") if c.strip())
        if len(corners) < 3:
            raise ValueError(f"{text!r} is not {form} (at least three corners)")
        poly = Polygon(corners)
        if poly.area_px < 1.0:
            raise ValueError(f"the corners in {text!r} enclose no area")
        return poly
    if kind == "annulus":
        cx, cy, r, rin = _numbers(text, body, 4, "annulus:CX,CY,R,RIN")
        if not 0 <= rin < r:
            raise ValueError(f"in {text!r} the inner radius must be at least 0 and less "
                             "than the outer")
        return Annulus(cx, cy, r, rin)
    if kind == "cut":
        form = "cut:CX,CY,R;ANGLE,DIST;..."
        pieces = [p for p in body.split(";") if p.strip()]
        if len(pieces) < 2:
            raise ValueError(f"{text!r} is not {form} (the circle, then at least one flat)")
        cx, cy, r = _numbers(text, pieces[0], 3, form)
        flats = tuple(tuple(_numbers(text, p, 2, form)) for p in pieces[1:])
        if r <= 0:
            raise ValueError(f"radius in {text!r} must be positive")
        if not all(0 < d < r for _, d in flats):
            raise ValueError(f"in {text!r} each flat's distance from the centre must be "
                             "more than 0 and less than the radius")
        return CutCircle(cx, cy, r, flats)
    raise ValueError(f"{text!r}: unknown aperture shape {kind!r}; use one of "
                     + ", ".join(SHAPE_FORMS))


def circle_text(x: float, y: float, r: float) -> str:
    """A circle's ``--aperture`` text, ``circle:X,Y,R``, as :meth:`Shape.to_text` is an
    outline's (a round part seen square-on has no :class:`Shape`)."""
    return "circle:" + ",".join(_fmt(v) for v in (x, y, r))


def shape_words(d: dict | None) -> str | None:
    """What a record's ``aperture.shape`` means, in a sentence for a certificate or a
    report (None for a circle, which has no ``shape``)."""
    if not d:
        return None
    try:
        shape = shape_from_dict(d)
    except (KeyError, TypeError, ValueError):
        return f"outline {d.get('kind')!s}"
    if isinstance(shape, Ellipse):
        return (f"a round part photographed {shape.view_angle_deg:.1f} deg off its axis "
                f"(an ellipse {_fmt(2 * shape.a_px)} x {_fmt(2 * shape.b_px)} px), mapped "
                "back to its circle; figures over that circle")
    return (f"{shape.describe()}; figures over its outline, fitted by polynomials "
            "orthonormal over it; power is the best-fit sphere's sag from the centre to "
            "the farthest point")


def shape_from_dict(d: dict) -> Shape:
    """The shape a record's ``aperture.shape`` describes (see :meth:`Shape.to_dict`)."""
    kind = d.get("kind")
    if kind == "ellipse":
        return Ellipse(d["center_x_px"], d["center_y_px"], d["a_px"], d["b_px"], d["angle_deg"])
    if kind == "rect":
        return Rectangle(d["center_x_px"], d["center_y_px"], d["width_px"], d["height_px"],
                         d["angle_deg"])
    if kind == "poly":
        return Polygon(tuple((float(x), float(y)) for x, y in d["corners_px"]))
    if kind == "annulus":
        return Annulus(d["center_x_px"], d["center_y_px"], d["radius_px"],
                       d["inner_radius_px"])
    if kind == "cut":
        return CutCircle(d["center_x_px"], d["center_y_px"], d["radius_px"],
                         tuple((float(f["angle_deg"]), float(f["distance_px"]))
                               for f in d["flats"]))
    raise ValueError(f"unknown aperture shape {kind!r}")
