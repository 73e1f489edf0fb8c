"""Showing text that a user, a file name or a stored record controls: escaped, never markup.

Every command and the station print such text (photo paths, parts, operators, stations,
tolerances, error messages naming a file) through these helpers, so that nothing in it
can drive the terminal or the terminal library:

* :func:`shown` writes control characters as visible escapes: the C0 set, DEL and the C1
  set of ECMA-48 (``\\x1b`` for ESC, ``\\x9b`` for CSI, ``\\n``, ``\\r``, ``\\t``), the
  bidirectional formatting characters of Unicode UAX #9 (``\\u202e`` ...), the line and
  paragraph separators, and lone surrogates (an undecodable byte in a file name), which
  no terminal encoding can carry. Backslashes stay as they are, so Windows paths read
  normally.
* :func:`literal` gives a Rich ``Text`` of the escaped text: Rich and Textual never read
  it as markup (``[b]``, ``[/]``, ``[link=...]``) or emoji codes.
* :func:`csv_cell` and :func:`csv_row` apply the usual defence against spreadsheet
  formula injection to text cells (a leading ``=``, ``+``, ``-``, ``@``, tab or CR gets a
  single quote before it) and escape control characters; numbers stay numbers.

JSON output needs none of this: ``json.dumps`` escapes every control character.
"""

from __future__ import annotations

import re

__all__ = ["FORMULA_STARTS", "csv_cell", "csv_row", "literal", "shown", "shown_cut"]

# ECMA-48 C0 controls, DEL and the C1 controls; UAX #9 explicit directional embeddings,
# overrides and isolates (U+202A-U+202E, U+2066-U+2069) and the implicit marks (ALM, LRM,
# RLM); the line and paragraph separators; lone surrogates
_CONTROLS = re.compile(
    "[\x00-\x1f\x7f-\x9f\u061c\u200e\u200f\u2028\u2029\u202a-\u202e\u2066-\u2069"
    "\ud800-\udfff]"
)
_SHORT = {"\t": "\\t", "\n": "\\n", "\r": "\\r"}

#: What a spreadsheet may take for the start of a formula (the OWASP list).
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")


def _escape(match: re.Match) -> str:
    ch = match.group()
    short = _SHORT.get(ch)
    if short is not None:
        return short
    code = ord(ch)
    return f"\\x{code:02x}" if code <= 0xFF else f"\\u{code:04x}"


def shown(value: object) -> str:
    """``str(value)`` with every control character written as a visible escape.

    Idempotent: what it returns holds no control characters, so escaping twice is
    the same as once.

    Examples
    --------
    >>> shown("BW\\x1b[2J\\u202e21")
    'BW\\\\x1b[2J\\\\u202e21'
    """
    text = value if isinstance(value, str) else str(value)
    return _CONTROLS.sub(_escape, text)


def shown_cut(value: object, room: int, *, keep_end: int = 0) -> str:
    """:func:`shown` cut to ``room`` characters with ``…``, never inside an escape.

    Each character of ``value`` is escaped on its own (``\u202e`` is six characters that
    stay together or go together), then the text keeps as many escaped characters from
    the start as fit and, when ``keep_end`` is given, up to that many of the last ones
    after the ``…``: the end of a file name is what tells photos of one part apart.
    """
    text = value if isinstance(value, str) else str(value)
    atoms = [shown(ch) for ch in text]
    if sum(map(len, atoms)) <= room:
        return "".join(atoms)
    budget = max(0, room - 1)
    tail: list[str] = []
    used = 0
    for atom in reversed(atoms[1:]):
        if used + len(atom) > min(keep_end, budget):
            break
        tail.insert(0, atom)
        used += len(atom)
    head: list[str] = []
    for atom in atoms[: len(atoms) - len(tail)]:
        if used + len(atom) > budget:
            break
        head.append(atom)
        used += len(atom)
    return "".join(head) + "…" + "".join(tail)


def literal(value: object, style: str = ""):
    """A Rich ``Text`` showing ``value`` escaped and exactly as written (no markup)."""
    from rich.text import Text

    return Text(shown(value), style=style)


def csv_cell(value: object) -> object:
    """One CSV cell: text defended against formula injection and escaped; others as given.

    Only ``str`` values change: numbers (negative ones too) stay numbers, and None stays
    an empty cell.
    """
    if not isinstance(value, str):
        return value
    if value.startswith(FORMULA_STARTS):
        value = "'" + value
    return shown(value)


def csv_row(row: dict) -> dict:
    """``row`` with :func:`csv_cell` applied to every value."""
    return {key: csv_cell(value) for key, value in row.items()}
