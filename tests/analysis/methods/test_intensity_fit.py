"""The intensity fit on few, bent and closed fringes, against the independent reference set.

The photos and their truth come from ``tests/refset`` (``few_fringe_case``: a generator
that shares no code with the project; the truth is direct quadrature of the surface
over the unit disk). Each is written as its file (8-bit PNG or JPEG) and measured with
the aperture found automatically. The limits are issue 10's targets
(``tests/refset/score.py``, ``FEW_FRINGE_TARGETS``): RMS within max(2 nm, 5 %), PVr
within max(8 nm, 10 %), power within max(3 nm, 5 %). The full held-out set is measured by
``benchmarks/few_fringe_accuracy.py`` and reported in the README.
"""

from __future__ import annotations

import math

import pytest
from flatsight.analysis.errors import UnanalysablePhotoError
from flatsight.analysis.methods.intensity_fit import terms_for_fringes
from flatsight.analysis.pipeline import MeasureSettings, measure
from flatsight.analysis.record import measurement_to_record

from tests.refset.cases import few_fringe_case
from tests.refset.score import score_few_fringes

SMALL = (0.3, 0.6)  # megapixels: quick photos, as the shop's phone would give at least

# (kind, seed) -> what it exercises (tests/refset/cases.py draws the rest)
CASES = {
    ("few", 3): "3.1 tilt fringes, power and astigmatism under a fringe",
    ("bent", 1): "6.5 tilt fringes bent by about 3 fringes of power (they close)",
    ("closed", 4): "about 3 rings of power, no tilt: the sign is stated",
}


@pytest.fixture(scope="module")
def measured(tmp_path_factory):
    """``measured(kind, seed, **settings) -> (case, measurement, record)``, each once."""
    folder = tmp_path_factory.mktemp("few-fringes")
    done: dict = {}

    def get(kind, seed, **settings):
        key = (kind, seed, tuple(sorted(settings.items())))
        if key not in done:
            case = few_fringe_case(kind, seed, megapixels=SMALL)
            m = measure(case.save(folder),
                        MeasureSettings(wavelength_nm=case.photo.wavelength_nm, **settings))
            done[key] = (case, m, measurement_to_record(m))
        return done[key]

    return get


def _misses(case, rec) -> dict:
    """The figures off their target: figure -> (measured, true, allowed)."""
    return {f: (round(s["measured"], 2), round(s["true"], 2), round(s["allowed"], 2))
            for f, s in score_few_fringes(rec, case.truth).items() if not s["ok"]}


def _true_sign(kind, seed) -> str:
    power = few_fringe_case(kind, seed, megapixels=SMALL).truth["power_nm"]
    return "convex" if power > 0 else "concave"


@pytest.mark.slow
@pytest.mark.parametrize("kind, seed", list(CASES), ids=[f"{k}{s}" for k, s in CASES])
def test_few_bent_and_closed_fringes_meet_the_targets(kind, seed, measured):
    case, m, rec = measured(kind, seed, ring_sign=_true_sign(kind, seed))
    misses = _misses(case, rec)
    assert not misses, f"{case.name}: measured, true, allowed: {misses}"
    q = rec["quality"]
    assert q["method"] == "intensity-fit"
    assert q["method_reason"] == ("closed fringes" if kind == "closed" else "too few fringes")
    assert q["sign"] == ("stated" if kind == "closed" else "measured")
    # the fit is limited to what the fringes resolve, and says how many terms that is
    assert 15 <= q["terms_fitted"] <= 28
    assert all(abs(c) < 1e-6 for c in rec["zernike"]["coefficients_nm"][q["terms_fitted"]:])
    # the aperture within 2 % of the radius (common practice: a 2 % radius error moves
    # power by 4 %, inside its 5 % target)
    cx, cy = case.photo.center_px
    r = case.photo.radius_px
    assert math.hypot(m.aperture.center_x_px - cx, m.aperture.center_y_px - cy) < 0.02 * r
    assert abs(m.aperture.radius_px / r - 1.0) < 0.02


@pytest.mark.slow
def test_closed_fringes_need_the_stated_sign_and_keep_it(measured, tmp_path):
    case = few_fringe_case("closed", 4, megapixels=SMALL)
    with pytest.raises(UnanalysablePhotoError, match="--ring-sign") as info:
        measure(case.save(tmp_path), MeasureSettings(wavelength_nm=case.photo.wavelength_nm))
    assert "\n" not in str(info.value)
    # the true sign stated gives the true power (the targets test); the other sign stated
    # with --invert, which flips only a measured sign, gives the same power negated
    _, _, stated = measured("closed", 4, ring_sign=_true_sign("closed", 4))
    other = "concave" if _true_sign("closed", 4) == "convex" else "convex"
    _, _, flipped = measured("closed", 4, ring_sign=other, invert=True)
    assert flipped["power_nm"] == pytest.approx(-stated["power_nm"], rel=1e-6)
    assert (stated["power_nm"] > 0) == (_true_sign("closed", 4) == "convex")
    assert flipped["quality"]["sign"] == "stated"
    assert flipped["settings"]["ring_sign"] == other


@pytest.mark.slow
def test_the_tilt_sets_the_sign_of_bent_fringes(measured):
    # bent fringes keep their tilt: the sign follows the wedge convention, as the carrier
    # method's does, whatever is stated for closed fringes (the reference set's truth
    # follows the README's convention)
    wrong = "concave" if _true_sign("bent", 1) == "convex" else "convex"
    case, _, rec = measured("bent", 1, ring_sign=wrong)
    assert math.copysign(1.0, rec["power_nm"]) == math.copysign(1.0, case.truth["power_nm"])


def test_terms_grow_with_the_fringes():
    # from memory: a photo's phase carries about one more radial order per fringe; the
    # fit keeps primary spherical (order 4, 15 terms) and stops at order 6 (28 terms)
    assert terms_for_fringes(1.0) == (4, 15)
    assert terms_for_fringes(3.2) == (5, 21)
    assert terms_for_fringes(4.0) == (6, 28)
    assert terms_for_fringes(12.0) == (6, 28)


# Few-fringe photos on which the fit once locked onto a wrong phase and said nothing: the
# tilt fringes cross the central seed disk only once or twice, a fit grown from there kept
# a phase with almost no tilt, and its modulation swelled until the misfit passed for
# noise (RMS, PVr and power all off by 10-50 %, no warning).
WRONG_PHASE_CASES = {
    ("few", 37): "3.4 tilt fringes, a fit grown from the centre keeps a wrong phase",
    ("few", 41): "3.0 tilt fringes, a wrong fit from the ring seed stopped the search",
}


@pytest.mark.slow
@pytest.mark.parametrize("kind, seed", list(WRONG_PHASE_CASES),
                         ids=[f"{k}{s}" for k, s in WRONG_PHASE_CASES])
def test_few_tilt_fringes_find_the_right_phase(kind, seed, measured):
    case, _, rec = measured(kind, seed, ring_sign=_true_sign(kind, seed))
    misses = _misses(case, rec)
    assert not misses, f"{case.name}: measured, true, allowed: {misses}"
    # the tilt is measured, not taken for closed rings
    assert rec["quality"]["method_reason"] == "too few fringes"
    assert rec["quality"]["sign"] == "measured"


@pytest.mark.slow
def test_a_fit_on_a_wrong_phase_warns(monkeypatch, tmp_path):
    # without the wide disk's seeds the fit of few-0037 ends on a wrong phase (see
    # WRONG_PHASE_CASES); whatever it then reports must carry a warning, one line
    from flatsight.analysis.methods import intensity_fit
    from flatsight.analysis.methods.intensity_fit import WIDE_SEED_RADIUS

    search = intensity_fit._seed_search

    def central_only(data, x, y, radius):
        return [] if radius >= WIDE_SEED_RADIUS else search(data, x, y, radius)

    monkeypatch.setattr(intensity_fit, "_seed_search", central_only)
    case = few_fringe_case("few", 37, megapixels=SMALL)
    rec = measurement_to_record(measure(
        case.save(tmp_path), MeasureSettings(wavelength_nm=case.photo.wavelength_nm,
                                             ring_sign=_true_sign("few", 37),
                                             method="intensity-fit")))
    assert _misses(case, rec), "the wrong phase is no longer reached"
    loose = [w for w in rec["warnings"] if "fits the photo loosely" in w]
    assert loose and all("\n" not in w for w in loose)


@pytest.mark.slow
@pytest.mark.parametrize("seed", [201, 211])
def test_three_straight_fringes_keep_their_tilt(seed):
    # Three straight tilt fringes over a round part seen square-on, from the other
    # independent generator (tests/refset/shaped.py: its own surfaces, with terms to
    # Noll 38 under a tenth of a fringe; truth by quadrature over the part's circle).
    # Grown from the centre, the fit lost half a fringe of tilt to the background and
    # modulation polynomials and still fitted within the noise's allowance: power read
    # 81 nm for -16 nm (seed 201) and 24 nm for 7.5 nm (seed 211), with no warning. The
    # wide disk's search now always runs, and the lower misfit wins.
    import numpy as np

    from tests.refset.shaped import random_shaped_case, render_shaped

    case = random_shaped_case(seed, "ellipse", view_deg=0.01)
    settings = dict(case.settings, fringes=3.0)
    pixels = render_shaped(case.surface, "ellipse", case.part, shape=case.pixels.shape,
                           center_px=case.center_px, wavelength_nm=case.wavelength_nm,
                           seed=seed, **settings)
    m = measure(pixels.astype(np.float64) / 255.0,
                MeasureSettings(wavelength_nm=case.wavelength_nm))
    rec = measurement_to_record(m)
    assert rec["quality"]["method"] == "intensity-fit"
    assert rec["quality"]["carrier_fringes"] == pytest.approx(3.0, abs=0.2)
    misses = {f: (round(s["measured"], 2), round(s["true"], 2), round(s["allowed"], 2))
              for f, s in score_few_fringes(rec, case.truth).items() if not s["ok"]}
    assert not misses, f"seed {seed}: measured, true, allowed: {misses}"


@pytest.mark.slow
def test_a_round_part_taken_for_an_ellipse_is_fitted_on_its_lit_disk(tmp_path):
    # few-0427 (5 tilt fringes, a JPEG): the fringes running along the edge bent its
    # brightness' 50 % point, and the outline finder took the round part for an ellipse
    # 12 deg off axis. The intensity fit measures round parts only, so the carrier
    # method's result on that ellipse was kept: RMS 37.0 for 39.9 nm, power -125.6 for
    # -134.4 nm, both beyond the targets. The lit region's own edge is round, and the
    # fit on it meets them.
    case = few_fringe_case("few", 427)
    m = measure(case.save(tmp_path), MeasureSettings(wavelength_nm=case.photo.wavelength_nm))
    rec = measurement_to_record(m)
    assert rec["quality"]["method"] == "intensity-fit"
    assert m.aperture.shape is None
    misses = _misses(case, rec)
    assert not misses, f"{case.name}: measured, true, allowed: {misses}"


def _square_on_round(seed: int, fringes: float):
    """A round part seen square-on under ``fringes`` tilt fringes, from the other
    independent generator (tests/refset/shaped.py: its own surfaces and renderer, truth by
    quadrature over the part's circle): the case and its photo, 0..1."""
    import numpy as np

    from tests.refset.shaped import random_shaped_case, render_shaped

    case = random_shaped_case(seed, "ellipse", view_deg=0.01)
    settings = dict(case.settings, fringes=fringes)
    pixels = render_shaped(case.surface, "ellipse", case.part, shape=case.pixels.shape,
                           center_px=case.center_px, wavelength_nm=case.wavelength_nm,
                           seed=seed, **settings)
    return case, pixels.astype(np.float64) / 255.0


@pytest.mark.slow
def test_a_loose_fit_the_photo_prefers_is_kept_over_the_carrier_methods_result():
    # shaped.py seed 205 under 4.5 tilt fringes: the fit leaves a misfit of 0.074 of the
    # fringe modulation where the noise allows 0.06, so it warns; the carrier method's
    # phase, put through the same intensity model (piston and tilt fitted), leaves 0.13.
    # Auto kept the carrier method's result on the fit's warning alone: power 105 nm
    # for 119 nm and B 105 for 154, with only "only 5 tilt fringes" said. The photo
    # prefers the fit, which meets every few-fringe target; its warning stays.
    case, photo = _square_on_round(205, 4.5)
    rec = measurement_to_record(measure(photo, MeasureSettings(
        wavelength_nm=case.wavelength_nm)))
    assert rec["quality"]["method"] == "intensity-fit"
    assert any("fits the photo loosely" in w for w in rec["warnings"])
    misses = {f: (round(s["measured"], 2), round(s["true"], 2), round(s["allowed"], 2))
              for f, s in score_few_fringes(rec, case.truth).items() if not s["ok"]}
    assert not misses, f"measured, true, allowed: {misses}"


@pytest.mark.slow
def test_the_carrier_methods_phase_is_judged_on_its_whole_tilt():
    # Under 9 tilt fringes the carrier method reads this surface well (power within
    # 0.1 nm of the truth), so its phase must fit the photo about as well as the
    # intensity fit's own. Without the whole-bin carrier, or with a piston the fit may
    # not move, its misfit reads 2.3 or 0.23 against the fit's 0.075.
    from flatsight.analysis.methods import carrier, intensity_fit
    from flatsight.analysis.outline import find_part_aperture

    _, photo = _square_on_round(205, 9.0)
    aperture = find_part_aperture(photo)
    fitted = intensity_fit.run(photo, aperture, reason="too few fringes",
                               prior=carrier.run(photo, aperture))
    assert fitted.prior_misfit == pytest.approx(fitted.misfit, rel=0.25)
