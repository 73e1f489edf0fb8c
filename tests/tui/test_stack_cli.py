"""Tests of the `stack` and `absolute` commands and the --average / --reference glue."""

from __future__ import annotations

import argparse
import json

import numpy as np
import pytest
from flatsight.analysis.synthetic import SyntheticSurface, make_fringe_photo, write_photo
from flatsight.analysis.zernike import noll_to_nm
from flatsight.tui import cmd_absolute, cmd_stack
from flatsight.tui.multi_options import add_multi_options, combine, combine_with_sections


def parser_with(*modules):
    p = argparse.ArgumentParser(prog="flatsight")
    sub = p.add_subparsers(dest="command")
    for mod in modules:
        mod.add_parser(sub)
    return p


def run_cli(argv, capsys, *modules):
    args = parser_with(*modules).parse_args(argv)
    code = args.run(args)
    out, err = capsys.readouterr()
    return code, out, err


# ---- stack ------------------------------------------------------------------------------------


def write_sequence(
    folder, surface, steps_deg, *, shape=(240, 320), wavelength=632.8, prefix="BW-FL-0412_f"
):
    """Frames of a widening gap (phase = 4 pi gap / lambda + delta; a high point narrows the
    gap), 16-bit PNG, with uneven light, a soft edge and noise."""
    rng = np.random.default_rng(5)
    y, x = np.mgrid[0 : shape[0], 0 : shape[1]].astype(float)
    cx, cy, r = 165.0, 118.0, 95.0
    xu, yu = (x - cx) / r, (cy - y) / r
    gap = 2 * np.pi * 0.8 * xu - 4 * np.pi * surface.height_nm(xu, yu) / wavelength
    disk = 0.5 * (1 - np.tanh((np.hypot(xu, yu) - 1) * r / 2))
    paths = []
    for k, d in enumerate(steps_deg):
        img = disk * (0.55 + 0.1 * xu) * (1 + 0.7 * np.cos(gap + np.radians(d))) + 0.02
        img = np.clip(img + rng.normal(0, 0.004, shape), 0, 1)
        path = folder / f"{prefix}{k + 1}.png"
        write_photo(img, path, bit_depth=16)
        paths.append(str(path))
    return paths


def test_stack_json_is_the_measure_document_plus_the_phase_fields(tmp_path, capsys):
    surface = SyntheticSurface(zernike_nm={4: -30.0, 6: 10.0, 7: 5.0})
    step = 86.0  # a shifter a little off its nominal 90 deg
    paths = write_sequence(tmp_path, surface, [k * step for k in range(-2, 3)])
    code, out, err = run_cli(
        ["stack", *paths, "--wavelength", "hene", "--step", "90", "--json"], capsys, cmd_stack
    )
    assert code == 0, err
    rec = json.loads(out)
    assert rec["algorithm"] == "hariharan"
    assert rec["step_found_deg"] == pytest.approx(step, abs=1.0)
    assert rec["frames"] == paths
    for key in (
        "pv_nm",
        "rms_nm",
        "pvr_nm",
        "power_nm",
        "irregularity_nm",
        "aperture",
        "zernike",
        "quality",
        "settings",
        "warnings",
    ):
        assert key in rec
    z = rec["zernike"]["coefficients_nm"]
    assert z[3] == pytest.approx(-30.0, abs=1.5)  # Noll 4, 1.5 nm = lambda / 400
    assert z[5] == pytest.approx(10.0, abs=1.5)
    assert rec["power_nm"] > 0  # convex reads positive (DEVELOPERS.md, "Sign")


def test_stack_table_and_a_list_of_steps(tmp_path, capsys):
    surface = SyntheticSurface(zernike_nm={4: 20.0})
    steps = [0.0, 60.0, 120.0, 180.0, 240.0, 300.0]
    paths = write_sequence(tmp_path, surface, steps)
    code, out, err = run_cli(
        ["stack", *paths, "-w", "632.8", "--step", ",".join(map(str, steps))], capsys, cmd_stack
    )
    assert code == 0, err
    assert "least-squares" in out and "power" in out


def test_stack_keeps_its_figures_when_the_map_cannot_be_written(tmp_path, capsys):
    # issue 9: a --save-map failure cost the result. A "folder" that is a regular file
    # stops root too (ENOTDIR), unlike a read-only folder
    paths = write_sequence(tmp_path, SyntheticSurface(zernike_nm={4: 20.0}), [0, 90, 180, 270])
    blocker = tmp_path / "maps"
    blocker.write_text("a file where the maps folder should be")
    code, out, err = run_cli(["stack", *paths, "-w", "hene", "--json", "--save-map",
                              str(blocker / "seq.npy")], capsys, cmd_stack)
    assert code == 2 and err.count("\n") == 1 and "Traceback" not in err
    assert "cannot write the height map" in err and str(blocker / "seq.npy") in err
    record = json.loads(out)
    assert record["power_nm"] < 0 and "height_map_path" not in record  # a4 = +20: concave


def test_stack_errors_are_one_line_with_documented_codes(tmp_path, capsys):
    surface = SyntheticSurface(zernike_nm={4: 20.0})
    paths = write_sequence(tmp_path, surface, [0, 90, 180, 270])
    code, _, err = run_cli(
        ["stack", *paths[:3], str(tmp_path / "missing.png"), "-w", "hene"], capsys, cmd_stack
    )
    assert code == 2 and "missing.png" in err and err.count("\n") == 1
    small = tmp_path / "small.png"
    write_photo(np.full((100, 120), 0.5), small)
    code, _, err = run_cli(["stack", *paths[:3], str(small), "-w", "hene"], capsys, cmd_stack)
    assert code == 2 and "one camera setting" in err and err.count("\n") == 1
    flat = []
    for k in range(4):
        f = tmp_path / f"flat{k}.png"
        write_photo(np.full((120, 160), 0.4), f)
        flat.append(str(f))
    code, _, err = run_cli(["stack", *flat, "-w", "hene"], capsys, cmd_stack)
    assert code == 3 and "no fringe modulation" in err and err.count("\n") == 1
    code, _, err = run_cli(["stack", *paths, "-w", "hene", "--step", "0,90"], capsys, cmd_stack)
    assert code == 2 and "2 shifts for 4 frames" in err
    assert "Traceback" not in err


def test_stack_takes_an_outline_for_its_aperture(tmp_path, capsys):
    # a round part with a flat ground on it, given as cut:CX,CY,R;ANGLE,DIST (the frames'
    # disk has centre 165,118 and radius 95; the flat cuts it 70 px right of the centre)
    paths = write_sequence(tmp_path, SyntheticSurface(zernike_nm={4: 20.0}), [0, 90, 180, 270])
    code, out, err = run_cli(["stack", *paths, "-w", "hene", "--json",
                              "--aperture", "cut:165,118,95;0,70"], capsys, cmd_stack)
    assert code == 0, err
    record = json.loads(out)
    assert record["aperture"]["shape"]["kind"] == "cut"
    assert record["aperture"]["shape"]["flats"] == [{"angle_deg": 0.0, "distance_px": 70.0}]
    code, out, err = run_cli(["stack", *paths, "-w", "hene",
                              "--aperture", "cut:165,118,95;0,70"], capsys, cmd_stack)
    assert code == 0 and "circle 190 px, 1 flat at (165.0, 118.0)" in out
    # a flat beyond the rim is a usage error: one line, exit 2 (the command line's own
    # parser, as an operator meets it)
    from flatsight.tui.cli import main

    code = main(["stack", *paths, "-w", "hene", "--aperture", "cut:165,118,95;0,120"])
    _, err = capsys.readouterr()
    assert code == 2 and err.count("\n") == 1 and "Traceback" not in err
    assert "less than the radius" in err


# ---- absolute ---------------------------------------------------------------------------------


def parity(j):
    """Under x -> -x, t -> pi - t: cos m t -> (-1)^m cos m t, sin m t -> (-1)^(m+1) sin m t.

    (The identities cos m(pi - t) and sin m(pi - t), expanded; Noll's terms, JOSA 66(3),
    207, 1976, carry cos m t or sin m t.)
    """
    _, m = noll_to_nm(j)
    return (-1) ** abs(m) if m >= 0 else (-1) ** (abs(m) + 1)


FLAT_TERMS = {
    "A": {4: -25.0, 5: 8.0, 6: 12.0, 7: -6.0, 8: 5.0, 11: 4.0},
    "B": {4: 15.0, 5: -6.0, 6: -5.0, 7: 4.0, 8: -7.0, 9: 3.0},
    "C": {4: 10.0, 5: 5.0, 6: 7.0, 8: 3.0, 10: -4.0, 11: -3.0},
}


def pair_surface(first, second):
    """X(x, y) + Y(-x, y), written out with the flip parity of each Noll term."""
    terms = dict(FLAT_TERMS[first])
    for j, c in FLAT_TERMS[second].items():
        terms[j] = terms.get(j, 0.0) + parity(j) * c
    return SyntheticSurface(zernike_nm=terms)


def test_absolute_solves_the_even_terms_and_saves_maps_keeping_a_flat_whose_map_fails(
        tmp_path, capsys):
    photos = {}
    for k, (x, y) in enumerate([("A", "B"), ("A", "C"), ("B", "C")]):
        ph = make_fringe_photo(
            pair_surface(x, y),
            shape=(384, 512),
            fringes=18,
            noise=0.005,
            dust=0,
            bad_pixels=0,
            seed=k,
            bit_depth=16,
        )
        photos[x + y] = tmp_path / f"{x}{y}.png"
        write_photo(ph, photos[x + y])
    maps = tmp_path / "maps"
    maps.mkdir()
    # issue 9: a map that cannot be written cost the whole solution; C's map name is
    # taken by a folder, which stops root as well (EISDIR on the rename)
    (maps / "C.npy").mkdir()
    code, out, err = run_cli(
        [
            "absolute",
            "--ab",
            str(photos["AB"]),
            "--ac",
            str(photos["AC"]),
            "--bc",
            str(photos["BC"]),
            "-w",
            "hene",
            "--json",
            "--save-maps",
            str(maps),
        ],
        capsys,
        cmd_absolute,
    )
    assert code == 2, err
    assert err.count("\n") == 1 and "cannot write the height map" in err
    assert str(maps / "C.npy") in err and "Traceback" not in err
    doc = json.loads(out)
    assert set(doc["flats"]) == {"A", "B", "C"}
    assert "height_map_path" not in doc["flats"]["C"]
    odd = [j for j in range(4, 37) if parity(j) == -1]
    for name, rec in doc["flats"].items():
        assert rec["unseparated_terms"] == odd
        z = rec["zernike"]["coefficients_nm"]
        for j in range(4, 16):
            if parity(j) == -1:
                assert z[j - 1] is None  # reported unknown, not invented
            else:
                # each photo is good to about 1.5 nm per term (the single-photo target in
                # analysis/synthetic.py); the solution combines three of them
                assert z[j - 1] == pytest.approx(FLAT_TERMS[name].get(j, 0.0), abs=2.5), (name, j)
        assert (maps / f"{name}.npy").is_file() == (name != "C")
        assert "pv_nm" in rec and "aperture" in rec

    # a saved map is accepted as --reference
    from flatsight.analysis.multiphoto.reference import load_reference_map

    ref = load_reference_map(maps / "A.npy")
    assert ref.radius_px > 50


def test_absolute_usage_errors(tmp_path, capsys):
    code, _, err = run_cli(
        [
            "absolute",
            "--ab",
            "a.png",
            "--ac",
            "b.png",
            "--bc",
            "c.png",
            "-w",
            "hene",
            "--angle",
            "90",
        ],
        capsys,
        cmd_absolute,
    )
    assert code == 2 and "go together" in err
    code, _, err = run_cli(
        [
            "absolute",
            "--ab",
            str(tmp_path / "none.png"),
            "--ac",
            "b.png",
            "--bc",
            "c.png",
            "-w",
            "hene",
        ],
        capsys,
        cmd_absolute,
    )
    assert code == 2 and "none.png" in err and err.count("\n") == 1


# ---- --average and --reference ----------------------------------------------------------------


def measured(seed, surface, name):
    from flatsight.analysis.aperture import Aperture
    from flatsight.analysis.pipeline import MapGeometry, MeasureSettings, measurement_from_height

    rng = np.random.default_rng(seed)
    geometry = MapGeometry(100.0 + seed, 80.0, 2.0, (101, 101))
    aperture = Aperture(200.0 + seed, 180.0, 95.0)
    x, y = geometry.unit_xy(aperture)
    valid = np.hypot(x, y) <= 1
    h = surface.height_nm(x, y) + rng.normal(0, 1.0, x.shape)
    return measurement_from_height(
        np.where(valid, h, np.nan),
        valid,
        aperture=aperture,
        geometry=geometry,
        settings=MeasureSettings(),
        photo=name,
    )


def test_multi_options_average_and_reference(tmp_path):
    p = argparse.ArgumentParser()
    p.add_argument("photos", nargs="*")
    add_multi_options(p)
    ref_surface = SyntheticSurface(zernike_nm={6: 9.0, 7: -4.0})
    part = SyntheticSurface(zernike_nm={4: -20.0, 5: 6.0})
    both = SyntheticSurface(zernike_nm={4: -20.0, 5: 6.0, 6: 9.0, 7: -4.0})
    y, x = np.mgrid[0:121, 0:121].astype(float)
    xu, yu = (x - 60) / 60, (60 - y) / 60
    ref_map = np.where(np.hypot(xu, yu) <= 1, ref_surface.height_nm(xu, yu), np.nan)
    np.save(tmp_path / "bench-2.npy", ref_map)
    ms = [measured(k, both, f"BW-FL-0412_{k}.png") for k in range(3)]

    args = p.parse_args(["--average", "--reference", str(tmp_path / "bench-2.npy")])
    items = combine_with_sections(args, ms)
    assert len(items) == 1
    sec = items[0].sections
    assert sec["average"]["n_photos"] == 3
    # 1 nm of white noise per photo; bilinear resampling onto the common grid averages up
    # to four neighbours, which lowers its standard deviation by up to half
    assert 0.45 <= sec["average"]["spread_rms_nm"] <= 1.05
    assert sec["reference"]["path"].endswith("bench-2.npy")
    z = items[0].measurement.zernike.coefficients_nm
    assert z[3] == pytest.approx(-20.0, abs=0.3) and z[5] == pytest.approx(0.0, abs=0.3)
    assert items[0].averaged.spread_nm.shape == items[0].measurement.height_nm.shape
    json.dumps(sec, allow_nan=False)  # the sections are valid JSON

    args = p.parse_args(["--reference", str(tmp_path / "bench-2.npy")])
    out = combine(args, ms)
    assert len(out) == 3
    assert out[0].zernike.coefficients_nm[6] == pytest.approx(0.0, abs=0.3)
    assert part.zernike_nm[4] == pytest.approx(out[0].zernike.coefficients_nm[3], abs=0.3)
