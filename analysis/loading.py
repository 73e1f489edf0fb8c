"""Reading a fringe photo from disk (or an array) into grey values in 0..1."""

from __future__ import annotations

import hashlib
import io
import os
import stat
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
    notes : tuple of str
        What the operator should know about how the file was read, for the record's
        warnings: only the first frame of a multi-page TIFF or animated PNG was used,
        transparency was ignored, or the image reader passed over a fault.
    """

    pixels: np.ndarray
    path: str | None
    format: str
    bit_depth: int
    sha256: str | None
    saturated_fraction: float
    notes: tuple[str, ...] = ()

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

    Only a regular file is read (a named pipe or a device is refused without waiting
    on it), and only after its header shows a supported image of a size within the
    guard below, so a large file that is no photo is never read whole. The file is
    read once; its SHA-256 is taken from the same bytes that are decoded. Pillow's
    decompression-bomb guard stays on (``Image.MAX_IMAGE_PIXELS`` as set), its warning
    counts as an error here, and truncated files are refused, never padded.

    A multi-page TIFF or an animated PNG is measured from its first frame, and a
    transparent image from its colour channels alone; each says so in ``notes``, as
    does any other warning of the image reader (which never reaches stderr).

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
    try:
        with warnings.catch_warnings(record=True) as caught:
            # A photo between MAX_IMAGE_PIXELS and twice that only warns in Pillow; refuse
            # it. Any other warning of the reader becomes a note instead of a line on
            # stderr naming a library file. The filters are restored on leaving (before
            # Python 3.14 they are shared by all threads meanwhile, which at worst turns
            # another load's bomb warning into the same refusal, or keeps another
            # thread's warning off stderr).
            warnings.simplefilter("always")
            warnings.simplefilter("error", Image.DecompressionBombWarning)
            data = _read_bytes(name)
            digest = hashlib.sha256(data).hexdigest()
            with Image.open(io.BytesIO(data)) as image:
                fmt = _supported_format(image, name)
                image.load()  # full decode now, so a cut-short file fails here
                notes = _frame_notes(image, fmt) + _alpha_notes(image)
                ImageOps.exif_transpose(image, in_place=True)
                counts, bit_depth, top = _counts(image, name)
        notes += tuple(f"the image reader passed over a fault in the file: "
                       f"{' '.join(str(w.message).split())}" for w in caught)
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
    return _photo(counts, bit_depth, top, path=name, fmt=fmt, sha256=digest, notes=notes)


def _frame_notes(image: Image.Image, fmt: str) -> tuple[str, ...]:
    """A note when the file holds more frames than the one measured."""
    frames = getattr(image, "n_frames", 1)
    if frames <= 1 or image.format == "MPO":  # MPO: the camera's own preview inside
        return ()
    kind = "an animated PNG" if fmt == "PNG" else f"a {fmt} of {frames} pages"
    return (f"the file is {kind} ({frames} frames); only the first frame was measured "
            "(save each frame as its own file: flatsight stack measures a phase-shifted "
            "sequence)",)


def _alpha_notes(image: Image.Image) -> tuple[str, ...]:
    """A note when the image is transparent anywhere: only its colour was measured."""
    if "A" in image.getbands():  # 8-bit alpha: 255 is opaque
        transparent = int(np.asarray(image.getchannel("A")).min(initial=255)) < 255
    else:
        transparent = "transparency" in image.info
    if not transparent:
        return ()
    return ("the photo is partly transparent; its transparency was ignored and the "
            "luminance of its colour channels measured",)


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


def _nonblocking(path: str, flags: int) -> int:
    # opening a named pipe for reading would wait for a writer: never wait
    return os.open(path, flags | getattr(os, "O_NONBLOCK", 0))


def _read_bytes(name: str) -> bytes:
    """The file's bytes, once it is known to be a regular file holding a supported image."""
    where = Path(name)
    if where.is_dir():
        raise UnreadablePhotoError(
            f"{name}: is a folder, not a photo; give a {_SUPPORTED_TEXT} file inside it")
    try:
        fh = open(where, "rb", opener=_nonblocking)  # noqa: SIM115 - closed below
        size_and_mode = os.fstat(fh.fileno())
    except OSError as exc:
        raise _os_problem(name, exc) from exc
    with fh:
        if not stat.S_ISREG(size_and_mode.st_mode):
            raise UnreadablePhotoError(
                f"{name}: not a regular file (a named pipe, a device or a socket); "
                f"give a {_SUPPORTED_TEXT} photo file")
        if size_and_mode.st_size:
            _check_header(fh, name, size_and_mode.st_size)  # Pillow's errors: the caller's
        try:
            fh.seek(0)
            data = fh.read()
        except OSError as exc:
            raise _os_problem(name, exc) from exc
    if not data:
        raise UnreadablePhotoError(f"{name}: the file is empty (0 bytes); copy the photo again")
    return data


def _os_problem(name: str, exc: OSError) -> UnreadablePhotoError:
    """One line for a file the system would not open or read."""
    if isinstance(exc, FileNotFoundError):
        return UnreadablePhotoError(f"{name}: no such file; check the path and name")
    if isinstance(exc, PermissionError):
        return UnreadablePhotoError(
            f"{name}: permission denied; ask for read access or copy the photo somewhere "
            "you can read")
    if isinstance(exc, IsADirectoryError):
        return UnreadablePhotoError(
            f"{name}: is a folder, not a photo; give a {_SUPPORTED_TEXT} file inside it")
    return UnreadablePhotoError(
        f"{name}: could not be read ({exc.strerror or exc}); check the disk and the path")


def _supported_format(image: Image.Image, name: str) -> str:
    """The image's format name, or a one-line refusal naming the formats Flatsight reads."""
    # MPO is the JPEG some cameras write with a second, smaller picture inside
    fmt = {"MPO": "JPEG"}.get(image.format, image.format or "unknown")
    if fmt not in SUPPORTED_FORMATS:
        raise UnreadablePhotoError(
            f"{name}: this is a {fmt} image; Flatsight reads {_SUPPORTED_TEXT} only: save "
            "the photo in one of those (16-bit PNG or TIFF keeps the most detail)")
    return fmt


def _check_header(fh, name: str, size: int) -> None:
    """Refuse, from its header alone, a file that is no supported image or that is far
    larger than its image can need, before it is read whole.

    Pillow's own errors (not an image, the decompression-bomb guard) are left to the
    caller, which turns them into one line.
    """
    with Image.open(fh) as probe:  # reads the header, not the pixels
        _supported_format(probe, name)
        width, height = probe.size
        frames = min(getattr(probe, "n_frames", 1), 10_000)
    # 16 bytes a pixel (16-bit RGBA twice over) per frame, and room for metadata and
    # previews: a genuine photo is far smaller
    room = 16 * width * height * max(frames, 1) + 64 * 2**20
    if size > room:
        raise UnreadablePhotoError(
            f"{name}: the file is {size / 2**20:.0f} MiB, far more than a {width} x "
            f"{height} px image needs; it is damaged or not a photo: export it again")


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
           sha256: str | None, notes: tuple[str, ...] = ()) -> FringePhoto:
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
        notes=notes,
    )
