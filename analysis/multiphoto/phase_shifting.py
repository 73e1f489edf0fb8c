"""Phase-shifted frame sequences: wrapped phase, modulation and the phase step found in the data.

Every algorithm here reads frames of the form

    I_k(x, y) = A(x, y) + B(x, y) cos(phi(x, y) + delta_k),

where ``A`` is the background, ``B`` the fringe amplitude and ``delta_k`` the phase
shift of frame ``k``. ``wrapped_phase`` is ``phi`` in that equation, with the
``delta_k`` listed in :attr:`PhaseResult.steps_deg` (each algorithm has its own zero:
the first frame for the 4-step, the middle frame for Hariharan, the middle of the
sequence for Carre and the equal-step least squares). The offsets only shift the
phase by a constant (piston), which the height map drops.

Sign: the frames are taken in the order of a *widening* gap, so ``delta_k`` grows
with the gap and ``phi`` follows the gap; a high point on either surface narrows the
gap, so height is ``-phi * lambda / (4 pi)`` (see :func:`measure_stack`).

References
----------
J. H. Bruning et al., "Digital wavefront measuring interferometer for testing optical
surfaces and lenses", Appl. Opt. 13, 2693 (1974) (4-step).
K. Creath, "Phase-measurement interferometry techniques", Progress in Optics 26, 349 (1988).
P. Hariharan, B. F. Oreb, T. Eiju, "Digital phase-shifting interferometry: a simple
error-compensating phase calculation algorithm", Appl. Opt. 26, 2504 (1987).
P. Carre, "Installation et utilisation du comparateur photoelectrique et interferentiel
du Bureau International des Poids et Mesures", Metrologia 2, 13 (1966).
J. E. Greivenkamp, "Generalized data reduction for heterodyne interferometry",
Opt. Eng. 23(4), 350 (1984).
"""

from __future__ import annotations

import threading
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import numpy as np
from scipy import ndimage

from ..aperture import Aperture
from ..errors import MeasurementCancelled, SettingsError, UnanalysablePhotoError

__all__ = [
    "ALGORITHMS",
    "PhaseResult",
    "StackMeasurement",
    "aperture_from_modulation",
    "bin_frames",
    "carre",
    "choose_algorithm",
    "demodulate_sequence",
    "estimate_equal_step_deg",
    "four_step",
    "hariharan_five_step",
    "least_squares",
    "measure_stack",
]

ALGORITHMS = ("four-step", "hariharan", "carre", "least-squares")
_RIGHT_ANGLE_TOLERANCE_DEG = 0.5  # a nominal 90 deg step within this counts as 90 deg
_TARGET_MAP_PX = 400  # binned map size along the photo's short side

Progress = Callable[[str, float], None]


@dataclass(frozen=True)
class PhaseResult:
    """What a phase-shifting algorithm made of a frame sequence.

    Attributes
    ----------
    wrapped_phase : (M, N) ndarray
        ``phi`` in ``(-pi, pi]``, radians, referred to the ``steps_deg`` below.
    modulation : (M, N) ndarray
        Fringe visibility ``B / A``, clipped to 0..1.
    amplitude : (M, N) ndarray
        Fringe amplitude ``B`` in the frames' own units.
    background : (M, N) ndarray
        Background ``A`` in the frames' own units.
    step_found_deg : float or None
        The equal phase step found in the data (None when the sequence cannot show it:
        fewer than four frames, or unequal steps).
    algorithm : str
        One of :data:`ALGORITHMS`.
    steps_deg : tuple of float
        The phase shift ``delta_k`` of each frame that the algorithm assumed (Carre:
        the ones it found).
    warnings : tuple of str
        Things the operator should know (a step far from the one given, ...).
    """

    wrapped_phase: np.ndarray
    modulation: np.ndarray
    amplitude: np.ndarray
    background: np.ndarray
    step_found_deg: float | None
    algorithm: str
    steps_deg: tuple[float, ...]
    warnings: tuple[str, ...] = field(default=())


# --------------------------------------------------------------------------------------
# the published formulas, each on a list of frames


def _as_frames(frames: Sequence[np.ndarray]) -> list[np.ndarray]:
    """Frames as float arrays: float64 stays float64, everything else becomes float32."""
    out = []
    for f in frames:
        a = np.asarray(f)
        if a.ndim != 2:
            raise SettingsError(f"each frame must be a 2-D grey image, got shape {a.shape}")
        out.append(a if a.dtype == np.float64 else a.astype(np.float32, copy=False))
    if len({a.shape for a in out}) > 1:
        shapes = ", ".join(f"{a.shape[1]}x{a.shape[0]}" for a in out)
        raise SettingsError(
            f"the frames differ in size ({shapes}); take them with one camera setting"
        )
    return out


def four_step(frames: Sequence[np.ndarray]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """The 4-step formula, steps ``0, 90, 180, 270`` degrees.

    ``phi = atan2(I4 - I2, I1 - I3)``, ``B = hypot(I4 - I2, I1 - I3) / 2``,
    ``A = mean(I1..I4)``.

    Returns
    -------
    phase, amplitude, background : (M, N) ndarray

    References
    ----------
    Bruning et al., Appl. Opt. 13, 2693 (1974); Creath, Progress in Optics 26, 349 (1988).
    """
    i1, i2, i3, i4 = _as_frames(frames)
    s = i4 - i2  # 2 B sin(phi)
    c = i1 - i3  # 2 B cos(phi)
    return np.arctan2(s, c), 0.5 * np.hypot(s, c), 0.25 * (i1 + i2 + i3 + i4)


def hariharan_five_step(frames: Sequence[np.ndarray]) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Hariharan, Oreb and Eiju's 5-step formula, steps ``-180, -90, 0, 90, 180`` degrees.

    ``phi = atan2(2 (I2 - I4), 2 I3 - I1 - I5)``. The derivative of the phase error
    with respect to the step vanishes at 90 degrees, so a miscalibrated step leaves
    only a second-order error.

    Returns
    -------
    phase, amplitude, background : (M, N) ndarray

    References
    ----------
    P. Hariharan, B. F. Oreb, T. Eiju, Appl. Opt. 26, 2504 (1987).
    """
    i1, i2, i3, i4, i5 = _as_frames(frames)
    s = 2.0 * (i2 - i4)  # 4 B sin(phi) at a 90 deg step
    c = 2.0 * i3 - i1 - i5  # 4 B cos(phi)
    background = 0.25 * (0.5 * (i1 + i5) + i2 + i3 + i4)
    return np.arctan2(s, c), 0.25 * np.hypot(s, c), background


def carre(
    frames: Sequence[np.ndarray], *, half_step_rad: float | None = None
) -> tuple[np.ndarray, np.ndarray, np.ndarray, float]:
    """Carre's formula for four frames with an unknown equal step ``2 alpha``.

    Steps ``-3 alpha, -alpha, alpha, 3 alpha``. Per pixel

    ``tan^2 alpha = [3(I2 - I3) - (I1 - I4)] / [(I2 - I3) + (I1 - I4)]``,
    ``tan phi = sgn(I2 - I3) sqrt([3(I2 - I3) - (I1 - I4)][(I2 - I3) + (I1 - I4)])
    / [(I2 + I3) - (I1 + I4)]``,

    valid for ``0 < alpha < 90`` degrees. Noise can make the product under the root
    slightly negative where ``sin phi`` is near zero; it is clipped at zero there.

    Parameters
    ----------
    frames : four (M, N) arrays
    half_step_rad : float, optional
        ``alpha`` for the amplitude and background; by default the pooled estimate of
        :func:`estimate_equal_step_deg` halved.

    Returns
    -------
    phase, amplitude, background : (M, N) ndarray
    half_step_rad : float
        The ``alpha`` used for the amplitude.

    References
    ----------
    P. Carre, Metrologia 2, 13 (1966); Creath, Progress in Optics 26, 349 (1988).
    """
    i1, i2, i3, i4 = _as_frames(frames)
    d23 = i2 - i3  # 2 B sin(phi) sin(alpha)
    d14 = i1 - i4  # 2 B sin(phi) sin(3 alpha)
    p = 3.0 * d23 - d14  # 8 B sin(phi) sin^3(alpha)
    q = d23 + d14  # 8 B sin(phi) sin(alpha) cos^2(alpha)
    num = np.sign(d23) * np.sqrt(np.maximum(p * q, 0.0))  # 8 B sin(phi) sin^2 cos
    den = (i2 + i3) - (i1 + i4)  # 8 B cos(phi) sin^2(alpha) cos(alpha)
    phase = np.arctan2(num, den)
    if half_step_rad is None:
        step = estimate_equal_step_deg([i1, i2, i3, i4])
        half_step_rad = np.radians(step if step is not None else 90.0) / 2.0
    gain = 8.0 * np.sin(half_step_rad) ** 2 * np.cos(half_step_rad)
    amplitude = np.hypot(num, den) / gain
    # mean of the four frames is A + B cos(phi) (cos a + cos 3a) / 2
    b_cos = den / gain
    background = 0.25 * (i1 + i2 + i3 + i4) - 0.5 * b_cos * (
        np.cos(half_step_rad) + np.cos(3.0 * half_step_rad)
    )
    return phase, amplitude, background, float(half_step_rad)


def least_squares(
    frames: Sequence[np.ndarray], steps_deg: Sequence[float]
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Greivenkamp's least-squares fit for any known phase shifts (at least three).

    Fits ``I_k = a0 + a1 cos(delta_k) + a2 sin(delta_k)`` at each pixel; then
    ``phi = atan2(-a2, a1)``, ``B = hypot(a1, a2)``, ``A = a0``. The design matrix is
    the same at every pixel, so its pseudo-inverse is formed once and applied as a
    weighted sum of the frames.

    Returns
    -------
    phase, amplitude, background : (M, N) ndarray

    References
    ----------
    J. E. Greivenkamp, Opt. Eng. 23(4), 350 (1984).
    """
    fr = _as_frames(frames)
    delta = np.radians(np.asarray(steps_deg, dtype=float))
    if delta.size != len(fr):
        raise SettingsError(f"{len(fr)} frames but {delta.size} phase steps given")
    design = np.stack([np.ones_like(delta), np.cos(delta), np.sin(delta)], axis=1)
    if np.linalg.matrix_rank(design) < 3:
        raise SettingsError(
            "the phase steps do not separate the fringe from the background; "
            "use at least three different steps (not 0 and 180 deg only)"
        )
    pinv = np.linalg.pinv(design).astype(fr[0].dtype)
    a0, a1, a2 = (sum(float(w) * f for w, f in zip(row, fr, strict=True)) for row in pinv)
    return np.arctan2(-a2, a1), np.hypot(a1, a2), a0


# --------------------------------------------------------------------------------------
# the step in the data


def estimate_equal_step_deg(
    frames: Sequence[np.ndarray], *, mask: np.ndarray | None = None
) -> float | None:
    """The equal phase step present in a sequence of four or more frames, in degrees.

    For equal steps ``alpha`` the frame differences ``D_k = I_(k+1) - I_k`` obey
    ``D_(k-1) + D_(k+1) = 2 cos(alpha) D_k`` at every pixel, whatever ``A``, ``B`` and
    ``phi``. Pooling all pixels and all ``k`` in one least-squares ratio weights each
    pixel by its fringe amplitude, so dark or flat regions barely count. For five
    frames the summed equations are Hariharan et al.'s calibration formula
    ``cos(alpha) = (I5 - I1) / (2 (I4 - I2))``; for four frames the single equation is
    the one behind Carre's ``tan^2`` formula.

    Parameters
    ----------
    frames : sequence of (M, N) ndarray
    mask : (M, N) bool ndarray, optional
        Pixels to use (by default those with the strongest temporal variation).

    Returns
    -------
    float or None
        Step in ``(0, 180)`` degrees; None for fewer than four frames or no fringes.
    """
    fr = _as_frames(frames)
    if len(fr) < 4:
        return None
    # one global number: a regular sample of about a million pixels pins it down as well
    # as all twelve million, at a fraction of the time
    every = max(1, int(np.sqrt(fr[0].size / 1_000_000)))
    if every > 1:
        fr = [f[::every, ::every] for f in fr]
        mask = None if mask is None else np.asarray(mask)[::every, ::every]
    diffs = [fr[k + 1] - fr[k] for k in range(len(fr) - 1)]
    if mask is None:
        # pixels outside the fringes add only noise, which biases the ratio toward 90 deg
        activity = sum(np.abs(d) for d in diffs)
        mask = activity >= 0.5 * np.percentile(activity, 95)
    num = 0.0
    den = 0.0
    for k in range(1, len(diffs) - 1):
        d = diffs[k]
        s = diffs[k - 1] + diffs[k + 1]
        if mask is not None:
            d, s = d[mask], s[mask]
        num += float(np.sum(d.astype(np.float64) * s))
        den += 2.0 * float(np.sum(d.astype(np.float64) ** 2))
    if den <= 0.0:
        return None
    return float(np.degrees(np.arccos(np.clip(num / den, -1.0, 1.0))))


def choose_algorithm(n_frames: int, step_deg: float | Sequence[float] | None = None) -> str:
    """The algorithm that suits ``n_frames`` frames taken ``step_deg`` apart.

    * 4 frames: the 4-step at 90 degrees, Carre when the step is unknown.
    * 5 frames at 90 degrees or unknown: Hariharan (tolerant of a miscalibrated step).
    * anything else, or other steps: Greivenkamp's least squares (the step is found in
      the data when not given, which needs at least four frames).

    ``step_deg`` may also list one phase shift per frame (unequal steps): least squares.
    """
    if n_frames < 3:
        raise SettingsError(f"a phase-shifted sequence needs at least 3 frames, got {n_frames}")
    if step_deg is not None and not np.isscalar(step_deg):
        return "least-squares"
    right = step_deg is not None and abs(float(step_deg) - 90.0) <= _RIGHT_ANGLE_TOLERANCE_DEG
    if n_frames == 4 and step_deg is None:
        return "carre"
    if n_frames == 4 and right:
        return "four-step"
    if n_frames == 5 and (step_deg is None or right):
        return "hariharan"
    return "least-squares"


def _centred_steps(n: int, step: float) -> tuple[float, ...]:
    return tuple(float((k - (n - 1) / 2.0) * step) for k in range(n))


def demodulate_sequence(
    frames: Sequence[np.ndarray],
    *,
    step_deg: float | Sequence[float] | None = None,
    algorithm: str | None = None,
) -> PhaseResult:
    """Wrapped phase and modulation of a phase-shifted frame sequence.

    Parameters
    ----------
    frames : sequence of (M, N) ndarray
        The frames in the order taken (gap widening). float64 input is computed in
        float64, anything else in float32.
    step_deg : float or sequence of float, optional
        The nominal equal step, or one phase shift per frame. None: unknown (found
        in the data; needs four or more frames).
    algorithm : str, optional
        One of :data:`ALGORITHMS`; by default :func:`choose_algorithm` picks.

    Returns
    -------
    PhaseResult

    References
    ----------
    See the module docstring (Bruning 1974, Hariharan 1987, Carre 1966, Greivenkamp 1984).
    """
    fr = _as_frames(frames)
    n = len(fr)
    algorithm = algorithm or choose_algorithm(n, step_deg)
    if algorithm not in ALGORITHMS:
        raise SettingsError(
            f"unknown algorithm {algorithm!r}; choose one of {', '.join(ALGORITHMS)}"
        )
    listed = step_deg is not None and not np.isscalar(step_deg)
    warnings: list[str] = []
    found = None if listed else estimate_equal_step_deg(fr)

    needed = {"four-step": 4, "hariharan": 5, "carre": 4}
    if algorithm in needed and n != needed[algorithm]:
        raise SettingsError(f"the {algorithm} algorithm takes {needed[algorithm]} frames, got {n}")
    if (
        algorithm in ("four-step", "hariharan")
        and step_deg is not None
        and (listed or abs(float(step_deg) - 90.0) > _RIGHT_ANGLE_TOLERANCE_DEG)
    ):
        raise SettingsError(
            f"the {algorithm} algorithm needs 90 deg steps; use least-squares "
            f"for a step of {step_deg}"
        )

    if algorithm == "four-step":
        phase, amp, bg = four_step(fr)
        steps = (0.0, 90.0, 180.0, 270.0)
    elif algorithm == "hariharan":
        phase, amp, bg = hariharan_five_step(fr)
        steps = (-180.0, -90.0, 0.0, 90.0, 180.0)
    elif algorithm == "carre":
        half = np.radians(found) / 2.0 if found is not None else None
        phase, amp, bg, half = carre(fr, half_step_rad=half)
        steps = _centred_steps(4, float(np.degrees(2.0 * half)))
    else:
        if listed:
            steps = tuple(float(s) for s in step_deg)  # type: ignore[union-attr]
        elif step_deg is not None:
            steps = _centred_steps(n, float(step_deg))
        elif found is not None:
            steps = _centred_steps(n, found)
        else:
            raise SettingsError(
                f"with {n} frames the step cannot be found in the data; give it with --step"
            )
        phase, amp, bg = least_squares(fr, steps)

    if found is not None and step_deg is not None and not listed:
        if abs(found - float(step_deg)) > 5.0:
            warnings.append(
                f"the frames show a phase step of {found:.1f} deg, not the "
                f"{float(step_deg):g} deg given; check the phase shifter's "
                "calibration"
            )
    with np.errstate(divide="ignore", invalid="ignore"):
        modulation = np.where(bg > 0, amp / np.where(bg > 0, bg, 1), 0.0)
    modulation = np.clip(np.nan_to_num(modulation), 0.0, 1.0).astype(amp.dtype, copy=False)
    return PhaseResult(
        wrapped_phase=phase,
        modulation=modulation,
        amplitude=amp,
        background=bg,
        step_found_deg=found,
        algorithm=algorithm,
        steps_deg=tuple(steps),
        warnings=tuple(warnings),
    )


# --------------------------------------------------------------------------------------
# from a sequence of photos to a measurement


def bin_frames(frames: Sequence[np.ndarray], factor: int) -> list[np.ndarray]:
    """Each frame averaged over ``factor x factor`` blocks (rows and columns past the
    last whole block are dropped).

    Binning before demodulation is exact for this model: the sum of ``A + B cos(phi +
    delta)`` over a block is again ``A' + B' cos(phi' + delta)`` with the same
    ``delta``, where ``B' e^(i phi')`` is the block's mean complex fringe. So binning
    the frames equals averaging the complex field ``B e^(i phi)`` over each block,
    weighted by amplitude, and every formula above applies unchanged.
    """
    fr = _as_frames(frames)
    if factor <= 1:
        return fr
    rows, cols = fr[0].shape
    r, c = rows // factor, cols // factor
    if r < 8 or c < 8:
        raise SettingsError(f"binning by {factor} leaves too small a map ({c}x{r})")
    out = []
    for f in fr:
        # rows first, then columns: two contiguous reductions, three times faster than one
        rows_summed = f[: r * factor, : c * factor].reshape(r, factor, c * factor).sum(axis=1)
        out.append(rows_summed.reshape(r, c, factor).sum(axis=2) / f.dtype.type(factor * factor))
    return out


def aperture_from_modulation(amplitude: np.ndarray, *, source: str = "the sequence") -> Aperture:
    """The illuminated disk in a map of temporal fringe amplitude.

    A phase-shifted sequence need not carry tilt fringes, so the disk is found from
    where the frames change: the threshold sits halfway between the typical
    amplitude inside and outside (the two classes split first by Otsu's method), the
    largest region above it is filled, and a circle is fitted to its edge by
    algebraic least squares (Kasa). A second pass takes the edge at half of the local
    level (a quadratic fit of the amplitude inside), so an uneven lamp does not pull
    the circle toward its bright side.

    Parameters
    ----------
    amplitude : (M, N) ndarray
        Fringe amplitude ``B`` (or any map that is high inside the aperture).
    source : str
        Named in the error message.

    Returns
    -------
    Aperture
        In the map's own pixels (x to the right, y down, from pixel centres).
    """
    from skimage.filters import threshold_otsu

    amp = np.nan_to_num(np.asarray(amplitude, dtype=float))
    if amp.size < 64 or not np.any(amp > 0):
        raise UnanalysablePhotoError(
            f"{source}: no fringe modulation found; check that the frames differ by the phase step"
        )
    split = threshold_otsu(amp)
    inside = float(np.median(amp[amp > split]))
    outside = float(np.median(amp[amp <= split])) if np.any(amp <= split) else 0.0
    if inside < 3.0 * max(outside, 1e-12) and outside > 0:
        raise UnanalysablePhotoError(
            f"{source}: the fringe modulation does not outline a clear aperture (inside "
            f"{inside:.3g}, outside {outside:.3g}); check focus, exposure and the phase shifter"
        )
    cx, cy, r = _circle_from_mask(amp > 0.5 * (inside + outside), source)
    # an uneven lamp moves a fixed threshold outward on the bright side: divide by a smooth
    # fit of the level inside, so the edge is taken at half of the local level everywhere
    yy, xx = np.mgrid[0 : amp.shape[0], 0 : amp.shape[1]].astype(float)
    u, v = (xx - cx) / r, (yy - cy) / r
    core = (u * u + v * v <= 0.8**2) & (amp > 0.5 * inside)
    if core.sum() >= 50:
        terms = [np.ones_like(u), u, v, u * u, u * v, v * v]
        design = np.stack([t[core] for t in terms], axis=1)
        coef, *_ = np.linalg.lstsq(design, amp[core], rcond=None)
        level = sum(c * t for c, t in zip(coef, terms, strict=True))
        level = np.maximum(level, 0.25 * inside)
        cx, cy, r = _circle_from_mask(amp - outside > 0.5 * (level - outside), source)
    # edge pixels are the last ones inside the half-level contour: move out half a pixel
    return Aperture(float(cx), float(cy), float(r) + 0.5)


def _circle_from_mask(mask: np.ndarray, source: str) -> tuple[float, float, float]:
    """Circle fitted to the edge of the largest region of ``mask``, holes filled.

    Algebraic least squares (Kasa), twice: edge points on the map's border and outliers
    (dust on the rim, a chipped edge) beyond three robust standard deviations are
    dropped before the second fit.
    """
    labels, count = ndimage.label(mask)
    if count == 0:
        raise UnanalysablePhotoError(f"{source}: no modulated region found")
    sizes = ndimage.sum_labels(np.ones(mask.shape), labels, index=np.arange(1, count + 1))
    disk = ndimage.binary_fill_holes(labels == 1 + int(np.argmax(sizes)))
    edge = disk & ~ndimage.binary_erosion(disk)
    edge[0, :] = edge[-1, :] = edge[:, 0] = edge[:, -1] = False
    ys, xs = np.nonzero(edge)
    if xs.size < 12:
        raise UnanalysablePhotoError(
            f"{source}: the modulated region is too small or fills "
            "the frame; frame the whole flat with some dark margin"
        )
    xs = xs.astype(float)
    ys = ys.astype(float)
    keep = np.ones(xs.size, dtype=bool)
    for _ in range(2):
        cx, cy, r = _kasa_circle(xs[keep], ys[keep])
        resid = np.hypot(xs - cx, ys - cy) - r
        mad = float(np.median(np.abs(resid[keep] - np.median(resid[keep])))) + 0.5
        keep = np.abs(resid) <= 3.0 * 1.4826 * mad
    return cx, cy, r


def _kasa_circle(x: np.ndarray, y: np.ndarray) -> tuple[float, float, float]:
    """Algebraic circle fit: ``x^2 + y^2 = 2 cx x + 2 cy y + c`` by least squares."""
    design = np.stack([2.0 * x, 2.0 * y, np.ones_like(x)], axis=1)
    (cx, cy, c), *_ = np.linalg.lstsq(design, x * x + y * y, rcond=None)
    return float(cx), float(cy), float(np.sqrt(max(c + cx * cx + cy * cy, 0.0)))


@dataclass(frozen=True)
class StackMeasurement:
    """A measurement made from a phase-shifted sequence, with the phase step found."""

    measurement: object  # pipeline.Measurement (typed loosely to keep the import lazy)
    phase: PhaseResult
    binning: int
    frames: tuple[str, ...]


def measure_stack(
    frames: Sequence[np.ndarray],
    settings,
    *,
    step_deg: float | Sequence[float] | None = None,
    algorithm: str | None = None,
    names: Sequence[str] = (),
    binning: int | None = None,
    progress: Progress | None = None,
    cancel: threading.Event | None = None,
) -> StackMeasurement:
    """Heights, Zernike terms and figures from a phase-shifted sequence.

    The frames are binned so the map is about 400 pixels along the photo's short side
    (see :func:`bin_frames`: exact for this model, and it keeps unwrapping fast),
    demodulated, the aperture is found from the temporal amplitude, and the wrapped
    phase goes through :func:`flatsight.analysis.pipeline.measurement_from_phase`.
    The phase is negated on the way (frames are taken with the gap widening, see the
    module docstring), so a high point reads positive as in a single-photo
    measurement; ``settings.invert`` flips it for a sequence taken with the gap closing.

    Parameters
    ----------
    frames : sequence of (M, N) ndarray
    settings : pipeline.MeasureSettings
    step_deg, algorithm : see :func:`demodulate_sequence`
    names : sequence of str
        The frames' file names, for the record.
    binning : int, optional
        Photo pixels per map pixel along each axis; by default chosen from the size.
    """
    from ..pipeline import MapGeometry, _validate, measurement_from_phase
    from ..unwrapping import unwrap

    def tick(stage: str, fraction: float) -> None:
        if cancel is not None and cancel.is_set():
            raise MeasurementCancelled("stopped by the operator")
        if progress is not None:
            progress(stage, fraction)

    _validate(settings)
    fr = _as_frames(frames)
    rows, cols = fr[0].shape
    k = binning or max(1, int(round(min(rows, cols) / _TARGET_MAP_PX)))
    label = names[0] if names else f"sequence of {len(fr)} frames"
    tick("binning", 0.0)
    small = bin_frames(fr, k)
    tick("phase", 0.2)
    result = demodulate_sequence(small, step_deg=step_deg, algorithm=algorithm)
    tick("aperture", 0.4)
    geometry = MapGeometry(
        origin_x_px=(k - 1) / 2.0, origin_y_px=(k - 1) / 2.0, step_px=float(k), shape=small[0].shape
    )
    exclusions = tuple(settings.exclusions) + (
        tuple(settings.aperture.exclusions) if settings.aperture is not None else ()
    )
    if settings.aperture is not None:
        # as given, in photo pixels: a circle or any outline (``shapes``)
        aperture = settings.aperture.with_exclusions(exclusions)
    else:
        ap_map = aperture_from_modulation(result.amplitude, source=label)
        aperture = Aperture(
            geometry.origin_x_px + k * ap_map.center_x_px,
            geometry.origin_y_px + k * ap_map.center_y_px,
            k * ap_map.radius_px,
            exclusions,
        )
    px, py = geometry.photo_xy()
    disk = (px - aperture.center_x_px) ** 2 + (py - aperture.center_y_px) ** 2 <= (
        aperture.radius_px**2
    )
    inside = aperture.inside(px, py)
    if np.count_nonzero(inside) < 200:
        raise UnanalysablePhotoError(
            f"{label}: the aperture covers too few pixels "
            f"({np.count_nonzero(inside)}); frame the flat larger"
        )
    typical = float(np.median(result.amplitude[inside]))
    # dust and dark specks show as low temporal amplitude; leave them out like masked specks
    valid = inside & (result.amplitude > 0.25 * typical)
    tick("unwrap", 0.5)
    phase = unwrap(-result.wrapped_phase.astype(np.float64), valid)
    tick("fit", 0.8)
    measurement = measurement_from_phase(
        phase,
        valid,
        disk,
        aperture=aperture,
        geometry=geometry,
        settings=settings,
        photo=label,
        modulation=np.where(disk, result.modulation, np.nan),
        quality_fields={"binning": k},
        warnings=result.warnings,
    )
    tick("done", 1.0)
    return StackMeasurement(measurement=measurement, phase=result, binning=k, frames=tuple(names))
