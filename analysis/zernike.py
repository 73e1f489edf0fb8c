"""Zernike polynomials in Noll's ordering and normalisation, and the least-squares fit.

Coordinates: ``x`` to the right of the photo and ``y`` toward its top (so the
angle ``theta`` runs counter-clockwise as the photo is seen), both divided by the
aperture radius. Each term is orthonormal over the unit disk,
``(1/pi) * integral(Z_j Z_k dA) = delta_jk``, so a coefficient is that term's RMS.

References
----------
R. J. Noll, "Zernike polynomials and atmospheric turbulence", JOSA 66(3), 207 (1976).
L. N. Thibos et al., "Standards for reporting the optical aberrations of eyes",
J. Refract. Surg. 18(5), S652 (2002); ANSI Z80.28 and ISO 24157:2008 (OSA/ANSI index).
J. C. Wyant, K. Creath, "Basic wavefront aberration theory for optical metrology",
Applied Optics and Optical Engineering XI, ch. 1 (1992): the Fringe (University of
Arizona) ordering, whose first 36 terms Evans's PVr fits (ordering from memory).
"""

from __future__ import annotations

from dataclasses import dataclass
from math import factorial

import numpy as np

__all__ = [
    "ZernikeFit",
    "aperture_basis",
    "fit_zernike",
    "fringe_to_nm",
    "nm_basis",
    "noll_to_nm",
    "noll_to_osa",
    "orthonormalized",
    "osa_to_noll",
    "radial",
    "term_name",
    "zernike",
    "solve_least_squares",
    "zernike_basis",
]


def noll_to_nm(j: int) -> tuple[int, int]:
    """Radial order ``n`` and signed azimuthal frequency ``m`` of Noll term ``j`` (from 1).

    ``m > 0`` is a cosine term (even ``j``), ``m < 0`` a sine term (odd ``j``).

    Examples
    --------
    >>> noll_to_nm(4)
    (2, 0)
    >>> noll_to_nm(7)
    (3, -1)
    """
    if j < 1:
        raise ValueError(f"Noll index starts at 1, got {j}")
    n = 0
    while (n + 1) * (n + 2) // 2 < j:
        n += 1
    p = j - n * (n + 1) // 2 - 1  # position within the row of order n
    m = n % 2 + 2 * ((p + (n + 1) % 2) // 2)
    if m != 0 and j % 2 == 1:
        m = -m
    return n, m


def fringe_to_nm(j: int) -> tuple[int, int]:
    """Radial order and signed azimuthal frequency of Fringe (University of Arizona) term ``j``.

    The Fringe set groups terms by ``(n + |m|) / 2``; within a group ``|m|`` falls from
    the group number to 0, cosine before sine. Terms 1 to 36 are every term with
    ``(n + |m|) / 2 <= 5``; term 37 is the 12th-order spherical (Wyant & Creath 1992,
    from memory).

    Examples
    --------
    >>> [fringe_to_nm(j) for j in (4, 9, 16, 25, 36, 37)]
    [(2, 0), (4, 0), (6, 0), (8, 0), (10, 0), (12, 0)]
    """
    if j < 1:
        raise ValueError(f"Fringe index starts at 1, got {j}")
    if j == 37:
        return 12, 0
    k = 0
    for d in range(0, 6):
        for mm in range(d, -1, -1):
            for sign in ((1, -1) if mm else (1,)):
                k += 1
                if k == j:
                    return 2 * d - mm, sign * mm
    raise ValueError(f"Fringe index {j} is beyond the 37 terms of the set")


def nm_to_noll(n: int, m: int) -> int:
    """Inverse of :func:`noll_to_nm`."""
    if (n - abs(m)) % 2 or abs(m) > n or n < 0:
        raise ValueError(f"no Zernike term with n={n}, m={m}")
    start = n * (n + 1) // 2 + 1
    for j in range(start, start + n + 1):
        if noll_to_nm(j) == (n, m):
            return j
    raise AssertionError("unreachable")  # pragma: no cover


def noll_to_osa(j: int) -> int:
    """OSA/ANSI single index (from 0) of Noll term ``j``: ``(n(n+2) + m) / 2``."""
    n, m = noll_to_nm(j)
    return (n * (n + 2) + m) // 2


def osa_to_noll(k: int) -> int:
    """Noll index of OSA/ANSI term ``k`` (from 0)."""
    if k < 0:
        raise ValueError(f"OSA/ANSI index starts at 0, got {k}")
    n = 0
    while (n + 1) * (n + 2) // 2 <= k:
        n += 1
    m = 2 * k - n * (n + 2)
    return nm_to_noll(n, m)


def radial(n: int, m: int, rho: np.ndarray) -> np.ndarray:
    """Zernike radial polynomial ``R_n^|m|(rho)`` by Noll's finite sum (eq. 2 of the paper)."""
    m = abs(m)
    rho = np.asarray(rho, dtype=float)
    out = np.zeros_like(rho)
    for s in range((n - m) // 2 + 1):
        coef = (-1) ** s * factorial(n - s)
        coef /= factorial(s) * factorial((n + m) // 2 - s) * factorial((n - m) // 2 - s)
        out += coef * rho ** (n - 2 * s)
    return out


def zernike(j: int, rho: np.ndarray, theta: np.ndarray) -> np.ndarray:
    """Noll-normalised Zernike term ``j`` at polar coordinates ``(rho, theta)``."""
    n, m = noll_to_nm(j)
    r = radial(n, m, rho)
    if m == 0:
        return np.sqrt(n + 1) * r
    norm = np.sqrt(2 * (n + 1))
    if m > 0:
        return norm * r * np.cos(m * np.asarray(theta))
    return norm * r * np.sin(-m * np.asarray(theta))


def _radial_coefficients(n: int, m: int) -> list[tuple[int, float]]:
    """(power, coefficient) pairs of ``R_n^|m|`` from Noll's finite sum."""
    m = abs(m)
    out = []
    for s in range((n - m) // 2 + 1):
        coef = (-1) ** s * factorial(n - s)
        coef /= factorial(s) * factorial((n + m) // 2 - s) * factorial((n - m) // 2 - s)
        out.append((n - 2 * s, float(coef)))
    return out


def zernike_basis(n_terms: int, x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Terms ``1..n_terms`` at normalised Cartesian points, as a ``(P, n_terms)`` array.

    Evaluated with shared powers of rho and a Chebyshev recurrence for cos/sin(m theta),
    which gives the same values as :func:`zernike` term by term, many times faster.

    Parameters
    ----------
    n_terms : int
        Number of Noll terms, starting at piston.
    x, y : (P,) ndarray
        Coordinates divided by the aperture radius (``y`` toward the photo's top).
    """
    return nm_basis([noll_to_nm(j) for j in range(1, n_terms + 1)], x, y)


def orthonormalized(basis: np.ndarray) -> np.ndarray:
    """Terms made orthonormal over the points they were evaluated at: ``(P, J)`` as given.

    Gram-Schmidt in the terms' own order, done as a QR decomposition: term ``j`` becomes
    what of it the terms before it cannot represent, scaled to unit RMS over the points
    and signed to agree with the term it came from. Over any outline Noll 1 stays the
    piston, 2 and 3 the tilts (planes), and 4 the best-fit sphere's ``rho^2`` less what
    the plane carries. On a full disk it changes the terms only by the grid's sampling.

    References
    ----------
    V. N. Mahajan, G.-m. Dai, "Orthonormal polynomials in wavefront analysis: analytical
    solution", JOSA A 24(9), 2994 (2007): the same polynomials by their numerical
    Gram-Schmidt over the aperture (from memory).
    """
    q, r = np.linalg.qr(np.asarray(basis, dtype=float))
    sign = np.where(np.diag(r) < 0, -1.0, 1.0)
    return q * (sign * np.sqrt(basis.shape[0]))[None, :]


def aperture_basis(n_terms: int, x: np.ndarray, y: np.ndarray, *,
                   orthonormal: bool) -> np.ndarray:
    """Noll terms ``1..n_terms`` at every point of an aperture, ``(P, n_terms)``.

    ``orthonormal`` makes them orthonormal over exactly these points (an outline other
    than the unit disk: :func:`orthonormalized`); else they are the plain terms.
    """
    basis = zernike_basis(n_terms, x, y)
    return orthonormalized(basis) if orthonormal else basis


def nm_basis(orders: list[tuple[int, int]], x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Noll-normalised terms given by ``(n, m)`` pairs, as a ``(P, len(orders))`` array.

    ``m > 0`` is a cosine term, ``m < 0`` a sine term (as :func:`noll_to_nm` gives them).
    """
    x = np.ravel(np.asarray(x, dtype=float))
    y = np.ravel(np.asarray(y, dtype=float))
    out = np.empty((x.size, len(orders)))
    if not orders:
        return out
    n_max = max(n for n, _ in orders)
    rho2 = x * x + y * y
    rho = np.sqrt(rho2)
    powers = [np.ones_like(rho), rho]
    for _ in range(2, n_max + 1):
        powers.append(powers[-1] * rho)
    # cos(m t) and sin(m t) from x/rho, y/rho by the angle-addition recurrence
    with np.errstate(invalid="ignore", divide="ignore"):
        c1 = np.where(rho > 0, x / rho, 1.0)
        s1 = np.where(rho > 0, y / rho, 0.0)
    cos_m = [np.ones_like(rho), c1]
    sin_m = [np.zeros_like(rho), s1]
    for _ in range(2, n_max + 1):
        c, s_ = cos_m[-1], sin_m[-1]
        cos_m.append(c * c1 - s_ * s1)
        sin_m.append(s_ * c1 + c * s1)
    for col, (n, m) in enumerate(orders):
        r = np.zeros_like(rho)
        for p, coef in _radial_coefficients(n, m):
            r += coef * powers[p]
        if m == 0:
            out[:, col] = np.sqrt(n + 1) * r
        elif m > 0:
            out[:, col] = np.sqrt(2 * (n + 1)) * r * cos_m[m]
        else:
            out[:, col] = np.sqrt(2 * (n + 1)) * r * sin_m[-m]
    return out


_M_NAMES = {1: "coma", 2: "astigmatism", 3: "trefoil", 4: "tetrafoil", 5: "pentafoil",
            6: "hexafoil", 7: "heptafoil", 8: "octafoil"}
_ORDINALS = ["primary", "secondary", "tertiary", "quaternary", "quinary"]


def _rank_prefix(rank: int, n: int) -> str:
    """'' for the primary term of a family, 'secondary ', 'tertiary ' ... after it."""
    if rank == 0:
        return ""
    return f"{_ORDINALS[rank]} " if rank < len(_ORDINALS) else f"order-{n} "


def term_name(j: int) -> str:
    """The trade's name for Noll term ``j``: piston, tilt, power, astigmatism, coma..."""
    n, m = noll_to_nm(j)
    am = abs(m)
    if n == 0:
        return "piston"
    if n == 1:
        return "tilt x" if m > 0 else "tilt y"
    if n == 2 and m == 0:
        return "power"
    if am == 0:
        return f"{_rank_prefix(n // 2 - 2, n)}spherical"
    # the lowest order that carries this azimuthal frequency is the "primary" one
    lowest = 3 if am == 1 else am
    rank = (n - lowest) // 2
    base = _M_NAMES.get(am, f"{am}-foil")
    prefix = _rank_prefix(rank, n)
    if am == 1:
        axis = "x" if m > 0 else "y"
    else:
        # the sine term is the cosine turned by a quarter of its period, 90/|m| degrees,
        # given to a tenth of a degree (12.9°, never 12.8571°)
        axis = "0°" if m > 0 else f"{round(90 / am, 1):g}°"
    return f"{prefix}{base} {axis}"


def solve_least_squares(basis: np.ndarray, values: np.ndarray) -> np.ndarray:
    """Least-squares coefficients of ``values`` on the columns of ``basis``.

    Zernike terms over a disk are close to orthonormal, so the normal equations are
    well conditioned and far quicker than an SVD on tens of thousands of pixels; a
    badly conditioned set (a strongly masked aperture) falls back to the SVD.
    """
    gram = basis.T @ basis
    rhs = basis.T @ values
    if np.linalg.cond(gram) < 1e8:
        return np.linalg.solve(gram, rhs)
    return np.linalg.lstsq(basis, values, rcond=None)[0]


@dataclass(frozen=True)
class ZernikeFit:
    """A least-squares Zernike fit of a height map.

    Attributes
    ----------
    coefficients_nm : (J,) ndarray
        Noll terms ``1..J`` in nanometres of height; each is that term's RMS over the disk.
    residual_rms_nm : float
        RMS of the map minus the fit over the pixels used.
    n_pixels : int
        How many pixels entered the fit.
    """

    coefficients_nm: np.ndarray
    residual_rms_nm: float
    n_pixels: int

    @property
    def n_terms(self) -> int:
        return int(self.coefficients_nm.size)

    def osa_coefficients_nm(self) -> np.ndarray:
        """The same coefficients in OSA/ANSI order (index 0 = piston); unfitted terms are 0."""
        j_max = self.n_terms
        k_max = max(noll_to_osa(j) for j in range(1, j_max + 1))
        out = np.zeros(k_max + 1)
        for j in range(1, j_max + 1):
            out[noll_to_osa(j)] = self.coefficients_nm[j - 1]
        return out


def fit_zernike(
    height_nm: np.ndarray,
    x: np.ndarray,
    y: np.ndarray,
    *,
    n_terms: int = 36,
    basis: np.ndarray | None = None,
) -> ZernikeFit:
    """Least-squares fit of Noll terms ``1..n_terms`` to heights at scattered points.

    The points are normalised by the full aperture radius, so masked edge pixels
    leave the normalisation unchanged. On a pixel grid the terms are only nearly
    orthogonal, hence a true least-squares solve rather than inner products.

    Parameters
    ----------
    height_nm : (P,) ndarray
        Heights at the valid pixels.
    x, y : (P,) ndarray
        Their coordinates divided by the aperture radius (``y`` toward the photo's top).
    n_terms : int
        Number of Noll terms (36 by default).
    basis : (P, n_terms) ndarray, optional
        A basis already evaluated at these points, to save recomputing it.
    """
    h = np.ravel(np.asarray(height_nm, dtype=float))
    if basis is None:
        basis = zernike_basis(n_terms, x, y)
    if h.size < n_terms * 3:
        raise ValueError(f"too few valid pixels ({h.size}) to fit {n_terms} Zernike terms")
    coef = solve_least_squares(basis, h)
    resid = h - basis @ coef
    return ZernikeFit(
        coefficients_nm=coef,
        residual_rms_nm=float(np.sqrt(np.mean(resid**2))),
        n_pixels=int(h.size),
    )
