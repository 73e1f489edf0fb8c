"""One photo from file to figures: the stages called in order, and the result they make."""

from __future__ import annotations

import threading
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .aperture import Aperture, Exclusion
from .figures import Figures
from .zernike import ZernikeFit

__all__ = ["MapGeometry", "MeasureSettings", "Measurement", "Quality", "Spectrum", "measure"]

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
    """

    wavelength_nm: float = 632.8
    n_terms: int = 36
    invert: bool = False
    diameter_mm: float | None = None
    aperture: Aperture | None = None
    exclusions: tuple[Exclusion, ...] = ()
    report_wavelength_nm: float | None = None


@dataclass(frozen=True)
class MapGeometry:
    """How the height map's grid sits on the photo.

    Map pixel ``(row i, column j)`` is centred on photo pixel
    ``(x, y) = (origin_x_px + j * step_px, origin_y_px + i * step_px)``.
    """

    origin_x_px: float
    origin_y_px: float
    step_px: float
    shape: tuple[int, int]

    def photo_xy(self) -> tuple[np.ndarray, np.ndarray]:
        """Photo coordinates (x right, y down) of every map pixel, each ``shape``."""
        rows, cols = self.shape
        x = self.origin_x_px + self.step_px * np.arange(cols, dtype=float)
        y = self.origin_y_px + self.step_px * np.arange(rows, dtype=float)
        return np.meshgrid(x, y)

    def unit_xy(self, aperture: Aperture) -> tuple[np.ndarray, np.ndarray]:
        """Zernike coordinates of every map pixel: x right, y up, divided by the radius."""
        px, py = self.photo_xy()
        return ((px - aperture.center_x_px) / aperture.radius_px,
                (aperture.center_y_px - py) / aperture.radius_px)


@dataclass(frozen=True)
class Quality:
    """How good the fringes were, for the operator and the record."""

    carrier_fringes: float  # tilt fringes across the aperture diameter
    carrier_angle_deg: float  # direction of the carrier (fringe normal), photo x axis, y down
    fringe_period_px: float
    resolution_cycles_per_aperture: float  # half-width of the flat-topped sideband window
    mean_modulation: float  # mean fringe visibility over the aperture, 0..1
    masked_fraction: float  # share of the aperture left out (specks, exclusions, low contrast)
    binning: int  # photo pixels binned into one before the Fourier transform


@dataclass(frozen=True)
class Spectrum:
    """A small log-magnitude view of the photo's spectrum, for the station's spectrum view.

    ``log_magnitude`` is centred on zero frequency; ``carrier_rc`` and the radii are in
    its own pixels (row, column), so a view can draw the window over it directly.
    """

    log_magnitude: np.ndarray
    carrier_rc: tuple[float, float]
    window_radius: float
    dc_radius: float


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


def measure(
    photo: str | Path | np.ndarray,
    settings: MeasureSettings,
    *,
    progress: Progress | None = None,
    cancel: threading.Event | None = None,
) -> Measurement:
    """Measure one fringe photo (a path, or an image array with values in 0..1)."""
    raise NotImplementedError
