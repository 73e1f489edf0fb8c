"""Numbers written for people never show a signed zero, wherever they are printed."""

from __future__ import annotations

import math

import numpy as np
import pytest
from flatsight.analysis.formatting import format_number, format_plus_minus, printable

# values a hair either side of zero, as a least-squares fit leaves them, and exact zeros
NEAR_ZERO = [-0.0, 0.0, -1e-15, 1e-15, -0.0004, 0.0004, -0.004, 0.004, -0.049, 0.049]


@pytest.mark.parametrize("value", NEAR_ZERO)
@pytest.mark.parametrize("digits", [0, 1, 2, 4])
def test_no_signed_zero(value, digits):
    for sign in (False, True):
        text = format_number(value, digits, sign=sign)
        # a number that rounds to zero carries no sign at all (IEEE 754-2008 keeps a
        # negative zero; Python's format spec gained "z" for this, PEP 682)
        if float(text) == 0.0:
            assert text == f"{0.0:.{digits}f}", (value, digits, sign, text)
        assert not text.startswith("-0") or float(text) != 0.0


def test_agrees_with_pythons_own_z_format_away_from_zero():
    # reference: Python's "z" format option (PEP 682, Python 3.11), which turns a negative
    # zero after rounding into a positive one; both round with the same float formatting
    rng = np.random.default_rng(0)
    values = np.concatenate([rng.normal(0.0, 50.0, 200), rng.normal(0.0, 0.01, 200)])
    for v in values:
        for digits in (0, 1, 2, 3):
            assert format_number(float(v), digits) == format(float(v), f"z.{digits}f")


def test_signs_missing_values_and_grouping():
    assert format_number(40.0, 2, sign=True) == "+40.00"
    assert format_number(-13.86, 1, sign=True) == "-13.9"
    assert format_number(None) == "—" and format_number(math.nan, missing="-") == "-"
    assert format_number(math.inf) == "—" and format_number("text") == "—"
    assert format_number(-8260.2, 0, grouping=True) == "-8,260"
    assert format_plus_minus(49.62, 3.08) == "49.6 ± 3.1"
    assert format_plus_minus(-0.01, 0.5) == "0.0 ± 0.5"
    assert format_plus_minus(12.0, None) == "12.0"
    assert format_plus_minus(None, 1.0) == "—"


def test_printable_escapes_control_characters_only():
    assert printable("BW-FL-0412_hene.png") == "BW-FL-0412_hene.png"
    assert printable("α β [bold]x[/]") == "α β [bold]x[/]"  # markup is the renderer's job
    assert printable("a\x1b[2Jb\nc\td") == "a\\x1b[2Jb\\nc\\td"
