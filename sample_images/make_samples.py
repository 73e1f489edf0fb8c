"""Make the demo fringe photos of the invented Brindlewick Optical Works, with their true figures.

Run ``python sample_images/make_samples.py`` to regenerate every photo and
``manifest.json`` in this folder. The output is deterministic (fixed seeds).
Everything here is synthetic: the shop, the parts and the operators are invented.
"""

from __future__ import annotations

import json
import os
import tempfile
from pathlib import Path

import numpy as np
from flatsight.analysis.atomic import atomic_path
from flatsight.analysis.shapes import parse_shape
from flatsight.analysis.synthetic import SyntheticSurface, make_fringe_photo, write_photo

HERE = Path(__file__).resolve().parent
SQRT3 = float(np.sqrt(3.0))

# Light sources: wavelength in air, nm (ISO 7944:1998, Reference wavelengths, from
# memory, for the sodium and mercury lines; He-Ne 632.8 nm is common practice).
LAMPS = {
    "hene": ("He-Ne laser", 632.8),
    "sodium": ("sodium lamp", 589.3),
    "mercury": ("mercury lamp, e line", 546.07),
}

SAMPLES = [
    dict(
        file="BW-FL-0412_hene.png",
        part="reference flat, 50 mm, grade lambda/10",
        serial="BW-FL-0412",
        diameter_mm=50.0,
        operator="Tamsin Ode",
        station="bench-2",
        lamp="hene",
        bit_depth=8,
        shape=(720, 960),
        radius_frac=0.40,
        center_frac=(0.52, 0.48),
        surface=dict(
            zernike_nm={4: 11.0, 5: 4.0, 6: -2.5, 11: 1.5}, ripple_nm=0.6, ripple_cycles=9.0
        ),
        photo=dict(
            fringes=16.0,
            angle_deg=28.0,
            visibility=0.72,
            illumination=0.25,
            surround="dark",
            gamma=0.72,
            noise=0.015,
            dust=3,
            edge_px=3.0,
            seed=412,
        ),
    ),
    dict(
        file="BW-FL-0412_mercury.jpg",
        part="reference flat, 50 mm, grade lambda/10",
        serial="BW-FL-0412",
        diameter_mm=50.0,
        operator="Ruben Halloway",
        station="bench-3",
        lamp="mercury",
        bit_depth=8,
        shape=(768, 1024),
        radius_frac=0.42,
        center_frac=(0.47, 0.5),
        surface=dict(
            zernike_nm={4: 11.0, 5: 4.0, 6: -2.5, 11: 1.5}, ripple_nm=0.6, ripple_cycles=9.0
        ),
        photo=dict(
            fringes=22.0,
            angle_deg=96.0,
            visibility=0.6,
            illumination=0.35,
            surround="grey",
            gamma=0.6,
            noise=0.02,
            dust=5,
            edge_px=5.0,
            seed=4121,
        ),
    ),
    dict(
        file="BW-FL-0413_sodium.jpg",
        part="workshop flat, 100 mm, grade lambda/4",
        serial="BW-FL-0413",
        diameter_mm=100.0,
        operator="Ruben Halloway",
        station="bench-1",
        lamp="sodium",
        bit_depth=8,
        shape=(900, 1200),
        radius_frac=0.44,
        center_frac=(0.5, 0.51),
        surface=dict(
            zernike_nm={4: -28.0, 6: 9.0, 8: 3.5, 11: -3.0},
            ripple_nm=1.5,
            ripple_cycles=7.0,
            ripple_linear=0.2,
            ripple_angle_deg=35.0,
        ),
        photo=dict(
            fringes=20.0,
            angle_deg=142.0,
            visibility=0.5,
            illumination=0.3,
            surround="dark",
            gamma=0.65,
            s_curve=0.3,
            noise=0.02,
            dust=6,
            edge_px=4.0,
            seed=413,
        ),
    ),
    dict(
        file="BW-WN-0207_mercury.tif",
        part="window, 60 mm, both faces polished",
        serial="BW-WN-0207",
        diameter_mm=60.0,
        operator="Ruben Halloway",
        station="bench-3",
        lamp="mercury",
        bit_depth=16,
        shape=(600, 800),
        radius_frac=0.41,
        center_frac=(0.5, 0.5),
        surface=dict(
            zernike_nm={4: 18.0, 5: -30.0, 6: 22.0, 9: 5.0}, ripple_nm=2.0, ripple_cycles=10.0
        ),
        photo=dict(
            fringes=26.0,
            angle_deg=63.0,
            visibility=0.8,
            illumination=0.2,
            surround="grey",
            gamma=0.8,
            noise=0.01,
            dust=2,
            edge_px=2.5,
            seed=207,
        ),
    ),
    dict(
        # a round flat photographed with a phone held off to the side, over a test plate
        file="BW-FL-0596_sodium.png",
        part="workshop flat, 80 mm, grade lambda/4, photographed at an angle",
        serial="BW-FL-0596",
        diameter_mm=80.0,
        operator="Ruben Halloway",
        station="bench-1",
        lamp="sodium",
        bit_depth=8,
        shape=(720, 960),
        outline="ellipse:470,352,300,250,12",  # 300 x 250 px semi-axes: 33.6 deg off axis
        surface=dict(zernike_nm={4: -22.0, 5: 6.0, 6: -3.0, 9: 2.0}, ripple_nm=0.8,
                     ripple_cycles=6.0),
        photo=dict(
            fringes=18.0,
            angle_deg=64.0,
            visibility=0.6,
            illumination=0.3,
            surround="dark",
            gamma=0.7,
            noise=0.015,
            dust=2,
            edge_px=3.0,
            mount_ring=False,
            seed=596,
        ),
    ),
    dict(
        # a rectangular window, 75 x 25 mm, laid on the reference flat at a slant
        file="BW-RW-0118_hene.png",
        part="rectangular window, 75 x 25 mm",
        serial="BW-RW-0118",
        diameter_mm=79.06,  # the diagonal: power is the sag from the centre to a corner
        operator="Tamsin Ode",
        station="bench-2",
        lamp="hene",
        bit_depth=8,
        shape=(720, 960),
        outline="rect:482,356,690,230,-17",
        surface=dict(zernike_nm={4: 14.0, 6: 5.0, 7: 2.0}, ripple_nm=0.5, ripple_cycles=5.0),
        photo=dict(
            fringes=15.0,
            angle_deg=100.0,
            visibility=0.7,
            illumination=0.2,
            surround="dark",
            gamma=0.75,
            noise=0.012,
            dust=2,
            edge_px=2.5,
            mount_ring=False,
            seed=118,
        ),
    ),
    dict(
        # a round flat with a locating flat ground on its edge (a straight cut-off)
        file="BW-FL-0605_hene.png",
        part="flat, 70 mm, grade lambda/10, with a locating flat on its edge",
        serial="BW-FL-0605",
        diameter_mm=70.0,
        operator="Tamsin Ode",
        station="bench-2",
        lamp="hene",
        bit_depth=8,
        shape=(720, 960),
        outline="cut:478,362,290;250,240",  # the flat 240 px from the centre, lower left
        surface=dict(zernike_nm={4: 16.0, 5: -4.0, 8: 3.0}, ripple_nm=0.5, ripple_cycles=5.0),
        photo=dict(
            fringes=16.0,
            angle_deg=35.0,
            visibility=0.7,
            illumination=0.2,
            surround="dark",
            gamma=0.75,
            noise=0.012,
            dust=2,
            edge_px=2.5,
            mount_ring=False,
            seed=605,
        ),
    ),
    dict(
        file="BW-TP-0031_hene.tif",
        part="test plate, 150 mm, grade lambda/20",
        serial="BW-TP-0031",
        diameter_mm=150.0,
        operator="Tamsin Ode",
        station="bench-2",
        lamp="hene",
        bit_depth=16,
        shape=(640, 640),
        radius_frac=0.45,
        center_frac=(0.5, 0.5),
        surface=dict(zernike_nm={4: 6.5, 6: 2.5, 11: 1.5}, ripple_nm=0.5, ripple_cycles=5.0),
        photo=dict(
            fringes=14.0,
            angle_deg=4.0,
            visibility=0.85,
            illumination=0.15,
            surround="dark",
            gamma=0.9,
            noise=0.008,
            dust=1,
            edge_px=2.0,
            seed=31,
        ),
    ),
    dict(
        file="BW-FL-0588_sodium.png",
        part="workshop flat, 100 mm, returned for refiguring",
        serial="BW-FL-0588",
        diameter_mm=100.0,
        operator="Ruben Halloway",
        station="bench-1",
        lamp="sodium",
        bit_depth=8,
        shape=(900, 1200),
        radius_frac=0.43,
        center_frac=(0.46, 0.53),
        surface=dict(
            zernike_nm={4: 120.0, 5: 38.0, 11: 27.0, 7: -19.0}, ripple_nm=7.0, ripple_cycles=6.0
        ),
        photo=dict(
            fringes=30.0,
            angle_deg=118.0,
            visibility=0.55,
            illumination=0.35,
            surround="dark",
            gamma=0.7,
            noise=0.025,
            dust=8,
            edge_px=6.0,
            seed=588,
        ),
    ),
    # issue 10: photos the carrier method cannot read, measured by the intensity fit
    dict(
        file="BW-FL-0431_sodium.png",
        part="workshop flat, 75 mm, contact test, few fringes",
        serial="BW-FL-0431",
        diameter_mm=75.0,
        operator="Ruben Halloway",
        station="bench-1",
        lamp="sodium",
        bit_depth=8,
        shape=(768, 1024),
        radius_frac=0.42,
        center_frac=(0.5, 0.49),
        surface=dict(zernike_nm={4: -40.0, 5: 12.0, 6: -6.0, 8: 4.0, 11: 3.0}),
        photo=dict(
            fringes=4.0,
            angle_deg=65.0,
            visibility=0.7,
            illumination=0.2,
            surround="dark",
            gamma=0.7,
            noise=0.012,
            dust=0,
            edge_px=4.0,
            seed=431,
        ),
    ),
    dict(
        file="BW-FL-0436_mercury.jpg",
        part="workshop flat, 75 mm, contact test, fringes bent by power",
        serial="BW-FL-0436",
        diameter_mm=75.0,
        operator="Ruben Halloway",
        station="bench-3",
        lamp="mercury",
        bit_depth=8,
        shape=(768, 1024),
        radius_frac=0.41,
        center_frac=(0.49, 0.5),
        surface=dict(zernike_nm={4: 190.0, 5: -15.0, 6: 10.0, 7: 5.0, 11: -4.0}),
        photo=dict(
            fringes=6.5,
            angle_deg=100.0,
            visibility=0.65,
            illumination=0.25,
            surround="dark",
            gamma=0.75,
            noise=0.015,
            dust=0,
            edge_px=5.0,
            seed=436,
        ),
    ),
    dict(
        file="BW-FL-0440_sodium.png",
        part="workshop flat, 60 mm, against test plate BW-TP-0031, closed rings (convex)",
        serial="BW-FL-0440",
        diameter_mm=60.0,
        operator="Ruben Halloway",
        station="bench-1",
        lamp="sodium",
        bit_depth=8,
        shape=(720, 960),
        radius_frac=0.42,
        center_frac=(0.5, 0.5),
        surface=dict(zernike_nm={4: -300.0, 5: 14.0, 6: 8.0, 11: 6.0}),
        photo=dict(
            fringes=1e-3,
            angle_deg=90.0,
            visibility=0.75,
            illumination=0.2,
            surround="dark",
            gamma=0.8,
            noise=0.01,
            dust=0,
            edge_px=3.0,
            seed=440,
        ),
    ),
    dict(
        # a flat on a high-reflectance reference: thin dark multiple-beam fringes
        file="BW-FL-0452_hene.png",
        part="reference flat, 50 mm, grade lambda/20, on the coated reference BW-TP-0031",
        serial="BW-FL-0452",
        diameter_mm=50.0,
        operator="Tamsin Ode",
        station="bench-2",
        lamp="hene",
        bit_depth=8,
        shape=(720, 960),
        radius_frac=0.4,
        center_frac=(0.49, 0.51),
        surface=dict(zernike_nm={4: 9.0, 6: -3.0, 7: 1.5}, ripple_nm=0.4, ripple_cycles=5.0),
        photo=dict(
            fringes=14.0,
            angle_deg=20.0,
            visibility=0.8,
            level=0.38,
            illumination=0.2,
            surround="dark",
            gamma=0.8,
            noise=0.01,
            dust=1,
            edge_px=2.5,
            finesse=25.0,
            seed=452,
        ),
    ),
    dict(
        # a phone's colour photo under the sodium lamp: a Bayer mosaic, demosaiced, JPEG
        file="BW-FL-0463_sodium.jpg",
        part="workshop flat, 75 mm, grade lambda/4, phone photo",
        serial="BW-FL-0463",
        diameter_mm=75.0,
        operator="Ruben Halloway",
        station="bench-1",
        lamp="sodium",
        bit_depth=8,
        shape=(768, 1024),
        radius_frac=0.41,
        center_frac=(0.52, 0.48),
        surface=dict(zernike_nm={4: -28.0, 5: 7.0, 8: -3.0, 11: 2.0}, ripple_nm=0.8,
                     ripple_cycles=6.0),
        colour="sodium-phone",
        photo=dict(
            fringes=18.0,
            angle_deg=125.0,
            visibility=0.65,
            illumination=0.3,
            surround="dark",
            gamma=0.7,
            noise=0.012,
            dust=2,
            edge_px=3.0,
            seed=463,
        ),
    ),
]

# a sodium lamp's yellow light as a phone's red, green and blue pixels see it (their
# relative response near 589 nm, an invented but typical balance)
SODIUM_RGB = (1.0, 0.72, 0.06)


def _phone_colour(grey: np.ndarray, seed: int) -> np.ndarray:
    """A grey photo (0..1) as a phone's colour photo of the sodium lamp: each pixel of an
    RGGB Bayer mosaic keeps its own colour's share of the light (with its own noise),
    and the mosaic is demosaiced by bilinear interpolation, as a simple camera does."""
    from scipy import ndimage as ndi

    rows, cols = grey.shape
    rng = np.random.default_rng(seed)
    yy, xx = np.mgrid[0:rows, 0:cols]
    masks = [(yy % 2 == 0) & (xx % 2 == 0), (yy % 2) != (xx % 2), (yy % 2 == 1) & (xx % 2 == 1)]
    mosaic = np.zeros_like(grey)
    for mask, gain in zip(masks, SODIUM_RGB, strict=True):
        mosaic[mask] = grey[mask] * gain
    mosaic = np.clip(mosaic + rng.normal(0.0, 0.004, grey.shape), 0.0, 1.0)
    # bilinear demosaicing: each colour from its own pixels, weighted by their count
    kernel = np.array([[0.25, 0.5, 0.25], [0.5, 1.0, 0.5], [0.25, 0.5, 0.25]])
    planes = []
    for mask in masks:
        total = ndi.convolve(np.where(mask, mosaic, 0.0), kernel, mode="mirror")
        weight = ndi.convolve(mask.astype(float), kernel, mode="mirror")
        planes.append(total / weight)
    return np.clip(np.stack(planes, axis=-1), 0.0, 1.0)


def _write_colour_jpeg(rgb: np.ndarray, path: Path, quality: int = 85) -> None:
    from PIL import Image

    with atomic_path(path) as tmp:
        Image.fromarray(np.round(rgb * 255.0).astype(np.uint8), "RGB").save(
            tmp, "JPEG", quality=quality)


def _atomic_json(data: dict, path: Path) -> None:
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "w", encoding="utf-8") as fh:
            json.dump(data, fh, indent=2)
            fh.write("\n")
        os.chmod(tmp, 0o644)
        os.replace(tmp, path)
    except BaseException:
        if os.path.exists(tmp):
            os.unlink(tmp)
        raise


def make_samples(folder: Path = HERE) -> dict:
    """Write every sample photo and ``manifest.json`` into ``folder``; return the manifest."""
    entries = []
    for spec in SAMPLES:
        rows, cols = spec["shape"]
        outline = parse_shape(spec["outline"]) if "outline" in spec else None
        if outline is None:
            radius = spec["radius_frac"] * min(rows, cols)
            center = (spec["center_frac"][0] * (cols - 1), spec["center_frac"][1] * (rows - 1))
        else:  # a part that is not a circle: its bounding circle
            radius = outline.bounding_radius_px
            center = (outline.center_x_px, outline.center_y_px)
        lamp_name, wavelength = LAMPS[spec["lamp"]]
        surface = SyntheticSurface(**spec["surface"])
        photo = make_fringe_photo(
            surface,
            shape=(rows, cols),
            center_xy=center,
            radius_px=radius,
            wavelength_nm=wavelength,
            bit_depth=spec["bit_depth"],
            outline=outline,
            **spec["photo"],
        )
        path = folder / spec["file"]
        if spec.get("colour") == "sodium-phone":
            _write_colour_jpeg(_phone_colour(photo.image, spec["photo"]["seed"]), path)
        else:
            write_photo(photo, path)
        truth = photo.truth()
        a = truth.zernike_nm
        entries.append(
            dict(
                file=spec["file"],
                part=spec["part"],
                serial=spec["serial"],
                diameter_mm=spec["diameter_mm"],
                operator=spec["operator"],
                station=spec["station"],
                light_source=lamp_name,
                wavelength_nm=wavelength,
                format=path.suffix.lstrip(".").upper(),
                bit_depth=spec["bit_depth"],
                **({"colour": "phone colour photo: RGGB Bayer mosaic of the sodium lamp's "
                              "light, demosaiced bilinearly, JPEG quality 85"}
                   if spec.get("colour") else {}),
                size_px=[cols, rows],
                file_bytes=path.stat().st_size,
                true_aperture_px=dict(
                    center_x_px=round(center[0], 3),
                    center_y_px=round(center[1], 3),
                    radius_px=round(radius, 3),
                ) | ({"outline": outline.to_text()} if outline is not None else {}),
                truth=dict(
                    note="over the true aperture, piston and tilt removed",
                    pv_nm=round(truth.pv_nm, 2),
                    rms_nm=round(truth.rms_nm, 2),
                    pvr_nm=round(truth.pvr_nm, 2),
                    pv_waves=round(truth.pv_nm / wavelength, 4),
                    # sag of the best-fit sphere, edge to centre, positive when the centre is high
                    # (figures.py): -2 sqrt(3) a4
                    # (an outline other than a circle: terms orthonormal over it, no closed form)
                    power_nm=(round(-2.0 * SQRT3 * float(a[3]), 2)
                              if photo.aperture.maps_to_disk else None),
                    zernike_nm={str(j): round(float(a[j - 1]), 3) for j in range(1, 16)},
                ),
                surface=dict(
                    photo.params["zernike_nm"],
                    ripple_nm=surface.ripple_nm,
                    ripple_cycles=surface.ripple_cycles,
                ),
                generator={k: v for k, v in photo.params.items() if k not in ("zernike_nm",)},
            )
        )
    manifest = dict(
        scenario="Brindlewick Optical Works (an invented optics shop): synthetic demo photos",
        synthetic=True,
        made_by="sample_images/make_samples.py (flatsight.analysis.synthetic)",
        photos=entries,
    )
    _atomic_json(manifest, folder / "manifest.json")
    return manifest


if __name__ == "__main__":
    made = make_samples()
    total = 0
    for e in made["photos"]:
        total += e["file_bytes"]
        t = e["truth"]
        print(
            f"{e['file']:26s} {e['size_px'][0]:5d}x{e['size_px'][1]:<5d} "
            f"{e['file_bytes'] / 1e6:5.2f} MB  PV {t['pv_nm']:7.1f} nm ({t['pv_waves']:.3f} waves)"
            f"  RMS {t['rms_nm']:6.2f} nm  PVr {t['pvr_nm']:7.1f} nm"
        )
    print(f"total {total / 1e6:.2f} MB")
