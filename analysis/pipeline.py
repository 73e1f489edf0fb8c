"""One photo from file to figures: the stages called in order, and the result they make."""

from __future__ import annotations

import math
import threading
import time
import weakref
from collections.abc import Callable
from dataclasses import dataclass, field

import numpy as np

from .aperture import Aperture, Exclusion
from .demodulation import MapGeometry, Spectrum
from .errors import PartCutByFrameError, SettingsError, UnanalysablePhotoError
from .figures import PISTON_TILT, Figures, MapFigures, compute_figures, prepare_map
from .unwrapping import phase_to_height_nm
from .zernike import ZernikeFit, aperture_basis, fit_zernike

__all__ = [
    "MapGeometry",
    "MeasureSettings",
    "Measurement",
    "Quality",
    "Spectrum",
    "measure",
    "measurement_from_height",
    "measurement_from_phase",
    "with_terms_removed",
]

Progress = Callable[[str, float], None]


@dataclass(frozen=True)
class MeasureSettings:
    """What the operator chose for a measurement.

    Attributes
    ----------
    wavelength_nm : float
        Test wavelength (He-Ne 632.8, sodium 589.3, mercury e 546.07 ...).
    n_terms : int
        Number of Noll Zernike terms fitted (36 by default, at least 15).
    invert : bool
        Flip the sign of the surface (see DEVELOPERS.md, "Sign").
    diameter_mm : float or None
        Physical clear-aperture diameter; gives mm axes and radius of curvature.
    aperture : Aperture or None
        A fixed aperture in photo pixels; None finds it automatically.
    exclusions : tuple of Exclusion
        Circles left out of the measurement, added to the aperture's own.
    report_wavelength_nm : float or None
        A second wavelength to express figures in waves of (for example 546.07 or 632.8).
    wavelength_uncertainty_nm : float
        Standard uncertainty of the test wavelength (0: a known spectral line).
    reference_uncertainty_nm : float
        Expanded uncertainty (k = 2) of the reference flat's form, in every figure.
    method : {"auto", "carrier", "intensity-fit"}
        How the fringes become phase (``analysis/methods``); auto picks by the photo.
    ring_sign : {"convex", "concave"} or None
        The part's form as the operator's push test shows it: needed for closed fringes,
        which cannot show it themselves (README, "Closed fringes").
    """

    wavelength_nm: float = 632.8
    n_terms: int = 36
    invert: bool = False
    diameter_mm: float | None = None
    aperture: Aperture | None = None
    exclusions: tuple[Exclusion, ...] = ()
    report_wavelength_nm: float | None = None
    wavelength_uncertainty_nm: float = 0.0
    reference_uncertainty_nm: float = 0.0
    method: str = "auto"
    ring_sign: str | None = None


@dataclass(frozen=True)
class Quality:
    """How good the fringes were, for the operator and the record."""

    # the tilt carrier: NaN where the map has none of its own (phase-shifted frames, an
    # average of photos, each with its own carrier: see ``per_photo``)
    carrier_fringes: float  # tilt fringes across the aperture diameter
    carrier_angle_deg: float  # direction of the carrier (fringe normal), photo x axis, y down
    fringe_period_px: float
    resolution_cycles_per_aperture: float  # half-width of the sideband window (NaN: none)
    mean_modulation: float  # mean fringe visibility over the aperture, 0..1 (NaN: unknown)
    masked_fraction: float  # share of the disk not measured: specks, exclusions, low
    # contrast, and the outermost rim where the fit stands in for the phase
    binning: int  # photo pixels binned into one before the Fourier transform
    photos: int = 1  # photos averaged into the map
    per_photo: tuple[Quality, ...] = ()  # an average: each photo's own quality, in order
    method: str = ""  # the single-photo method (analysis/methods); "" for combined maps
    method_reason: str = ""  # why it was chosen: "carrier found", "closed fringes" ...
    sign: str = "measured"  # "stated": the operator said convex or concave (closed fringes)
    terms_fitted: int = 0  # Noll terms the photo resolves and the method fitted (0: no limit)


@dataclass(frozen=True)
class Measurement:
    """Everything one measurement produced.

    Attributes
    ----------
    height_nm : (M, N) ndarray
        Surface height with piston and tilt removed, NaN outside the aperture and
        where masked. Grid placement: ``geometry``.
    valid : (M, N) bool ndarray
        Pixels that carry a measured height.
    modulation : (M, N) ndarray
        Fringe visibility (0..1) at each map pixel, NaN outside the aperture.
    zernike : ZernikeFit
        Noll coefficients of the surface in nm (piston and tilt included as fitted).
    height_sigma_nm : (M, N) ndarray or None
        Standard deviation of the height that the photo's noise leaves at each map
        pixel (nm), where the demodulation estimated it.
    """

    photo: str
    settings: MeasureSettings
    aperture: Aperture
    geometry: MapGeometry
    height_nm: np.ndarray
    valid: np.ndarray
    modulation: np.ndarray
    zernike: ZernikeFit
    figures: Figures
    quality: Quality
    spectrum: Spectrum
    warnings: tuple[str, ...] = field(default=())
    photo_sha256: str | None = None
    timings_s: dict[str, float] = field(default_factory=dict)
    height_sigma_nm: np.ndarray | None = None


def _validate(settings: MeasureSettings) -> None:
    if not (100.0 <= settings.wavelength_nm <= 20000.0):
        raise SettingsError(
            f"wavelength {settings.wavelength_nm:g} nm is out of range (100 to 20000 nm)")
    if not (15 <= settings.n_terms <= 231):
        raise SettingsError(f"number of Zernike terms {settings.n_terms} must be 15 to 231")
    if settings.diameter_mm is not None and not (0.0 < settings.diameter_mm <= 10000.0):
        raise SettingsError(f"clear-aperture diameter {settings.diameter_mm:g} mm is out of "
                            "range (more than 0, at most 10000 mm)")
    for what, value in (("wavelength uncertainty", settings.wavelength_uncertainty_nm),
                        ("reference flat uncertainty", settings.reference_uncertainty_nm)):
        if not (math.isfinite(value) and 0.0 <= value <= 1000.0):
            raise SettingsError(f"{what} {value:g} nm must be 0 to 1000 nm")
    from .methods import METHOD_CHOICES, RING_SIGNS

    if settings.method not in METHOD_CHOICES:
        raise SettingsError(f"unknown method {settings.method!r}: use "
                            + ", ".join(METHOD_CHOICES))
    if settings.ring_sign is not None and settings.ring_sign not in RING_SIGNS:
        raise SettingsError(f"unknown ring sign {settings.ring_sign!r}: use convex or concave")
    if settings.report_wavelength_nm is not None and not (
            100.0 <= settings.report_wavelength_nm <= 20000.0):
        raise SettingsError(f"reporting wavelength {settings.report_wavelength_nm:g} nm is "
                            "out of range (100 to 20000 nm)")


def measure(
    photo,
    settings: MeasureSettings,
    *,
    progress: Progress | None = None,
    cancel: threading.Event | None = None,
) -> Measurement:
    """Measure one fringe photo: load, find the aperture, demodulate, unwrap, fit, figure.

    Parameters
    ----------
    photo : path, FringePhoto or (H, W) ndarray
        A PNG, JPEG or TIFF file, a photo already loaded with ``load_photo``, or an
        image array (values 0..1, or integers).
    settings : MeasureSettings
        Wavelength, number of Zernike terms, sign, aperture.
    progress : callable, optional
        Called as ``progress(stage, fraction)``.
    cancel : threading.Event, optional
        When set, the measurement stops with ``MeasurementCancelled``.

    Raises
    ------
    UnreadablePhotoError, UnanalysablePhotoError, SettingsError, MeasurementCancelled
    """
    from .lit_disk import find_lit_disk
    from .loading import FringePhoto, load_photo, photo_from_array
    from .methods import CARRIER_MIN_FRINGES, run_method
    from .outline import find_part_aperture

    _validate(settings)
    timings: dict[str, float] = {}
    t = time.perf_counter()

    def lap(stage: str) -> None:
        nonlocal t
        now = time.perf_counter()
        timings[stage] = timings.get(stage, 0.0) + now - t
        t = now

    def report(stage: str, frac: float) -> None:
        if progress is not None:
            progress(stage, frac)
        if cancel is not None and cancel.is_set():
            from .errors import MeasurementCancelled

            raise MeasurementCancelled("measurement cancelled")

    report("load", 0.0)
    if isinstance(photo, FringePhoto):
        fringe_photo = photo  # already decoded (the station shows it while this runs)
        name = photo.path or "<array>"
    elif isinstance(photo, np.ndarray):
        fringe_photo = photo_from_array(photo)
        name = "<array>"
    else:
        fringe_photo = load_photo(photo)
        name = str(photo)
    image = fringe_photo.pixels
    lap("load")

    report("aperture", 0.0)
    warnings: list[str] = list(fringe_photo.notes)  # how the file was read
    by_light = False  # the aperture found by the lit disk, not by fringe contrast
    if settings.aperture is not None:
        aperture = settings.aperture
        H, W = image.shape
        # the operator's own numbers: a mistake in them is a usage error, said at once
        if not (0 <= aperture.center_x_px < W and 0 <= aperture.center_y_px < H
                and 16 <= aperture.radius_px <= max(W, H) / 2):
            given = (aperture.shape.to_text() if aperture.shape is not None else
                     f"{aperture.center_x_px:g},{aperture.center_y_px:g},"
                     f"{aperture.radius_px:g}")
            raise SettingsError(
                f"aperture {given} does not fit the {W}x{H} photo (centre inside, "
                f"radius from 16 px to {max(W, H) / 2:g} px, half the photo's longer side)")
    else:
        try:
            aperture = find_part_aperture(image, photo_name=name)
        except UnanalysablePhotoError as refusal:
            # a part cut by the frame is refused whatever its fringes: its lit disk would
            # be the frame's cut as much as the part's edge
            if settings.method == "carrier" or isinstance(refusal, PartCutByFrameError):
                raise
            # too few fringes for the contrast finder's carrier: the lit disk by its light
            aperture = find_lit_disk(image, photo_name=name)
            by_light = True
        for ex in aperture.exclusions:  # a dark hole in the part, a chip in its rim
            warnings.append(f"a dark region at {ex.center_x_px:.0f},{ex.center_y_px:.0f} "
                            f"(radius {ex.radius_px:.0f} px) is left out: a chip or a hole? "
                            "check the outline drawn on the photo")
    if settings.exclusions:
        aperture = aperture.with_exclusions(tuple(aperture.exclusions) + settings.exclusions)
    if fringe_photo.saturated_fraction > 0.01:
        warnings.append(f"{100 * fringe_photo.saturated_fraction:.1f} % of the pixels are "
                        "saturated: shorten the exposure")
    lap("aperture")

    def run(aperture: Aperture):
        return run_method(image, aperture, method=settings.method,
                          ring_sign=settings.ring_sign, invert=settings.invert,
                          photo_name=name, progress=progress, cancel=cancel)

    try:
        result = run(aperture)
    except UnanalysablePhotoError as refusal:
        # an outline found on a photo of few or closed fringes may be the fringes' as
        # much as the part's: where the lit region's own edge is round, measure that
        if settings.aperture is not None or aperture.shape is None or (
                settings.method == "carrier"):
            raise
        try:
            aperture = find_lit_disk(image, photo_name=name).with_exclusions(
                aperture.exclusions)
        except UnanalysablePhotoError:
            raise refusal from None
        result = run(aperture)
    if (settings.aperture is None and settings.method == "auto" and aperture.shape is not None
            and result.method == "carrier"
            and result.quality["carrier_fringes"] < CARRIER_MIN_FRINGES):
        # A few broad fringes running along the edge move its brightness' 50 % point by a
        # good part of a fringe, and the outline finder can take a round part for an
        # ellipse, a polygon or a cut circle (on 64 square-on photos of 3 to 9 tilt
        # fringes from tests/refset/shaped.py, 27 times; refset few-0427, 5 fringes: an
        # ellipse 12 deg off axis). The intensity fit measures round parts only, so the carrier
        # method's result on that outline was kept (few-0427: RMS 37.0 for 39.9 nm, power
        # 6.6 % low). Where the lit region's own edge is round, the fit measures that,
        # kept on the terms ``run_method`` keeps a fit by: that it gives no warning.
        from .methods import intensity_fit

        try:
            lit = find_lit_disk(image, photo_name=name).with_exclusions(aperture.exclusions)
            fitted = intensity_fit.run(image, lit, reason="too few fringes",
                                       ring_sign=settings.ring_sign, invert=settings.invert,
                                       photo_name=name, progress=progress, cancel=cancel)
        except UnanalysablePhotoError:
            fitted = None
        if fitted is not None and not fitted.warnings:
            aperture, result, by_light = lit, fitted, True
    lap("demodulate")
    warnings.extend(result.warnings)
    if (settings.aperture is None and not by_light and aperture.shape is None
            and result.method == "intensity-fit"):
        warnings.extend(_lit_edge_check(image, aperture, name))
    quality = dict(result.quality, method=result.method, method_reason=result.reason,
                   sign=result.sign)
    m = measurement_from_phase(
        result.phase, result.valid, result.disk, aperture=aperture,
        geometry=result.geometry, settings=settings, photo=name,
        modulation=result.modulation,
        height_sigma_nm=result.phase_sigma * (settings.wavelength_nm * _obliquity(aperture)
                                              / (4.0 * np.pi)),
        quality_fields=quality, spectrum=result.spectrum, warnings=tuple(warnings),
        photo_sha256=fringe_photo.sha256,
    )
    lap("fit")
    timings["total"] = sum(timings.values())
    return _replace(m, timings_s=timings)


# how far the fringe-contrast circle and the lit disk's edge may part, as a share of the
# radius, before a few-fringe photo's aperture is in doubt: on 94 held-out square-on
# photos of few, bent and closed fringes (tests/refset) they parted by at most 1.7 %;
# a radius 2 % out moves power, which scales with the radius squared, by about 4 %
_LIT_EDGE_TOLERANCE = 0.022


def _lit_edge_check(image: np.ndarray, aperture: Aperture, name: str) -> list[str]:
    """A warning when the lit disk's own edge disagrees with the circle found by contrast.

    With few or closed fringes the contrast finder sees the rim only where a fringe
    crosses it; on a wide, soft edge it can settle inside the part. The lit disk, found
    by the light alone, is a second opinion; the aperture found stays as it was.
    """
    from .lit_disk import find_lit_disk

    try:
        lit = find_lit_disk(image, photo_name=name)
    except UnanalysablePhotoError:
        return []
    r = aperture.radius_px
    radius_off = (lit.radius_px - r) / r
    centre_off = math.hypot(lit.center_x_px - aperture.center_x_px,
                            lit.center_y_px - aperture.center_y_px) / r
    if abs(radius_off) <= _LIT_EDGE_TOLERANCE and centre_off <= _LIT_EDGE_TOLERANCE:
        return []
    return [f"the lit disk's edge (radius {lit.radius_px:.0f} px) and the fringe-contrast "
            f"outline (radius {r:.0f} px) disagree by {100 * max(abs(radius_off), centre_off):.1f} "
            "% of the radius: every figure depends on it; check the outline, or give it "
            "with --aperture"]


def _obliquity(aperture: Aperture) -> float:
    """Height per fringe over its square-on value: ``1 / cos`` of the viewing angle.

    A round part seen as an ellipse was photographed at an angle, and the fringes seen
    from there come from light that crossed the air gap at that angle: a fringe is then
    ``lambda / (2 cos angle)`` of height, not ``lambda / 2`` (the thin-film fringe's
    ``2 t cos angle`` path, common practice). 1 for every other outline.
    """
    angle = aperture.shape.view_angle_deg if aperture.shape is not None else None
    return 1.0 / math.cos(math.radians(angle)) if angle else 1.0


def _part_pixels(aperture: Aperture, geometry: MapGeometry, xu: np.ndarray,
                 yu: np.ndarray) -> tuple[np.ndarray, bool]:
    """The part's map pixels, and whether the fit's terms are made orthonormal over them.

    A circle and an ellipse (mapped back to the part's circle) fill the unit disk of
    ``xu, yu``, and plain Zernike terms apply; any other outline is its own region.
    """
    if aperture.maps_to_disk:
        return np.hypot(xu, yu) <= 1.0, False
    return aperture.region(*geometry.photo_xy()), True


def _methods(method: str | None, per_photo=()) -> set:
    """The single-photo methods behind a map: its own, or each averaged photo's."""
    return {method} | {getattr(q, "method", None) for q in (per_photo or ())}


def _scale_uncertainty(method: str | None, per_photo=()) -> float:
    """The height scale's relative standard uncertainty from how the aperture was set:
    the intensity fit's (its own photo's, or any averaged photo's) finds it from the
    contrast or the lit disk alone (``uncertainty.INTENSITY_FIT_SCALE``); with a carrier
    it is within the method's own share. Averaging keeps it whole: a soft edge misleads
    every photo of a part alike."""
    from .uncertainty import INTENSITY_FIT_SCALE

    return INTENSITY_FIT_SCALE if "intensity-fit" in _methods(method, per_photo) else 0.0


def _demodulated_outline(aperture: Aperture, method: str | None, per_photo=()) -> str | None:
    """The outline kind whose corners add to the method part (``uncertainty.OUTLINE_METHOD``)
    when the map is one photo's demodulation, or an average of such; None for a
    phase-shifted stack or a combined map, whose heights no demodulation window smoothed."""
    demodulated = _methods(method, per_photo) & {"carrier", "intensity-fit"}
    return aperture.kind if demodulated else None


def _resolution_px(resolution_cycles_per_aperture: float, xu: np.ndarray) -> float | None:
    """The resolution as a Gaussian width in map pixels (None when unknown).

    About the width of the demodulation window's kernel: a window flat to ``f``
    cycles per aperture diameter over 0.7 of its radius has a kernel about
    ``0.35 / f`` diameters wide.
    """
    if not resolution_cycles_per_aperture > 0:  # 0 or NaN: no demodulation window
        return None
    step = float(np.max(np.abs(np.diff(xu, axis=1)))) if xu.shape[1] > 1 else 0.0
    if step <= 0:
        return None
    px_per_diameter = 2.0 / step
    return 0.35 * px_per_diameter / resolution_cycles_per_aperture


def _replace(m: Measurement, **changes) -> Measurement:
    """``m`` with ``changes``; the copy keeps ``m``'s prepared map if it has the same map."""
    from dataclasses import replace

    copy = replace(m, **changes)
    prepared = _recalled_map(m)
    if prepared is not None and not {"height_nm", "valid", "geometry", "aperture",
                                     "zernike", "quality"} & changes.keys():
        _remember_map(copy, prepared)
    return copy


def measurement_from_phase(
    phase: np.ndarray,
    valid: np.ndarray,
    disk: np.ndarray,
    *,
    aperture: Aperture,
    geometry: MapGeometry,
    settings: MeasureSettings,
    photo: str,
    modulation: np.ndarray | None = None,
    quality_fields: dict | None = None,
    spectrum: Spectrum | None = None,
    warnings: tuple[str, ...] = (),
    photo_sha256: str | None = None,
    height_sigma_nm: np.ndarray | None = None,
) -> Measurement:
    """A measurement from an unwrapped phase map (radians) on ``geometry``'s grid."""
    height = phase_to_height_nm(phase, settings.wavelength_nm * _obliquity(aperture),
                                invert=settings.invert)
    return measurement_from_height(
        height, valid, disk, aperture=aperture, geometry=geometry, settings=settings,
        photo=photo, modulation=modulation, quality_fields=quality_fields,
        spectrum=spectrum, warnings=warnings, photo_sha256=photo_sha256,
        height_sigma_nm=height_sigma_nm,
    )


def measurement_from_height(
    height_nm: np.ndarray,
    valid: np.ndarray,
    disk: np.ndarray | None = None,
    *,
    aperture: Aperture,
    geometry: MapGeometry,
    settings: MeasureSettings,
    photo: str,
    modulation: np.ndarray | None = None,
    quality_fields: dict | None = None,
    spectrum: Spectrum | None = None,
    warnings: tuple[str, ...] = (),
    photo_sha256: str | None = None,
    height_sigma_nm: np.ndarray | None = None,
) -> Measurement:
    """Fit and figure a height map (nm) already placed on ``geometry``'s grid.

    ``valid`` marks measured pixels; ``disk`` the aperture (defaults to the disk of
    ``aperture`` on the grid). Piston and tilt are removed from the stored map.
    """
    xu, yu = geometry.unit_xy(aperture)
    orthonormal = False
    if disk is None or aperture.shape is not None:
        disk, orthonormal = _part_pixels(aperture, geometry, xu, yu)
    valid = np.asarray(valid, bool) & disk & np.isfinite(height_nm)
    n_valid = int(valid.sum())
    if n_valid < 3 * settings.n_terms:
        raise UnanalysablePhotoError(
            f"only {n_valid} map pixels could be measured: too few to fit "
            f"{settings.n_terms} Zernike terms")
    disk_basis = aperture_basis(settings.n_terms, xu[disk], yu[disk], orthonormal=orthonormal)
    basis = disk_basis[valid[disk]]
    h = np.asarray(height_nm, dtype=float)[valid]
    fit = fit_zernike(h, None, None, n_terms=settings.n_terms, basis=basis)
    qf = dict(quality_fields or {})
    resolution_px = _resolution_px(float(qf.get("resolution_cycles_per_aperture", 0.0)),
                                   xu)
    region = disk if orthonormal else None
    prepared = prepare_map(height_nm, valid, xu, yu, fit, resolution_px=resolution_px,
                           region=region, height_sigma_nm=height_sigma_nm)
    figures = compute_figures(
        height_nm, valid, xu, yu, fit, wavelength_nm=settings.wavelength_nm,
        diameter_mm=settings.diameter_mm, resolution_px=resolution_px,
        height_sigma_nm=height_sigma_nm,
        wavelength_uncertainty_nm=settings.wavelength_uncertainty_nm,
        reference_uncertainty_nm=settings.reference_uncertainty_nm,
        photos=int(qf.get("photos", 1)), prepared=prepared, region=region,
        scale_uncertainty=_scale_uncertainty(qf.get("method"), qf.get("per_photo", ())),
        outline=_demodulated_outline(aperture, qf.get("method"), qf.get("per_photo", ())))
    tilt = basis[:, :3] @ fit.coefficients_nm[:3]
    surface = np.full(np.shape(height_nm), np.nan)
    surface[valid] = h - tilt
    # a map with no carrier or visibility of its own says so (NaN), never a made-up 0 or 1
    if modulation is None:
        modulation = np.full(np.shape(height_nm), np.nan)
        mean_modulation = float(qf.get("mean_modulation", np.nan))
    else:
        seen = np.asarray(modulation, dtype=float)[valid]
        seen = seen[np.isfinite(seen)]
        mean_modulation = float(seen.mean()) if seen.size else float("nan")
    n_disk = int(disk.sum())
    quality = Quality(
        carrier_fringes=float(qf.get("carrier_fringes", np.nan)),
        carrier_angle_deg=float(qf.get("carrier_angle_deg", np.nan)),
        fringe_period_px=float(qf.get("fringe_period_px", np.nan)),
        resolution_cycles_per_aperture=float(qf.get("resolution_cycles_per_aperture", np.nan)),
        mean_modulation=mean_modulation,
        masked_fraction=float(1.0 - n_valid / n_disk) if n_disk else 1.0,
        binning=int(qf.get("binning", 1)),
        photos=int(qf.get("photos", 1)),
        per_photo=tuple(qf.get("per_photo", ())),
        method=str(qf.get("method", "")),
        method_reason=str(qf.get("method_reason", "")),
        sign=str(qf.get("sign", "measured")),
        terms_fitted=int(qf.get("terms_fitted", 0)),
    )
    warnings = tuple(warnings)
    # the outermost rim, where a soft edge dims the fringes, is left to the fit by
    # design; only what is masked inside it is worth an operator's attention
    inner = disk & (np.hypot(xu, yu) <= 0.9)
    inner_masked = float(1.0 - (valid & inner).sum() / inner.sum()) if inner.any() else 0.0
    if inner_masked > 0.08:
        warnings += (f"{100 * inner_masked:.0f} % of the aperture is masked (specks, "
                     "scratches, exclusions or low contrast): clean the flats or check the "
                     "aperture",)
    noisy = [name for name, removed in figures.noise_bias_removed_nm.items()
             if name in ("pv_nm", "pvr_nm", "irregularity_nm")
             and removed > 0.1 * (getattr(figures, name) + removed) and removed > 2.0]
    if noisy:
        labels = {"pv_nm": "PV", "pvr_nm": "PVr", "irregularity_nm": "irregularity"}
        warnings += ("the map's noise inflated " + ", ".join(labels[n] for n in noisy)
                     + " by more than 10 % (taken out, and counted in U): improve the "
                     "fringe contrast, or average several photos",)
    if spectrum is None:
        spectrum = Spectrum(np.zeros((1, 1), np.float32), (0.0, 0.0), 0.0, 0.0)
    return _remember_map(Measurement(
        photo=photo, settings=settings, aperture=aperture, geometry=geometry,
        height_nm=surface, valid=valid, modulation=np.asarray(modulation, dtype=np.float32),
        zernike=fit, figures=figures, quality=quality, spectrum=spectrum,
        warnings=warnings, photo_sha256=photo_sha256,
        height_sigma_nm=(None if height_sigma_nm is None
                         else np.where(disk, height_sigma_nm, np.nan).astype(np.float32)),
    ), prepared)


# The last measurement's map as prepared for its figures (fits, bases, Monte Carlo copies):
# the station toggles terms on the photo it shows, so keeping that one map makes each
# toggle a re-evaluation instead of a new analysis. One map only: a prepared map is
# about as large as twenty height maps, too much to keep for every photo of a queue.
_last_map: tuple[weakref.ref, MapFigures] | None = None


def _remember_map(m: Measurement, prepared: MapFigures) -> Measurement:
    global _last_map
    _last_map = (weakref.ref(m), prepared)
    return m


def _recalled_map(m: Measurement) -> MapFigures | None:
    last = _last_map
    return last[1] if last is not None and last[0]() is m else None


def with_terms_removed(
    m: Measurement, removed_terms: tuple[int, ...]
) -> tuple[np.ndarray, Figures]:
    """The map and figures of ``m`` with more Noll terms taken out, without a new FFT.

    Piston and tilt are always removed. Returns the map (NaN where not measured) and
    the figures computed from it.
    """
    xu, yu = m.geometry.unit_xy(m.aperture)
    valid = m.valid
    disk, orthonormal = _part_pixels(m.aperture, m.geometry, xu, yu)
    region = disk if orthonormal else None
    disk_basis = aperture_basis(m.zernike.n_terms, xu[disk], yu[disk], orthonormal=orthonormal)
    basis = disk_basis[valid[disk]]
    # the stored map has piston and tilt out; put them back so the fit stays the same
    h = m.height_nm[valid] + basis[:, :3] @ m.zernike.coefficients_nm[:3]
    removed = tuple(sorted(set(PISTON_TILT) | set(removed_terms)))
    full = np.full(m.height_nm.shape, np.nan)
    full[valid] = h
    resolution_px = _resolution_px(m.quality.resolution_cycles_per_aperture, xu)
    prepared = _recalled_map(m)
    if prepared is None:
        prepared = prepare_map(full, valid, xu, yu, m.zernike, resolution_px=resolution_px,
                               region=region, height_sigma_nm=m.height_sigma_nm)
        _remember_map(m, prepared)
    figures = compute_figures(
        full, valid, xu, yu, m.zernike, wavelength_nm=m.settings.wavelength_nm,
        diameter_mm=m.settings.diameter_mm, removed_terms=removed,
        resolution_px=resolution_px, height_sigma_nm=m.height_sigma_nm,
        wavelength_uncertainty_nm=m.settings.wavelength_uncertainty_nm,
        reference_uncertainty_nm=m.settings.reference_uncertainty_nm,
        photos=m.quality.photos, prepared=prepared, region=region,
        scale_uncertainty=_scale_uncertainty(m.quality.method, m.quality.per_photo),
        outline=_demodulated_outline(m.aperture, m.quality.method, m.quality.per_photo))
    idx = [j - 1 for j in removed if j <= m.zernike.n_terms]
    out = np.full(m.height_nm.shape, np.nan)
    out[valid] = h - basis[:, idx] @ m.zernike.coefficients_nm[idx]
    return out, figures
