"""Reading a fringe photo from disk (or an array) into grey values in 0..1."""

from __future__ import annotations

import hashlib
import io
import os
import struct
import warnings
import zlib
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from PIL import Image, ImageOps, UnidentifiedImageError

from .errors import UnreadablePhotoError

__all__ = [
    "LUMA_WEIGHTS",
    "MIN_PHOTO_PX",
    "PHOTO_SUFFIXES",
    "SUPPORTED_FORMATS",
    "FringePhoto",
    "is_photo_path",
    "load_photo",
    "photo_from_array",
    "photos_in",
]

#: Formats Flatsight decodes; anything else is refused with a message naming them.
SUPPORTED_FORMATS = ("PNG", "JPEG", "TIFF")
#: File suffixes taken when a folder or a glob is expanded into photos.
PHOTO_SUFFIXES = (".png", ".jpg", ".jpeg", ".tif", ".tiff")
#: A photo narrower or shorter than this cannot hold enough fringes to measure.
MIN_PHOTO_PX = 64
#: Luma weights of ITU-R BT.601 (R, G, B), the same ones Pillow's ``convert("L")`` uses.
LUMA_WEIGHTS = (0.299, 0.587, 0.114)

_SUPPORTED_TEXT = "PNG, JPEG or TIFF"
# Everything Pillow's decoders raise on damaged or cut-short data.
_DECODE_ERRORS = (OSError, SyntaxError, ValueError, EOFError, IndexError, struct.error,
                  zlib.error)


@dataclass(frozen=True)
class FringePhoto:
    """A photo ready for analysis.

    Attributes
    ----------
    pixels : (H, W) ndarray
        float32 luminance in 0..1 with the EXIF orientation applied (read-only).
    path : str or None
        Where it was read from; None for an array handed in directly.
    format : str
        ``"PNG"``, ``"JPEG"``, ``"TIFF"``, or ``"array"`` for an array.
    bit_depth : int
        8 or 16: bits per sample of the source (float arrays count as 16).
    sha256 : str or None
        Hex SHA-256 of the file's bytes, exactly the bytes that were decoded.
    saturated_fraction : float
        Share of pixels at the top code value (any colour channel), for a warning.
    """

    pixels: np.ndarray
    path: str | None
    format: str
    bit_depth: int
    sha256: str | None
    saturated_fraction: float

    @property
    def name(self) -> str:
        """How messages name this photo: its path, or "the image array"."""
        return self.path if self.path is not None else "the image array"


def is_photo_path(path: str | os.PathLike) -> bool:
    """True when the file name ends in .png, .jpg, .jpeg, .tif or .tiff (any case)."""
    return Path(path).suffix.lower() in PHOTO_SUFFIXES


def photos_in(folder: str | os.PathLike) -> list[Path]:
    """The photos directly inside ``folder`` (by :func:`is_photo_path`), sorted by name."""
    return sorted(p for p in Path(folder).iterdir() if p.is_file() and is_photo_path(p))


def load_photo(path: str | os.PathLike) -> FringePhoto:
    """Read a PNG, JPEG or TIFF fringe photo.

    The file is read once; its SHA-256 is taken from the same bytes that are decoded.
    Pillow's decompression-bomb guard stays on (``Image.MAX_IMAGE_PIXELS`` as set), its
    warning counts as an error here, and truncated files are refused, never padded.

    Parameters
    ----------
    path : str or path-like
        The photo file.

    Returns
    -------
    FringePhoto

    Raises
    ------
    UnreadablePhotoError
        With one line naming the file and what to do: missing, a folder, empty,
        unreadable (permissions), not an image, an unsupported format, truncated or
        damaged, too many pixels, or too small to hold fringes.
    """
    name = os.fspath(path)
    data = _read_bytes(name)
    digest = hashlib.sha256(data).hexdigest()
    try:
        with warnings.catch_warnings():
            # A photo between MAX_IMAGE_PIXELS and twice that only warns in Pillow; refuse
            # it. The filter is restored on leaving (before Python 3.14 it is shared by all
            # threads meanwhile, which at worst turns another load's bomb warning into
            # the same refusal).
            warnings.simplefilter("error", Image.DecompressionBombWarning)
            with Image.open(io.BytesIO(data)) as image:
                # MPO is the JPEG some cameras write with a second, smaller picture inside
                fmt = {"MPO": "JPEG"}.get(image.format, image.format or "unknown")
                if fmt not in SUPPORTED_FORMATS:
                    raise UnreadablePhotoError(
                        f"{name}: this is a {fmt} image; Flatsight reads {_SUPPORTED_TEXT} "
                        "only: save the photo in one of those (16-bit PNG or TIFF keeps the "
                        "most detail)")
                image.load()  # full decode now, so a cut-short file fails here
                ImageOps.exif_transpose(image, in_place=True)
                counts, bit_depth, top = _counts(image, name)
    except UnreadablePhotoError:
        raise
    except (Image.DecompressionBombError, Image.DecompressionBombWarning) as exc:
        raise UnreadablePhotoError(
            f"{name}: the image claims more pixels than the safety limit of "
            f"{Image.MAX_IMAGE_PIXELS} (decompression-bomb guard); if it is a genuine photo, "
            "scale it down below that size") from exc
    except UnidentifiedImageError as exc:
        raise UnreadablePhotoError(
            f"{name}: not an image (the contents are not {_SUPPORTED_TEXT} data); "
            "check that the right file was chosen") from exc
    except _DECODE_ERRORS as exc:
        reason = " ".join(str(exc).split()) or type(exc).__name__
        raise UnreadablePhotoError(
            f"{name}: the image data is cut short or damaged ({reason}); "
            "copy the photo from the camera again") from exc
    return _photo(counts, bit_depth, top, path=name, fmt=fmt, sha256=digest)


def photo_from_array(image: np.ndarray) -> FringePhoto:
    """Wrap an image array handed in by a test or the station.

    Parameters
    ----------
    image : (H, W) or (H, W, 3|4) ndarray
        uint8 (0..255), uint16 (0..65535) or float (0..1). Colour is turned into
        luminance with the ITU-R BT.601 weights; a fourth (alpha) channel is ignored.
        The array is copied, never modified.

    Returns
    -------
    FringePhoto
        With ``path`` and ``sha256`` None and ``format`` ``"array"``.

    Raises
    ------
    UnreadablePhotoError
        For a wrong shape, an unsupported dtype, values outside 0..1 (float), NaN or
        infinity, or fewer than 64 pixels on a side.
    """
    name = "the image array"
    arr = np.asarray(image)
    if arr.ndim == 3 and arr.shape[2] in (3, 4):
        arr = arr[..., :3]
    elif arr.ndim != 2:
        raise UnreadablePhotoError(
            f"{name}: shape {arr.shape} is not a photo; give (rows, columns) grey or "
            "(rows, columns, 3) colour")
    if arr.dtype == np.uint8:
        bit_depth, top = 8, 255
    elif arr.dtype == np.uint16:
        bit_depth, top = 16, 65535
    elif arr.dtype.kind == "f":
        if not np.all(np.isfinite(arr)):
            raise UnreadablePhotoError(f"{name}: holds NaN or infinite values; give values in 0..1")
        if arr.size and (arr.min() < 0.0 or arr.max() > 1.0):
            raise UnreadablePhotoError(
                f"{name}: float values run from {arr.min():g} to {arr.max():g}; "
                "scale them into 0..1")
        bit_depth, top = 16, 1.0
    else:
        raise UnreadablePhotoError(
            f"{name}: dtype {arr.dtype} is not supported; give uint8, uint16 or float in 0..1")
    return _photo(arr, bit_depth, top, path=None, fmt="array", sha256=None)


def _read_bytes(name: str) -> bytes:
    where = Path(name)
    try:
        if where.is_dir():
            raise UnreadablePhotoError(
                f"{name}: is a folder, not a photo; give a {_SUPPORTED_TEXT} file inside it")
        with open(where, "rb") as fh:
            data = fh.read()
    except FileNotFoundError as exc:
        raise UnreadablePhotoError(f"{name}: no such file; check the path and name") from exc
    except PermissionError as exc:
        raise UnreadablePhotoError(
            f"{name}: permission denied; ask for read access or copy the photo somewhere "
            "you can read") from exc
    except IsADirectoryError as exc:
        raise UnreadablePhotoError(
            f"{name}: is a folder, not a photo; give a {_SUPPORTED_TEXT} file inside it") from exc
    except OSError as exc:
        raise UnreadablePhotoError(
            f"{name}: could not be read ({exc.strerror or exc}); check the disk and the path"
        ) from exc
    if not data:
        raise UnreadablePhotoError(f"{name}: the file is empty (0 bytes); copy the photo again")
    return data


def _counts(image: Image.Image, name: str) -> tuple[np.ndarray, int, int]:
    """The decoded samples as an array, their bit depth and top code value."""
    mode = image.mode
    if mode.startswith("I;16"):
        return np.asarray(image), 16, 65535
    if mode == "I":
        counts = np.asarray(image)
        if counts.size and (counts.min() < 0 or counts.max() > 65535):
            raise UnreadablePhotoError(
                f"{name}: 32-bit integer samples outside 0..65535 are not supported; "
                "save the photo as 8- or 16-bit")
        return counts, 16, 65535
    if mode in ("L", "RGB"):
        return np.asarray(image), 8, 255
    if mode in ("LA", "La"):
        return np.asarray(image.getchannel("L")), 8, 255
    if mode in ("RGBA", "RGBa", "RGBX"):
        return np.asarray(image)[..., :3], 8, 255
    if mode in ("P", "PA", "1", "CMYK", "YCbCr", "LAB", "HSV"):
        return np.asarray(image.convert("RGB")), 8, 255
    raise UnreadablePhotoError(
        f"{name}: pixel mode {mode} is not supported; save the photo as 8- or 16-bit grey "
        "or 8-bit colour")


def _photo(counts: np.ndarray, bit_depth: int, top: float, *, path: str | None, fmt: str,
           sha256: str | None) -> FringePhoto:
    name = path if path is not None else "the image array"
    rows, cols = counts.shape[:2]
    if min(rows, cols) < MIN_PHOTO_PX:
        raise UnreadablePhotoError(
            f"{name}: {cols} x {rows} px is too small to hold fringes; use a photo of at "
            f"least {MIN_PHOTO_PX} x {MIN_PHOTO_PX} px")
    if counts.ndim == 3:
        saturated = np.any(counts == top, axis=2)
        scale = np.float32(1.0 / top)
        pixels = counts[..., 0].astype(np.float32)
        pixels *= np.float32(LUMA_WEIGHTS[0]) * scale
        for channel, weight in ((1, LUMA_WEIGHTS[1]), (2, LUMA_WEIGHTS[2])):
            pixels += counts[..., channel].astype(np.float32) * (np.float32(weight) * scale)
        np.clip(pixels, 0.0, 1.0, out=pixels)
    else:
        saturated = counts == top
        # one multiply from integer counts straight into float32
        pixels = np.multiply(counts, np.float32(1.0 / top), dtype=np.float32)
    pixels.flags.writeable = False
    return FringePhoto(
        pixels=pixels,
        path=path,
        format=fmt,
        bit_depth=bit_depth,
        sha256=sha256,
        saturated_fraction=float(np.count_nonzero(saturated)) / saturated.size,
    )
