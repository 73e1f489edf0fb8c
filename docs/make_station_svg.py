"""Make docs/station.svg: the station's surface view on the demo photos, as the README shows it.

Runs the real station headless (Textual's run_test) on sample_images with the demo
presets, waits for the first measurement, switches to the surface view and exports
the screen. Nothing is logged and no settings are remembered.
"""

from __future__ import annotations

import asyncio
import sys
import tempfile
from pathlib import Path

from flatsight.analysis.atomic import atomic_write_text
from flatsight.tui.app import FlatsightStation
from flatsight.tui.config import StationSettings

ROOT = Path(__file__).resolve().parent.parent


async def main(out: Path) -> None:
    photos = sorted(p for p in (ROOT / "sample_images").iterdir()
                    if p.suffix.lower() in {".png", ".jpg", ".tif"})
    with tempfile.TemporaryDirectory() as tmp:
        app = FlatsightStation(
            photos,
            settings=StationSettings(colour="truecolor", diameter_mm=50.0),
            config_path=Path(tmp) / "station.toml",
            presets_file=ROOT / "sample_images" / "presets.toml",
        )
        async with app.run_test(size=(120, 36)) as pilot:
            await pilot.pause()
            await app.workers.wait_for_complete()
            await pilot.pause()
            await pilot.press("3")
            await app.workers.wait_for_complete()
            await pilot.pause()
            atomic_write_text(out, app.export_screenshot(title="Flatsight"))


if __name__ == "__main__":
    target = Path(sys.argv[1]) if len(sys.argv) > 1 else ROOT / "docs" / "station.svg"
    asyncio.run(main(target))
    print(f"wrote {target}")
