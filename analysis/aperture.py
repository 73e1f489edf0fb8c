"""Where the flat is in the photo: the illuminated circular clear aperture."""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

__all__ = ["Aperture", "Exclusion"]


@dataclass(frozen=True)
class Exclusion:
    """A circle left out of the measurement (a chip, a central obscuration, a fixture).

    Photo pixels: x to the right, y down.
    """

    center_x_px: float
    center_y_px: float
    radius_px: float


@dataclass(frozen=True)
class Aperture:
    """The clear aperture in photo pixels (x to the right, y down, from pixel centres)."""

    center_x_px: float
    center_y_px: float
    radius_px: float
    exclusions: tuple[Exclusion, ...] = field(default=())

    def moved(self, dx: float = 0.0, dy: float = 0.0, dr: float = 0.0) -> Aperture:
        """A copy shifted by ``(dx, dy)`` pixels and grown by ``dr``."""
        return Aperture(self.center_x_px + dx, self.center_y_px + dy,
                        max(2.0, self.radius_px + dr), self.exclusions)

    def with_exclusions(self, exclusions: tuple[Exclusion, ...]) -> Aperture:
        return Aperture(self.center_x_px, self.center_y_px, self.radius_px, tuple(exclusions))

    def inside(self, x: np.ndarray, y: np.ndarray) -> np.ndarray:
        """True for photo points inside the disk and outside every exclusion."""
        x = np.asarray(x, dtype=float)
        y = np.asarray(y, dtype=float)
        keep = (x - self.center_x_px) ** 2 + (y - self.center_y_px) ** 2 <= self.radius_px**2
        for e in self.exclusions:
            keep &= (x - e.center_x_px) ** 2 + (y - e.center_y_px) ** 2 > e.radius_px**2
        return keep
