"""Reference surfaces of known form, and their truth figures by direct quadrature over the disk.

Coordinates are those of the unit disk over the part: ``x`` to the right, ``y`` toward the top of
the photo, angles counter-clockwise as seen. Zernike terms follow Noll's ordering and
normalisation (Noll, JOSA 66(3), 207, 1976); a coefficient in nm is the term's RMS over the disk.

Everything here is written from the closed forms; nothing is shared with the measurement engine.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, field, replace
from functools import cache, cached_property

import numpy as np
from numpy.polynomial import polynomial as npoly
from scipy import ndimage, optimize

#: Highest Noll index the truth projects onto (radial order 10 ends at j = 66).
NOLL_MAX = 66

__all__ = [
    "FRINGE36_NM",
    "FRINGE36_NOLL",
    "NOLL_MAX",
    "Bump",
    "Edge",
    "PolarGrid",
    "RefSurface",
    "Ring",
    "Ripple",
    "noll_to_nm",
    "nm_to_noll",
    "polar_grid",
    "pv_over_disk",
    "radial",
    "truth",
    "zernike",
    "zernike_monomials",
    "zernike_polar",
    "zernike_sum",
]


# ---------------------------------------------------------------------------------------------
# Zernike terms
# ---------------------------------------------------------------------------------------------


def noll_to_nm(j: int) -> tuple[int, int]:
    """Radial order and signed azimuthal frequency of Noll term ``j``.

    Parameters
    ----------
    j : int
        Noll index, 1 for piston.

    Returns
    -------
    tuple of int
        ``(n, m)``: ``m > 0`` for a cosine term (even ``j``), ``m < 0`` for a sine term (odd
        ``j``), ``m == 0`` for a rotationally symmetric one.

    Notes
    -----
    Order ``n`` holds the ``n + 1`` indices that follow those of the lower orders; within an
    order ``|m|`` rises from ``n mod 2`` in steps of 2, each non-zero ``|m|`` taking two
    consecutive indices of which the even one is the cosine (Noll 1976, table 1).
    """
    j = int(j)
    if j < 1:
        raise ValueError(f"Noll index starts at 1, got {j}")
    n, first = 0, 1
    while j > first + n:  # order n spans first .. first + n
        first += n + 1
        n += 1
    k = j - first
    am = 2 * ((k + 1) // 2) if n % 2 == 0 else 2 * (k // 2) + 1
    if am == 0:
        return n, 0
    return n, (am if j % 2 == 0 else -am)


@cache
def _nm_table(limit: int) -> dict[tuple[int, int], int]:
    return {noll_to_nm(j): j for j in range(1, limit + 1)}


def nm_to_noll(n: int, m: int) -> int:
    """Noll index of the term with radial order ``n`` and signed frequency ``m``.

    Parameters
    ----------
    n, m : int
        Radial order and signed azimuthal frequency (negative for a sine term).

    Returns
    -------
    int
        The Noll index.
    """
    if abs(m) > n or (n - abs(m)) % 2:
        raise ValueError(f"no Zernike term with n={n}, m={m}")
    return _nm_table((n + 1) * (n + 2) // 2)[(n, m)]


@cache
def _radial_terms(n: int, am: int) -> tuple[tuple[int, int], ...]:
    """``(power, integer coefficient)`` pairs of R_n^m, highest power first."""
    half = (n - am) // 2
    return tuple((n - 2 * k, (-1) ** k * math.comb(n - k, k) * math.comb(n - 2 * k, half - k))
                 for k in range(half + 1))


def radial(n: int, m: int, rho: np.ndarray) -> np.ndarray:
    """Zernike radial polynomial R_n^|m| at ``rho``.

    Parameters
    ----------
    n, m : int
        Radial order and azimuthal frequency (its sign is ignored).
    rho : array_like
        Radii (the polynomial is defined for any value, not only the unit interval).

    Returns
    -------
    numpy.ndarray
        R_n^|m|(rho).

    Notes
    -----
    The coefficient of rho^(n-2k) is (-1)^k (n-k)! / (k! ((n+m)/2-k)! ((n-m)/2-k)!), written as
    (-1)^k C(n-k, k) C(n-2k, (n-m)/2-k); evaluated by Horner's rule in rho^2, times rho^|m|.
    """
    am = abs(int(m))
    if am > n or (n - am) % 2:
        raise ValueError(f"no radial polynomial with n={n}, m={m}")
    rho = np.asarray(rho, dtype=float)
    u = rho * rho
    acc = np.zeros_like(rho)
    for _, c in _radial_terms(n, am):
        acc = acc * u + c
    return acc * rho**am if am else acc


def _norm(n: int, m: int) -> float:
    return math.sqrt(n + 1) if m == 0 else math.sqrt(2 * (n + 1))


def zernike_polar(j: int, rho: np.ndarray, theta: np.ndarray) -> np.ndarray:
    """Noll term ``j`` at polar coordinates.

    Parameters
    ----------
    j : int
        Noll index.
    rho, theta : array_like
        Radius (unit disk) and angle in radians, counter-clockwise from ``x``; broadcast.

    Returns
    -------
    numpy.ndarray
        The term, RMS 1 over the unit disk.
    """
    n, m = noll_to_nm(j)
    r = radial(n, m, rho) * _norm(n, m)
    if m == 0:
        return r * np.ones_like(np.asarray(theta, dtype=float))
    if m > 0:
        return r * np.cos(m * np.asarray(theta, dtype=float))
    return r * np.sin(-m * np.asarray(theta, dtype=float))


def zernike(j: int, x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Noll term ``j`` at unit-disk coordinates ``x`` (right) and ``y`` (up).

    Parameters
    ----------
    j : int
        Noll index.
    x, y : array_like
        Unit coordinates; broadcast.

    Returns
    -------
    numpy.ndarray
        The term's value.
    """
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    return zernike_polar(j, np.hypot(x, y), np.arctan2(y, x))


def zernike_sum(coeffs: Mapping[int, float], x: np.ndarray, y: np.ndarray) -> np.ndarray:
    """Sum of Noll terms, ``sum(c_j Z_j)``, at unit coordinates.

    Parameters
    ----------
    coeffs : mapping of int to float
        Noll index to coefficient.
    x, y : array_like
        Unit coordinates; broadcast.

    Returns
    -------
    numpy.ndarray
        The sum.
    """
    x, y = np.broadcast_arrays(np.asarray(x, dtype=float), np.asarray(y, dtype=float))
    rho = np.hypot(x, y)
    theta = np.arctan2(y, x)
    out = np.zeros(x.shape)
    for j, c in coeffs.items():
        if c:
            out += c * zernike_polar(j, rho, theta)
    return out


def _poly2_mul(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Product of two polynomials held as ``C[p, q]`` coefficient arrays of ``x**p * y**q``."""
    out = np.zeros((a.shape[0] + b.shape[0] - 1, a.shape[1] + b.shape[1] - 1))
    for p, q in zip(*np.nonzero(a), strict=True):
        out[p:p + b.shape[0], q:q + b.shape[1]] += a[p, q] * b
    return out


@cache
def _monomials_cached(j: int) -> np.ndarray:
    n, m = noll_to_nm(j)
    am = abs(m)
    # rho^|m| cos(|m| theta) + i rho^|m| sin(|m| theta) = (x + i y)^|m| (binomial expansion)
    ang = np.zeros((am + 1, am + 1))
    for t in range(am + 1):
        if (m >= 0 and t % 2 == 0) or (m < 0 and t % 2 == 1):
            ang[am - t, t] = math.comb(am, t) * (-1) ** (t // 2)
    # the rest of the radial polynomial is a polynomial in rho^2 = x^2 + y^2
    half = (n - am) // 2
    rad = np.zeros((2 * half + 1, 2 * half + 1))
    for power, c in _radial_terms(n, am):
        s = (power - am) // 2
        for u in range(s + 1):
            rad[2 * u, 2 * (s - u)] += c * math.comb(s, u)
    out = _poly2_mul(rad, ang) * _norm(n, m)
    out.setflags(write=False)
    return out


def zernike_monomials(j: int) -> np.ndarray:
    """Noll term ``j`` as a polynomial in Cartesian unit coordinates.

    Parameters
    ----------
    j : int
        Noll index.

    Returns
    -------
    numpy.ndarray
        ``C`` of shape ``(n + 1, n + 1)`` with ``Z_j(x, y) = sum C[p, q] x**p y**q``
        (read-only).
    """
    return _monomials_cached(int(j))


#: The 36-term FRINGE (University of Arizona) set as (n, m) in its own order (from memory,
#: after Wyant & Creath, "Basic wavefront aberration theory for optical metrology", Applied
#: Optics and Optical Engineering XI, 1992): every (n, |m|) with (n + |m|)/2 <= 5, grouped by
#: that sum, |m| falling within a group, cosine before sine; piston to 10th-order spherical.
FRINGE36_NM: tuple[tuple[int, int], ...] = tuple(
    nm
    for k in range(6)
    for am in range(k, -1, -1)
    for nm in (((2 * k - am, am), (2 * k - am, -am)) if am else ((2 * k, 0),))
)

#: Noll indices spanning the same 36 functions as the FRINGE set.
FRINGE36_NOLL: tuple[int, ...] = tuple(sorted(nm_to_noll(n, m) for n, m in FRINGE36_NM))


# ---------------------------------------------------------------------------------------------
# Surfaces
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Bump:
    """A Gaussian bump (positive height) or dig (negative height).

    Parameters
    ----------
    x, y : float
        Centre in unit coordinates (``y`` up).
    sigma : float
        Standard deviation in radii.
    height_nm : float
        Height at the centre.
    """

    x: float
    y: float
    sigma: float
    height_nm: float

    def __call__(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        """Height at unit coordinates (broadcast)."""
        d2 = (np.asarray(x) - self.x) ** 2 + (np.asarray(y) - self.y) ** 2
        return self.height_nm * np.exp(-0.5 * d2 / self.sigma**2)


@dataclass(frozen=True)
class Ring:
    """A zonal ring: a Gaussian in radius.

    Parameters
    ----------
    rho0 : float
        Radius of the ring's crest, in radii.
    width : float
        Standard deviation of the Gaussian in radius, in radii.
    height_nm : float
        Height of the crest (negative for a zonal trough).
    """

    rho0: float
    width: float
    height_nm: float

    def of_rho(self, rho: np.ndarray) -> np.ndarray:
        """Height at radius ``rho``."""
        return self.height_nm * np.exp(-0.5 * ((np.asarray(rho) - self.rho0) / self.width) ** 2)


@dataclass(frozen=True)
class Edge:
    """A turned-down (negative height) or turned-up (positive height) edge.

    Parameters
    ----------
    rho0 : float
        Radius where the edge starts to turn, in radii.
    height_nm : float
        Height reached at the rim (rho = 1).
    power : float
        Exponent ``p``: the height is ``height_nm * ((rho - rho0) / (1 - rho0))**p`` beyond
        ``rho0`` and zero inside.
    """

    rho0: float
    height_nm: float
    power: float = 2.0

    def of_rho(self, rho: np.ndarray) -> np.ndarray:
        """Height at radius ``rho`` (it keeps growing past the rim)."""
        t = np.maximum(np.asarray(rho, dtype=float) - self.rho0, 0.0) / (1.0 - self.rho0)
        return self.height_nm * t**self.power


@dataclass(frozen=True)
class Ripple:
    """A mid-spatial ripple, straight or circular.

    Parameters
    ----------
    amplitude_nm : float
        Half the ripple's peak-to-valley.
    cycles : float
        Cycles per diameter for a straight ripple, cycles per radius for a circular one.
    direction_deg : float
        Straight ripple only: direction of the wave vector, counter-clockwise from ``x``.
    phase_deg : float
        Phase of the cosine at the centre.
    circular : bool
        Concentric ripple (a function of radius) instead of a straight one.
    """

    amplitude_nm: float
    cycles: float
    direction_deg: float = 0.0
    phase_deg: float = 0.0
    circular: bool = False

    def _wave(self) -> tuple[float, float, float]:
        k = 2.0 * math.pi * self.cycles / 2.0  # radians per unit length (diameter = 2)
        d = math.radians(self.direction_deg)
        return k * math.cos(d), k * math.sin(d), math.radians(self.phase_deg)

    def __call__(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        """Height at unit coordinates (broadcast)."""
        ph = math.radians(self.phase_deg)
        if self.circular:
            rho = np.hypot(x, y)
            return self.amplitude_nm * np.cos(2.0 * math.pi * self.cycles * rho + ph)
        kx, ky, ph = self._wave()
        return self.amplitude_nm * np.cos(kx * np.asarray(x) + ky * np.asarray(y) + ph)


@dataclass(frozen=True)
class RefSurface:
    """A surface of known form over the unit disk, heights in nm.

    Parameters
    ----------
    zernike_nm : dict of int to float
        Noll index to coefficient (the term's RMS over the disk), any index.
    bumps : tuple of Bump
        Local Gaussian bumps and digs.
    rings : tuple of Ring
        Zonal rings.
    edge : Edge or None
        A turned edge.
    ripples : tuple of Ripple
        Mid-spatial ripples.

    Notes
    -----
    The dataclass is frozen but holds a dict, so it is not hashable; treat the dict as read-only.
    """

    zernike_nm: dict[int, float] = field(default_factory=dict)
    bumps: tuple[Bump, ...] = ()
    rings: tuple[Ring, ...] = ()
    edge: Edge | None = None
    ripples: tuple[Ripple, ...] = ()

    def __post_init__(self) -> None:
        clean = {int(j): float(c) for j, c in dict(self.zernike_nm).items()}
        if any(j < 1 for j in clean):
            raise ValueError("Noll indices start at 1")
        object.__setattr__(self, "zernike_nm", clean)
        for name in ("bumps", "rings", "ripples"):
            object.__setattr__(self, name, tuple(getattr(self, name)))

    # -- evaluation -----------------------------------------------------------------------

    def _radial_features(self, rho: np.ndarray) -> np.ndarray | float:
        out: np.ndarray | float = 0.0
        for ring in self.rings:
            out = out + ring.of_rho(rho)
        if self.edge is not None:
            out = out + self.edge.of_rho(rho)
        for rip in self.ripples:
            if rip.circular:
                ph = math.radians(rip.phase_deg)
                out = out + rip.amplitude_nm * np.cos(2.0 * math.pi * rip.cycles * rho + ph)
        return out

    def height_nm(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        """Height at unit coordinates.

        Parameters
        ----------
        x, y : array_like
            Unit coordinates (``x`` right, ``y`` up); broadcast.

        Returns
        -------
        numpy.ndarray
            Height in nm.
        """
        x, y = np.broadcast_arrays(np.asarray(x, dtype=float), np.asarray(y, dtype=float))
        h = zernike_sum(self.zernike_nm, x, y)
        rho = np.hypot(x, y)
        h = h + self._radial_features(rho)
        for bump in self.bumps:
            h = h + bump(x, y)
        for rip in self.ripples:
            if not rip.circular:
                h = h + rip(x, y)
        return h

    def monomials(self) -> np.ndarray:
        """The Zernike part as one Cartesian polynomial ``C[p, q]`` of ``x**p * y**q``."""
        return self._monomials

    @cached_property
    def _monomials(self) -> np.ndarray:
        terms = [(c, zernike_monomials(j)) for j, c in self.zernike_nm.items() if c]
        size = max((m.shape[0] for _, m in terms), default=1)
        out = np.zeros((size, size))
        for c, m in terms:
            out[: m.shape[0], : m.shape[1]] += c * m
        out.setflags(write=False)
        return out

    def height_fast_nm(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        """Height at unit coordinates through the Cartesian polynomial (for many small calls).

        Parameters
        ----------
        x, y : array_like
            Unit coordinates; broadcast.

        Returns
        -------
        numpy.ndarray
            The same values as :meth:`height_nm` (to rounding).
        """
        x, y = np.broadcast_arrays(np.asarray(x, dtype=float), np.asarray(y, dtype=float))
        h = npoly.polyval2d(x, y, self._monomials) + self._radial_features(np.hypot(x, y))
        for bump in self.bumps:
            h = h + bump(x, y)
        for rip in self.ripples:
            if not rip.circular:
                h = h + rip(x, y)
        return np.broadcast_to(h, x.shape)

    def height_grid(self, xu: np.ndarray, yu: np.ndarray) -> np.ndarray:
        """Height on the Cartesian product of two coordinate vectors (fast path for photos).

        Parameters
        ----------
        xu, yu : array_like
            1-D unit coordinates along ``x`` and ``y``.

        Returns
        -------
        numpy.ndarray
            ``h[i, k]`` = height at ``(xu[k], yu[i])``; same values as :meth:`height_nm`.
        """
        xu = np.asarray(xu, dtype=float).ravel()
        yu = np.asarray(yu, dtype=float).ravel()
        h = npoly.polygrid2d(yu, xu, self.monomials().T)
        h = np.broadcast_to(h, (yu.size, xu.size)).copy()
        if self.rings or self.edge is not None or any(r.circular for r in self.ripples):
            rho = np.sqrt(yu[:, None] ** 2 + xu[None, :] ** 2)
            h += self._radial_features(rho)
        for bump in self.bumps:  # separable Gaussian
            gy = np.exp(-0.5 * ((yu - bump.y) / bump.sigma) ** 2)
            gx = np.exp(-0.5 * ((xu - bump.x) / bump.sigma) ** 2)
            h += bump.height_nm * gy[:, None] * gx[None, :]
        for rip in self.ripples:  # cos(a + b) = cos a cos b - sin a sin b
            if not rip.circular:
                kx, ky, ph = rip._wave()
                ax = kx * xu + ph
                by = ky * yu
                h += rip.amplitude_nm * (np.cos(by)[:, None] * np.cos(ax)[None, :]
                                         - np.sin(by)[:, None] * np.sin(ax)[None, :])
        return h

    # -- helpers -----------------------------------------------------------------------------

    def scaled(self, factor: float) -> RefSurface:
        """The same surface with every height multiplied by ``factor``."""
        f = float(factor)
        return RefSurface(
            zernike_nm={j: c * f for j, c in self.zernike_nm.items()},
            bumps=tuple(replace(b, height_nm=b.height_nm * f) for b in self.bumps),
            rings=tuple(replace(r, height_nm=r.height_nm * f) for r in self.rings),
            edge=None if self.edge is None else replace(self.edge,
                                                        height_nm=self.edge.height_nm * f),
            ripples=tuple(replace(r, amplitude_nm=r.amplitude_nm * f) for r in self.ripples),
        )

    def radial_breaks(self) -> tuple[float, ...]:
        """Radii inside the disk where the height is not smooth (panel ends for quadrature)."""
        if self.edge is not None and 0.0 < self.edge.rho0 < 1.0:
            return (self.edge.rho0,)
        return ()


# ---------------------------------------------------------------------------------------------
# Quadrature
# ---------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class PolarGrid:
    """Quadrature nodes over the unit disk: Gauss-Legendre in radius, uniform in angle.

    Attributes
    ----------
    rho : numpy.ndarray
        Radial nodes, shape ``(nr,)``.
    theta : numpy.ndarray
        Angular nodes, shape ``(nt,)``.
    ring_weight : numpy.ndarray
        Weight of each radial node such that the disk mean of ``f`` is
        ``ring_weight @ f.mean(axis=1)`` for ``f`` sampled as ``(nr, nt)``; sums to 1.
    x, y : numpy.ndarray
        Cartesian nodes, shape ``(nr, nt)``.
    """

    rho: np.ndarray
    theta: np.ndarray
    ring_weight: np.ndarray
    x: np.ndarray
    y: np.ndarray

    def mean(self, values: np.ndarray) -> float:
        """Area mean over the disk of values sampled at the nodes."""
        return float(self.ring_weight @ np.asarray(values).mean(axis=1))

    def rms(self, values: np.ndarray) -> float:
        """Root mean square over the disk."""
        return math.sqrt(max(self.mean(np.asarray(values) ** 2), 0.0))


def polar_grid(*, nodes_per_panel: int = 24, panels: int = 8, n_theta: int = 720,
               breaks: Iterable[float] = ()) -> PolarGrid:
    """Composite Gauss-Legendre rule in radius (weight rho) times a uniform rule in angle.

    Parameters
    ----------
    nodes_per_panel : int
        Gauss-Legendre nodes per radial panel.
    panels : int
        Equal radial panels over [0, 1].
    n_theta : int
        Equally spaced angles (exact for trigonometric polynomials of degree below it).
    breaks : iterable of float
        Extra panel ends, e.g. where the surface has a kink.

    Returns
    -------
    PolarGrid
        The nodes and weights.
    """
    ends = set(np.linspace(0.0, 1.0, panels + 1).tolist())
    ends.update(float(b) for b in breaks if 0.0 < b < 1.0)
    ends_arr = np.array(sorted(ends))
    t, w = np.polynomial.legendre.leggauss(nodes_per_panel)
    rho_list, w_list = [], []
    for a, b in zip(ends_arr[:-1], ends_arr[1:], strict=True):
        if b - a < 1e-12:
            continue
        rho_list.append(0.5 * (b - a) * t + 0.5 * (a + b))
        w_list.append(0.5 * (b - a) * w)
    rho = np.concatenate(rho_list)
    # disk mean = (1/pi) int int f rho drho dtheta = sum_i 2 w_i rho_i mean_k f(rho_i, theta_k)
    ring_weight = 2.0 * np.concatenate(w_list) * rho
    theta = 2.0 * math.pi * np.arange(n_theta) / n_theta
    return PolarGrid(rho=rho, theta=theta, ring_weight=ring_weight,
                     x=rho[:, None] * np.cos(theta)[None, :],
                     y=rho[:, None] * np.sin(theta)[None, :])


def _projections(grid: PolarGrid, values: np.ndarray, jmax: int) -> dict[int, float]:
    """Noll projections a_j = (1/pi) int h Z_j dA, using the separable grid."""
    mmax = max(abs(noll_to_nm(j)[1]) for j in range(1, jmax + 1))
    ms = np.arange(mmax + 1)
    cos_t = np.cos(np.outer(grid.theta, ms))
    sin_t = np.sin(np.outer(grid.theta, ms))
    nt = grid.theta.size
    cmom = values @ cos_t / nt  # (nr, m): angular means of h cos(m theta)
    smom = values @ sin_t / nt
    out = {}
    for j in range(1, jmax + 1):
        n, m = noll_to_nm(j)
        r = radial(n, m, grid.rho) * _norm(n, m) * grid.ring_weight
        out[j] = float(r @ (smom[:, -m] if m < 0 else cmom[:, m]))
    return out


def _zernike_on_grid(grid: PolarGrid, coeffs: Mapping[int, float]) -> np.ndarray:
    out = np.zeros(grid.x.shape)
    for j, c in coeffs.items():
        if c:
            n, m = noll_to_nm(j)
            r = radial(n, m, grid.rho) * _norm(n, m)
            a = (np.ones_like(grid.theta) if m == 0
                 else np.cos(m * grid.theta) if m > 0 else np.sin(-m * grid.theta))
            out += c * r[:, None] * a[None, :]
    return out


def _weighted_fit(grid: PolarGrid, values: np.ndarray,
                  basis: list[np.ndarray]) -> tuple[np.ndarray, np.ndarray]:
    """Area-weighted least squares of ``values`` on ``basis``; returns (coefficients, fit)."""
    sw = np.sqrt(np.broadcast_to(grid.ring_weight[:, None], values.shape)).ravel()
    a = np.stack([b.ravel() * sw for b in basis], axis=1)
    coef, *_ = np.linalg.lstsq(a, values.ravel() * sw, rcond=None)
    fit = sum(c * b for c, b in zip(coef, basis, strict=True))
    return coef, np.asarray(fit)


# ---------------------------------------------------------------------------------------------
# Peak-to-valley by search and refinement
# ---------------------------------------------------------------------------------------------

Func2D = Callable[[np.ndarray, np.ndarray], np.ndarray]


def _top_local(values: np.ndarray, count: int, wrap_last: bool) -> list[tuple[int, ...]]:
    mode = ("nearest", "wrap") if values.ndim == 2 else ("wrap" if wrap_last else "nearest")
    peaks = ndimage.maximum_filter(values, size=3, mode=mode) == values
    idx = np.argwhere(peaks)
    order = np.argsort(values[peaks])[::-1][:count]
    return [tuple(int(v) for v in idx[i]) for i in order]


def _max_over_disk(func: Func2D, grid: PolarGrid, values: np.ndarray, starts: int = 4) -> float:
    """Maximum of a smooth ``func`` over the closed unit disk.

    Starts from the best local maxima on the grid, on the rim and at the centre, then refines
    each by a zooming pattern search in (rho, theta).
    """
    rim = np.asarray(func(np.cos(grid.theta), np.sin(grid.theta)), dtype=float)
    centre = float(np.asarray(func(np.zeros(1), np.zeros(1)))[0])
    seeds = [(grid.rho[i], grid.theta[k]) for i, k in _top_local(values, starts, True)]
    seeds += [(1.0, grid.theta[k]) for (k,) in _top_local(rim, starts, True)]
    best = max(float(values.max()), float(rim.max()), centre)

    dtheta = 2.0 * math.pi / grid.theta.size
    dgrid = float(np.max(np.diff(grid.rho)))
    offsets = np.linspace(-1.0, 1.0, 9)
    for r0, t0 in seeds:
        # zooming pattern search: a 9 x 9 patch around the best point so far, shrunk by 3 each
        # round (the new patch still spans the old patch's spacing, so no peak is skipped)
        hr, ht = 2.0 * dgrid, 2.0 * dtheta
        r_best, t_best = float(r0), float(t0)
        for _ in range(24):
            r = np.clip(r_best + hr * offsets, 0.0, 1.0)[:, None]
            t = (t_best + ht * offsets)[None, :]
            v = np.asarray(func(r * np.cos(t), r * np.sin(t)), dtype=float)
            i, k = np.unravel_index(int(np.argmax(v)), v.shape)
            best = max(best, float(v[i, k]))
            r_best, t_best = float(r[i, 0]), float(t[0, k])
            hr, ht = hr / 3.0, ht / 3.0
    return best


def _pv(func: Func2D, grid: PolarGrid, values: np.ndarray) -> float:
    top = _max_over_disk(func, grid, values)
    bottom = -_max_over_disk(lambda x, y: -np.asarray(func(x, y)), grid, -values)
    return top - bottom


def pv_over_disk(func: Func2D, *, grid: PolarGrid | None = None) -> float:
    """Peak-to-valley of a smooth function over the closed unit disk.

    Parameters
    ----------
    func : callable
        ``func(x, y)`` on unit coordinates, vectorised.
    grid : PolarGrid, optional
        Search grid (default :func:`polar_grid` with default settings).

    Returns
    -------
    float
        max - min over the disk.
    """
    grid = grid or polar_grid()
    return _pv(func, grid, np.asarray(func(grid.x, grid.y), dtype=float))


def _pv_1d(func: Callable[[np.ndarray], np.ndarray], samples: int = 801) -> float:
    r = np.linspace(0.0, 1.0, samples)
    v = np.asarray(func(r), dtype=float)
    extremes = []
    for sign in (1.0, -1.0):
        s = sign * v
        best = float(s.max())
        for (i,) in _top_local(s, 3, False):
            lo, hi = r[max(i - 1, 0)], r[min(i + 1, samples - 1)]
            res = optimize.minimize_scalar(lambda t, sg=sign: -sg * float(func(np.array([t]))[0]),
                                           bounds=(lo, hi), method="bounded",
                                           options={"xatol": 1e-10})
            best = max(best, -float(res.fun))
        extremes.append(sign * best)
    return extremes[0] - extremes[1]


# ---------------------------------------------------------------------------------------------
# Truth figures
# ---------------------------------------------------------------------------------------------


def truth(surface: RefSurface, wavelength_nm: float, *, nodes_per_panel: int = 24,
          panels: int = 8, n_theta: int = 720) -> dict:
    """Figures of a surface by direct quadrature over the unit disk.

    Parameters
    ----------
    surface : RefSurface
        The surface.
    wavelength_nm : float
        Test wavelength (echoed; the figures are in nm and do not depend on it).
    nodes_per_panel, panels, n_theta : int
        Quadrature size (see :func:`polar_grid`); the defaults converge to 0.01 nm for
        surfaces within the reference set's ranges.

    Returns
    -------
    dict
        ``pv_nm``, ``rms_nm`` (piston and tilt removed), ``power_nm`` (centre high positive),
        ``irregularity_nm`` (ISO 10110-5 B), ``rms_irregularity_nm``,
        ``symmetric_irregularity_nm`` (C), ``rms_asymmetric_nm``, ``astigmatism_nm``,
        ``astigmatism_axis_deg``, ``zernike_nm`` (dict of Noll 1..66), ``pvr_nm`` (FRINGE 36),
        ``pvr_noll36_nm`` and ``wavelength_nm``.
    """
    grid = polar_grid(nodes_per_panel=nodes_per_panel, panels=panels, n_theta=n_theta,
                      breaks=surface.radial_breaks())
    h = surface.height_nm(grid.x, grid.y)
    one = np.ones_like(h)
    rho2 = grid.x**2 + grid.y**2

    # piston and tilt: area-weighted least squares on {1, x, y}
    c_t, fit_t = _weighted_fit(grid, h, [one, grid.x, grid.y])
    res_t = h - fit_t

    def f_t(x, y):
        return surface.height_fast_nm(x, y) - (c_t[0] + c_t[1] * x + c_t[2] * y)

    pv = _pv(f_t, grid, res_t)
    rms = grid.rms(res_t)

    # power: least squares on {1, x, y, rho^2}; its residual gives B and RMSi
    c_p, fit_p = _weighted_fit(grid, h, [one, grid.x, grid.y, rho2])
    res_p = h - fit_p

    def f_p(x, y):
        return surface.height_fast_nm(x, y) - (c_p[0] + c_p[1] * x + c_p[2] * y
                                          + c_p[3] * (x * x + y * y))

    irregularity = _pv(f_p, grid, res_p)
    rms_irr = grid.rms(res_p)

    # rotationally symmetric part: azimuthal mean profile, fitted by {1, rho^2}
    cos_t, sin_t = np.cos(grid.theta), np.sin(grid.theta)

    def profile(r: np.ndarray) -> np.ndarray:
        r = np.asarray(r, dtype=float)
        return surface.height_nm(r[:, None] * cos_t[None, :], r[:, None] * sin_t[None, :]).mean(1)

    prof = h.mean(axis=1)
    w = grid.ring_weight
    a_mat = np.stack([np.ones_like(grid.rho), grid.rho**2], axis=1) * np.sqrt(w)[:, None]
    c_s, *_ = np.linalg.lstsq(a_mat, prof * np.sqrt(w), rcond=None)
    sym_irr = _pv_1d(lambda r: profile(r) - (c_s[0] + c_s[1] * np.asarray(r) ** 2))

    # asymmetric part: (h - tilt fit) minus its azimuthal mean profile (the uniform angular
    # rule averages x and y to zero exactly, so the profile of h - tilt is prof - c_t[0])
    asym = res_t - (prof - c_t[0])[:, None]
    rms_asym = grid.rms(asym)

    zern = _projections(grid, h, NOLL_MAX)
    a5, a6 = zern[5], zern[6]
    astig = 2.0 * math.sqrt(6.0) * math.hypot(a5, a6)
    axis = math.degrees(0.5 * math.atan2(a5, a6)) % 180.0

    def pvr(indices: Iterable[int]) -> float:
        coeffs = {j: zern[j] for j in indices}
        residual = h - _zernike_on_grid(grid, coeffs)
        shape = {j: c for j, c in coeffs.items() if j > 3}
        fit_pv = _pv(RefSurface(shape).height_fast_nm, grid,
                     _zernike_on_grid(grid, shape))
        return fit_pv + 3.0 * grid.rms(residual)

    return {
        "pv_nm": pv,
        "rms_nm": rms,
        "power_nm": -float(c_p[3]),
        "irregularity_nm": irregularity,
        "rms_irregularity_nm": rms_irr,
        "symmetric_irregularity_nm": sym_irr,
        "rms_asymmetric_nm": rms_asym,
        "astigmatism_nm": astig,
        "astigmatism_axis_deg": axis,
        "zernike_nm": zern,
        "pvr_nm": pvr(FRINGE36_NOLL),
        "pvr_noll36_nm": pvr(range(1, 37)),
        "wavelength_nm": float(wavelength_nm),
    }
