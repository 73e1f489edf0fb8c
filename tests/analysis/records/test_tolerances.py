"""Tolerance notation and pass/fail: worked examples of ISO 10110-5 and plain limits.

The ISO examples follow the notation of ISO 10110-5:2015 (the 2007 edition writes the same
forms) as remembered, not checked clause by clause: marked "ISO 10110-5, from memory".
One fringe = half a wavelength of height (common practice; 273.035 nm at the mercury e
line 546.07 nm, 316.4 nm at He-Ne 632.8 nm).
"""

from __future__ import annotations

import math
import random
import re

import pytest
from flatsight.analysis.errors import SettingsError
from flatsight.analysis.records.tolerances import (
    ToleranceSyntaxError,
    evaluate,
    parse_tolerance,
    spec_section,
)

FRINGE_546 = 546.07 / 2  # nm, common practice: fringe = lambda/2 in double-pass reflection
FRINGE_633 = 632.8 / 2


def record(**figures):
    """A record dict shaped like ``measure --json`` with only what a tolerance reads."""
    base = {
        "photo": "BW-FL-0412.png",
        "wavelength_nm": 632.8,
        "pv_nm": 40.0,
        "rms_nm": 8.0,
        "pvr_nm": 42.0,
        "power_nm": -30.0,
        "irregularity_nm": 20.0,
        "astigmatism_nm": 12.0,
        "symmetric_irregularity_nm": 5.0,
        "rms_irregularity_nm": 4.0,
        "rms_asymmetric_nm": 3.5,
    }
    base.update(figures)
    return base


def limits_nm(text, *, test_wavelength_nm=632.8, **kw):
    tol = parse_tolerance(text, **kw)
    return [
        (lim.name, lim.figure, pytest.approx(lim.value * lim.nm_per_unit(test_wavelength_nm)))
        for lim in tol.limits
    ]


# --- ISO 10110-5 worked examples (ISO 10110-5, from memory) --------------------------------


def test_full_form_a_b_c_in_fringes_at_546():
    # "3/2(1/0.5)": sag error 2 fringes, irregularity 1 fringe, of which 0.5 rotationally
    # symmetric; fringes at 546.07 nm when no wavelength is stated (ISO 10110-5, from memory)
    assert limits_nm("3/2(1/0.5)") == [
        ("A", "power_nm", pytest.approx(2 * FRINGE_546)),
        ("B", "irregularity_nm", pytest.approx(FRINGE_546)),
        ("C", "symmetric_irregularity_nm", pytest.approx(0.5 * FRINGE_546)),
    ]
    assert FRINGE_546 == pytest.approx(273.035)  # half of 546.07 nm (ISO 10110-5's fringe)


def test_dash_means_not_toleranced():
    # "3/-(0.5)": only the irregularity toleranced; "3/5(-)": only the power (ISO 10110-5,
    # from memory)
    assert limits_nm("3/-(0.5)") == [("B", "irregularity_nm", pytest.approx(0.5 * FRINGE_546))]
    assert limits_nm("3/5(-)") == [("A", "power_nm", pytest.approx(5 * FRINGE_546))]
    assert limits_nm("3/1(0.5/-)") == limits_nm("3/1(0.5)")


def test_stated_wavelength_changes_the_fringe():
    # a drawing that states 632.8 nm counts fringes of 316.4 nm (common practice)
    assert limits_nm("3/1(0.25)", spec_wavelength_nm=632.8) == [
        ("A", "power_nm", pytest.approx(FRINGE_633)),
        ("B", "irregularity_nm", pytest.approx(0.25 * FRINGE_633)),
    ]


def test_rms_forms_in_waves_of_the_spec_wavelength():
    # "3/2(0.5) RMSi < 0.05": D in units of the wavelength (ISO 10110-5, from memory)
    assert limits_nm("3/2(0.5) RMSi < 0.05") == [
        ("A", "power_nm", pytest.approx(2 * FRINGE_546)),
        ("B", "irregularity_nm", pytest.approx(0.5 * FRINGE_546)),
        ("RMSi", "rms_irregularity_nm", pytest.approx(0.05 * 546.07)),
    ]
    assert limits_nm("3/-(-) RMSt < 0.1") == [("RMSt", "rms_nm", pytest.approx(54.607))]
    assert limits_nm("3/RMSa<0.02") == [("RMSa", "rms_asymmetric_nm", pytest.approx(10.9214))]
    # two RMS clauses after one PV form
    assert [n for n, *_ in limits_nm("3/1(0.5) RMSi<0.05 RMSa<0.03")] == ["A", "B", "RMSi", "RMSa"]


def test_decimal_comma_as_drawings_write_it():
    # ISO drawings often use the decimal comma (common practice)
    assert limits_nm("3/0,5(0,2)") == limits_nm("3/0.5(0.2)")
    # ... but a comma before a letter still separates limits
    assert len(parse_tolerance("3/1(0,5),pv<=63nm").limits) == 3


def test_units_may_be_written_explicitly():
    assert limits_nm("3/100nm(0.05um)") == [
        ("A", "power_nm", pytest.approx(100.0)),
        ("B", "irregularity_nm", pytest.approx(50.0)),
    ]


# --- plain limits ---------------------------------------------------------------------------


def test_plain_limits_and_their_wavelengths():
    # lambda/10 PV at 632.8 nm is 63.28 nm (arithmetic; the usual grade, common practice)
    assert limits_nm("pv<=0.1w") == [("pv", "pv_nm", pytest.approx(63.28))]
    # waves follow the test wavelength unless a spec wavelength is stated
    assert limits_nm("pv<=0.1w", test_wavelength_nm=546.07) == [
        ("pv", "pv_nm", pytest.approx(54.607))
    ]
    assert limits_nm("pv<=0.1w", spec_wavelength_nm=546.07) == [
        ("pv", "pv_nm", pytest.approx(54.607))
    ]
    # fringes are at 546.07 nm unless stated, whatever the test wavelength
    assert limits_nm("power<=2fr, irregularity<=0.5fr") == [
        ("power", "power_nm", pytest.approx(2 * FRINGE_546)),
        ("irregularity", "irregularity_nm", pytest.approx(0.5 * FRINGE_546)),
    ]
    assert limits_nm("rms<=0.02w; pvr<=63nm ;astigmatism <= 30 nm") == [
        ("rms", "rms_nm", pytest.approx(0.02 * 632.8)),
        ("pvr", "pvr_nm", pytest.approx(63.0)),
        ("astigmatism", "astigmatism_nm", pytest.approx(30.0)),
    ]


def _reference_parse(text):
    """A slow obvious reading of the plain "3/A(B/C)" case with a regular expression."""
    m = re.fullmatch(r"3/([\d.]+|-)\(([\d.]+|-)(?:/([\d.]+|-))?\)", text)
    out = []
    for name, g in zip("ABC", m.groups(), strict=True):
        if g not in (None, "-"):
            out.append((name, float(g) * FRINGE_546))
    return out


def test_random_iso_forms_agree_with_a_regex_reading():
    rng = random.Random(7)
    for _ in range(300):
        a, b, c = (rng.choice(["-", f"{rng.uniform(0, 10):.3g}"]) for _ in range(3))
        if b != "-" and c != "-" and float(c) > float(b):
            b, c = c, b
        if a == b == "-":
            a = "1"
        text = f"3/{a}({b}/{c})" if rng.random() < 0.5 else f"3/{a}({b})"
        tol = parse_tolerance(text)
        got = [(lim.name, lim.value * lim.nm_per_unit(632.8)) for lim in tol.limits]
        want = _reference_parse(text)
        assert [n for n, _ in got] == [n for n, _ in want], text
        assert [v for _, v in got] == pytest.approx([v for _, v in want]), text


# --- malformed tolerances point at the character --------------------------------------------


@pytest.mark.parametrize(
    ("text", "position", "words"),
    [
        ("3/1(0.5", 7, "')'"),
        ("3/1 0.5)", 4, "'('"),
        ("3/1(0.5/0.2", 11, "')'"),
        ("4/1(1)", 0, "'3/'"),
        ("3/1(0.2/0.5)", 8, "cannot exceed"),
        ("pv<63", 5, "unit"),
        ("pv<=63mm", 6, "unknown unit"),
        ("pv>=3nm", 2, "upper limits"),
        ("flatness<=3nm", 0, "unknown figure"),
        ("3/1(1) RMSq<0.1", 10, "RMSt, RMSi or RMSa"),
        ("3/1(1) x", 7, "','"),
        ("pv<=63nm,", 9, "missing"),
        ("3/-1(2)", 2, "negative"),
        ("3/-(-)", 0, "limits nothing"),
        ("   ", 3, "empty"),
        ("3/a(1)", 2, "number"),
    ],
)
def test_malformed_tolerance_names_the_character(text, position, words):
    with pytest.raises(ToleranceSyntaxError) as info:
        parse_tolerance(text)
    err = info.value
    assert isinstance(err, SettingsError)  # the CLI maps it to the usage-error exit code
    assert err.position == position
    assert f"at character {position + 1}:" in str(err)
    assert words in str(err)
    assert "\n" not in str(err)  # one line for the operator
    assert err.caret().splitlines()[1] == " " * position + "^"


def test_out_of_range_spec_wavelength():
    with pytest.raises(SettingsError, match="spec wavelength"):
        parse_tolerance("3/1(1)", spec_wavelength_nm=0.5)


# --- evaluation -----------------------------------------------------------------------------


def _reference_verdict(limit_nm, measured_nm):
    return "pass" if abs(measured_nm) <= limit_nm else "fail"


def test_power_is_compared_by_magnitude_with_margins():
    tol = parse_tolerance("3/1(0.1)")
    concave = evaluate(tol, record(power_nm=-300.0, irregularity_nm=20.0))
    a, b = concave.results
    assert a.verdict == "fail" and concave.verdict == "fail"  # |-300| > 273.035
    assert a.measured_nm == pytest.approx(300.0)
    assert a.margin_nm == pytest.approx(FRINGE_546 - 300.0)
    assert a.margin == pytest.approx(1 - 300.0 / FRINGE_546)
    assert b.verdict == "pass" and b.margin_nm == pytest.approx(0.1 * FRINGE_546 - 20.0)
    convex = evaluate(tol, record(power_nm=+200.0, irregularity_nm=20.0))
    assert convex.verdict == "pass"


def test_limit_equal_to_value_passes_and_nan_fails():
    tol = parse_tolerance("pv<=40nm")
    assert evaluate(tol, record(pv_nm=40.0)).verdict == "pass"
    assert evaluate(tol, record(pv_nm=40.001)).verdict == "fail"
    assert evaluate(tol, record(pv_nm=float("nan"))).verdict == "fail"
    missing = record()
    del missing["pv_nm"]
    assert evaluate(tol, missing).verdict == "fail"


def test_random_records_against_a_reference_verdict():
    rng = random.Random(11)
    tol = parse_tolerance("3/0.5(0.2/0.1) RMSi<0.02, pvr<=0.1w")
    for _ in range(200):
        rec = record(
            power_nm=rng.uniform(-200, 200),
            irregularity_nm=rng.uniform(0, 80),
            symmetric_irregularity_nm=rng.uniform(0, 40),
            rms_irregularity_nm=rng.uniform(0, 15),
            pvr_nm=rng.uniform(0, 90),
        )
        expected = [
            _reference_verdict(0.5 * FRINGE_546, rec["power_nm"]),
            _reference_verdict(0.2 * FRINGE_546, rec["irregularity_nm"]),
            _reference_verdict(0.1 * FRINGE_546, rec["symmetric_irregularity_nm"]),
            _reference_verdict(0.02 * 546.07, rec["rms_irregularity_nm"]),
            _reference_verdict(0.1 * 632.8, rec["pvr_nm"]),
        ]
        result = evaluate(tol, rec)
        assert [r.verdict for r in result.results] == expected
        assert result.verdict == ("pass" if set(expected) == {"pass"} else "fail")


def test_spec_section_is_json_ready():
    import json

    result = evaluate(
        parse_tolerance("3/1(0.5) RMSi<0.05, pv<=0.1w"), record(pv_nm=70.0, power_nm=-100.0)
    )
    section = spec_section(result)
    json.dumps(section, allow_nan=False)
    assert section["verdict"] == "fail"
    assert section["tolerance"] == "3/1(0.5) RMSi<0.05, pv<=0.1w"
    by_name = {x["name"]: x for x in section["limits"]}
    assert by_name["A"]["compared"] == "magnitude"
    assert by_name["A"]["measured_nm"] == pytest.approx(100.0)
    assert by_name["pv"]["unit_wavelength_nm"] == pytest.approx(632.8)
    assert by_name["pv"]["verdict"] == "fail"
    assert by_name["pv"]["margin_nm"] == pytest.approx(63.28 - 70.0)
    assert math.isclose(by_name["B"]["limit_nm"], 0.5 * FRINGE_546, rel_tol=1e-6)


@pytest.mark.parametrize("text", ["3/1(0.25)", "3/-(0.1/0.05)", "3/0.5(-)", "3/-(-) RMSi<0.02",
                                  "3/-(-) RMSa<0.01", "pv<=40nm, pvr<=0.1w, rms<=10nm"])
def test_every_limit_form_passes_at_its_limit_and_fails_just_beyond(text):
    # a tolerance is a maximum permissible value: a figure equal to it conforms under the
    # simple rule (ISO 14253-1's specification zone includes its limit, from memory)
    tol = parse_tolerance(text)
    zero = {k: 0.0 for k in ("pv_nm", "rms_nm", "pvr_nm", "power_nm", "irregularity_nm",
                             "symmetric_irregularity_nm", "rms_irregularity_nm",
                             "rms_asymmetric_nm", "astigmatism_nm")}
    limits = evaluate(tol, record(**zero)).results
    assert limits
    at = record(**zero)
    for r in limits:
        at[r.limit.figure] = r.limit_nm
    assert evaluate(tol, at).verdict == "pass"
    for r in limits:
        beyond = dict(at)
        beyond[r.limit.figure] = r.limit_nm * (1 + 1e-9) + 1e-9
        judged = evaluate(tol, beyond)
        assert judged.verdict == "fail", r.limit.figure
        assert [x.verdict for x in judged.results].count("fail") == 1
