"""How long the station takes from start to the first figures on a photo, printed as a table.

Runs the real station headless (Textual's test driver, no terminal needed) on synthetic
fringe photos of about 0.5, 1 and 2 megapixels, with the real measurement library, and
compares with ``measure`` called directly. The target for a 1 MP photo is 2 s.

    python benchmarks/bench_station.py [--repeat 3]
"""

from __future__ import annotations

import argparse
import asyncio
import statistics
import tempfile
import time
from pathlib import Path

SIZES = {"0.5 MP": (600, 800), "1 MP": (868, 1152), "2 MP": (1224, 1632)}


def make_photo(folder: Path, shape: tuple[int, int]) -> Path:
    from flatsight.analysis.synthetic import SyntheticSurface, make_fringe_photo, write_photo

    # a Brindlewick Optical Works demo part: some power, astigmatism and coma
    surface = SyntheticSurface({4: 35.0, 5: 10.0, 6: -6.0, 7: 4.0}, ripple_nm=2.0)
    photo = make_fringe_photo(surface, shape=shape, fringes=18.0, seed=3)
    path = folder / f"BW-FL-0412_{shape[0]}x{shape[1]}.png"
    write_photo(photo, path)
    return path


async def station_times(path: Path) -> tuple[float, float]:
    """Seconds from creating the app to its first paint, and to its first figures."""
    from flatsight.tui.app import FlatsightStation
    from flatsight.tui.config import StationSettings

    t0 = time.perf_counter()
    app = FlatsightStation([path], settings=StationSettings(colour="truecolor"), config_path=None)
    first_paint = None
    async with app.run_test(size=(120, 40)):
        first_paint = time.perf_counter() - t0  # the bench is mounted and composed
        bench = app.bench
        while bench.first_figures_s is None:
            if time.perf_counter() - t0 > 120:
                raise RuntimeError(f"no figures after 120 s: {bench.entries[0].error}")
            await asyncio.sleep(0.01)
        first_figures = time.perf_counter() - t0
        if bench.entries[0].state == "error":
            raise RuntimeError(bench.entries[0].error)
    return first_paint, first_figures


def measure_time(path: Path) -> float:
    from flatsight.analysis.pipeline import MeasureSettings, measure

    t0 = time.perf_counter()
    measure(path, MeasureSettings(wavelength_nm=632.8))
    return time.perf_counter() - t0


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=3)
    args = parser.parse_args()
    rows = []
    with tempfile.TemporaryDirectory() as tmp:
        for label, shape in SIZES.items():
            path = make_photo(Path(tmp), shape)
            paint, figures, direct = [], [], []
            for _ in range(args.repeat):
                p, f = asyncio.run(station_times(path))
                paint.append(p)
                figures.append(f)
                direct.append(measure_time(path))
            rows.append(
                (
                    label,
                    shape,
                    statistics.median(paint),
                    statistics.median(figures),
                    statistics.median(direct),
                )
            )
    print(f"station start to first figures (median of {args.repeat}; target 2 s at 1 MP)")
    print(
        f"{'photo':<8} {'pixels':>11} {'first paint s':>14} {'first figures s':>16} "
        f"{'measure() s':>12} {'station overhead s':>19}"
    )
    for label, shape, p, f, d in rows:
        print(
            f"{label:<8} {shape[1]:>5}x{shape[0]:<5} {p:>14.2f} {f:>16.2f} {d:>12.2f} "
            f"{f - d:>19.2f}"
        )


if __name__ == "__main__":
    main()
