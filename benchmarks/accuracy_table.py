"""Measure N random synthetic photos and print how far each is from the truth.

Every photo is drawn by ``flatsight.analysis.synthetic.random_photo`` across the whole
hard range, written to PNG, JPEG or TIFF (or passed as an array), measured with the
aperture found automatically, and compared with the true surface over the reported
disk. Targets: RMS within max(1.5 nm, 2 %), PVr within max(5 nm, 5 %), Noll 4-15
within max(1.5 nm, 3 %), aperture centre and radius within 1.5 % of the radius.

    python benchmarks/accuracy_table.py [--n 40] [--seed 0] [--megapixels 0.3 2.0]
"""

from __future__ import annotations

import argparse
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
from flatsight.analysis.errors import FlatsightError
from flatsight.analysis.pipeline import MeasureSettings, measure
from flatsight.analysis.synthetic import check_accuracy, random_photo, write_photo

CRITERIA = ("rms", "pvr", "zernike", "aperture")


def _source(photo, index: int, folder: Path):
    """Alternate the ways a photo reaches the pipeline; JPEG only for 8-bit photos."""
    kind = ("png", "jpg", "tif", "array")[index % 4]
    if kind == "jpg" and photo.params["bit_depth"] == 16:
        kind = "png"
    if kind == "array":
        return photo.image, "array"
    path = folder / f"photo{index}.{kind}"
    write_photo(photo, path)
    return path, kind


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--n", type=int, default=40, help="number of photos (default 40)")
    ap.add_argument("--seed", type=int, default=0, help="first seed (default 0)")
    ap.add_argument(
        "--megapixels",
        type=float,
        nargs=2,
        default=(0.3, 2.0),
        metavar=("MIN", "MAX"),
        help="photo size range in megapixels (default 0.3 2.0)",
    )
    args = ap.parse_args(argv)

    head = (
        f"{'seed':>5} {'MP':>5} {'fmt':>5} {'bit':>3} {'sur':>4} {'fr':>5} {'ang':>5} "
        f"{'vis':>4} {'noise':>5} {'lam':>6} | {'RMS true':>8} {'meas':>7} {'err':>6} | "
        f"{'PVr true':>8} {'meas':>7} {'err':>6} | {'Z err':>5} {'lim':>5} | "
        f"{'c err':>5} {'r err':>5} {'lim':>5} | {'time':>5} verdict"
    )
    print(head)
    print("-" * len(head))
    rows = []
    failures = []
    with tempfile.TemporaryDirectory() as tmp:
        for i in range(args.n):
            seed = args.seed + i
            photo = random_photo(seed, megapixels=tuple(args.megapixels))
            p = photo.params
            source, kind = _source(photo, i, Path(tmp))
            left = (
                f"{seed:5d} {p['megapixels']:5.2f} {kind:>5} {p['bit_depth']:3d} "
                f"{p['surround'][:4]:>4} {p['fringes']:5.1f} {p['angle_deg']:5.1f} "
                f"{p['visibility']:4.2f} {p['noise']:5.3f} {photo.wavelength_nm:6.1f} | "
            )
            t0 = time.perf_counter()
            try:
                m = measure(source, MeasureSettings(wavelength_nm=photo.wavelength_nm))
            except FlatsightError as exc:
                print(left + f"measurement refused: {exc}")
                failures.append((seed, str(exc)))
                continue
            dt = time.perf_counter() - t0
            c = check_accuracy(
                photo,
                aperture=m.aperture,
                rms_nm=m.figures.rms_nm,
                pvr_nm=m.figures.pvr_nm,
                zernike_nm=m.zernike.coefficients_nm,
            )
            t = c.truth
            verdict = "ok" if c.ok else "FAIL " + ",".join(k for k, v in c.passed.items() if not v)
            print(
                left + f"{t.rms_nm:8.2f} {c.measured_rms_nm:7.2f} {c.rms_error_nm:6.2f} | "
                f"{t.pvr_nm:8.1f} {c.measured_pvr_nm:7.1f} {c.pvr_error_nm:6.1f} | "
                f"{c.zernike_error_nm:5.2f} {c.zernike_limit_nm:5.2f} | "
                f"{c.center_error_px:5.2f} {c.radius_error_px:5.2f} {c.aperture_limit_px:5.2f} | "
                f"{dt:5.2f} {verdict}",
                flush=True,
            )
            rows.append((seed, c, dt))

    n = args.n
    print()
    print(f"summary over {n} photos ({len(failures)} refused by the pipeline)")
    if rows:
        checks = [c for _, c, _ in rows]
        for k in CRITERIA:
            passed = sum(c.passed[k] for c in checks)
            print(f"  {k:9s} pass {passed:3d}/{n}  ({100 * passed / n:5.1f} %)")
        all_ok = sum(c.ok for c in checks)
        print(f"  {'all four':9s} pass {all_ok:3d}/{n}  ({100 * all_ok / n:5.1f} %)")

        def med(values) -> float:
            return float(np.median(values))

        rel_rms = [c.rms_error_nm / max(c.truth.rms_nm, 1e-9) for c in checks]
        rel_pvr = [c.pvr_error_nm / max(c.truth.pvr_nm, 1e-9) for c in checks]
        rel_centre = [c.center_error_px / c.true_aperture.radius_px for c in checks]
        rel_radius = [c.radius_error_px / c.true_aperture.radius_px for c in checks]
        print(
            "  median errors: RMS "
            f"{med([c.rms_error_nm for c in checks]):.2f} nm ({100 * med(rel_rms):.1f} %), "
            f"PVr {med([c.pvr_error_nm for c in checks]):.2f} nm ({100 * med(rel_pvr):.1f} %), "
            f"Zernike 4-15 {med([c.zernike_error_nm for c in checks]):.2f} nm, "
            f"centre {100 * med(rel_centre):.2f} % R, radius {100 * med(rel_radius):.2f} % R"
        )
        seed, worst, _ = max(rows, key=lambda r: r[1].worst_ratio)
        print(f"  worst case: seed {seed}, {worst.worst_ratio:.2f} x its limit: {worst.describe()}")
        print(
            f"  time per photo: median {med([d for *_, d in rows]):.2f} s, "
            f"max {max(d for *_, d in rows):.2f} s"
        )
    for seed, msg in failures:
        print(f"  refused: seed {seed}: {msg}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
