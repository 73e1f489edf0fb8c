"""The queue's lines (tui/widgets/photo_queue.py): names cut to fit, yet told apart."""

from __future__ import annotations

from pathlib import Path

import pytest
from flatsight.tui.station_state import QueueEntry
from flatsight.tui.widgets.photo_queue import entry_prompt


@pytest.mark.parametrize("names", [
    ["BW-FL-0412_hene.png", "BW-FL-0412_mercury.jpg"],
    [f"BW-FL-0999_frame-{k}.png" for k in range(5)],
])
def test_names_cut_to_fit_the_queue_can_still_be_told_apart(names):
    # issue 9, layout: `BW-FL-041…` for hene and mercury; five frames all `BW-FL-0999_f…`
    # the queue at 80x24 has 22 columns; a measured photo's PV ("49.6 nm") and verdict tag
    # take 9 of them, leaving the name what an unmeasured one has at 13
    width = 13
    lines = [entry_prompt(QueueEntry(Path("/shop") / n), units="nm", wavelength_nm=632.8,
                          width=width).plain for n in names]
    assert all(len(line) <= width for line in lines)
    assert len(set(lines)) == len(names), lines
    assert all(line[2:].startswith("BW-F") for line in lines)  # the serial's start stays
