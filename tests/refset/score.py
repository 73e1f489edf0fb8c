"""How far a measurement record lies from a reference case's truth, against the issue's targets."""

from __future__ import annotations

import math
from collections.abc import Mapping

__all__ = ["FEW_FRINGE_OTHERS", "FEW_FRINGE_TARGETS", "FIGURES", "TARGETS", "score",
           "score_few_fringes", "within"]

#: figure -> (floor nm, share of the true value): the error allowed is the larger of the two.
#: irregularity, C, power, RMS and PVr are the accuracy issue's targets; PV, RMSi, RMSa
#: and astigmatism are ours (a verdict can use them too).
TARGETS: dict[str, tuple[float, float]] = {
    "pv_nm": (4.0, 0.05),
    "rms_nm": (1.0, 0.02),
    "pvr_nm": (4.0, 0.05),
    "power_nm": (1.0, 0.02),
    "irregularity_nm": (4.0, 0.05),
    "symmetric_irregularity_nm": (3.0, 0.10),
    "rms_irregularity_nm": (1.0, 0.03),
    "rms_asymmetric_nm": (1.0, 0.03),
    "astigmatism_nm": (1.0, 0.03),
}
FIGURES = tuple(TARGETS)


def within(figure: str, true_nm: float) -> float:
    """The error allowed for ``figure`` when the truth is ``true_nm``."""
    floor, share = TARGETS[figure]
    return max(floor, share * abs(true_nm))


def score(record: Mapping, truth: Mapping,
          targets: Mapping[str, tuple[float, float]] = TARGETS) -> dict[str, dict]:
    """Error, allowance and uncertainty coverage of each figure of ``targets`` (by
    default every figure, :data:`TARGETS`) in a record.

    Returns ``{figure: {"true", "measured", "error", "allowed", "ok", "u", "covered"}}``;
    ``u`` is the record's expanded uncertainty (None when it gives none).
    """
    out = {}
    unc = record.get("uncertainty") or {}
    for fig, (floor, share) in targets.items():
        t = float(truth[fig])
        m = record.get(fig)
        m = float(m) if m is not None else math.nan
        err = m - t
        allowed = max(floor, share * abs(t))
        u = unc.get(fig)
        out[fig] = {
            "true": t, "measured": m, "error": err, "allowed": allowed,
            "ok": bool(abs(err) <= allowed),
            "u": u, "covered": (None if u is None else bool(abs(err) <= float(u))),
        }
    return out


#: The few-fringe issue's targets (issue 10): figure -> (floor nm, share of the true value).
FEW_FRINGE_TARGETS: dict[str, tuple[float, float]] = {
    "rms_nm": (2.0, 0.05),
    "pvr_nm": (8.0, 0.10),
    "power_nm": (3.0, 0.05),
}


#: The other figures a verdict can use, scored on the same photos with allowances twice
#: the accuracy issue's (as the few-fringe targets are for RMS and PVr).
FEW_FRINGE_OTHERS: dict[str, tuple[float, float]] = {
    "pv_nm": (8.0, 0.10),
    "irregularity_nm": (8.0, 0.10),
    "symmetric_irregularity_nm": (6.0, 0.20),
    "rms_irregularity_nm": (2.0, 0.06),
    "astigmatism_nm": (2.0, 0.06),
}


def score_few_fringes(record: Mapping, truth: Mapping,
                      targets: Mapping[str, tuple[float, float]] = FEW_FRINGE_TARGETS
                      ) -> dict[str, dict]:
    """:func:`score` against the few-fringe targets (by default RMS, PVr and power,
    :data:`FEW_FRINGE_TARGETS`; :data:`FEW_FRINGE_OTHERS` for the other figures)."""
    return score(record, truth, targets)
