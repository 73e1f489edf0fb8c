"""A measurement as a plain-text summary, for the operator's file and the station's save."""

from __future__ import annotations

from ...analysis.formatting import format_number
from ...analysis.shapes import shape_words
from ...analysis.version import flatsight_version
from ...analysis.zernike import term_name
from .units import fmt_height

__all__ = ["UNCERTAINTY_KEYS", "carrier_lines", "carrier_short", "figure_rows", "method_lines",
           "quality_lines", "summary_text", "uncertainty_text", "zernike_rows"]


# a figure's name in the station -> its key in Figures.uncertainty_nm
UNCERTAINTY_KEYS = {
    "PV": "pv_nm", "RMS": "rms_nm", "PVr": "pvr_nm", "power": "power_nm",
    "irregularity": "irregularity_nm", "astigmatism": "astigmatism_nm",
    "sym. irregularity": "symmetric_irregularity_nm",
    "RMS irregularity": "rms_irregularity_nm", "RMS asymmetric": "rms_asymmetric_nm",
}


def figure_rows(figures, *, units: str, wavelength_nm: float) -> list[tuple[str, str]]:
    """``(name, value)`` pairs of the headline figures in ``units``."""

    def h(v):
        return fmt_height(v, units, wavelength_nm)

    power = h(figures.power_nm)
    if units != "fringes":  # fringes of the test wavelength (the views say so)
        power += f"  ({format_number(figures.power_fringes, 2, sign=True)} fr)"
    rows = [
        ("PV", h(figures.pv_nm)),
        ("RMS", h(figures.rms_nm)),
        ("PVr", h(figures.pvr_nm)),
        ("power", power),
    ]
    if figures.radius_of_curvature_m is not None:
        rows.append(("radius", f"{format_number(figures.radius_of_curvature_m, 1, sign=True)} m"))
    rows += [
        ("irregularity", h(figures.irregularity_nm)),
        ("astigmatism", f"{h(figures.astigmatism_nm)} @ {figures.astigmatism_axis_deg:.0f}°"),
        ("sym. irregularity", h(figures.symmetric_irregularity_nm)),
        ("RMS irregularity", h(figures.rms_irregularity_nm)),
        ("RMS asymmetric", h(figures.rms_asymmetric_nm)),
    ]
    return rows


def _span(values, digits: int) -> str:
    """``"14.2–16.0"`` over the values given (one value when they agree); ``—`` without any."""
    seen = [v for v in values if v is not None and v == v]
    if not seen:
        return "—"
    low, high = format_number(min(seen), digits), format_number(max(seen), digits)
    return low if low == high else f"{low}–{high}"


def carrier_lines(fringes, period_px, visibility, per_photo=()) -> list[str]:
    """The tilt carrier and visibility in a few short lines (at most 24 characters each).

    ``per_photo`` gives an average's photos as ``(fringes, period_px, visibility)``: an
    average has no carrier of its own, so the lines give the range over its photos. A map
    without a carrier (phase-shifted frames) says so, never ``0.0``.
    """
    if per_photo:
        f, p, v = zip(*per_photo, strict=True)
        return [f"{len(per_photo)} photos, each its own:", f"tilt fringes {_span(f, 1)}",
                f"period {_span(p, 1)} px", f"visibility {_span(v, 2)}"]
    if fringes is None or fringes != fringes:
        return ["no tilt carrier", f"visibility {_span([visibility], 2)}"]
    return [f"{format_number(fringes, 1)} tilt fringes", f"period {_span([period_px], 1)} px",
            f"visibility {_span([visibility], 2)}"]


def _quality_triples(q) -> tuple:
    return tuple((p.carrier_fringes, p.fringe_period_px, p.mean_modulation) for p in q.per_photo)


def method_lines(q, ring_sign: str | None = None) -> list[str]:
    """The single-photo method and why, in short lines; none for a combined map.

    ``ring_sign`` is the sign the operator stated for closed fringes (the measurement's
    ``settings.ring_sign``), said when the measurement took it.
    """
    method = getattr(q, "method", "")
    if not method:
        return []
    lines = [f"method {method}", f"({q.method_reason})" if q.method_reason else ""]
    if q.terms_fitted:
        lines.append(f"{q.terms_fitted} terms resolved")
    if q.sign == "stated":
        lines.append(f"sign stated: {ring_sign}" if ring_sign else "sign stated, not measured")
    return [line for line in lines if line]


def quality_lines(q, ring_sign: str | None = None) -> list[str]:
    """:func:`carrier_lines` of a measurement's ``Quality``, then its method."""
    return carrier_lines(q.carrier_fringes, q.fringe_period_px, q.mean_modulation,
                         _quality_triples(q)) + method_lines(q, ring_sign)


def carrier_short(q) -> str:
    """``"16 fr"``, ``"14–16 fr (2 photos)"`` or ``"no carrier"``, for a one-line summary."""
    if q.per_photo:
        span = _span([p.carrier_fringes for p in q.per_photo], 0)
        return f"{span} fr ({len(q.per_photo)} photos)"
    if q.carrier_fringes != q.carrier_fringes:
        return "no carrier"
    return f"{format_number(q.carrier_fringes, 0)} fr"


def uncertainty_text(figures, name: str, *, units: str, wavelength_nm: float) -> str:
    """``"± 3.1 nm"``: the expanded uncertainty (k = 2) of figure ``name``; empty without one."""
    u = (getattr(figures, "uncertainty_nm", None) or {}).get(UNCERTAINTY_KEYS.get(name, ""))
    if u is None:
        return ""
    return f"± {fmt_height(u, units, wavelength_nm)}"


def zernike_rows(coefficients_nm, *, wavelength_nm: float) -> list[tuple[int, str, str, str]]:
    """``(noll j, trade name, nm, waves)`` for every fitted term."""
    return [
        (j, term_name(j), format_number(c, 2, sign=True),
         format_number(c / wavelength_nm, 4, sign=True))
        for j, c in enumerate(coefficients_nm, start=1)
    ]


def summary_text(m, *, figures=None, removed_terms: tuple[int, ...] = ()) -> str:
    """The measurement ``m`` as readable text.

    ``figures`` (with ``removed_terms``) adds the figures the operator was looking at
    when more terms than piston and tilt were taken out.
    """
    wl = m.settings.wavelength_nm
    a = m.aperture
    out = [
        "Flatsight measurement summary",
        f"flatsight      {flatsight_version()}",
        f"photo          {m.photo}",
    ]
    if m.photo_sha256:
        out.append(f"sha256         {m.photo_sha256}")
    out += [
        f"wavelength     {wl:g} nm   (1 fringe = {wl / 2:g} nm)",
        f"sign           {_sign_words(m)}",
        f"aperture       centre ({a.center_x_px:.1f}, {a.center_y_px:.1f}) px, "
        f"radius {a.radius_px:.1f} px, {len(a.exclusions)} exclusion(s)",
    ]
    if a.shape is not None:
        out.append(f"outline        {a.shape.to_text()}: {shape_words(a.shape.to_dict())}")
    if m.settings.diameter_mm:
        out.append(f"diameter       {m.settings.diameter_mm:g} mm")
    out += ["", "Figures (piston and tilt removed; ± U is the expanded uncertainty, k = 2)"]
    waves = dict(figure_rows(m.figures, units="waves", wavelength_nm=wl))
    for name, nm in figure_rows(m.figures, units="nm", wavelength_nm=wl):
        u = uncertainty_text(m.figures, name, units="nm", wavelength_nm=wl)
        out.append(f"  {name:<18} {nm:<26} {u:<12} {waves[name]}".rstrip())
    if figures is not None and set(removed_terms) - {1, 2, 3}:
        names = ", ".join(term_name(j) for j in sorted(set(removed_terms) - {1, 2, 3}))
        out += ["", f"Figures with {names} also removed"]
        for name, value in figure_rows(figures, units="nm", wavelength_nm=wl)[:3]:
            out.append(f"  {name:<18} {value}")
    q = m.quality
    out += ["", "Fringes"] + [f"  {line}" for line in quality_lines(q, m.settings.ring_sign)] + [
        f"  masked {100 * q.masked_fraction:.1f} % of the aperture",
    ]
    if m.warnings:
        out += ["", "Warnings"] + [f"  ! {w}" for w in m.warnings]
    out += [
        "",
        "Zernike terms (Noll order, each coefficient is the term's RMS)",
        "   j  term                           nm        waves",
    ]
    for j, name, nm, waves in zernike_rows(m.zernike.coefficients_nm, wavelength_nm=wl):
        out.append(f"  {j:>2}  {name:<28} {nm:>9}  {waves:>9}")
    return "\n".join(out) + "\n"


def _sign_words(m) -> str:
    """How the surface's sign was set: as photographed, inverted, or stated for rings."""
    if m.quality.sign == "stated" and m.settings.ring_sign:
        return f"stated {m.settings.ring_sign} for closed fringes (push test), not measured"
    return "inverted" if m.settings.invert else "as photographed"
