"""Surface-form tolerances: parse ISO 10110-5 ``3/A(B/C)`` and plain limits, judge a record.

How Flatsight reads the notation
--------------------------------
This section is the text the README and ``--help`` repeat; change them together.

Flatsight reads ISO 10110-5:2015 (third edition; the 2007 edition writes the same
forms). The notation below is summarised from memory of the standard, not checked
clause by clause against its text.

* ``3/A(B/C)``, ``3/A(B)``, ``3/-(B)``, ``3/A(-)``: code 3 is surface form.
  A is the sagitta error (power), B the irregularity, C the rotationally symmetric
  irregularity. A dash means "not toleranced"; C may be left out.
  Numbers without a unit are fringe spacings (one fringe = half a wavelength of
  height) at 546.07 nm, or at ``--spec-wavelength`` when the drawing states another.
  A number may carry a unit instead: ``nm``, ``um``, ``fr``, ``w``. A comma between
  two digits is a decimal comma (``3/0,5(0,2)``), as drawings often write it.
* A is compared with the **magnitude** of the power: ``|power| <= A``, a concave and a
  convex part of the same sag are treated alike.
* B is the **peak-to-valley of everything left after piston, tilt and power are
  removed**, astigmatism and the symmetric part included (``irregularity_nm``).
* C is the peak-to-valley of the **rotationally symmetric terms beyond power**
  (spherical aberration and its higher orders; ``symmetric_irregularity_nm``).
  C larger than B is refused, since C is part of B.
* RMS forms, written after the PV form or on their own: ``3/A(B/C) RMSt < D``,
  ``RMSi < D``, ``RMSa < D``, and ``3/-(-) RMSi < D``; Flatsight also accepts the
  shorter ``3/RMSi < D``. RMSt is the RMS with piston and tilt removed
  (``rms_nm``), RMSi the RMS after power is removed too (``rms_irregularity_nm``),
  RMSa the RMS of the non-rotationally-symmetric part (``rms_asymmetric_nm``).
  D without a unit is in waves of the same wavelength as A, B and C (546.07 nm or
  ``--spec-wavelength``), also where ``RMSi < D`` stands alone in a list of limits.
* Plain limits, for shops that write them so: ``pv<=63nm``, ``rms<=0.02w``,
  ``pvr<=0.1w``, ``power<=2fr``, ``irregularity<=0.5fr`` (also ``astigmatism``,
  ``symmetric``). A unit is required. ``fr`` is a
  fringe at 546.07 nm (or ``--spec-wavelength``); ``w`` is a wave of the **test**
  wavelength the photo was taken at, unless ``--spec-wavelength`` is given, when it
  is a wave of that.
* Several limits are separated by commas or semicolons; the part passes when every
  one passes. A value equal to its limit passes (the standard writes ``<``; at the
  precision of a fringe photo the difference has no meaning). A figure the
  measurement could not give (missing, or not a number) fails its limit.
* The margin of a limit is the limit minus the measured value, in the limit's own
  unit and in nanometres: positive is inside the tolerance.
* Decision rules (ISO 14253-1; ILAC G8). ``simple`` (the default): a limit passes
  when the measured value is within it. ``guarded``: a limit passes only when the
  measured value plus its expanded uncertainty U (k = 2) is within it, fails when the
  value minus U is beyond it, and is ``inconclusive`` in between (or when the
  measurement gives no U for that figure). The part fails when any limit fails, is
  inconclusive when none fails but one is inconclusive, and passes otherwise.

References
----------
ISO 10110-5:2015, Optics and photonics - Preparation of drawings for optical elements
and systems - Part 5: Surface form tolerances (from memory).
ISO 14999-4:2015, Interferometric measurement of optical elements and optical systems -
Part 4: Interpretation and evaluation of tolerances specified in ISO 10110 (from memory).
ISO 14253-1:2017, Geometrical product specifications (GPS) - Inspection by measurement of
workpieces and measuring equipment - Part 1: Decision rules for verifying conformity or
nonconformity with specifications (from memory).
ILAC-G8:09/2019, Guidelines on decision rules and statements of conformity (from memory).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass

from ..errors import SettingsError

__all__ = [
    "DECISION_RULES",
    "DEFAULT_SPEC_WAVELENGTH_NM",
    "Limit",
    "LimitResult",
    "SpecResult",
    "Tolerance",
    "ToleranceSyntaxError",
    "evaluate",
    "judge",
    "parse_tolerance",
    "spec_section",
]

DEFAULT_SPEC_WAVELENGTH_NM = 546.07  # mercury e line, ISO 10110-5's reference wavelength

# decision rule -> how it is stated in records and on certificates
DECISION_RULES = {
    "simple": "simple acceptance: a limit passes when the measured value is within it "
              "(ISO 14253-1 and ILAC G8, no guard band)",
    "guarded": "guarded acceptance (ISO 14253-1, ILAC G8): pass when value + U is within "
               "the limit, fail when value - U is beyond it, otherwise inconclusive; "
               "U is the expanded uncertainty, k = 2",
}

# plain-limit name -> (record figure, label, compared by magnitude)
_PLAIN = {
    "pv": ("pv_nm", "PV", False),
    "rms": ("rms_nm", "RMS", False),
    "pvr": ("pvr_nm", "PVr", False),
    "power": ("power_nm", "power", True),
    "irregularity": ("irregularity_nm", "irregularity", False),
    "irr": ("irregularity_nm", "irregularity", False),
    "astigmatism": ("astigmatism_nm", "astigmatism", False),
    "symmetric": ("symmetric_irregularity_nm", "symmetric irregularity", False),
}
_RMS = {"t": ("rms_nm", "RMSt"), "i": ("rms_irregularity_nm", "RMSi"),
        "a": ("rms_asymmetric_nm", "RMSa")}
# longest spelling first so "fringes" is not read as "fr" + "inges"
_UNITS = [("fringes", "fr"), ("fringe", "fr"), ("fr", "fr"), ("waves", "w"), ("wave", "w"),
          ("w", "w"), ("λ", "w"), ("nm", "nm"), ("um", "um"), ("µm", "um"), ("μm", "um")]


def _is_digit(ch: str) -> bool:
    """An ASCII digit: ``str.isdigit`` also takes superscripts such as '²', which no
    number in a tolerance may hold."""
    return len(ch) == 1 and "0" <= ch <= "9"


class ToleranceSyntaxError(SettingsError):
    """A tolerance that cannot be read; ``position`` is the 0-based offending character."""

    def __init__(self, text: str, position: int, problem: str):
        self.text = text
        self.position = position
        self.problem = problem
        super().__init__(
            f"tolerance {text!r}: at character {position + 1}: {problem} "
            f"(fix the --spec text; see 'flatsight measure --help' for the notation)")

    def caret(self) -> str:
        """Two lines: the tolerance and a caret under the offending character."""
        return f"{self.text}\n{' ' * self.position}^"


@dataclass(frozen=True)
class Limit:
    """One upper limit on one figure of a record.

    Attributes
    ----------
    name : str
        Where it came from: ``"A"``, ``"B"``, ``"C"``, ``"RMSi"`` ... or the plain name.
    label : str
        The figure in words, for tables.
    figure : str
        The record key it is compared with (``"power_nm"``).
    value : float
        The limit in ``unit``.
    unit : str
        ``"nm"``, ``"um"``, ``"fr"`` (fringes) or ``"w"`` (waves).
    wavelength_nm : float or None
        Wavelength of the fringes or waves; None means the record's test wavelength.
    absolute : bool
        Compare the magnitude of the figure (power), not its signed value.
    """

    name: str
    label: str
    figure: str
    value: float
    unit: str
    wavelength_nm: float | None
    absolute: bool = False

    def nm_per_unit(self, test_wavelength_nm: float) -> float:
        """Nanometres of height in one of this limit's units."""
        if self.unit == "nm":
            return 1.0
        if self.unit == "um":
            return 1000.0
        wl = self.wavelength_nm if self.wavelength_nm is not None else test_wavelength_nm
        return wl / 2.0 if self.unit == "fr" else wl


@dataclass(frozen=True)
class Tolerance:
    """A parsed tolerance: the text as written and its limits, all to be met."""

    text: str
    limits: tuple[Limit, ...]
    spec_wavelength_nm: float


@dataclass(frozen=True)
class LimitResult:
    """One limit judged against a record; heights in the limit's unit and in nm.

    ``uncertainty_nm`` is the expanded uncertainty (k = 2) of the measured figure, NaN
    when the record gives none; ``verdict`` is ``"pass"``, ``"fail"`` or
    ``"inconclusive"`` (the last only under the guarded rule).
    """

    limit: Limit
    limit_nm: float
    measured: float
    measured_nm: float
    margin: float
    margin_nm: float
    verdict: str
    uncertainty_nm: float = math.nan


@dataclass(frozen=True)
class SpecResult:
    """A tolerance judged against a record under a decision rule.

    ``verdict`` is ``"pass"`` only if every limit passes, ``"fail"`` if any fails, and
    ``"inconclusive"`` otherwise.
    """

    tolerance: Tolerance
    results: tuple[LimitResult, ...]
    test_wavelength_nm: float
    verdict: str
    decision: str = "simple"


class _Scanner:
    """A cursor over the tolerance text that knows how to complain about a character."""

    def __init__(self, text: str):
        self.text = text
        self.pos = 0

    def error(self, problem: str, pos: int | None = None) -> ToleranceSyntaxError:
        return ToleranceSyntaxError(self.text, self.pos if pos is None else pos, problem)

    def skip_ws(self) -> None:
        while self.pos < len(self.text) and self.text[self.pos].isspace():
            self.pos += 1

    def at_end(self) -> bool:
        return self.pos >= len(self.text)

    def peek(self, n: int = 1) -> str:
        return self.text[self.pos:self.pos + n]

    def found(self) -> str:
        return f"found {self.peek()!r}" if not self.at_end() else "the text ends there"

    def expect(self, ch: str, what: str | None = None) -> None:
        self.skip_ws()
        if self.peek() != ch:
            raise self.error(f"expected {what or repr(ch)}, {self.found()}")
        self.pos += 1

    def starts_rms(self) -> bool:
        return self.peek(3).lower() == "rms"

    def number(self) -> float:
        self.skip_ws()
        start = self.pos
        digits = seen_point = 0
        while not self.at_end():
            ch = self.text[self.pos]
            if _is_digit(ch):
                digits += 1
            elif ch == "." and not seen_point:
                seen_point = 1
            elif (ch == "," and not seen_point and digits and self.pos + 1 < len(self.text)
                  and _is_digit(self.text[self.pos + 1])):
                seen_point = 1  # decimal comma, as ISO drawings write it
            else:
                break
            self.pos += 1
        if not digits:
            if self.peek() == "-":
                raise self.error("a limit cannot be negative")
            raise self.error(f"expected a number, {self.found()}", start)
        value = float(self.text[start:self.pos].replace(",", "."))
        if not value < 1e9:  # also catches a number too long for a float (inf)
            raise self.error("the number is too large for a limit", start)
        return value

    def unit(self, *, required: bool) -> str | None:
        number_end = self.pos
        self.skip_ws()
        lowered = self.text[self.pos:].lower()
        for spelling, unit in _UNITS:
            if lowered.startswith(spelling):
                end = self.pos + len(spelling)
                if end < len(self.text) and (self.text[end].isalpha() or self.text[end] == "_"):
                    continue  # "nmx" is not "nm"
                self.pos = end
                return unit
        spaced = self.pos > number_end
        self.pos = number_end  # a word after a space may be the next clause ("RMSa")
        if self.peek().isalpha() and not spaced:
            raise self.error("unknown unit: use nm, um, fr (fringes) or w (waves)")
        if required:
            raise self.error("add a unit after the number: nm, um, fr (fringes) or w (waves)")
        return None

    def comparator(self) -> None:
        self.skip_ws()
        for op in ("<=", "≤", "<"):
            if self.text.startswith(op, self.pos):
                self.pos += len(op)
                return
        if self.peek() in (">", "="):
            raise self.error("only upper limits are allowed: write '<' or '<='")
        raise self.error(f"expected '<' or '<=', {self.found()}")


def _iso_value(sc: _Scanner, name: str, label: str, figure: str, wl: float,
               *, absolute: bool = False) -> Limit | None:
    """A, B or C: a dash (not toleranced) or a number in fringes unless a unit follows."""
    sc.skip_ws()
    if sc.peek() == "-":
        sc.pos += 1
        sc.skip_ws()
        if _is_digit(sc.peek()[:1]):
            raise sc.error("a limit cannot be negative", sc.pos - 1)
        return None
    value = sc.number()
    unit = sc.unit(required=False) or "fr"
    return Limit(name, label, figure, value, unit, wl, absolute)


def _rms_clause(sc: _Scanner, wl: float) -> Limit:
    """``RMSx < D``, D in waves of the spec wavelength unless a unit follows."""
    sc.skip_ws()
    sc.pos += 3
    kind = sc.peek().lower()
    if kind not in _RMS:
        raise sc.error(f"expected RMSt, RMSi or RMSa, {sc.found()}")
    sc.pos += 1
    figure, label = _RMS[kind]
    sc.comparator()
    value = sc.number()
    unit = sc.unit(required=False) or "w"
    return Limit(label, label, figure, value, unit, wl)


def _iso_item(sc: _Scanner, wl: float) -> list[Limit]:
    start = sc.pos
    sc.pos += 1  # the "3"
    sc.expect("/", "'/' after the code 3")
    sc.skip_ws()
    limits: list[Limit] = []
    if not sc.starts_rms():
        a = _iso_value(sc, "A", "power (sagitta error)", "power_nm", wl, absolute=True)
        sc.expect("(", "'(' before the irregularity B")
        b = _iso_value(sc, "B", "irregularity", "irregularity_nm", wl)
        sc.skip_ws()
        c = None
        if sc.peek() == "/":
            sc.pos += 1
            c_pos = sc.pos
            c = _iso_value(sc, "C", "rotationally symmetric irregularity",
                           "symmetric_irregularity_nm", wl)
            if c is not None and b is not None and (
                    c.value * c.nm_per_unit(wl) > b.value * b.nm_per_unit(wl) + 1e-9):
                raise sc.error("C (symmetric irregularity) cannot exceed B (irregularity), "
                               "since it is part of it", c_pos)
        sc.expect(")", "')' to close the irregularity")
        limits += [x for x in (a, b, c) if x is not None]
    sc.skip_ws()
    while sc.starts_rms():
        limits.append(_rms_clause(sc, wl))
        sc.skip_ws()
    if not limits:
        raise sc.error("this surface-form tolerance limits nothing (all dashes)", start)
    return limits


def _plain_item(sc: _Scanner, spec_wl: float | None) -> Limit:
    start = sc.pos
    while not sc.at_end() and (sc.text[sc.pos].isalpha() or sc.text[sc.pos] == "_"):
        sc.pos += 1
    name = sc.text[start:sc.pos].lower()
    if name not in _PLAIN:
        known = ", ".join(sorted(_PLAIN))
        what = f"unknown figure {name!r}" if name else f"expected a figure name, {sc.found()}"
        raise sc.error(f"{what}: use 3/A(B/C) or one of {known}", start)
    figure, label, absolute = _PLAIN[name]
    sc.comparator()
    value = sc.number()
    unit = sc.unit(required=True)
    fringe_wl = spec_wl if spec_wl is not None else DEFAULT_SPEC_WAVELENGTH_NM
    wl = fringe_wl if unit == "fr" else spec_wl  # waves: the test wavelength unless stated
    return Limit(name, label, figure, value, unit, wl, absolute)


def parse_tolerance(text: str, *, spec_wavelength_nm: float | None = None) -> Tolerance:
    """Read a tolerance written in ISO 10110-5 notation or as plain limits.

    Parameters
    ----------
    text : str
        For example ``"3/1(0.5/0.2)"``, ``"3/-(0.5) RMSi < 0.05"``, ``"pv<=63nm, rms<=0.02w"``.
    spec_wavelength_nm : float, optional
        The wavelength the drawing states; fringes (and ISO waves) are of 546.07 nm
        without it. With it, plain ``w`` limits are waves of it too.

    Returns
    -------
    Tolerance

    Raises
    ------
    ToleranceSyntaxError
        A :class:`SettingsError` whose message names the offending character.

    References
    ----------
    ISO 10110-5:2015, surface form tolerances (from memory); see the module docstring.

    Examples
    --------
    >>> [(l.name, l.value, l.unit) for l in parse_tolerance("3/2(0.5)").limits]
    [('A', 2.0, 'fr'), ('B', 0.5, 'fr')]
    """
    if spec_wavelength_nm is not None and not (
            math.isfinite(spec_wavelength_nm) and 100.0 <= spec_wavelength_nm <= 20000.0):
        raise SettingsError(
            f"spec wavelength {spec_wavelength_nm} nm is out of range: give it in nm "
            "(for example --spec-wavelength 632.8)")
    sc = _Scanner(text)
    iso_wl = spec_wavelength_nm if spec_wavelength_nm is not None else DEFAULT_SPEC_WAVELENGTH_NM
    limits: list[Limit] = []
    sc.skip_ws()
    if sc.at_end():
        raise sc.error("the tolerance is empty")
    while True:
        sc.skip_ws()
        ch = sc.peek()
        if ch == "3":
            limits += _iso_item(sc, iso_wl)
        elif _is_digit(ch):
            raise sc.error("an ISO 10110-5 surface-form tolerance starts with '3/' "
                           "(code 3 is surface form)")
        elif sc.starts_rms() and sc.peek(4)[3:].lower() in _RMS and (
                not sc.peek(5)[4:].isalpha()):
            limits.append(_rms_clause(sc, iso_wl))
        else:
            limits.append(_plain_item(sc, spec_wavelength_nm))
        sc.skip_ws()
        if sc.at_end():
            break
        if sc.peek() not in ",;":
            raise sc.error(f"expected ',' between limits, {sc.found()}")
        sc.pos += 1
        sc.skip_ws()
        if sc.at_end():
            raise sc.error("a limit is missing after the last separator")
    return Tolerance(text=text, limits=tuple(limits), spec_wavelength_nm=iso_wl)


def _measured_nm(record: Mapping, figure: str) -> float:
    value = record.get(figure)
    try:
        return float(value) if value is not None else math.nan
    except (TypeError, ValueError):
        return math.nan


def _uncertainty_nm(record: Mapping, figure: str) -> float:
    section = record.get("uncertainty")
    if not isinstance(section, Mapping):
        return math.nan
    value = _measured_nm(section, figure)
    return value if value >= 0 else math.nan


def judge(measured_nm: float, limit_nm: float, uncertainty_nm: float, decision: str) -> str:
    """One limit's verdict under a decision rule (see the module docstring).

    Examples
    --------
    >>> judge(50.0, 54.6, 3.0, "simple"), judge(50.0, 54.6, 3.0, "guarded")
    ('pass', 'pass')
    >>> judge(53.0, 54.6, 3.0, "guarded"), judge(58.0, 54.6, 3.0, "guarded")
    ('inconclusive', 'fail')
    """
    if not (math.isfinite(measured_nm) and math.isfinite(limit_nm)):
        return "fail"
    if decision == "simple":
        return "pass" if measured_nm <= limit_nm else "fail"
    if decision != "guarded":
        raise SettingsError(f"unknown decision rule {decision!r}: use simple or guarded")
    if not math.isfinite(uncertainty_nm):
        return "inconclusive"  # without U neither conformity nor its absence is proven
    if measured_nm - uncertainty_nm > limit_nm:
        return "fail"
    return "pass" if measured_nm + uncertainty_nm <= limit_nm else "inconclusive"


def evaluate(spec: Tolerance, record: Mapping, *, decision: str = "simple") -> SpecResult:
    """Judge a measurement record (the ``measure --json`` document) against a tolerance.

    Parameters
    ----------
    spec : Tolerance
        From :func:`parse_tolerance`.
    record : mapping
        Needs ``wavelength_nm`` and the figures the limits name (``power_nm`` ...); the
        guarded rule also reads their expanded uncertainties from ``uncertainty``.
    decision : {"simple", "guarded"}
        The decision rule (ISO 14253-1; see the module docstring).

    Returns
    -------
    SpecResult
        Every limit with its measured value, uncertainty and margin, and the verdict.

    References
    ----------
    ISO 14253-1:2017; ILAC-G8:09/2019 (both from memory).
    """
    if decision not in DECISION_RULES:
        raise SettingsError(f"unknown decision rule {decision!r}: use simple or guarded")
    test_wl = float(record.get("wavelength_nm") or math.nan)
    results = []
    for lim in spec.limits:
        per_unit = lim.nm_per_unit(test_wl)
        measured_nm = _measured_nm(record, lim.figure)
        if lim.absolute:
            measured_nm = abs(measured_nm)
        limit_nm = lim.value * per_unit
        u_nm = _uncertainty_nm(record, lim.figure)
        results.append(LimitResult(
            limit=lim,
            limit_nm=limit_nm,
            measured=measured_nm / per_unit,
            measured_nm=measured_nm,
            margin=lim.value - measured_nm / per_unit,
            margin_nm=limit_nm - measured_nm,
            verdict=judge(measured_nm, limit_nm, u_nm, decision),
            uncertainty_nm=u_nm,
        ))
    verdicts = {r.verdict for r in results}
    verdict = ("fail" if "fail" in verdicts
               else "inconclusive" if "inconclusive" in verdicts else "pass")
    return SpecResult(tolerance=spec, results=tuple(results), test_wavelength_nm=test_wl,
                      verdict=verdict, decision=decision)


def _json_number(x: float) -> float | None:
    return round(float(x), 6) if math.isfinite(x) else None


def spec_section(result: SpecResult) -> dict:
    """The ``spec`` section of a record's JSON: the tolerance, each limit, the verdict."""
    return {
        "tolerance": result.tolerance.text,
        "notation": "ISO 10110-5:2015 as read by Flatsight",
        "spec_wavelength_nm": result.tolerance.spec_wavelength_nm,
        "decision_rule": result.decision,
        "decision_rule_text": DECISION_RULES[result.decision],
        "verdict": result.verdict,
        "limits": [
            {
                "name": r.limit.name,
                "label": r.limit.label,
                "figure": r.limit.figure,
                "compared": "magnitude" if r.limit.absolute else "value",
                "limit": r.limit.value,
                "unit": r.limit.unit,
                "unit_wavelength_nm": (
                    None if r.limit.unit in ("nm", "um")
                    else (r.limit.wavelength_nm if r.limit.wavelength_nm is not None
                          else _json_number(result.test_wavelength_nm))),
                "limit_nm": _json_number(r.limit_nm),
                "measured": _json_number(r.measured),
                "measured_nm": _json_number(r.measured_nm),
                "margin": _json_number(r.margin),
                "margin_nm": _json_number(r.margin_nm),
                "uncertainty_nm": _json_number(r.uncertainty_nm),
                "uncertainty": _json_number(r.uncertainty_nm / (r.limit_nm / r.limit.value))
                if r.limit.value and math.isfinite(r.limit_nm) and r.limit_nm else None,
                "verdict": r.verdict,
            }
            for r in result.results
        ],
    }
