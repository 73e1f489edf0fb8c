"""Accuracy on parts that are not a circle seen square-on: single photos with the outline
found automatically, or phase-shifted stacks with the outline given.

    python benchmarks/shape_accuracy.py [--seeds 200:230] [--kinds ellipse,rect,poly,annulus,cut]
                                        [--stack N] [--jobs N]

The photos and their truth come from ``tests/refset/shaped.py`` (an independent
generator: a round part seen 15-35 deg off axis, rectangles 1:1 to 4:1 at any rotation,
convex polygons of 5 to 8 corners, rings with a dark centre hole 20-45 % of their
diameter and round parts with one or two flats 75-95 % of the radius from the centre;
the truth is direct quadrature, or a direct sum on a fine grid, over the part's real
area). Each photo is measured by ``flatsight.analysis.pipeline.measure`` with nothing
but the wavelength given.

With ``--stack N`` each case is instead a stack of N frames of the same part, surface
and lamp, 360/N deg of phase apart, with 2 to 6 tilt fringes and each frame its own
noise (``render_shaped_stack``), measured by
``flatsight.analysis.multiphoto.phase_shifting.measure_stack`` with the wavelength, the
step and the part's true outline given, as an operator types it for ``--aperture``
(``outline_text``, read by ``shapes.parse_shape`` as the command line reads it). The
truth is the same as for the single photo (the tilt does not enter it); the outline
column then only confirms the outline given was kept.

The figures are compared with the truth: RMS within max(2 nm, 5 %) is the issue's
target; power within max(3 nm, 5 %), RMSi within max(2 nm, 5 %), PV, PVr and
irregularity (B) within max(8 nm, 10 %), astigmatism and RMSa within max(2 nm, 5 %) and C
within max(6 nm, 10 %) are ours (C and RMSa only where the part holds whole rings about
its centre: an ellipse's circle, a ring). Prints a row per photo that misses the RMS target
(a stack: a row per figure that misses its target or whose truth lies outside U), then
a table per shape: photos, outline kind right, passes per figure, the worst error and
how many photos have the truth within the record's expanded uncertainty U. Seeds 200
and up are held out: nothing was tuned on them.
"""

from __future__ import annotations

import argparse
import math
import os
import sys
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from tests.refset.shaped import (  # noqa: E402
    outline_text,
    random_shaped_case,
    render_shaped_stack,
)

#: figure -> (floor nm, share of the true value)
TARGETS = {"rms_nm": (2.0, 0.05), "power_nm": (3.0, 0.05),
           "rms_irregularity_nm": (2.0, 0.05), "pv_nm": (8.0, 0.10),
           "pvr_nm": (8.0, 0.10), "irregularity_nm": (8.0, 0.10),
           "astigmatism_nm": (2.0, 0.05), "symmetric_irregularity_nm": (6.0, 0.10),
           "rms_asymmetric_nm": (2.0, 0.05)}
LABELS = {"rms_nm": "RMS", "power_nm": "power", "rms_irregularity_nm": "RMSi", "pv_nm": "PV",
          "pvr_nm": "PVr", "irregularity_nm": "B", "astigmatism_nm": "astig",
          "symmetric_irregularity_nm": "C", "rms_asymmetric_nm": "RMSa"}


def _measure(job):
    seed, kind, stack = job
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    import numpy as np
    from flatsight.analysis.aperture import Aperture
    from flatsight.analysis.errors import FlatsightError
    from flatsight.analysis.multiphoto.phase_shifting import measure_stack
    from flatsight.analysis.pipeline import MeasureSettings, measure
    from flatsight.analysis.shapes import parse_shape

    case = random_shaped_case(seed, kind)
    try:
        if stack:
            step = 360.0 / stack
            frames = render_shaped_stack(case, stack, step, seed=seed)
            # as the command line reads --aperture
            given = Aperture.of_shape(parse_shape(outline_text(case)))
            m = measure_stack([f.astype(np.float64) / 255.0 for f in frames],
                              MeasureSettings(wavelength_nm=case.wavelength_nm, aperture=given),
                              step_deg=step).measurement
        else:
            m = measure(case.pixels.astype(np.float64) / 255.0,
                        MeasureSettings(wavelength_nm=case.wavelength_nm))
    except FlatsightError as exc:
        return seed, kind, None, case.truth, str(exc), case.part
    found = m.aperture.kind
    figures = {name: float(getattr(m.figures, name)) for name in TARGETS}
    figures.update({"U " + name: float(m.figures.uncertainty_nm[name]) for name in TARGETS})
    return seed, kind, (found, figures), case.truth, None, case.part


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", default="200:230", help="first:last (last excluded)")
    ap.add_argument("--kinds", default="ellipse,rect,poly,annulus,cut")
    ap.add_argument("--stack", type=int, default=0, metavar="N",
                    help="measure a phase-shifted stack of N frames 360/N deg apart "
                         "(at least 3), the outline given, instead of one photo")
    ap.add_argument("--jobs", type=int, default=2)
    args = ap.parse_args(argv)
    if args.stack and args.stack < 3:
        ap.error("--stack takes at least 3 frames")
    lo, hi = (int(v) for v in args.seeds.split(":"))
    jobs = [(s, k, args.stack) for k in args.kinds.split(",") for s in range(lo, hi)]
    with ProcessPoolExecutor(max_workers=args.jobs) as pool:
        results = list(pool.map(_measure, jobs))

    if args.stack:
        print(f"seeds {lo} to {hi - 1}, stacks of {args.stack} frames "
              f"{360.0 / args.stack:g} deg apart, outline given (--aperture)")
    else:
        print(f"seeds {lo} to {hi - 1}, outline found automatically")
    table = {}
    for seed, kind, got, truth, error, _part in results:
        row = table.setdefault(kind, {"n": 0, "kind_ok": 0, "refused": 0,
                                      **{f: [0, 0.0, 0, 0] for f in TARGETS}})
        row["n"] += 1
        if got is None:
            row["refused"] += 1
            print(f"  {kind} seed {seed}: refused: {error}")
            continue
        found, figures = got
        row["kind_ok"] += found == kind
        if found != kind:
            print(f"  {kind} seed {seed}: outline taken as {found}")
        for name, (floor, share) in TARGETS.items():
            if name not in truth:  # C and RMSa: only where the part holds whole rings
                continue
            row[name][3] += 1
            true = truth[name]
            err = figures[name] - true
            allowed = max(floor, share * abs(true))
            row[name][0] += abs(err) <= allowed
            # the worst error as a share of what is allowed
            row[name][1] = max(row[name][1], abs(err) / allowed)
            row[name][2] += abs(err) <= figures["U " + name]  # the truth within U
            if args.stack and abs(err) > min(allowed, figures["U " + name]):
                # a stack should meet every target: show each miss, and each truth outside U
                print(f"  {kind} seed {seed}: {LABELS[name]} {figures[name]:.2f} nm, true "
                      f"{true:.2f} nm: error {err:+.2f} nm, allowed {allowed:.2f}, "
                      f"U {figures['U ' + name]:.2f}")
            elif name == "rms_nm" and abs(err) > allowed:
                print(f"  {kind} seed {seed}: RMS {figures[name]:.2f} nm, true {true:.2f} "
                      f"nm (found {found})")
    print()
    head = f"{'shape':8} {'photos':>6} {'outline':>8} {'refused':>7}"
    for name in TARGETS:
        head += f" {LABELS[name] + ' ok':>9} {'worst':>6} {'in U':>5}"
    print(head)
    for kind, row in table.items():
        line = f"{kind:8} {row['n']:6d} {row['kind_ok']:8d} {row['refused']:7d}"
        for name in TARGETS:
            ok, worst, covered, scored = row[name]
            if not scored:
                line += f" {'-':>9} {'-':>6} {'-':>5}"
                continue
            line += (f" {ok:9d} {worst:6.2f}" if math.isfinite(worst) else f" {ok:9d}      -")
            line += f" {covered:5d}"
        print(line)
    print("\nworst: the largest error as a multiple of what the target allows (1.00 = at it); "
          "in U: photos whose error lies within the record's expanded uncertainty U; "
          "C and RMSa are scored only where the part holds whole rings about its centre "
          "(an ellipse's circle, a ring)")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
