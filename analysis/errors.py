"""The errors the measurement library raises, each with a message an operator can act on."""

from __future__ import annotations


class FlatsightError(Exception):
    """Base of every error Flatsight raises on purpose."""


class UnreadablePhotoError(FlatsightError):
    """The file could not be read as a photo (missing, not an image, truncated, too large)."""


class UnanalysablePhotoError(FlatsightError):
    """The photo was read but its fringes cannot be measured (no carrier, closed fringes...)."""


class RingSignNeededError(UnanalysablePhotoError):
    """Closed fringes and no stated ``ring_sign``: one photo cannot tell convex from concave.

    The operator's push test answers it; measured again with the sign stated, the photo
    is measured (the station asks for the sign when it meets this refusal).
    """


class PartCutByFrameError(UnanalysablePhotoError):
    """Too much of a round part's rim lies outside the photo: the frame cuts the part.

    Not a photo of too few fringes, so no other way of finding the part (its lit disk)
    is tried in its place: the part must be photographed whole, or its aperture given.
    """


class SettingsError(FlatsightError):
    """A setting is out of range or inconsistent (a wavelength of -5 nm, a bad aperture)."""


class MeasurementCancelled(FlatsightError):
    """The caller's cancel event was set while the analysis was running."""


class InspectionLogError(SettingsError):
    """The inspection log cannot be read or written: missing, another program's database,
    from a newer Flatsight, read-only, or on a full disk. The measurement itself is fine."""
