"""A batch on every core: `flatsight measure --jobs N` against `--jobs 1`, as a table.

Measures the same batch of demo photos (2 MP by default, 40 of them) with the console
command at each ``--jobs`` value, in a fresh process each time, and prints the wall
time, the speed-up over ``--jobs 1`` and the peak resident memory of the whole process
tree (the command and its workers, summed, sampled from ``/proc`` every 0.1 s), beside
the target: ``--jobs 2`` at least 1.7 x faster than ``--jobs 1`` on 2 cores. Every run
must print every photo in the order given; the run fails otherwise.

    python benchmarks/bench_jobs.py [--photos 40] [--megapixels 2] [--jobs 1,2]

Run it on an otherwise idle machine: other work on the cores is counted as ours.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import shutil
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

from flatsight.analysis.synthetic import SyntheticSurface, make_fringe_photo, write_photo
from flatsight.tui.parallel import available_cores

SPEEDUP_TARGET = 1.7


def _tree_rss_mb(root: int) -> float:
    """Resident memory of ``root`` and every process below it, MB (Linux /proc)."""
    children: dict[int, list[int]] = {}
    rss: dict[int, int] = {}
    for entry in os.listdir("/proc"):
        if not entry.isdigit():
            continue
        try:
            with open(f"/proc/{entry}/stat") as fh:
                fields = fh.read().rsplit(")", 1)[1].split()
            ppid, pages = int(fields[1]), int(fields[21])
        except (OSError, IndexError, ValueError):
            continue
        children.setdefault(ppid, []).append(int(entry))
        rss[int(entry)] = pages
    total, todo = 0, [root]
    while todo:
        pid = todo.pop()
        total += rss.get(pid, 0)
        todo.extend(children.get(pid, []))
    return total * os.sysconf("SC_PAGE_SIZE") / 1e6


def _run(photos: list[Path], jobs: int, log: Path) -> tuple[float, float, list[str]]:
    code = "import sys; from flatsight.tui.cli import main; sys.exit(main(sys.argv[1:]))"
    cmd = [sys.executable, "-c", code, "measure", *map(str, photos), "--wavelength", "632.8",
           "--json", "--jobs", str(jobs), "--log", str(log)]
    peak = 0.0
    start = time.perf_counter()
    proc = subprocess.Popen(cmd, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    stop = threading.Event()

    def sample() -> None:
        nonlocal peak
        while not stop.is_set():
            peak = max(peak, _tree_rss_mb(proc.pid))
            stop.wait(0.1)

    sampler = threading.Thread(target=sample, daemon=True)
    sampler.start()
    out, err = proc.communicate()
    elapsed = time.perf_counter() - start
    stop.set()
    sampler.join()
    if proc.returncode != 0:
        sys.exit(f"bench_jobs: --jobs {jobs} exited {proc.returncode}: {err.strip()}")
    names = [Path(json.loads(line)["photo"]).name for line in out.splitlines() if line]
    return elapsed, peak, names


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--photos", type=int, default=40)
    ap.add_argument("--megapixels", type=float, default=2.0)
    ap.add_argument("--jobs", default="1,2", help="comma-separated --jobs values")
    args = ap.parse_args()
    jobs_list = [int(j) for j in args.jobs.split(",")]

    folder = Path(tempfile.mkdtemp(prefix="flatsight-bench-jobs-"))
    try:
        width = int(round(math.sqrt(args.megapixels * 1e6 * 4 / 3)))
        shape = (width * 3 // 4, width)
        photos = []
        for k in range(args.photos):
            surface = SyntheticSurface({4: 30.0 + k, 5: -10.0, 6: 8.0, 11: 4.0},
                                       ripple_nm=0.8)
            photo = make_fringe_photo(surface, shape=shape, fringes=18.0 + k % 5,
                                      angle_deg=(20.0 + 7 * k) % 180.0, seed=k)
            photos.append(folder / f"BW-FL-{1000 + k:04d}.png")
            write_photo(photo, photos[-1])
        expected = [p.name for p in photos]
        print(f"{args.photos} photos of {shape[1]}x{shape[0]} px "
              f"({shape[0] * shape[1] / 1e6:.1f} MP); {available_cores()} cores available; "
              f"load average {os.getloadavg()[0]:.2f} before the runs")
        print()
        print(f"{'--jobs':>6}  {'wall s':>8}  {'s/photo':>8}  {'speed-up':>8}  "
              f"{'peak MB (all processes)':>24}")
        base = None
        for jobs in jobs_list:
            elapsed, peak, names = _run(photos, jobs, folder / f"log-{jobs}.sqlite")
            if names != expected:
                sys.exit(f"bench_jobs: --jobs {jobs} printed the photos out of order "
                         "or left some out")
            base = base or (elapsed if jobs == 1 else None)
            speedup = f"{base / elapsed:.2f} x" if base else "-"
            print(f"{jobs:>6}  {elapsed:>8.1f}  {elapsed / args.photos:>8.2f}  "
                  f"{speedup:>8}  {peak:>24.0f}")
        print()
        print(f"target: --jobs 2 at least {SPEEDUP_TARGET} x faster than --jobs 1 on 2 cores")
    finally:
        shutil.rmtree(folder, ignore_errors=True)


if __name__ == "__main__":
    main()
