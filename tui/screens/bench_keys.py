"""The bench's keys as rows for the help screen and the command palette."""

from __future__ import annotations

from ..widgets.fringe_view import FringeView
from ..widgets.profile_view import ProfileView
from ..widgets.surface_view import SurfaceView
from ..widgets.trend_view import TrendView

__all__ = ["key_rows"]

KEY_NAMES = {
    "left_square_bracket": "[",
    "right_square_bracket": "]",
    "question_mark": "?",
    "equals_sign": "=",
    "plus": "+",
    "minus": "-",
    "comma": ",",
    "full_stop": ".",
    "less_than_sign": "<",
    "greater_than_sign": ">",
}


def key_rows(screen) -> list[tuple[str, str, str, str]]:
    """``(where, key, description, action)`` for every binding of ``screen`` and its views."""
    rows = []
    scopes = [
        ("anywhere", screen.BINDINGS),
        ("fringes", FringeView.BINDINGS),
        ("surface", SurfaceView.BINDINGS),
        ("profiles", ProfileView.BINDINGS),
        ("trend", TrendView.BINDINGS),
    ]
    for scope, bindings in scopes:
        for b in bindings:
            key = b.key.split(",")[0]
            rows.append((scope, KEY_NAMES.get(key, key), b.description,
                         b.action.removeprefix("screen.")))
    return rows
