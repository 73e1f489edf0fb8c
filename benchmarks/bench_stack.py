"""Speed of phase-shifted sequences: frames in memory to figures, by photo size and algorithm.

Run: python benchmarks/bench_stack.py [--repeat N]

The frames are float32 in 0..1, as ``loading.load_photo`` hands them over; decoding the
files is not included (see bench_measure.py for that). Target: a 5-frame 12 MP
sequence in under 2 s.
"""

from __future__ import annotations

import argparse
import time

import numpy as np
from flatsight.analysis.multiphoto.phase_shifting import demodulate_sequence, measure_stack
from flatsight.analysis.pipeline import MeasureSettings
from flatsight.analysis.synthetic import SyntheticSurface

SIZES = {"2 MP": (1200, 1600), "5 MP": (1944, 2592), "12 MP": (3000, 4000)}


def make_frames(shape, steps_deg, seed=0):
    rows, cols = shape
    rng = np.random.default_rng(seed)
    radius = 0.42 * min(rows, cols)
    cx, cy = cols / 2 + 11.3, rows / 2 - 7.9
    surface = SyntheticSurface(zernike_nm={4: -35.0, 5: 10.0, 7: 6.0, 11: 4.0}, ripple_nm=2.0)
    frames = []
    for band in range(0, rows, 500):  # in bands, to keep the generator's memory small
        y, x = np.mgrid[band : min(rows, band + 500), 0:cols].astype(np.float32)
        xu, yu = (x - cx) / radius, (cy - y) / radius
        phase = 2 * np.pi * 1.5 * xu - 4 * np.pi * surface.height_nm(xu, yu) / 632.8
        disk = 0.5 * (1 - np.tanh((np.hypot(xu, yu) - 1) * radius / 3))
        lamp = disk * (0.6 + 0.1 * xu)
        frames.append(
            [
                (
                    lamp * (1 + 0.7 * np.cos(phase + np.radians(d))) + rng.normal(0, 0.01, x.shape)
                ).astype(np.float32)
                for d in steps_deg
            ]
        )
    return [np.concatenate([b[k] for b in frames]) for k in range(len(steps_deg))]


def timed(fn, repeat):
    """Best and median wall time of ``repeat`` runs (the machine may be shared)."""
    times = []
    out = None
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        times.append(time.perf_counter() - t)
    return min(times), float(np.median(times)), out


def accuracy_table() -> None:
    """Phase error of each algorithm against a miscalibrated step, noise-free and noisy."""
    phi = np.linspace(-np.pi, np.pi, 20001)[None, :]
    rng = np.random.default_rng(1)
    print()
    print("Phase error (mrad) vs step error; 'max' is the largest error, 'ripple' the largest")
    print("after the constant (piston) part is removed; noisy: sigma = 1 % of the amplitude")
    print(f"{'algorithm':>13} {'step error':>10} {'max':>8} {'ripple':>8} {'noisy RMS':>9}")
    for name, n in (("four-step", 4), ("hariharan", 5), ("carre", 4), ("least-squares", 5)):
        for err in (0.0, 0.05, 0.10):
            s = 90.0 * (1 + err)
            steps = [(k - (n - 1) / 2) * s for k in range(n)]
            if name == "four-step":
                steps = [k * s for k in range(n)]
            if name == "hariharan":
                steps = [k * s for k in range(-2, 3)]
            frames = [1 + 0.5 * np.cos(phi + np.radians(d)) for d in steps]
            kwargs = {"step_deg": 90.0} if name == "least-squares" else {}
            r = demodulate_sequence(frames, algorithm=name, **kwargs)
            e = np.angle(np.exp(1j * (r.wrapped_phase - phi)))
            noisy = [f + rng.normal(0, 0.005, f.shape) for f in frames]
            rn = demodulate_sequence(noisy, algorithm=name, **kwargs)
            en = np.angle(np.exp(1j * (rn.wrapped_phase - phi)))
            print(
                f"{name:>13} {100 * err:>9.0f}% {1e3 * np.abs(e).max():>8.2f} "
                f"{1e3 * np.abs(e - e.mean()).max():>8.2f} {1e3 * np.std(en):>9.2f}"
            )
    print(
        "least-squares is told 90 deg here, so it carries the miscalibration; given no step"
        " it uses the step found and is exact."
    )


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=3, help="runs per case (default 3)")
    args = parser.parse_args()
    settings = MeasureSettings(wavelength_nm=632.8)
    print(f"Sequence to figures (best and median of {args.repeat} runs; frames in memory)")
    print(
        f"{'size':>6} {'frames':>6} {'algorithm':>13} {'binning':>7} {'map px':>9} "
        f"{'full-res phase s':>16} {'stack best s':>12} {'median s':>8} "
        f"{'step found':>10} {'Z4 nm':>7}"
    )
    cases = [
        ("2 MP", 4, None),
        ("2 MP", 5, None),
        ("5 MP", 5, None),
        ("12 MP", 4, None),
        ("12 MP", 5, None),
        ("12 MP", 8, 60.0),
    ]
    for size, n, step in cases:
        s = step or 90.0 * 1.03
        steps = [(k - (n - 1) / 2) * s for k in range(n)]
        frames = make_frames(SIZES[size], steps)
        t_full, _, _ = timed(lambda f=frames, st=step: demodulate_sequence(f, step_deg=st), 1)
        t_stack, t_median, res = timed(
            lambda f=frames, st=step: measure_stack(f, settings, step_deg=st), args.repeat
        )
        m = res.measurement
        print(
            f"{size:>6} {n:>6} {res.phase.algorithm:>13} {res.binning:>7} "
            f"{m.height_nm.shape[1]}x{m.height_nm.shape[0]:<5} {t_full:>16.2f} "
            f"{t_stack:>12.2f} {t_median:>8.2f} {res.phase.step_found_deg:>10.2f} "
            f"{m.zernike.coefficients_nm[3]:>7.2f}"
        )
        del frames
    print(
        "'full-res phase s': demodulate_sequence on the unbinned frames, for comparison; "
        "'stack': measure_stack (bin, phase, aperture, unwrap, Zernike, figures)."
    )
    print("Truth: Z4 = -35.00 nm; step 92.70 deg (60 deg for the 8-frame case).")
    accuracy_table()


if __name__ == "__main__":
    main()
