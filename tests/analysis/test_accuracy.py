"""End-to-end accuracy against an independent truth: every figure a verdict can use.

The photos come from the reference set in ``tests/refset``, a generator written apart
from the project that shares none of its code (its Zernike terms are checked against
the ``aotools`` library from PyPI in ``tests/refset/test_refset.py``); the truth is
direct numerical quadrature of the surface over the unit disk, not the project's fit.
Each photo is written in its file format (8/16-bit PNG and TIFF, JPEG at quality
70-90) and measured by the pipeline with the aperture found automatically.

The limits are the accuracy issue's targets (``tests/refset/score.py``): irregularity B
within max(4 nm, 5 %), C within max(3 nm, 10 %), power within max(1 nm, 2 %), RMS within
max(1 nm, 2 %), PVr within max(4 nm, 5 %); PV, RMSi, RMSa and astigmatism likewise. The
full set, misses included, is measured by ``benchmarks/refset_accuracy.py`` and reported
in the README; the photos here span its kinds (edges, tone curves, speckle, formats,
12-38 fringes) and each must meet every target with its expanded uncertainty covering
the true error.
"""

from __future__ import annotations

import math

import pytest
from flatsight.analysis.pipeline import MeasureSettings, measure
from flatsight.analysis.record import measurement_to_record

from tests.refset.cases import named_case, random_case
from tests.refset.score import FIGURES, score

# seed -> what it exercises (tests/refset/cases.py draws the rest; megapixels 0.3-3)
SEEDS = {
    0: "JPEG, Gaussian edge, gamma tone, 15 fringes",
    4: "16-bit PNG, hard edge, visibility 0.41, 36 fringes, a zonal ring",
    7: "16-bit PNG, hard edge, speckle 0.45, 19 fringes, Noll 56 (n 10, m 0) at 4.6 nm, "
       "15 nm at the rim: B read 45.0 nm against 58.4 and C 20.2 against 30.6 while the "
       "demodulation's phase model stopped at radial order 8",
    9: "16-bit TIFF, rolled edge, Noll terms to 45, turned edge and ripple",
    14: "JPEG, visibility 0.35, 38 fringes, a zonal ring",
    16: "JPEG, linear edge, a bump, a turned-up edge 0.17 of the radius wide and a "
        "ripple: C read 5.0 nm against 12.6 while the filtered map's fit stopped at "
        "radial order 8, and 26.0 when the demodulation's phase model always went to "
        "order 10 (it overshoots past the last pixels it was fitted to)",
    18: "PNG, hard edge, laser speckle 0.17, Noll terms to 43",
    20: "16-bit PNG, 13 fringes, speckle 0.25",
    21: "16-bit PNG, hard edge, 15 fringes, Noll 66 (n 10) at the rim: B read 119.8 nm "
        "against 127.4 while the filtered map's fit stopped at radial order 8",
    25: "8-bit TIFF, hard edge, bumps and digs, turned edge, ripple",
    26: "PNG, rolled edge, 12 fringes",
    32: "PNG, rolled edge, speckle 0.38: B read 49.5 nm against 43.6 before the fit's "
        "noisy high-order terms were shrunk",
    33: "JPEG, rolled edge, a ripple: PVr read 42.4 nm against 46.9 while the ripple "
        "was taken for noise",
    36: "16-bit PNG, speckle 0.54, sRGB tone, Noll 65, bumps, ring and turned edge "
        "(its B is speckle-limited, below)",
    39: "16-bit PNG, Gaussian edge, gamma tone, ring, turned edge and ripple",
    42: "small (0.44 MP) PNG, sRGB tone",
    57: "8-bit TIFF, rolled edge, 38 fringes",
}
MEGAPIXELS = (0.3, 3.0)


def _measured(case, tmp_path):
    path = case.save(tmp_path)
    m = measure(path, MeasureSettings(wavelength_nm=case.photo.wavelength_nm))
    return m, measurement_to_record(m)


# (case, figure) pairs that a photo's fringes cannot resolve, each said in the README's
# accuracy section: they must still stay within twice the target and within U
# (none at present: rolled_edge_f20's PVr read 8 % low, 1.13 times its target, until the
# map's noise was read against the stand-in fit to radial order 10; it now reads 2.7 nm,
# 4.8 %, low, within its 4 nm)
RESOLUTION_LIMITED: set[tuple[str, str]] = set()

# (case, figure) pairs that one photo's laser speckle decides, said in the README's
# accuracy section: they too must stay within twice the target and within U. Dev seed
# 36 (speckle contrast 0.54) has B 14.3 nm; it read 0.93 of its target, 1.19 once the
# rings' mean was fitted against the phase (a change that moved every speckled photo a
# little, either way: dev seed 44's surface photographed six times, each with its own
# speckle field, read B from -4.6 to +2.3 times its target with either statistic, the
# two at most 0.3 of the target apart on each photo). Averaging photos with the speckle
# moved is the remedy (tests/analysis/multiphoto/test_averaging.py).
SPECKLE_LIMITED: set[tuple[str, str]] = {("random-0036", "irregularity_nm")}


def _check(case, tmp_path):
    m, rec = _measured(case, tmp_path)
    sc = score(rec, case.truth)
    limited = RESOLUTION_LIMITED | SPECKLE_LIMITED
    misses = {f: (round(s["measured"], 2), round(s["true"], 2), round(s["allowed"], 2))
              for f, s in sc.items()
              if not s["ok"] and (case.name, f) not in limited}
    assert not misses, f"{case.name}: measured, true, allowed: {misses}"
    for name, f in limited:
        if name == case.name:
            assert abs(sc[f]["error"]) <= 2.0 * sc[f]["allowed"], (name, f, sc[f])
    uncovered = {f: (round(s["error"], 2), s["u"]) for f, s in sc.items() if not s["covered"]}
    assert not uncovered, f"{case.name}: error beyond U: {uncovered}"
    # the aperture found to within 1.5 % of the radius (centre and radius)
    cx, cy = case.photo.center_px
    r = case.photo.radius_px
    assert math.hypot(m.aperture.center_x_px - cx, m.aperture.center_y_px - cy) < 0.015 * r
    assert abs(m.aperture.radius_px / r - 1.0) < 0.015
    return m, rec, sc


@pytest.mark.slow
@pytest.mark.parametrize("seed", list(SEEDS), ids=[f"seed{s}" for s in SEEDS])
def test_every_figure_meets_its_target_on_the_reference_photos(seed, tmp_path):
    _check(random_case(seed, megapixels=MEGAPIXELS), tmp_path)


@pytest.mark.slow
@pytest.mark.parametrize("name", ["z22_6nm_f32", "z16_f32", "z37_f32", "z22_z37_f32",
                                  "rolled_edge_f20", "speckle_f20"])
def test_surfaces_the_demo_generator_never_makes(name, tmp_path):
    # hand-made cases (tests/refset/cases.py), each under an sRGB tone curve: Noll 22,
    # 16 and 37 (37 beyond the 36 fitted terms), a rolled edge and laser speckle. A zonal
    # ring 0.07 of the radius wide and a local dig of sigma 0.08 are finer than 20-32
    # fringes resolve and miss (the README's accuracy section says so)
    _check(named_case(name), tmp_path)


@pytest.mark.slow
def test_rim_terms_of_radial_order_ten_reach_the_peak_figures(tmp_path):
    # seed 633 of the 0.3-12 MP draw (1.9 MP PNG, 29 fringes, visibility 0.35): Noll 63
    # and 64 (n 10, m 8) at 4 and 10 nm peak in a band at the rim. Past a fit that
    # stopped at radial order 8 they reached the peak map only smoothed at the
    # resolution: B read 138.4 nm against 218.7 (7.4 times the target) and RMSi 25.3
    # against 26.6. The figures must now stay within twice their targets (the issue's
    # bound on any photo); B reads 6.8 % low, 1.4 times its target, which the README
    # reports among the misses.
    case = random_case(633, megapixels=(0.3, 12.0))
    _, rec = _measured(case, tmp_path)
    sc = score(rec, case.truth)
    for f in ("pv_nm", "irregularity_nm", "rms_irregularity_nm", "rms_asymmetric_nm"):
        assert abs(sc[f]["error"]) <= 2.0 * sc[f]["allowed"], (f, sc[f])
    assert abs(sc["rms_irregularity_nm"]["error"]) <= sc["rms_irregularity_nm"]["allowed"]


@pytest.mark.slow
def test_a_sideband_spread_by_a_steep_surface_is_centred_by_its_power(tmp_path):
    # seed 800 of the 0.3-12 MP draw (0.8 MP 16-bit TIFF, 12 tilt fringes, a grey
    # surround, the light falling 29 % across the part): -309 nm of power and 250 nm of
    # astigmatism spread the sideband over several fringes either side of the tilt.
    # Its highest bin lay at 9.3 fringes; centred there, the band the extension and the
    # speck finder trust missed the sideband's fast side, 4.5 % of the disk was masked
    # (3.6 % taken for specks), and B read 265.5 nm against 241.4, twice its target, and
    # PV 447.0 against 430.1. The sideband's power centroid lies at 12.1 fringes.
    # C (none on this surface) then read 6.4 nm, 2.1 times its 3 nm, until the richer
    # phase models were refitted against their terms as the window sees them: the rim of
    # so steep a surface is where the one-sided window rounds the most off.
    case = random_case(800, megapixels=(0.3, 12.0))
    m, rec = _measured(case, tmp_path)
    sc = score(rec, case.truth)
    for f in ("pv_nm", "pvr_nm", "rms_nm", "power_nm", "irregularity_nm",
              "symmetric_irregularity_nm", "rms_irregularity_nm", "astigmatism_nm"):
        assert sc[f]["ok"] and sc[f]["covered"], (f, sc[f])
    assert m.quality.masked_fraction < 0.01


@pytest.mark.slow
def test_a_turned_edge_is_followed_to_the_rim(tmp_path):
    # dev seed 50 (2.5 MP PNG, 21 fringes, a grey surround, the fringes' crests clipped
    # at full scale): power and astigmatism, and an edge turned down 43 nm from 0.91 of
    # the radius out (C 41.4 nm). The window is one-sided at the rim and rounded the edge
    # off; refitted from that rounded fringe, the phase model kept it rounded (the map
    # 7.5 nm high in the last hundredth of the radius), and C read 31.4 nm, 2.4 times
    # its target and beyond its U. Refitted against its terms as the window sees them,
    # and given the rim's radial functions, the model follows the edge.
    case = random_case(50, megapixels=MEGAPIXELS)
    _, rec = _measured(case, tmp_path)
    sc = score(rec, case.truth)
    for f in ("pv_nm", "pvr_nm", "rms_nm", "power_nm", "rms_irregularity_nm",
              "astigmatism_nm"):
        assert sc[f]["ok"] and sc[f]["covered"], (f, sc[f])
    for f in ("irregularity_nm", "symmetric_irregularity_nm"):
        assert abs(sc[f]["error"]) <= 2.0 * sc[f]["allowed"] and sc[f]["covered"], (f, sc[f])


@pytest.mark.slow
def test_pvr_of_a_speckled_photo_takes_its_noise_out_once(tmp_path):
    # seed 621 of the 0.3-12 MP draw (1.5 MP JPEG, 26 fringes, laser speckle 0.50, a
    # rolled edge on a grey surround; PVr 28.5 nm). PVr takes the map's noise out of the
    # RMS its Fringe-36 fit leaves; the Monte Carlo copies took out only the map's
    # noise, not their larger own, so SIMEX took it out again and PVr read 16.1 nm, 3.1
    # times its target low. (Its PV, 15.8 for 29.3 nm, is SIMEX's correction on a photo
    # whose noise lifted its PV less than such noise does on average: the README says so.)
    case = random_case(621, megapixels=(0.3, 12.0))
    _, rec = _measured(case, tmp_path)
    sc = score(rec, case.truth)
    for f in ("pvr_nm", "rms_nm", "rms_irregularity_nm"):
        assert sc[f]["ok"] and sc[f]["covered"], (f, sc[f])


@pytest.mark.slow
def test_power_and_astigmatism_keep_their_signs(tmp_path):
    # a convex part (centre high) reads positive power; the astigmatism's high axis
    # matches the truth's (the reference set's truth follows the README's convention)
    case = random_case(9, megapixels=MEGAPIXELS)
    _, rec = _measured(case, tmp_path)
    t = case.truth
    assert math.copysign(1.0, rec["power_nm"]) == math.copysign(1.0, t["power_nm"])
    d = (rec["astigmatism_axis_deg"] - t["astigmatism_axis_deg"] + 90.0) % 180.0 - 90.0
    assert abs(d) < 5.0


def test_every_verdict_figure_is_scored():
    # every figure a tolerance can limit (analysis/records/tolerances.py) is in the score
    from flatsight.analysis.records import tolerances

    limited = {v[0] for v in tolerances._PLAIN.values()} | {
        v[0] for v in tolerances._RMS.values()}
    assert limited <= set(FIGURES)


def _true_error_rms(m, case) -> float:
    """RMS of the measured map less the truth over the measured interior (rho <= 0.9),
    each less its least-squares fit by the monomials x^i y^j, i + j <= 8 (numpy): what
    the map carries beyond any smooth form, its noise included."""
    import numpy as np

    xu, yu = m.geometry.unit_xy(m.aperture)
    inner = m.valid & (np.hypot(xu, yu) <= 0.9)
    x, y = xu[inner], yu[inner]
    error = m.height_nm[inner] - case.photo.surface.height_nm(x, y)
    basis = np.stack([x**i * y**j for i in range(9) for j in range(9 - i)], axis=1)
    coef, *_ = np.linalg.lstsq(basis, error, rcond=None)
    return float(np.std(error - basis @ coef))


@pytest.mark.slow
@pytest.mark.parametrize("seed, what", [(17, "clean, a ripple and a rolled edge"),
                                        (3, "laser speckle 0.54, JPEG")])
def test_the_noise_read_is_the_photos_and_not_the_surfaces_detail(seed, what, tmp_path):
    # the map's noise drives the Monte Carlo copies, the SIMEX corrections and the
    # shrinking of the fit's terms. Read from the map's fine-scale roughness alone, seed
    # 17's ripple counted as 6.8 nm of noise where the map is 0.5 nm off the truth, and
    # PVr lost its residual (540 nm for 571)
    case = random_case(seed, megapixels=MEGAPIXELS)
    m, _ = _measured(case, tmp_path)
    error = _true_error_rms(m, case)
    assert m.figures.noise_nm <= 2.0 * error + 0.2, (m.figures.noise_nm, error)
    assert m.figures.noise_nm >= 0.6 * error, (m.figures.noise_nm, error)
