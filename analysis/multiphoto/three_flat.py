"""The absolute three-flat test: each flat's own shape from the pair tests of three flats.

Convention: in the pair test XY, flat Y faces X after being turned over about the
photo's vertical axis, so the photo measures ``X(x, y) + Y(-x, y)`` (heights of both
surfaces add: a high point on either narrows the gap). Coordinates are the Zernike
ones (x right, y toward the top of the photo, divided by the aperture radius). An
extra photo may show a pair with one flat turned about the optical axis by a known
angle, counter-clockwise as seen in the photo.

Turning over, ``x -> -x``, maps ``cos m theta -> (-1)^m cos m theta`` and
``sin m theta -> (-1)^(m+1) sin m theta``. Split every map into its part even under
the flip and its part odd under it:

* even parts: ``A_e = (AB_e + AC_e - BC_e) / 2`` and the like, pixel by pixel
  (Schulz & Schwider); on the flip axis ``x = 0`` the odd part vanishes, so these are
  the absolute profiles along that axis;
* odd parts: the three photos give only differences (``AB_o = A_o - B_o`` ...), so a
  common odd function stays unknown. A photo with A turned by ``alpha`` adds
  ``(R_alpha - 1) A``, which fixes each Zernike pair ``(n, +-m)`` unless ``m alpha`` is
  a multiple of 360 degrees. The terms that stay unknown are reported, never filled in.

Zernike terms are solved together by least squares over all photos (Noll terms from 4;
piston and tilt are set by how each pair happened to lie, so they mean nothing); the
unknown ones are found from the null space of that system. The map of each flat is
its pixel-wise even part plus its separated odd Zernike terms; odd detail finer than
the fitted terms cannot be separated by this method and is left out.

References
----------
G. Schulz, J. Schwider, "Precise measurement of planeness", Appl. Opt. 6, 1077 (1967).
B. S. Fritz, "Absolute calibration of an optical flat", Opt. Eng. 23(4), 379 (1984).
M. Vannoni, G. Molesini, "Absolute planarity with three-flat test: an iterative
approach with Zernike polynomials", Opt. Express 16(1), 340 (2008) (from memory).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from ..errors import SettingsError, UnanalysablePhotoError
from ..zernike import fit_zernike, nm_to_noll, noll_to_nm, zernike_basis
from .averaging import grid_geometry, resample_to_unit_disk, unit_grid

__all__ = [
    "AbsoluteResult",
    "FlatSolution",
    "PairTest",
    "ThreeFlatSolution",
    "absolute_test",
    "flip_parity",
    "flip_matrix",
    "rotation_matrix",
    "solve_three_flat",
]

_FIRST_SOLVED = 4  # Noll terms 1-3 (piston, tilt) are arbitrary in every pair photo
_NULL_TOL = 0.1  # singular values below this count as not separated (|2 sin(m a / 2)| < 0.1)


def flip_parity(j: int) -> int:
    """+1 if Noll term ``j`` is unchanged by ``x -> -x``, -1 if it changes sign."""
    _, m = noll_to_nm(j)
    return (-1) ** abs(m) if m >= 0 else (-1) ** (abs(m) + 1)


def flip_matrix(n_terms: int) -> np.ndarray:
    """Noll coefficients of ``f(-x, y)`` from those of ``f``: a diagonal of parities."""
    return np.diag([float(flip_parity(j)) for j in range(1, n_terms + 1)])


def rotation_matrix(n_terms: int, angle_deg: float) -> np.ndarray:
    """Noll coefficients of ``f`` turned counter-clockwise by ``angle_deg``.

    ``g(r, theta) = f(r, theta - a)``: for each pair ``c cos m theta + s sin m theta``,
    ``c' = c cos ma - s sin ma`` and ``s' = c sin ma + s cos ma``. Needs whole radial
    orders so every cosine term has its sine partner.
    """
    a = np.radians(angle_deg)
    out = np.zeros((n_terms, n_terms))
    for j in range(1, n_terms + 1):
        n, m = noll_to_nm(j)
        if m == 0:
            out[j - 1, j - 1] = 1.0
            continue
        mm = abs(m)
        jc, js = nm_to_noll(n, mm), nm_to_noll(n, -mm)
        if max(jc, js) > n_terms:
            raise SettingsError(
                f"{n_terms} Zernike terms split a radial order; use a whole "
                "number of orders (15, 21, 28, 36, 45 ...)"
            )
        cm, sm = np.cos(mm * a), np.sin(mm * a)
        if m > 0:  # row of the cosine coefficient
            out[jc - 1, jc - 1], out[jc - 1, js - 1] = cm, -sm
        else:
            out[js - 1, jc - 1], out[js - 1, js - 1] = sm, cm
    return out


def _whole_orders(n_terms: int) -> int:
    n = 0
    while (n + 2) * (n + 3) // 2 <= n_terms:
        n += 1
    return (n + 1) * (n + 2) // 2


@dataclass(frozen=True)
class PairTest:
    """One pair photo resampled onto :func:`~flatsight.analysis.multiphoto.averaging.unit_grid`.

    Attributes
    ----------
    first, second : str
        Flat names; ``second`` was turned over about the vertical axis.
    height_nm : (G, G) ndarray
        The measured map, NaN where not measured.
    first_rotation_deg, second_rotation_deg : float
        How far each flat was turned about the optical axis (counter-clockwise as seen
        in the photo) from its position in the plain pair test.
    photo : str
        For messages.
    """

    first: str
    second: str
    height_nm: np.ndarray
    first_rotation_deg: float = 0.0
    second_rotation_deg: float = 0.0
    photo: str = ""


@dataclass(frozen=True)
class FlatSolution:
    """One flat's solved shape.

    Attributes
    ----------
    name : str
    height_nm : (G, G) ndarray
        The separated shape on the unit grid (piston and tilt removed), NaN outside.
    coefficients_nm : (J,) ndarray
        Noll terms; NaN for piston, tilt and every term not separated.
    unseparated_terms : tuple of int
        Noll terms (from 4) the photos could not separate for this flat.
    """

    name: str
    height_nm: np.ndarray
    coefficients_nm: np.ndarray
    unseparated_terms: tuple[int, ...]


@dataclass(frozen=True)
class ThreeFlatSolution:
    """All three flats, and how well the photos agreed with one another."""

    flats: dict[str, FlatSolution]
    n_terms: int
    consistency_rms_nm: float  # RMS misfit of the Zernike equations (0 for consistent photos)
    closure_rms_nm: float  # RMS of AB_o - AC_o + BC_o, pixel-wise; noise only if labels are right
    warnings: tuple[str, ...] = field(default=())


def _coefficients(height: np.ndarray, xu, yu, n_terms: int, photo: str) -> np.ndarray:
    ok = np.isfinite(height)
    if ok.sum() < 3 * n_terms:
        raise UnanalysablePhotoError(f"{photo}: too few measured pixels for the absolute test")
    return fit_zernike(height[ok], xu[ok], yu[ok], n_terms=n_terms).coefficients_nm


def solve_three_flat(pairs: Sequence[PairTest], *, n_terms: int = 36) -> ThreeFlatSolution:
    """Solve three flats from their pair tests (see the module docstring).

    Parameters
    ----------
    pairs : sequence of PairTest
        On one common unit grid. Must hold the three plain tests ``AB``, ``AC``, ``BC``
        (no rotation; names are free, "first" and "second" as photographed) and may hold
        more, for example A against B with A turned.
    n_terms : int
        Noll terms solved (rounded down to whole radial orders).

    Returns
    -------
    ThreeFlatSolution

    References
    ----------
    Schulz & Schwider, Appl. Opt. 6, 1077 (1967); Fritz, Opt. Eng. 23(4), 379 (1984).
    """
    n_terms = _whole_orders(n_terms)
    if len(pairs) < 3:
        raise SettingsError("the absolute test needs the three pair photos AB, AC and BC")
    size = pairs[0].height_nm.shape[0]
    if any(p.height_nm.shape != (size, size) for p in pairs):
        raise SettingsError("the pair maps must share one square grid")
    names: list[str] = []
    for p in pairs:
        if p.first == p.second:
            raise SettingsError(f"{p.photo}: a pair test needs two different flats")
        for f in (p.first, p.second):
            if f not in names:
                names.append(f)
    if len(names) != 3:
        raise SettingsError(f"the absolute test takes exactly three flats, got {names}")
    plain = {
        frozenset((p.first, p.second)): p
        for p in pairs
        if p.first_rotation_deg == 0 and p.second_rotation_deg == 0
    }
    if len(plain) < 3:
        raise SettingsError("the plain (unturned) photos of all three pairs are needed")
    # order the base pairs so that the even-part formula applies: XY, XZ, YZ
    xy = next(p for p in plain.values() if {p.first, p.second} == {names[0], names[1]})
    xz = next(p for p in plain.values() if {p.first, p.second} == {names[0], names[2]})
    yz = next(p for p in plain.values() if {p.first, p.second} == {names[1], names[2]})

    xu, yu = unit_grid(size)
    disk = np.hypot(xu, yu) <= 1.0
    j0 = _FIRST_SOLVED
    k = n_terms - j0 + 1
    flip = flip_matrix(n_terms)[j0 - 1 :, j0 - 1 :]
    rows = []
    rhs = []
    for p in pairs:
        c = _coefficients(p.height_nm, xu, yu, n_terms, p.photo or f"{p.first}{p.second}")
        block = np.zeros((k, 3 * k))
        r1 = rotation_matrix(n_terms, p.first_rotation_deg)[j0 - 1 :, j0 - 1 :]
        r2 = rotation_matrix(n_terms, p.second_rotation_deg)[j0 - 1 :, j0 - 1 :]
        i1, i2 = names.index(p.first), names.index(p.second)
        block[:, i1 * k : (i1 + 1) * k] += r1
        block[:, i2 * k : (i2 + 1) * k] += r2 @ flip
        rows.append(block)
        rhs.append(c[j0 - 1 :])
    system = np.vstack(rows)
    target = np.concatenate(rhs)
    u, s, vt = np.linalg.svd(system, full_matrices=False)
    keep = s >= _NULL_TOL
    solution = vt[keep].T @ ((u[:, keep].T @ target) / s[keep])
    null = vt[~keep]
    ambiguous = (np.linalg.norm(null, axis=0) > 1e-6) if null.size else np.zeros(3 * k, bool)
    consistency = float(np.sqrt(np.mean((system @ solution - target) ** 2)))

    # pixel-wise even parts (turning over is a column reversal on the symmetric grid)
    def even(h):
        return 0.5 * (h + h[:, ::-1])

    def odd(h):
        # without tilt x: it is odd under the flip but set by how the pair happened to lie
        o = 0.5 * (h - h[:, ::-1])
        ok = np.isfinite(o)
        slope = np.dot(o[ok], xu[ok]) / max(np.dot(xu[ok], xu[ok]), 1e-12)
        return o - slope * xu

    sign_xy = xy.first == names[0]
    sign_xz = xz.first == names[0]
    sign_yz = yz.first == names[1]
    e_xy, e_xz, e_yz = even(xy.height_nm), even(xz.height_nm), even(yz.height_nm)
    evens = {
        names[0]: 0.5 * (e_xy + e_xz - e_yz),
        names[1]: 0.5 * (e_xy - e_xz + e_yz),
        names[2]: 0.5 * (-e_xy + e_xz + e_yz),
    }
    # closure: with each odd part signed as (first - second), XY - XZ + YZ vanishes
    o = [
        odd(p.height_nm) * (1 if first else -1)
        for p, first in ((xy, sign_xy), (xz, sign_xz), (yz, sign_yz))
    ]
    closure_map = o[0] - o[1] + o[2]
    closure = closure_map[np.isfinite(closure_map)]
    closure_rms = float(np.sqrt(np.mean(closure**2))) if closure.size else float("nan")

    odd_terms = [j for j in range(j0, n_terms + 1) if flip_parity(j) == -1]
    flats: dict[str, FlatSolution] = {}
    for i, name in enumerate(names):
        coef = np.full(n_terms, np.nan)
        coef[j0 - 1 :] = solution[i * k : (i + 1) * k]
        unsep = tuple(j for j in range(j0, n_terms + 1) if ambiguous[i * k + j - j0])
        coef[[j - 1 for j in unsep]] = np.nan
        separated_odd = [j for j in odd_terms if j not in unsep]
        h = evens[name].copy()
        if separated_odd:
            basis = zernike_basis(n_terms, xu[disk], yu[disk])
            odd_map = np.full((size, size), np.nan)
            idx = [j - 1 for j in separated_odd]
            odd_map[disk] = basis[:, idx] @ coef[idx]
            h = h + odd_map
        h[~disk] = np.nan
        ok = np.isfinite(h)
        if ok.sum() < 3 * n_terms:
            raise UnanalysablePhotoError(
                "the pair photos have too little of the aperture "
                "measured in common (and mirrored) to solve the flats"
            )
        plane = np.stack([np.ones(ok.sum()), xu[ok], yu[ok]], axis=1)
        pc, *_ = np.linalg.lstsq(plane, h[ok], rcond=None)
        h = h - (pc[0] + pc[1] * xu + pc[2] * yu)
        # the reported even coefficients follow the map, so map and terms agree
        fit = fit_zernike(h[ok], xu[ok], yu[ok], n_terms=n_terms).coefficients_nm
        even_terms = [j for j in range(j0, n_terms + 1) if flip_parity(j) == 1]
        coef[[j - 1 for j in even_terms]] = fit[[j - 1 for j in even_terms]]
        flats[name] = FlatSolution(
            name=name, height_nm=h, coefficients_nm=coef, unseparated_terms=unsep
        )

    warnings = []
    if closure_rms > 2.0 or consistency > 2.0:
        warnings.append(
            f"the pair photos disagree with one another (closure {closure_rms:.1f} "
            f"nm RMS, misfit {consistency:.1f} nm RMS): check which flat was on "
            "top in each photo, that the turned-over flat was turned about the "
            "vertical axis, and the angle of the turned photo"
        )
    return ThreeFlatSolution(
        flats=flats,
        n_terms=n_terms,
        consistency_rms_nm=consistency,
        closure_rms_nm=closure_rms,
        warnings=tuple(warnings),
    )


@dataclass(frozen=True)
class AbsoluteResult:
    """Each flat as a measurement, with what the test could not separate."""

    measurements: dict[str, object]  # flat name -> pipeline.Measurement
    solution: ThreeFlatSolution
    photos: dict[str, str]  # "AB", "AC", "BC", "rotated" -> photo name


def absolute_test(
    ab,
    ac,
    bc,
    *,
    rotated=None,
    angle_deg: float | None = None,
    settings=None,
    size: int | None = None,
) -> AbsoluteResult:
    """The three-flat test from measurements of the pairs AB, AC, BC (and optionally A
    against B with A turned counter-clockwise by ``angle_deg`` as seen in the photo).

    Each pair map is resampled onto a common unit grid (aperture-aligned), solved with
    :func:`solve_three_flat`, and each flat's map becomes a measurement placed on the
    AB photo's aperture (fit and figures by ``measurement_from_height``).
    """
    from ..pipeline import measurement_from_height

    if (rotated is None) != (angle_deg is None):
        raise SettingsError("--rotated and --angle go together: give both or neither")
    settings = settings or ab.settings
    ms = [ab, ac, bc] + ([rotated] if rotated is not None else [])
    if size is None:
        diam = [2.0 * m.aperture.radius_px / m.geometry.step_px + 1 for m in ms]
        size = int(min(401, max(33, round(float(np.median(diam))))))
    if size % 2 == 0:
        size += 1  # an odd grid has a column on the flip axis itself
    pairs = []
    for m, (f, s, rot) in zip(
        ms,
        [("A", "B", 0.0), ("A", "C", 0.0), ("B", "C", 0.0), ("A", "B", angle_deg or 0.0)],
        strict=False,
    ):
        h, _ = resample_to_unit_disk(m, size=size)
        pairs.append(PairTest(f, s, h, first_rotation_deg=float(rot), photo=m.photo))
    if rotated is not None and abs(np.remainder(angle_deg + 180.0, 360.0) - 180.0) < 1.0:
        raise SettingsError(
            f"an angle of {angle_deg:g} deg leaves the turned photo the same "
            "as the plain AB photo; turn the flat by 30 to 180 deg"
        )
    sol = solve_three_flat(pairs, n_terms=settings.n_terms)
    geometry = grid_geometry(ab.aperture, size)
    xu, yu = unit_grid(size)
    disk = np.hypot(xu, yu) <= 1.0
    out = {}
    for name, flat in sol.flats.items():
        notes = tuple(sol.warnings)
        if flat.unseparated_terms:
            notes += (
                f"flat {name}: Noll terms {', '.join(map(str, flat.unseparated_terms))} "
                "could not be separated and are left out of its map",
            )
        out[name] = measurement_from_height(
            flat.height_nm,
            np.isfinite(flat.height_nm),
            disk,
            aperture=ab.aperture,
            geometry=geometry,
            settings=settings,
            photo=f"flat {name} (absolute test)",
            warnings=notes,
        )
    photos = {"AB": ab.photo, "AC": ac.photo, "BC": bc.photo}
    if rotated is not None:
        photos["rotated"] = rotated.photo
    return AbsoluteResult(measurements=out, solution=sol, photos=photos)
