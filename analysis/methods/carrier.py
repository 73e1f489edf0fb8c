"""The carrier method: tilt fringes demodulated by Fourier transform (Takeda), then unwrapped.

The stages live in their own modules (``carrier``, ``extension``, ``demodulation``,
``unwrapping``); this one runs them for the pipeline and hands back a
:class:`~flatsight.analysis.methods.PhaseResult`.
"""

from __future__ import annotations

import threading

import numpy as np

from ..aperture import Aperture
from ..demodulation import demodulate
from ..errors import UnanalysablePhotoError
from ..unwrapping import unwrap
from . import PhaseResult, Progress

__all__ = ["fringes_may_suit_a_fit", "run"]

# the carrier method's refusals that another method may overcome: no carrier (too few
# or too curved fringes), closed fringes, or the carrier lost to a small aperture's rim
_FRINGE_REFUSALS = ("no straight tilt fringes", "closed fringes",
                    "too little of the aperture has usable fringes")


def fringes_may_suit_a_fit(exc: UnanalysablePhotoError) -> bool:
    """True when the carrier method refused the photo for its fringes, not its contrast."""
    return str(exc).startswith(_FRINGE_REFUSALS)


def run(
    image: np.ndarray,
    aperture: Aperture,
    *,
    progress: Progress | None = None,
    cancel: threading.Event | None = None,
) -> PhaseResult:
    """Demodulate tilt fringes and unwrap the residual phase (see ``demodulation``)."""
    demod = demodulate(image, aperture, progress=progress, cancel=cancel)
    valid = demod.disk & ~demod.masked
    if progress is not None:
        progress("unwrap", 0.0)
    residual = unwrap(demod.wrapped_residual, valid)
    valid = _drop_spikes(residual, valid)
    quality = {
        "carrier_fringes": demod.carrier.fringes_across(2 * aperture.radius_px),
        "carrier_angle_deg": demod.carrier.angle_deg,
        "fringe_period_px": demod.carrier.period_px,
        "resolution_cycles_per_aperture": demod.resolution_cycles_per_aperture,
        "binning": demod.binning,
    }
    return PhaseResult(
        phase=demod.model_phase + residual, valid=valid, disk=demod.disk,
        geometry=demod.geometry, modulation=demod.modulation, phase_sigma=demod.phase_sigma,
        quality=quality, spectrum=demod.spectrum, method="carrier", reason="carrier found",
        sign="measured", warnings=demod.warnings,
    )


def _drop_spikes(residual: np.ndarray, valid: np.ndarray) -> np.ndarray:
    """Leave out map pixels the demodulation cannot vouch for.

    The residual phase is band-limited by the sideband window, so a pixel that stands
    far out of its neighbours (beside a speck, where the window's fit was lopsided) or
    a scrap of a few pixels cut off by masks is an artefact, not the surface.
    """
    from scipy import ndimage

    keep = valid.copy()
    labels, n = ndimage.label(keep)
    if n > 1:
        sizes = ndimage.sum_labels(keep, labels, index=np.arange(1, n + 1))
        keep &= np.isin(labels, 1 + np.flatnonzero(sizes >= 25))
    smooth = ndimage.median_filter(np.where(keep, residual, np.nan), size=5, mode="nearest")
    dev = np.abs(residual - smooth)
    ok = keep & np.isfinite(dev)
    if ok.sum() > 100:
        sigma = 1.4826 * float(np.median(dev[ok])) + 1e-9
        keep &= ~(ok & (dev > max(8.0 * sigma, 0.15)))  # 0.15 rad: under 1/40 fringe
    return keep
