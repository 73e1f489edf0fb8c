"""The queue's lines (tui/widgets/photo_queue.py): names cut to fit, yet told apart."""

from __future__ import annotations

from pathlib import Path

import pytest
from flatsight.tui.safe_text import shown
from flatsight.tui.station_state import QueueEntry
from flatsight.tui.widgets.photo_queue import entry_prompt

HOSTILE = "BW-FL-0412 [b]\x1b[2J\u202e_f01.png"


def queue_lines(names, width):
    others = tuple(names)
    return [entry_prompt(QueueEntry(Path("/shop") / n), units="nm", wavelength_nm=632.8,
                         width=width, others=others).plain for n in names]


@pytest.mark.parametrize("names", [
    ["BW-FL-0412_hene.png", "BW-FL-0412_mercury.jpg", "BW-FL-0413_sodium.jpg"],
    [f"BW-FL-0999_f0{k}.png" for k in range(1, 6)],
    [HOSTILE, HOSTILE.replace("f01", "f02")],
])
@pytest.mark.parametrize("width", [13, 16, 22])
def test_names_cut_to_fit_the_queue_can_still_be_told_apart(names, width):
    # issue 9, layout: `BW-FL-041…` for hene and mercury; five frames all `BW-FL-0999_f…`.
    # The queue at 80x24 is 22 columns wide; a measured photo's PV and verdict tag leave
    # its name about 13 of them (13 - 3 for the glyph and spacing is the narrowest here)
    lines = queue_lines(names, width)
    assert all(len(line) <= width for line in lines)
    assert len(set(lines)) == len(names), lines
    assert all(line[2:].startswith("BW-") for line in lines)  # the serial's start stays


def test_a_cut_never_splits_the_escape_of_a_control_character():
    # the first middle cut split "\u202e" and showed "u202e" (reverted in 6a42879)
    full = shown(HOSTILE)
    # where one character's escape ends and the next begins: the only places to cut
    bounds, at = {0}, 0
    for ch in HOSTILE:
        at += len(shown(ch))
        bounds.add(at)
    for room in range(2, len(full) + 2):
        for others in ((), (HOSTILE.replace("f01", "f02"),)):
            name = QueueEntry(Path(HOSTILE)).name_in(room, others=others)
            assert len(name) <= room
            if name == full:
                continue
            head, tail = name.split("…")
            assert full.startswith(head) and len(head) in bounds, (room, name)
            assert full.endswith(tail) and len(full) - len(tail) in bounds, (room, name)


def test_a_name_that_fits_is_shown_whole_and_an_average_keeps_its_prefix():
    assert QueueEntry(Path("BW-FL-0412_hene.png")).name_in(30) == "BW-FL-0412_hene.png"
    avg = QueueEntry(Path("BW-FL-0412-0.png"), kind="average",
                     sources=(Path("a"), Path("b"), Path("c")))
    assert avg.name_in(12).startswith("avg×3 ") and len(avg.name_in(12)) == 12


def test_the_fringe_view_draws_what_the_finder_left_out_after_the_operators_own():
    # the measurement's aperture holds the finder's exclusions (a chip in the rim) and
    # the operator's, which the pipeline added to it; the view draws each once, the
    # operator's first (its selection counts them), and the finder's only while the
    # finder's aperture is the one in force
    from types import SimpleNamespace

    from flatsight.analysis.aperture import Aperture, Exclusion

    mine, chip = Exclusion(100.0, 120.0, 10.0), Exclusion(377.0, 77.0, 28.0)
    found = Aperture(480.0, 360.0, 300.0, (chip, mine))
    e = QueueEntry(path=Path("part.png"), exclusions=(mine,),
                   measurement=SimpleNamespace(aperture=found))
    assert e.shown_aperture().exclusions == (mine, chip)
    e.aperture = Aperture(481.0, 360.0, 300.0)  # the operator's own aperture
    assert e.shown_aperture().exclusions == (mine,)
