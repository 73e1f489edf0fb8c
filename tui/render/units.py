"""Heights shown in the operator's chosen unit: nanometres, waves or fringes."""

from __future__ import annotations

import math

from ...analysis.formatting import format_number

__all__ = ["UNIT_LABELS", "convert", "fmt_height", "next_units"]

UNIT_ORDER = ("nm", "waves", "fringes")
UNIT_LABELS = {"nm": "nm", "waves": "λ", "fringes": "fr"}
UNIT_DIGITS = {"nm": 1, "waves": 3, "fringes": 2}  # decimals that show 0.1 nm or so


def convert(height_nm: float, units: str, wavelength_nm: float) -> float:
    """Height in ``units``: a wave is one wavelength, a fringe half of one (double pass)."""
    if units == "nm":
        return height_nm
    if units == "waves":
        return height_nm / wavelength_nm
    if units == "fringes":
        return height_nm / (wavelength_nm / 2.0)
    raise ValueError(f"unknown units {units!r}")


def fmt_height(
    height_nm: float | None, units: str, wavelength_nm: float, *, signed: bool = False
) -> str:
    """``"63.3 nm"``, ``"0.100 λ"`` or ``"0.20 fr"``; a dash for a missing value."""
    if height_nm is None or not math.isfinite(height_nm):
        return "—"
    v = convert(height_nm, units, wavelength_nm)
    digits, label = UNIT_DIGITS[units], UNIT_LABELS[units]
    return f"{format_number(v, digits, sign=signed)} {label}"


def next_units(units: str) -> str:
    """The unit after ``units`` in the cycle nm -> waves -> fringes -> nm."""
    return UNIT_ORDER[(UNIT_ORDER.index(units) + 1) % len(UNIT_ORDER)]
