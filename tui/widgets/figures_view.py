"""The figures view: PV, RMS, PVr, power, irregularity, astigmatism, and the Zernike table."""

from __future__ import annotations

from rich.console import Group
from rich.table import Table
from rich.text import Text
from textual.containers import VerticalScroll
from textual.widgets import Static

from ...analysis.formatting import printable
from ...analysis.zernike import term_name
from ..render.summary import figure_rows, uncertainty_text, zernike_rows
from ..render.units import fmt_height
from ..report_text import limit_lines, verdict_text
from ..safe_text import literal
from ..station_state import QueueEntry, ViewContext

__all__ = ["FiguresView"]


class FiguresView(VerticalScroll, can_focus=True):
    """The numbers, in the operator's units; scrolls with the arrow keys."""

    DEFAULT_CSS = """
    FiguresView { height: 1fr; }
    FiguresView > Static { width: 1fr; }
    """

    def __init__(self, **kwargs) -> None:
        super().__init__(**kwargs)
        self.entry: QueueEntry | None = None
        self.ctx = ViewContext()

    def compose(self):
        yield Static(id="figures-body")

    def show(self, entry: QueueEntry | None, ctx: ViewContext) -> None:
        self.entry = entry
        self.ctx = ctx
        if self.is_mounted:
            self.query_one("#figures-body", Static).update(self._content())

    def on_mount(self) -> None:
        self.query_one("#figures-body", Static).update(self._content())

    def _content(self):
        e = self.entry
        if e is None:
            return Text("No photo. Press o to open photos.", style="dim")
        if e.measurement is None:
            if e.state == "error":
                return Text.assemble(("✗ ", "bold #ff6e8a"), e.error or "error")
            return Text(
                "Measuring…" if e.state == "running" else "Not measured yet (m).", style="dim"
            )
        m = e.measurement
        ctx = self.ctx
        wl = ctx.wavelength_nm
        figures = ctx.figures if ctx.figures is not None else m.figures
        main = Table(box=None, show_header=False, padding=(0, 1), expand=False)
        main.add_column("figure", style="bold")
        main.add_column("value", justify="right")
        main.add_column("U", justify="right", style="dim")
        for name, value in figure_rows(figures, units=ctx.units, wavelength_nm=wl):
            main.add_row(name, value,
                         uncertainty_text(figures, name, units=ctx.units, wavelength_nm=wl))
        # waves and fringes are of the test wavelength; a tolerance's may be another's
        unit = {"nm": "nm", "waves": f"waves of {wl:g} nm",
                "fringes": f"fringes of {wl:g} nm (λ/2 each)"}[ctx.units]
        title = Text.assemble((e.name, "bold"), (f"   λ {wl:g} nm, heights in {unit}", "dim"))
        removed = sorted(set(figures.removed_terms) - {1, 2, 3})
        names = ["piston", "tilt", *dict.fromkeys(term_name(j).split(" ")[0] for j in removed)]
        note = Text(f"terms out: {', '.join(names)}; ± U (k = 2); fr: fringes of {wl:g} nm"
                    "   (u: units)", style="dim")
        zt = Table(box=None, padding=(0, 1), header_style="bold", expand=False)
        zt.add_column("j", justify="right")
        zt.add_column("term")
        zt.add_column("nm", justify="right")
        zt.add_column("waves", justify="right")
        for j, name, nm, waves in zernike_rows(m.zernike.coefficients_nm, wavelength_nm=wl):
            zt.add_row(str(j), name, nm, waves)
        fit = Text(
            f"fit: {m.zernike.n_terms} Noll terms, residual RMS "
            f"{fmt_height(m.zernike.residual_rms_nm, ctx.units, wl)}",
            style="dim",
        )
        parts = [title, note, main]
        if e.spec:
            rule = e.spec.get("decision_rule") or "simple"
            parts += [Text.assemble("tolerance ", printable(e.spec.get("tolerance") or ""),
                                    f" ({rule}): ", verdict_text(e.spec.get("verdict"),
                                                                 upper=True)),
                      *limit_lines(e.spec)]
        if m.warnings:
            parts += [literal("! " + w, "#ffc440") for w in m.warnings]
        parts += [Text(""), fit, zt]
        return Group(*parts)
