"""The measurement as a document (the `measure --json` record) and the saved height map."""

from __future__ import annotations

import io
import math
import os
from pathlib import Path

import numpy as np

from .atomic import atomic_path, atomic_write_bytes
from .errors import SettingsError
from .figures import to_fringes, to_waves
from .methods import METHOD_TEXT
from .pipeline import Measurement
from .shapes import circle_text
from .version import flatsight_version

__all__ = ["MAP_SUFFIXES", "RECORD_SCHEMA", "SIGN_CONVENTION", "measurement_to_record",
           "save_height_map", "flat_fields", "outline_fields"]

#: File suffixes a height map can be saved as (NumPy array, 32-bit float TIFF).
MAP_SUFFIXES = (".npy", ".tif", ".tiff")

RECORD_SCHEMA = "flatsight.measurement/1"
SIGN_CONVENTION = (
    "height = +phase x wavelength / (4 pi) with the carrier taken pointing down the photo "
    "(right for vertical fringes): the wedge is assumed wider toward the top (left); "
    "positive = high point on the part" )
_WAVE_FIELDS = ("pv", "rms", "pvr", "power", "irregularity", "astigmatism")
UNCERTAINTY_BASIS = (
    "expanded uncertainty U, k = 2 (JCGM 100:2008): the map's noise propagated by Monte "
    "Carlo (JCGM 101:2008), the method's limits as validated on independent reference "
    "photos, the stated wavelength and reference-flat uncertainties")
FIGURES_METHOD = (
    "PV, irregularity (B) and C over the filtered map (Zernike fit to order 10, 8 off "
    "the disk, each term beyond power shrunk by the non-negative garrote at its noise, "
    "Breiman 1995, plus the map's departures from it smoothed at the resolution); "
    "C from the mean "
    "around each circle less its best a + b rho^2; RMS over the filtered map; PVr after "
    "Evans 2009 with the 36-term Fringe set, shrunk alike, and the map's noise taken out "
    "of its residual; "
    "the bias the map's noise adds to PV, B, C, PVr and the RMS figures removed by "
    "simulation-extrapolation (Cook & Stefanski 1994); pv_raw_nm is the PV of the "
    "unfiltered map")


def _num(value: float | None, digits: int = 4) -> float | None:
    if value is None or not math.isfinite(value):
        return None
    return round(float(value), digits)


_NORMALISATION = {
    True: "Noll: orthonormal over the unit disk, each coefficient is that term's RMS",
    False: "Noll terms made orthonormal over the part's own outline (Gram-Schmidt over "
           "its map pixels, Mahajan & Dai 2007): each coefficient is that polynomial's RMS "
           "over the part; 1 piston, 2 and 3 tilt, 4 the best-fit sphere",
}
_COORDINATES = {
    "circle": "x right, y toward the top of the photo, over the aperture radius",
    "ellipse": "the part's own circle: the photo's ellipse mapped back to the unit disk "
               "(x right, y toward the top of the photo)",
    "other": "x right, y toward the top of the photo, from the outline's centre, over the "
             "radius of its bounding circle",
}


def _shape_fields(aperture) -> dict:
    """A non-circular outline's ``shape`` (a circle keeps only today's fields): its kind
    and parameters in photo pixels and degrees, and an ellipse's viewing angle."""
    if aperture.shape is None:
        return {}
    shape = {k: (_num(v, 3) if isinstance(v, float) else v)
             for k, v in aperture.shape.to_dict().items()}
    if aperture.shape.view_angle_deg is not None:
        shape["view_angle_deg"] = _num(aperture.shape.view_angle_deg, 2)
    shape["text"] = aperture.shape.to_text()
    return {"shape": shape}


def measurement_to_record(m: Measurement, *, ordering: str = "noll") -> dict:
    """The JSON document of a measurement (one line of ``flatsight measure --json``).

    Parameters
    ----------
    m : Measurement
    ordering : {"noll", "osa"}
        Zernike ordering of ``zernike.coefficients_nm``: Noll from j = 1, or OSA/ANSI
        (ISO 24157) from index 0.
    """
    f = m.figures
    lam = m.settings.wavelength_nm
    rec: dict = {
        "schema": RECORD_SCHEMA,
        "flatsight_version": flatsight_version(),
        "photo": m.photo,
        "photo_sha256": m.photo_sha256,
        "wavelength_nm": lam,
        "aperture": {
            "center_x_px": _num(m.aperture.center_x_px, 2),
            "center_y_px": _num(m.aperture.center_y_px, 2),
            "radius_px": _num(m.aperture.radius_px, 2),
            "exclusions": [
                {"center_x_px": _num(e.center_x_px, 2), "center_y_px": _num(e.center_y_px, 2),
                 "radius_px": _num(e.radius_px, 2)}
                for e in m.aperture.exclusions
            ],
            "source": "given" if m.settings.aperture is not None else "found",
        } | _shape_fields(m.aperture),
        "pv_nm": _num(f.pv_nm, 3),
        "rms_nm": _num(f.rms_nm, 3),
        "pvr_nm": _num(f.pvr_nm, 3),
        "power_nm": _num(f.power_nm, 3),
        "irregularity_nm": _num(f.irregularity_nm, 3),
        "astigmatism_nm": _num(f.astigmatism_nm, 3),
        "astigmatism_axis_deg": _num(f.astigmatism_axis_deg, 2),
        "symmetric_irregularity_nm": _num(f.symmetric_irregularity_nm, 3),
        "rms_irregularity_nm": _num(f.rms_irregularity_nm, 3),
        "rms_asymmetric_nm": _num(f.rms_asymmetric_nm, 3),
        "radius_of_curvature_m": _num(f.radius_of_curvature_m, 2),
        "pv_raw_nm": _num(f.pv_raw_nm, 3),
        "uncertainty": {name: _num(u, 3) for name, u in f.uncertainty_nm.items()},
    }
    for name in _WAVE_FIELDS:
        rec[f"{name}_waves"] = _num(to_waves(getattr(f, f"{name}_nm"), lam), 5)
    for name in ("pv", "power", "irregularity"):
        rec[f"{name}_fringes"] = _num(to_fringes(getattr(f, f"{name}_nm"), lam), 4)
    if m.settings.report_wavelength_nm:
        rl = m.settings.report_wavelength_nm
        rec["report_waves"] = {"wavelength_nm": rl} | {
            f"{name}_waves": _num(to_waves(getattr(f, f"{name}_nm"), rl), 5)
            for name in _WAVE_FIELDS
        }
    coef = m.zernike.coefficients_nm
    if ordering == "osa":
        coefficients = m.zernike.osa_coefficients_nm()
        first_index = 0
    elif ordering == "noll":
        coefficients = coef
        first_index = 1
    else:
        raise SettingsError(f"unknown Zernike ordering {ordering!r}: use noll or osa")
    rec["zernike"] = {
        "ordering": ordering,
        "first_index": first_index,
        "normalisation": _NORMALISATION[m.aperture.maps_to_disk],
        "coordinates": _COORDINATES.get(m.aperture.kind, _COORDINATES["other"]),
        "radius_px": _num(m.aperture.radius_px, 2),
        "coefficients_nm": [_num(c, 4) for c in coefficients],
        "fit_residual_rms_nm": _num(m.zernike.residual_rms_nm, 4),
    }
    q = m.quality
    rec["quality"] = {
        "carrier_fringes": _num(q.carrier_fringes, 2),
        "carrier_angle_deg": _num(q.carrier_angle_deg, 2),
        "fringe_period_px": _num(q.fringe_period_px, 2),
        "resolution_cycles_per_aperture": _num(q.resolution_cycles_per_aperture, 2),
        "mean_modulation": _num(q.mean_modulation, 4),
        "masked_fraction": _num(q.masked_fraction, 5),
        "binning": q.binning,
        "map_pixels_across": int(round(2 * m.aperture.radius_px / m.geometry.step_px)),
        # the single-photo method and why it was chosen (analysis/methods); null for a
        # map combined from several photos
        "method": q.method or None,
        "method_reason": q.method_reason or None,
        # "measured": the sign follows the tilt (the wedge convention); "stated": the
        # operator said convex or concave for closed fringes
        "sign": q.sign,
        "terms_fitted": q.terms_fitted or None,  # Noll terms the photo resolves (null: 36+)
    }
    if q.per_photo:  # an average: no carrier of its own (null above), each photo's here
        rec["quality"]["per_photo"] = [
            {"carrier_fringes": _num(p.carrier_fringes, 2),
             "carrier_angle_deg": _num(p.carrier_angle_deg, 2),
             "fringe_period_px": _num(p.fringe_period_px, 2),
             "mean_modulation": _num(p.mean_modulation, 4)}
            for p in q.per_photo]
    rec["settings"] = {
        "wavelength_nm": lam,
        "n_terms": m.settings.n_terms,
        "invert": m.settings.invert,
        "diameter_mm": m.settings.diameter_mm,
        "report_wavelength_nm": m.settings.report_wavelength_nm,
        "removed_terms": list(f.removed_terms),
        "method": m.settings.method,
        "ring_sign": m.settings.ring_sign,
    }
    rec["uncertainty_budget"] = {
        "coverage_factor": 2,
        "basis": UNCERTAINTY_BASIS,
        "map_noise_nm": _num(f.noise_nm, 4),
        "wavelength_uncertainty_nm": m.settings.wavelength_uncertainty_nm,
        "reference_uncertainty_nm": m.settings.reference_uncertainty_nm,
        "photos": m.quality.photos,
        "standard_uncertainties_nm": {
            name: {part: _num(v, 4) for part, v in parts.items()}
            for name, parts in f.uncertainty_budget.items()},
        "noise_bias_removed_nm": {name: _num(v, 4)
                                  for name, v in f.noise_bias_removed_nm.items()},
    }
    rec["figures_method"] = FIGURES_METHOD
    rec["sign_convention"] = SIGN_CONVENTION
    rec["method"] = METHOD_TEXT.get(q.method, METHOD_TEXT["carrier"])
    rec["warnings"] = list(m.warnings)
    return rec


def outline_fields(record: dict) -> tuple[str | None, str | None, float | None]:
    """The part's outline in a record, for a CSV row: its kind, its text, a viewing angle.

    Returns ``aperture.shape``'s kind (``"circle"`` for a round part seen square-on,
    which has no ``shape``; ``"ellipse"``, ``"rect"``, ``"poly"``, ``"annulus"``), the
    outline as ``--aperture`` takes it back (photo pixels and degrees:
    ``circle:X,Y,R``, ``ellipse:CX,CY,A,B,ANGLE`` ...) and an ellipse's
    ``view_angle_deg``; None for what the record does not hold.
    """
    aperture = record.get("aperture")
    if not isinstance(aperture, dict):
        return None, None, None
    shape = aperture.get("shape")
    if isinstance(shape, dict):
        return shape.get("kind"), shape.get("text"), shape.get("view_angle_deg")
    centre_radius = [aperture.get(k) for k in ("center_x_px", "center_y_px", "radius_px")]
    if any(not isinstance(v, int | float) for v in centre_radius):
        return "circle", None, None
    return "circle", circle_text(*centre_radius), None


def flat_fields(record: dict) -> dict:
    """The record's scalar fields, flattened for a CSV row (Zernike terms as z1, z2, ...).

    Each figure's expanded uncertainty stands beside it as ``u_<figure>``
    (``pv_nm``, ``u_pv_nm``, ``rms_nm``, ``u_rms_nm`` ...). The part's outline follows
    the aperture's centre and radius as ``aperture.shape``, ``aperture.outline`` and
    ``aperture.view_angle_deg`` (:func:`outline_fields`), in every row, a circle's too.
    """
    row: dict = {}
    uncertainty = record.get("uncertainty") or {}
    for key, value in record.items():
        if key == "uncertainty" and isinstance(value, dict):
            for figure, u in value.items():  # figures the record does not carry: at the end
                if figure not in record:
                    row[f"u_{figure}"] = u
            continue
        if isinstance(value, dict):
            if key == "zernike":
                first = value.get("first_index", 1)
                for i, c in enumerate(value.get("coefficients_nm", [])):
                    row[f"z{i + first}_nm"] = c
                row["zernike_ordering"] = value.get("ordering")
                continue
            for sub, v in value.items():
                if not isinstance(v, (dict, list)):
                    row[f"{key}.{sub}"] = v
            if key == "aperture":
                row["aperture.shape"], row["aperture.outline"], row[
                    "aperture.view_angle_deg"] = outline_fields(record)
        elif isinstance(value, list):
            if key == "warnings":
                row["warnings"] = " | ".join(str(w) for w in value)
        else:
            row[key] = value
            if key in uncertainty:
                row[f"u_{key}"] = uncertainty[key]
    return row


def save_height_map(m: Measurement, path: str | os.PathLike) -> Path:
    """Write the height map (nm, NaN where not measured) as ``.npy`` or 32-bit float ``.tif``.

    The map is the measurement's grid (``m.geometry``), piston and tilt removed. The
    write is atomic: a reader sees the old file or the whole new one.
    """
    target = Path(path)
    suffix = target.suffix.lower()
    data = np.asarray(m.height_nm, dtype=np.float32)
    if suffix == ".npy":
        buf = io.BytesIO()
        np.save(buf, data)
        atomic_write_bytes(target, buf.getvalue())
    elif suffix in (".tif", ".tiff"):
        from PIL import Image

        with atomic_path(target) as tmp:
            Image.fromarray(data).save(tmp, format="TIFF")
    else:
        raise SettingsError(f"cannot save a height map as {target.name}: use .npy or .tif")
    return target
