"""A stored map of the reference flat: loading it and subtracting it from a measurement.

The map is a bare 2-D array of heights in nm (``.npy``, or a 32-bit float ``.tif``)
with NaN outside the flat, as ``--save-map`` and ``absolute --save-maps`` write it:
row 0 at the top of the photo, column 0 at the left, the flat as it lies in the test
set-up. Nothing else is stored, so the map is taken to cover exactly its own disk (the
disk of its measured region) and is scaled onto each measurement's aperture.

Subtracting it removes the reference flat's own contribution: a pair test measures the
sum of both surfaces' heights (DEVELOPERS.md, "Sign"), so ``part = measured - reference``.
"""

from __future__ import annotations

import hashlib
import io
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from scipy import ndimage

from ..errors import UnanalysablePhotoError, UnreadablePhotoError

__all__ = [
    "ReferenceMap",
    "ReferenceSubtraction",
    "load_reference_map",
    "reference_on_grid",
    "subtract_reference",
]

MAP_SUFFIXES = (".npy", ".tif", ".tiff")


@dataclass(frozen=True)
class ReferenceMap:
    """A reference flat's height map and the disk it covers.

    Attributes
    ----------
    height_nm : (M, N) ndarray
        Heights, NaN where not measured.
    center_x_px, center_y_px, radius_px : float
        The disk in the array's own pixels (x = column, y = row, from pixel centres).
    path : str
        Where it was read from.
    sha256 : str
        Hex SHA-256 of the file's bytes, for the record.
    """

    height_nm: np.ndarray
    center_x_px: float
    center_y_px: float
    radius_px: float
    path: str
    sha256: str

    @property
    def valid(self) -> np.ndarray:
        return np.isfinite(self.height_nm)

    @property
    def rms_nm(self) -> float:
        h = self.height_nm[self.valid]
        return float(np.sqrt(np.mean((h - h.mean()) ** 2)))


def _read_array(path: str, data: bytes) -> np.ndarray:
    suffix = Path(path).suffix.lower()
    if suffix == ".npy":
        try:
            return np.load(io.BytesIO(data), allow_pickle=False)
        except (ValueError, OSError, EOFError) as exc:
            raise UnreadablePhotoError(
                f"{path}: not a readable .npy height map ({' '.join(str(exc).split())}); "
                "save the reference again with --save-map"
            ) from exc
    from PIL import Image, UnidentifiedImageError

    try:
        with Image.open(io.BytesIO(data)) as image:
            image.load()
            if image.mode != "F":
                raise UnreadablePhotoError(
                    f"{path}: a TIFF in mode {image.mode}, not a 32-bit float height map; "
                    "give the map written by --save-map, not a photo"
                )
            return np.asarray(image, dtype=np.float64)
    except UnreadablePhotoError:
        raise
    except (UnidentifiedImageError, OSError, ValueError, SyntaxError, EOFError) as exc:
        raise UnreadablePhotoError(
            f"{path}: not a readable TIFF height map ({' '.join(str(exc).split())}); "
            "save the reference again with --save-map"
        ) from exc


def load_reference_map(path: str | os.PathLike) -> ReferenceMap:
    """Read a stored reference map and find the disk it covers.

    The disk is that of the measured (finite) region with its holes filled: its centre
    is the region's centroid and its radius ``sqrt(area / pi)``, which for a map
    sampled wherever pixel centres fall inside the aperture is the aperture's radius.

    Raises
    ------
    UnreadablePhotoError
        Missing, unreadable, corrupt, not a 2-D float array, or not a disk. The message
        names the file and what to do.
    """
    name = os.fspath(path)
    if Path(name).suffix.lower() not in MAP_SUFFIXES:
        raise UnreadablePhotoError(
            f"{name}: a reference map must be a .npy or 32-bit float "
            ".tif file (as --save-map writes)"
        )
    try:
        data = Path(name).read_bytes()
    except FileNotFoundError as exc:
        raise UnreadablePhotoError(f"{name}: no such reference map; check the path") from exc
    except IsADirectoryError as exc:
        raise UnreadablePhotoError(f"{name}: is a folder, not a reference map file") from exc
    except OSError as exc:
        raise UnreadablePhotoError(
            f"{name}: cannot be read ({exc.strerror}); check its permissions"
        ) from exc
    arr = _read_array(name, data)
    if arr.ndim != 2 or arr.dtype.kind != "f":
        raise UnreadablePhotoError(
            f"{name}: holds a {arr.dtype} array of shape {arr.shape}, not a 2-D float height "
            "map; give the map written by --save-map"
        )
    if min(arr.shape) < 16:
        raise UnreadablePhotoError(
            f"{name}: the map is only {arr.shape[1]}x{arr.shape[0]} "
            "pixels; save the reference at full size"
        )
    height = np.array(arr, dtype=np.float64)  # a private copy: the caller's array is never shared
    height[~np.isfinite(height)] = np.nan
    region = ndimage.binary_fill_holes(np.isfinite(height))
    area = int(region.sum())
    if area < 200:
        raise UnreadablePhotoError(
            f"{name}: fewer than 200 measured pixels; the map is empty or nearly so"
        )
    rows, cols = np.nonzero(region)
    cy, cx = float(rows.mean()), float(cols.mean())
    radius = float(np.sqrt(area / np.pi))
    yy, xx = np.mgrid[0 : height.shape[0], 0 : height.shape[1]]
    in_disk = np.hypot(xx - cx, yy - cy) <= radius
    overlap = np.count_nonzero(region & in_disk) / area
    if overlap < 0.95:
        raise UnreadablePhotoError(
            f"{name}: the measured region is not a disk (only {100 * overlap:.0f} % of it lies "
            "in its best circle); give a map of a round flat with NaN outside it"
        )
    return ReferenceMap(
        height_nm=height,
        center_x_px=cx,
        center_y_px=cy,
        radius_px=radius,
        path=name,
        sha256=hashlib.sha256(data).hexdigest(),
    )


def reference_on_grid(
    reference: ReferenceMap, xu: np.ndarray, yu: np.ndarray
) -> tuple[np.ndarray, np.ndarray]:
    """The reference's heights at Zernike coordinates ``(xu, yu)`` of its own disk.

    Normalised bilinear interpolation (``scipy.ndimage.map_coordinates`` of the heights
    and of the measured mask), so holes do not bleed into their neighbours.
    """
    cols = reference.center_x_px + np.asarray(xu) * reference.radius_px
    rows = reference.center_y_px - np.asarray(yu) * reference.radius_px
    valid_src = reference.valid
    filled = np.where(valid_src, reference.height_nm, 0.0)
    coords = np.stack([rows, cols])
    num = ndimage.map_coordinates(filled, coords, order=1, mode="constant", cval=0.0)
    weight = ndimage.map_coordinates(
        valid_src.astype(float), coords, order=1, mode="constant", cval=0.0
    )
    ok = weight >= 0.5
    out = np.full(np.shape(xu), np.nan)
    out[ok] = num[ok] / weight[ok]
    return out, ok


@dataclass(frozen=True)
class ReferenceSubtraction:
    """A measurement with the reference flat's map taken out, and what was taken out."""

    measurement: object  # pipeline.Measurement
    reference: ReferenceMap
    covered_fraction: float  # share of the measured pixels the reference also covered


def subtract_reference(measurement, reference: ReferenceMap) -> ReferenceSubtraction:
    """``measurement - reference``, the reference scaled onto the measurement's aperture.

    Parameters
    ----------
    measurement : Measurement
    reference : ReferenceMap

    Returns
    -------
    ReferenceSubtraction
        Its ``measurement`` is refitted and re-figured (the same photo, settings and
        quality), measured where both maps are.

    Raises
    ------
    UnanalysablePhotoError
        When the reference leaves too few pixels measured.
    """
    from ..pipeline import measurement_from_height

    m = measurement
    xu, yu = m.geometry.unit_xy(m.aperture)
    ref, ref_ok = reference_on_grid(reference, xu, yu)
    valid = np.asarray(m.valid, bool) & ref_ok
    covered = float(valid.sum() / max(1, np.count_nonzero(m.valid)))
    height = np.where(valid, m.height_nm - np.where(ref_ok, ref, 0.0), np.nan)
    disk = np.hypot(xu, yu) <= 1.0
    warnings = tuple(m.warnings)
    if covered < 0.95:
        warnings += (
            f"the reference map {reference.path} covers only {100 * covered:.0f} % of "
            "the measured pixels",
        )
    q = m.quality
    try:
        out = measurement_from_height(
            height,
            valid,
            disk,
            aperture=m.aperture,
            geometry=m.geometry,
            settings=m.settings,
            photo=m.photo,
            modulation=m.modulation,
            quality_fields={
                "carrier_fringes": q.carrier_fringes,
                "carrier_angle_deg": q.carrier_angle_deg,
                "fringe_period_px": q.fringe_period_px,
                "resolution_cycles_per_aperture": q.resolution_cycles_per_aperture,
                "binning": q.binning,
                # the photo's method stays its own: its scale and outline shares of U
                "method": q.method,
                "method_reason": q.method_reason,
                "per_photo": q.per_photo,
                "photos": q.photos,
            },
            spectrum=m.spectrum,
            warnings=warnings,
            photo_sha256=m.photo_sha256,
        )
    except UnanalysablePhotoError as exc:
        raise UnanalysablePhotoError(f"{m.photo} minus {reference.path}: {exc}") from exc
    return ReferenceSubtraction(measurement=out, reference=reference, covered_fraction=covered)
