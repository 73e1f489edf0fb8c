"""The trend view: a figure over time from the inspection log, its tolerance, the pass rate."""

from __future__ import annotations

from datetime import datetime

from rich.text import Text
from textual.binding import Binding

from ..safe_text import shown
from .view_base import StationView

__all__ = ["TREND_FIGURES", "TrendView", "pass_rate"]

TREND_FIGURES = ("auto", "pvr_nm", "pv_nm", "rms_nm", "power_nm", "irregularity_nm")


def auto_figure(rows: list[dict]) -> str:
    """The figure the newest record's tolerance limits first (power for ISO 3/A(B)), else PVr."""
    from ..cmd_records import limited_figure  # one rule for the station and `flatsight trend`

    return limited_figure(rows, TREND_FIGURES)


def pass_rate(rows: list[dict]) -> tuple[int, int]:
    """``(passed, judged)`` over the records that had a tolerance (inconclusive: not passed)."""
    judged = [r for r in rows if r.get("verdict") in ("pass", "fail", "inconclusive")]
    return sum(r["verdict"] == "pass" for r in judged), len(judged)


def _time(stamp: str) -> datetime:
    return datetime.fromisoformat(stamp.replace("Z", "+00:00"))


class TrendView(StationView):
    """A figure over time for the current part (or every part), from the inspection log."""

    BINDINGS = [
        Binding("f", "screen.trend_figure", "Next figure"),
        Binding("l", "screen.trend_scope", "Part / all parts"),
    ]

    def draw(self) -> Text:
        from ..cmd_records import _limits_for, trend_lines

        ctx = self.ctx
        rows = list(ctx.log_rows)
        if not ctx.trend_all:
            rows = [r for r in rows if r.get("part") == ctx.part]
        figure = auto_figure(rows) if ctx.trend_figure == "auto" else ctx.trend_figure
        scope = "all parts" if ctx.trend_all or ctx.part is None else f"part {shown(ctx.part)}"
        head = Text.assemble((f"{figure} over time", "bold"), f" · {scope}")
        if ctx.log_note and not ctx.log_rows:
            return head + Text("\n" + shown(ctx.log_note), style="dim")
        rows = rows[::-1]  # oldest first
        points = [(_time(r["logged_utc"]), float(r[figure]), r.get("verdict"))
                  for r in rows if isinstance(r.get(figure), int | float)]
        if not points:
            return head + Text(f"\nno logged records with {figure} for {scope}", style="dim")
        limits, note = _limits_for(rows[-1], figure)
        w, h = self.size.width, self.size.height
        plot = trend_lines(points, width=max(30, w - 1), height=max(4, h - 6), limits_nm=limits)
        out = head + Text(f" · {len(points)} record{'s' if len(points) != 1 else ''}\n")
        for line in plot:
            label, bar, body = line.partition("│")
            if not bar:
                out.append(line + "\n", style="dim")
                continue
            text = Text(body)
            text.highlight_regex(r"-+", "#ffc440")
            text.highlight_regex(r"o", "#7fd67f")
            text.highlight_regex(r"x", "bold #ff6e8a")
            text.highlight_regex(r"\?", "bold #ffc440")
            out.append(label + bar, style="dim")
            out.append_text(text)
            out.append("\n")
        passed, judged = pass_rate(rows)
        rate = (f"pass rate {passed}/{judged} ({100.0 * passed / judged:.0f} %)"
                if judged else "pass rate: no record had a tolerance")
        out.append("o pass  x fail  ? inconclusive  * no tolerance\n", style="dim")
        out.append(f"--- {note}\n"[: max(10, w)], style="dim")
        out.append(rate, style="bold")
        return out
