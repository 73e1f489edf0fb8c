"""Speed and accuracy of find_aperture and load_photo: prints tables (not a test)."""

import os
import tempfile
import time

import numpy as np
from flatsight.analysis.aperture import find_aperture
from flatsight.analysis.loading import load_photo
from flatsight.analysis.synthetic import (
    SyntheticSurface,
    make_fringe_photo,
    random_photo,
    write_photo,
)


def best_of(fn, n=5):
    cpu, wall = [], []
    for _ in range(n):
        c0, w0 = time.process_time(), time.perf_counter()
        fn()
        cpu.append(time.process_time() - c0)
        wall.append(time.perf_counter() - w0)
    return min(cpu) * 1e3, min(wall) * 1e3


def errors(found, true):
    r = true.radius_px
    return (
        100
        * np.hypot(found.center_x_px - true.center_x_px, found.center_y_px - true.center_y_px)
        / r,
        100 * (found.radius_px - r) / r,
    )


print("find_aperture speed (best of 5; float32 input)")
print(f"{'photo':>12} {'surround':>8} {'cpu ms':>7} {'wall ms':>8} {'centre %':>9} {'radius %':>9}")
surface = SyntheticSurface({4: 50.0, 6: -20.0, 11: 15.0})
for shape in [(864, 1152), (1728, 2304), (3000, 4000)]:
    for surround in ("dark", "grey"):
        photo = make_fringe_photo(
            surface,
            shape=shape,
            fringes=25,
            angle_deg=40,
            surround=surround,
            edge_px=6,
            gamma=0.6,
            seed=3,
        )
        image = photo.image.astype(np.float32)
        cpu, wall = best_of(lambda: find_aperture(image))
        c, r = errors(find_aperture(image), photo.aperture)
        mp = shape[0] * shape[1] / 1e6
        print(f"{mp:>9.1f} MP {surround:>8} {cpu:>7.0f} {wall:>8.0f} {c:>9.3f} {r:>+9.3f}")

n = int(os.environ.get("N_RANDOM", "30"))
print(
    f"\nfind_aperture accuracy over {n} random hard photos (synthetic.random_photo, seeds 0..{n - 1})"
)
cs, rs = [], []
for seed in range(n):
    photo = random_photo(seed)
    c, r = errors(find_aperture(photo.image), photo.aperture)
    cs.append(c)
    rs.append(r)
cs, rs = np.array(cs), np.array(rs)
print(f"{'':>14} {'mean':>7} {'rms':>7} {'p95':>7} {'max':>7}")
print(
    f"{'centre % of R':>14} {cs.mean():>7.3f} {np.sqrt((cs**2).mean()):>7.3f} {np.percentile(cs, 95):>7.3f} {cs.max():>7.3f}"
)
print(
    f"{'radius % of R':>14} {rs.mean():>+7.3f} {np.sqrt((rs**2).mean()):>7.3f} {np.percentile(abs(rs), 95):>7.3f} {abs(rs).max():>7.3f}"
)

print("\nload_photo speed, 12 MP (best of 3)")
photo = make_fringe_photo(surface, shape=(3000, 4000), seed=1, bit_depth=16)
with tempfile.TemporaryDirectory() as tmp:
    for name, depth in (("p16.png", 16), ("p8.png", 8), ("p8.jpg", 8), ("p16.tif", 16)):
        path = os.path.join(tmp, name)
        write_photo(photo.image, path, bit_depth=depth)
        cpu, wall = best_of(lambda: load_photo(path), 3)
        print(
            f"{name:>10} {os.path.getsize(path) / 1e6:>6.1f} MB  cpu {cpu:>5.0f} ms  wall {wall:>5.0f} ms"
        )
