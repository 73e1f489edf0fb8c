"""Numbers and names written for people: fixed decimals, never a signed zero, no control codes.

A value that rounds to zero is written without a sign whichever side of zero it came
from: ``-0.004`` to two places is ``0.00``, not ``-0.00``. Whether a tiny number comes
out of a least-squares fit a hair above or below zero depends on the numerical
library's order of operations, so a sign on a printed zero would be noise that changes
between versions (and a ``-0.00`` on a certificate reads as a measured negative value).
The command line's tables, the station and the certificate all write their figures
through :func:`format_number`.
"""

from __future__ import annotations

import math

__all__ = ["finite_number", "format_number", "format_plus_minus", "printable"]


def finite_number(value) -> float | None:
    """``value`` as a float, or None when it is missing, not a number, NaN or infinite."""
    try:
        x = float(value)
    except (TypeError, ValueError):
        return None
    return x if math.isfinite(x) else None


def format_number(value, digits: int = 1, *, sign: bool = False, missing: str = "—",
                  grouping: bool = False) -> str:
    """``value`` with ``digits`` decimals, never as a signed zero.

    Parameters
    ----------
    value : float, int, str or None
        Anything ``float()`` reads; None, NaN, infinities and text that is not a number
        give ``missing``.
    digits : int
        Decimal places.
    sign : bool
        Write ``+`` before positive values (a value that rounds to zero gets no sign).
    missing : str
        What to write for a missing value.
    grouping : bool
        Separate thousands with commas (``-8,260``).

    Examples
    --------
    >>> format_number(-0.004, 2), format_number(0.004, 2, sign=True), format_number(-1.26, 1)
    ('0.00', '0.00', '-1.3')
    >>> format_number(None), format_number(float("nan"), missing="-")
    ('—', '-')
    >>> format_number(3, 1, sign=True), format_number(-8260.4, 0, grouping=True)
    ('+3.0', '-8,260')
    """
    x = finite_number(value)
    if x is None:
        return missing
    plain = f"{x:.{digits}f}"
    if float(plain) == 0.0:
        x = 0.0  # rounds to zero: drop the sign, whichever side it came from
    spec = f"{'+' if sign and x != 0.0 else ''}{',' if grouping else ''}.{digits}f"
    return format(x, spec)


def format_plus_minus(value, uncertainty, digits: int = 1, *, sign: bool = False,
                      missing: str = "—") -> str:
    """``"49.6 ± 3.1"``: a value and its expanded uncertainty; the value alone without one.

    Examples
    --------
    >>> format_plus_minus(49.64, 3.08), format_plus_minus(-0.01, 0.5), format_plus_minus(2.0, None)
    ('49.6 ± 3.1', '0.0 ± 0.5', '2.0')
    """
    text = format_number(value, digits, sign=sign, missing=missing)
    u = format_number(uncertainty, digits, missing="")
    return f"{text} ± {u}" if u and text != missing else text


def printable(text) -> str:
    """``text`` with control characters written as escapes (``\\x1b``, ``\\n``).

    A file name or a part serial is printed as it is, but a control character in it
    (an escape sequence that would clear the terminal, a newline that would fake a
    line of output) is shown as its escape instead of being obeyed.

    Examples
    --------
    >>> printable("BW-FL-0412.png"), printable("a\\x1b[2Jb")
    ('BW-FL-0412.png', 'a\\\\x1b[2Jb')
    """
    s = str(text)
    if s.isprintable():
        return s
    return "".join(c if c.isprintable() else c.encode("unicode_escape").decode("ascii")
                   for c in s)
