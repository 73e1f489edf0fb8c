"""The options every tolerance-judging command shares: decision rule, stated uncertainties,
exit statuses and their order of severity.

The decision rules are ISO 14253-1:2017's and ILAC-G8:09/2019's (from memory): simple
acceptance, and a guard band of the expanded uncertainty U (k = 2, JCGM 100:2008 6.2)
with an inconclusive zone between. The exit statuses and their order are the project's
own, as the README's exit table and ``flatsight measure --help`` document them.
"""

from __future__ import annotations

import argparse
import itertools

import pytest
from flatsight.tui import cmd_measure, record_options
from flatsight.tui.cli import main
from flatsight.tui.options import (
    STATUS_SEVERITY,
    TOLERANCE_EXIT_CODES,
    parse_uncertainty,
    worst_status,
)


def test_severity_order_is_130_4_3_2_1_5_0():
    # the order the README's exit table states: an inconclusive verdict (5) is less
    # severe than a fail (1), and anything that went wrong (2, 3, 4, 130) outranks both
    assert STATUS_SEVERITY == (0, 5, 1, 2, 3, 4, 130)
    for a, b in itertools.combinations(STATUS_SEVERITY, 2):  # a is less severe than b
        assert worst_status(a, b) == b and worst_status(b, a) == b
    assert worst_status(0, 5, 0, 5) == 5
    assert worst_status(5, 1, 5) == 1
    assert worst_status(1, 5, 2) == 2
    assert worst_status(0) == 0


def test_help_of_measure_lists_status_5_and_the_order(capsys):
    assert main(["measure", "--help"]) == 0
    out = capsys.readouterr().out
    for line in ("5  inconclusive under --decision guarded", "130, 4, 3, 2, 1, 5, 0",
                 "--decision {simple,guarded}", "--wavelength-uncertainty NM",
                 "--reference-uncertainty NM"):
        assert line in out, line
    assert TOLERANCE_EXIT_CODES.splitlines()[0] in out


@pytest.mark.parametrize("command", ["stack", "absolute"])
def test_commands_without_a_tolerance_list_no_tolerance_statuses(capsys, command):
    assert main([command, "--help"]) == 0
    out = capsys.readouterr().out
    assert "exit status:" in out
    assert "out of tolerance" not in out and "inconclusive" not in out


def test_inspect_lists_its_own_exit_statuses(capsys):
    # the station's verdicts are on its screen and in its log, not in its exit status
    assert main(["inspect", "--help"]) == 0
    out = capsys.readouterr().out
    assert "0  the station was closed" in out and "out of tolerance" not in out


@pytest.mark.parametrize("text, value", [("0", 0.0), ("2.5", 2.5), ("6nm", 6.0),
                                         (" 1000 ", 1000.0)])
def test_uncertainties_read(text, value):
    assert parse_uncertainty(text) == value


@pytest.mark.parametrize("text", ["-1", "1001", "nan", "inf", "two", ""])
def test_bad_uncertainties_are_refused(text):
    with pytest.raises(ValueError):
        parse_uncertainty(text)


@pytest.mark.parametrize("command", ["measure", "watch", "inspect"])
@pytest.mark.parametrize("option, value, says", [
    ("--decision", "lenient", "invalid choice: 'lenient'"),
    ("--wavelength-uncertainty", "-0.5", "out of range (0 to 1000 nm)"),
    ("--reference-uncertainty", "x", "is not an uncertainty in nm"),
])
def test_bad_values_are_one_line_usage_errors(capsys, tmp_path, command, option, value, says):
    target = tmp_path / ("x.png" if command != "watch" else "")
    status = main([command, str(target), "-w", "hene", option, value])
    err = capsys.readouterr().err
    assert status == 2
    assert len(err.strip().splitlines()) == 1 and "Traceback" not in err
    assert err.startswith(f"flatsight {command}: error: argument {option}") and says in err


def _args(*argv):
    p = argparse.ArgumentParser()
    record_options.add_record_options(p)
    return p.parse_args(list(argv))


def _judge(*argv, pv_nm=12.0, u_nm=3.0):
    record = {"photo": "BW-FL-0412.png", "wavelength_nm": 632.8, "pv_nm": pv_nm}
    if u_nm is not None:
        record["uncertainty"] = {"pv_nm": u_nm}
    out, status = record_options.finish_record(_args(*argv, "--no-log"), record)
    return out["spec"], status


@pytest.mark.parametrize("limit, verdict, status", [
    ("16nm", "pass", 0),  # 12 + 3 <= 16
    ("15nm", "pass", 0),  # 12 + 3 == 15: a value equal to its limit passes
    ("14nm", "inconclusive", 5),  # 12 + 3 > 14 but 12 - 3 <= 14
    ("9nm", "inconclusive", 5),  # 12 - 3 == 9: not beyond the limit
    ("8nm", "fail", 1),  # 12 - 3 > 8
])
def test_guarded_rule_and_its_exit_status(limit, verdict, status):
    # ISO 14253-1 / ILAC G8 guarded acceptance with the guard band w = U (from memory)
    spec, got = _judge("--spec", f"pv<={limit}", "--decision", "guarded")
    assert (spec["verdict"], got) == (verdict, status)
    assert spec["decision_rule"] == "guarded" and "inconclusive" in spec["decision_rule_text"]
    assert spec["limits"][0]["uncertainty_nm"] == 3.0


def test_simple_rule_is_the_default_and_ignores_u():
    spec, status = _judge("--spec", "pv<=14nm")
    assert spec["decision_rule"] == "simple" and (spec["verdict"], status) == ("pass", 0)


def test_guarded_without_an_uncertainty_is_inconclusive():
    # without U neither conformity nor non-conformity is proven (ILAC G8, from memory)
    spec, status = _judge("--spec", "pv<=100nm", "--decision", "guarded", u_nm=None)
    assert (spec["verdict"], status) == ("inconclusive", 5)


PRESETS = """
# Brindlewick Optical Works (demo data)
[presets.bench-2-hene]
wavelength_nm = 632.8
tolerance = "pv<=14nm"
decision = "guarded"
wavelength_uncertainty_nm = 0.05
reference_uncertainty_nm = 6
"""


def test_a_preset_sets_the_rule_and_the_uncertainties(tmp_path):
    presets = tmp_path / "presets.toml"
    presets.write_text(PRESETS, encoding="utf-8")
    args = record_options.apply_preset(_args("--presets", str(presets), "--preset",
                                             "bench-2-hene", "--no-log"))
    assert args.decision == "guarded"
    assert record_options.uncertainty_settings(args) == {
        "wavelength_uncertainty_nm": 0.05, "reference_uncertainty_nm": 6.0}
    out, status = record_options.finish_record(args, {
        "wavelength_nm": 632.8, "pv_nm": 12.0, "uncertainty": {"pv_nm": 3.0}})
    assert out["spec"]["verdict"] == "inconclusive" and status == 5
    # the measure command hands them to the measurement's settings
    args.wavelength, args.aperture, args.exclude = 632.8, None, []
    args.terms = args.diameter = args.report_wavelength = None
    args.invert = False
    settings = cmd_measure._settings(args)
    assert settings.wavelength_uncertainty_nm == 0.05
    assert settings.reference_uncertainty_nm == 6.0
    # the command line wins over the preset
    args = record_options.apply_preset(_args(
        "--presets", str(presets), "--preset", "bench-2-hene", "--decision", "simple",
        "--reference-uncertainty", "0"))
    assert args.decision == "simple" and args.reference_uncertainty == 0.0


def test_no_option_and_no_preset_means_simple_and_zero():
    args = _args()
    assert record_options.decision_from_args(args) == "simple"
    assert record_options.uncertainty_settings(args) == {
        "wavelength_uncertainty_nm": 0.0, "reference_uncertainty_nm": 0.0}


def test_the_readme_exit_table_says_the_same():
    from pathlib import Path

    readme = (Path(__file__).resolve().parents[2] / "README.md").read_text(encoding="utf-8")
    table = readme.split("### Exit status", 1)[1].split("\n## ", 1)[0]
    statuses = {int(line.split("|")[1]) for line in table.splitlines()
                if line.startswith("| ") and line.split("|")[1].strip().isdigit()}
    assert statuses == set(STATUS_SEVERITY)
    assert "130, 4, 3, 2, 1, 5, 0" in table
