"""Accuracy of every figure on the independent reference set (tests/refset), aperture found.

    python benchmarks/refset_accuracy.py [--seeds 0:60] [--megapixels 0.3:3] [--named]
                                         [--cache DIR] [--jobs N] [--csv FILE]

The photos and their truth come from ``tests/refset`` (a generator that shares no code
with the project; the truth is direct quadrature of the surface). Each photo is written
in its file format, measured by ``flatsight.analysis.pipeline.measure`` with the aperture
found automatically, and every figure compared with the truth. Prints one row per photo
that misses a target, then a table per figure: how many photos are within the target,
how many beyond twice it, the median and worst error, and how often the truth lies
within the record's expanded uncertainty U.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import pickle
import statistics
import sys
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
sys.path.insert(0, str(ROOT))

from tests.refset.cases import NAMED_CASES, named_case, random_case  # noqa: E402
from tests.refset.score import FIGURES, score  # noqa: E402


def _case(key: str, cache: Path, megapixels):
    """The case's photo file and truth, made once and kept in ``cache``."""
    cache.mkdir(parents=True, exist_ok=True)
    meta = cache / f"{key}.pkl"
    if meta.exists():
        with open(meta, "rb") as fh:
            return pickle.load(fh)
    case = named_case(key) if not key.startswith("seed") else random_case(
        int(key[4:]), megapixels=megapixels)
    path = case.save(cache)
    truth = {k: v for k, v in case.truth.items() if k != "zernike_nm"}
    truth["zernike_nm"] = {int(j): float(c) for j, c in case.truth["zernike_nm"].items()}
    info = {"path": str(path), "truth": truth, "wavelength_nm": case.photo.wavelength_nm,
            "center_px": case.photo.center_px, "radius_px": case.photo.radius_px,
            "params": {k: v for k, v in case.photo.params.items()
                       if isinstance(v, (int, float, str))},
            "fmt": case.fmt, "shape": case.photo.shape}
    with open(meta, "wb") as fh:
        pickle.dump(info, fh)
    return info


def _measure(job):
    key, cache, megapixels = job
    from flatsight.analysis.errors import FlatsightError
    from flatsight.analysis.pipeline import MeasureSettings, measure
    from flatsight.analysis.record import measurement_to_record

    info = _case(key, Path(cache), megapixels)
    try:
        m = measure(info["path"], MeasureSettings(wavelength_nm=info["wavelength_nm"]))
    except FlatsightError as exc:
        return key, info, None, str(exc)
    rec = measurement_to_record(m)
    rec["_aperture_err"] = (
        math.hypot(m.aperture.center_x_px - info["center_px"][0],
                   m.aperture.center_y_px - info["center_px"][1]) / info["radius_px"],
        m.aperture.radius_px / info["radius_px"] - 1.0)
    return key, info, rec, None


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", default="0:60", help="random case seeds, START:STOP")
    ap.add_argument("--megapixels", default="0.3:12", help="photo size range, LO:HI")
    ap.add_argument("--named", action="store_true", help="the hand-made hard cases instead")
    ap.add_argument("--cache", default=os.environ.get("REFSET_CACHE", "/tmp/refset-cache"))
    ap.add_argument("--jobs", type=int, default=os.cpu_count() or 1)
    ap.add_argument("--csv", default=None, help="write every (photo, figure) row here")
    ap.add_argument("--quiet", action="store_true", help="only the summary table")
    args = ap.parse_args(argv)
    lo, hi = (float(x) for x in args.megapixels.split(":"))
    if args.named:
        keys = list(NAMED_CASES)
        cache = Path(args.cache) / "named"
    else:
        a, b = (int(x) for x in args.seeds.split(":"))
        keys = [f"seed{s}" for s in range(a, b)]
        cache = Path(args.cache) / f"mp{lo:g}-{hi:g}"
    jobs = [(k, str(cache), (lo, hi)) for k in keys]
    with ProcessPoolExecutor(max_workers=args.jobs) as pool:
        results = list(pool.map(_measure, jobs))

    rows = []
    refused = []
    for key, info, rec, err in results:
        if rec is None:
            refused.append((key, err))
            continue
        sc = score(rec, info["truth"])
        misses = [f for f in FIGURES if not sc[f]["ok"]]
        p = info["params"]
        if misses and not args.quiet:
            what = ", ".join(f"{f[:-3]} {sc[f]['measured']:.1f}/{sc[f]['true']:.1f}"
                             for f in misses)
            print(f"{key:10s} {info['shape'][1]}x{info['shape'][0]} {p.get('fringes', 0):4.1f}fr "
                  f"V{p.get('visibility', 0):.2f} {p.get('edge', '')}/{p.get('tone', '')}"
                  f"/{p.get('surround', '')} sp{p.get('speckle', 0):.2f} {info['fmt']}: {what}")
        rows.append((key, info, rec, sc))

    print(f"\n{len(rows)} photos measured, {len(refused)} refused")
    for key, err in refused:
        print(f"  refused {key}: {err}")
    print(f"\n{'figure':28s} {'within':>8s} {'beyond 2x':>9s} {'median err':>10s} "
          f"{'worst err':>10s} {'worst/allowed':>13s} {'U covers':>9s} {'median U':>9s} "
          f"{'U/max(3nm,10%)':>14s}")
    covered_all = total_u = 0
    ratios_all: list[float] = []
    for f in FIGURES:
        s = [r[3][f] for r in rows]
        if not s:
            continue
        ok = sum(x["ok"] for x in s)
        beyond = sum(abs(x["error"]) > 2 * x["allowed"] for x in s)
        errs = [abs(x["error"]) for x in s]
        worst = max(s, key=lambda x: abs(x["error"]) / x["allowed"])
        cov = [x["covered"] for x in s if x["covered"] is not None]
        us = [float(x["u"]) for x in s if x["u"] is not None]
        ratio = [float(x["u"]) / max(3.0, 0.1 * abs(x["measured"])) for x in s
                 if x["u"] is not None]
        ratios_all.extend(ratio)
        covered_all += sum(cov)
        total_u += len(cov)
        print(f"{f:28s} {ok:>4d}/{len(s):<3d} {beyond:>9d} {statistics.median(errs):>10.2f} "
              f"{max(errs):>10.2f} {abs(worst['error']) / worst['allowed']:>13.2f} "
              f"{(f'{sum(cov)}/{len(cov)}' if cov else '-'):>9s} "
              f"{(f'{statistics.median(us):.2f}' if us else '-'):>9s} "
              f"{(f'{statistics.median(ratio):.2f}' if ratio else '-'):>14s}")
    ap_c = [r[2]["_aperture_err"][0] for r in rows]
    ap_r = [r[2]["_aperture_err"][1] for r in rows]
    if rows:
        print(f"aperture: centre error median {100 * statistics.median(ap_c):.2f} % of R, "
              f"worst {100 * max(ap_c):.2f} %; radius error median "
              f"{100 * statistics.median(map(abs, ap_r)):.2f} %, worst "
              f"{100 * max(map(abs, ap_r)):.2f} %")
    if total_u:
        print(f"uncertainty: truth within U for {covered_all}/{total_u} "
              f"({100 * covered_all / total_u:.1f} %) of (photo, figure) pairs; median "
              f"U / max(3 nm, 10 % of the figure) {statistics.median(ratios_all):.2f}")
    if args.csv:
        with open(args.csv, "w") as fh:
            fh.write("case,figure,true,measured,error,allowed,u\n")
            for key, _, _, sc in rows:
                for f in FIGURES:
                    x = sc[f]
                    fh.write(f"{key},{f},{x['true']:.4f},{x['measured']:.4f},"
                             f"{x['error']:.4f},{x['allowed']:.4f},{x['u']}\n")
    with open(Path(args.cache) / "last.json", "w") as fh:
        json.dump({k: {"truth": i["truth"], "record": {f: r.get(f) for f in FIGURES}}
                   for k, i, r, _ in rows}, fh)
    return 0


if __name__ == "__main__":
    sys.exit(main())
