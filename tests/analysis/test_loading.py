"""Tests of reading fringe photos (analysis/loading.py)."""

from __future__ import annotations

import hashlib
import struct
import warnings
import zlib
from pathlib import Path

import numpy as np
import pytest
from flatsight.analysis import loading
from flatsight.analysis.errors import UnreadablePhotoError
from flatsight.analysis.loading import (
    LUMA_WEIGHTS,
    is_photo_path,
    load_photo,
    photo_from_array,
)
from PIL import Image, ImageFile


def _ramp(shape: tuple[int, int], top: int, dtype) -> np.ndarray:
    """Every code value from 0 to ``top`` at least once, in a scrambled order."""
    rows, cols = shape
    values = (np.arange(rows * cols, dtype=np.int64) * 7919) % (top + 1)
    values[:2] = (0, top)
    return values.reshape(rows, cols).astype(dtype)


def _one_line_error(path, match: str) -> str:
    with pytest.raises(UnreadablePhotoError) as info:
        load_photo(path)
    message = str(info.value)
    assert "\n" not in message
    assert str(path) in message
    assert match in message
    return message


# --- bad input -------------------------------------------------------------------------


def test_missing_file(tmp_path):
    _one_line_error(tmp_path / "BW-FL-0412.png", "no such file")


def test_folder(tmp_path):
    _one_line_error(tmp_path, "folder")


def test_empty_file(tmp_path):
    path = tmp_path / "empty.png"
    path.write_bytes(b"")
    _one_line_error(path, "empty")


def test_text_named_png(tmp_path):
    path = tmp_path / "notes.png"
    path.write_text("bench-2 log: Tamsin Ode checked the flat at 08:10\n")
    _one_line_error(path, "not an image")


@pytest.mark.parametrize("suffix, fmt", [(".png", "PNG"), (".jpg", "JPEG"), (".tif", "TIFF")])
def test_truncated_file(tmp_path, suffix, fmt):
    rng = np.random.default_rng(3)
    whole = tmp_path / f"whole{suffix}"
    # noise does not compress, so cutting the file removes image data, not just a trailer
    Image.fromarray(rng.integers(0, 256, (200, 200), dtype=np.uint8)).save(whole, format=fmt)
    data = whole.read_bytes()
    cut = tmp_path / f"cut{suffix}"
    cut.write_bytes(data[: len(data) // 2])
    _one_line_error(cut, "cut short or damaged")
    assert ImageFile.LOAD_TRUNCATED_IMAGES is False


@pytest.mark.parametrize("fmt, suffix", [("GIF", ".gif"), ("BMP", ".bmp"), ("BMP", ".png")])
def test_unsupported_format_names_the_supported_ones(tmp_path, fmt, suffix):
    path = tmp_path / f"photo{suffix}"
    Image.fromarray(np.full((80, 80), 128, dtype=np.uint8)).save(path, format=fmt)
    message = _one_line_error(path, fmt)
    assert "PNG, JPEG or TIFF" in message


def test_too_small(tmp_path):
    path = tmp_path / "thumb.png"
    Image.fromarray(np.zeros((40, 300), dtype=np.uint8)).save(path)
    _one_line_error(path, "too small to hold fringes")


def test_permission_denied(tmp_path, monkeypatch):
    # Tests may run as root, where chmod does not deny reading; make open() deny instead.
    path = tmp_path / "locked.png"
    Image.fromarray(np.zeros((80, 80), dtype=np.uint8)).save(path)

    def denied(*args, **kwargs):
        raise PermissionError(13, "Permission denied")

    monkeypatch.setattr(loading, "open", denied, raising=False)
    _one_line_error(path, "permission denied")


def _png_claiming(width: int, height: int) -> bytes:
    """A PNG signature and IHDR (with a valid CRC) claiming ``width x height`` grey pixels."""
    ihdr = struct.pack(">IIBBBBB", width, height, 8, 0, 0, 0, 0)
    chunk = struct.pack(">I", len(ihdr)) + b"IHDR" + ihdr
    chunk += struct.pack(">I", zlib.crc32(b"IHDR" + ihdr) & 0xFFFFFFFF)
    idat = zlib.compress(b"\x00" * 64)
    chunk += struct.pack(">I", len(idat)) + b"IDAT" + idat
    chunk += struct.pack(">I", zlib.crc32(b"IDAT" + idat) & 0xFFFFFFFF)
    return b"\x89PNG\r\n\x1a\n" + chunk


def test_decompression_bomb_header(tmp_path):
    path = tmp_path / "bomb.png"
    path.write_bytes(_png_claiming(100_000, 100_000))  # 1e10 px, over twice Pillow's limit
    limit = Image.MAX_IMAGE_PIXELS
    _one_line_error(path, "decompression-bomb")
    assert Image.MAX_IMAGE_PIXELS == limit


def test_decompression_bomb_warning_zone_is_refused(tmp_path, monkeypatch):
    # Between MAX_IMAGE_PIXELS and twice it Pillow only warns; the loader must refuse.
    path = tmp_path / "big.png"
    Image.fromarray(np.zeros((120, 120), dtype=np.uint8)).save(path)
    monkeypatch.setattr(Image, "MAX_IMAGE_PIXELS", 10_000)
    filters = list(warnings.filters)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # even when the caller ignores warnings
        _one_line_error(path, "decompression-bomb")
    assert warnings.filters == filters


def test_globals_untouched_after_failures(tmp_path):
    filters = list(warnings.filters)
    limit = Image.MAX_IMAGE_PIXELS
    bomb = tmp_path / "bomb.png"
    bomb.write_bytes(_png_claiming(100_000, 100_000))
    for bad in (bomb, tmp_path / "missing.png"):
        with pytest.raises(UnreadablePhotoError):
            load_photo(bad)
    assert warnings.filters == filters
    assert Image.MAX_IMAGE_PIXELS == limit
    assert ImageFile.LOAD_TRUNCATED_IMAGES is False


# --- values ----------------------------------------------------------------------------


@pytest.mark.parametrize("fmt, suffix", [("PNG", ".png"), ("TIFF", ".tif")])
@pytest.mark.parametrize("bits", [8, 16])
def test_grey_round_trip_is_exact(tmp_path, fmt, suffix, bits):
    top = 2**bits - 1
    counts = _ramp((150, 170), top, np.uint8 if bits == 8 else np.uint16)
    path = tmp_path / f"grey{bits}{suffix}"
    Image.fromarray(counts).save(path, format=fmt)
    photo = load_photo(path)
    assert photo.pixels.dtype == np.float32
    assert photo.pixels.shape == counts.shape
    assert (photo.format, photo.bit_depth, photo.path) == (fmt, bits, str(path))
    # every code value comes back exactly: counts / top, to float32 rounding
    np.testing.assert_array_equal(np.round(photo.pixels.astype(np.float64) * top), counts)
    np.testing.assert_allclose(photo.pixels, counts / top, rtol=0, atol=1e-7)
    assert photo.pixels.min() >= 0.0 and photo.pixels.max() <= 1.0


def test_big_endian_16_bit_tiff(tmp_path):
    counts = _ramp((100, 90), 65535, np.uint16)
    image = Image.frombytes("I;16B", (90, 100), counts.astype(">u2").tobytes())
    path = tmp_path / "be.tif"
    image.save(path, format="TIFF")
    photo = load_photo(path)
    assert photo.bit_depth == 16
    np.testing.assert_array_equal(np.round(photo.pixels.astype(np.float64) * 65535), counts)


def test_32_bit_integer_tiff_mode_i(tmp_path):
    counts = _ramp((70, 80), 65535, np.int32)
    path = tmp_path / "mode_i.tif"
    Image.fromarray(counts).save(path)
    photo = load_photo(path)
    assert photo.bit_depth == 16
    np.testing.assert_array_equal(np.round(photo.pixels.astype(np.float64) * 65535), counts)
    counts[0, 0] = 70_000  # past 16 bits: refused rather than squeezed
    Image.fromarray(counts).save(path)
    _one_line_error(path, "32-bit integer")


def test_jpeg_is_close(tmp_path):
    y, x = np.mgrid[0:200, 0:240]
    grey = 0.5 + 0.35 * np.cos(2 * np.pi * (x * 0.03 + y * 0.02))
    counts = np.round(grey * 255).astype(np.uint8)
    path = tmp_path / "fringes.jpg"
    Image.fromarray(counts).save(path, quality=95)
    photo = load_photo(path)
    assert (photo.format, photo.bit_depth) == ("JPEG", 8)
    # quality-95 JPEG of smooth fringes: a few code values at most (common practice)
    assert np.abs(photo.pixels - counts / 255).mean() < 1.5 / 255
    assert np.abs(photo.pixels - counts / 255).max() < 8 / 255


def test_colour_luminance_uses_bt601(tmp_path):
    rng = np.random.default_rng(11)
    rgb = rng.integers(0, 256, (90, 100, 3), dtype=np.uint8)
    path = tmp_path / "colour.png"
    Image.fromarray(rgb).save(path)
    photo = load_photo(path)
    # ITU-R BT.601 luma weights 0.299, 0.587, 0.114 (from memory; Pillow's convert("L")
    # documents the same "ITU-R 601-2 luma transform")
    assert LUMA_WEIGHTS == (0.299, 0.587, 0.114)
    expected = (0.299 * rgb[..., 0] + 0.587 * rgb[..., 1] + 0.114 * rgb[..., 2]) / 255.0
    np.testing.assert_allclose(photo.pixels, expected, rtol=0, atol=2e-6)
    # and Pillow's own conversion, which rounds to whole code values
    pillow = np.asarray(Image.fromarray(rgb).convert("L"), dtype=float) / 255.0
    assert np.abs(photo.pixels - pillow).max() <= 0.5 / 255 + 1e-6


@pytest.mark.parametrize("mode", ["RGBA", "LA", "P"])
def test_other_modes_match_luminance(tmp_path, mode):
    rng = np.random.default_rng(5)
    rgb = rng.integers(0, 256, (80, 80, 3), dtype=np.uint8)
    base = Image.fromarray(rgb)
    image = base.convert(mode) if mode != "P" else base.quantize(64)
    path = tmp_path / f"{mode}.png"
    image.save(path)
    photo = load_photo(path)
    # what the image holds, seen through Pillow's RGB conversion and BT.601 weights
    shown = np.asarray(Image.open(path).convert("RGB"), dtype=float)
    expected = shown @ np.array(LUMA_WEIGHTS) / 255.0
    np.testing.assert_allclose(photo.pixels, expected, rtol=0, atol=2e-6)


def test_exif_orientation_is_applied(tmp_path):
    # big blocks survive JPEG: a bright top-left quarter and a mid-grey right half
    stored = np.full((120, 160), 20, dtype=np.uint8)
    stored[:60, :80] = 230
    stored[:, 80:] = 128
    exif = Image.Exif()
    exif[0x0112] = 6  # EXIF Orientation 6: rotate 90 degrees clockwise to view (EXIF 2.3)
    path = tmp_path / "rotated.jpg"
    Image.fromarray(stored).save(path, quality=95, exif=exif)
    photo = load_photo(path)
    shown = np.rot90(stored, k=-1)  # numpy: k=-1 turns clockwise
    assert photo.pixels.shape == shown.shape == (160, 120)
    assert np.abs(photo.pixels - shown / 255.0).mean() < 2 / 255


def test_exif_orientation_on_16_bit_tiff(tmp_path):
    counts = _ramp((70, 90), 65535, np.uint16)
    image = Image.fromarray(counts)
    exif = Image.Exif()
    exif[0x0112] = 3  # Orientation 3: rotate 180 degrees (EXIF 2.3)
    path = tmp_path / "upside_down.tif"
    image.save(path, exif=exif)
    photo = load_photo(path)
    np.testing.assert_array_equal(
        np.round(photo.pixels.astype(np.float64) * 65535), counts[::-1, ::-1]
    )


def test_hash_is_of_the_file_bytes(tmp_path):
    path = tmp_path / "h.png"
    Image.fromarray(_ramp((64, 64), 255, np.uint8)).save(path)
    assert load_photo(path).sha256 == hashlib.sha256(path.read_bytes()).hexdigest()


def test_saturated_fraction(tmp_path):
    counts = np.full((100, 100), 1000, dtype=np.uint16)
    counts[:5, :] = 65535  # 5 % of the pixels at the top code value
    path = tmp_path / "sat.png"
    Image.fromarray(counts).save(path)
    assert load_photo(path).saturated_fraction == pytest.approx(0.05)
    rgb = np.zeros((100, 100, 3), dtype=np.uint8)
    rgb[:10, :, 0] = 255  # one channel clipped is a clipped pixel
    assert photo_from_array(rgb).saturated_fraction == pytest.approx(0.10)


def test_pixels_are_read_only(tmp_path):
    path = tmp_path / "ro.png"
    Image.fromarray(np.zeros((64, 64), dtype=np.uint8)).save(path)
    with pytest.raises(ValueError):
        load_photo(path).pixels[0, 0] = 1.0


# --- arrays ----------------------------------------------------------------------------


@pytest.mark.parametrize("dtype, top, bits", [(np.uint8, 255, 8), (np.uint16, 65535, 16)])
def test_array_integer(dtype, top, bits):
    counts = _ramp((64, 80), top, dtype)
    before = counts.copy()
    photo = photo_from_array(counts)
    np.testing.assert_array_equal(counts, before)
    assert (photo.path, photo.sha256, photo.format, photo.bit_depth) == (None, None, "array", bits)
    np.testing.assert_allclose(photo.pixels, counts / top, rtol=0, atol=1e-7)


def test_array_float_and_colour():
    rng = np.random.default_rng(2)
    grey = rng.uniform(0, 1, (70, 64))
    np.testing.assert_allclose(photo_from_array(grey).pixels, grey, rtol=0, atol=1e-7)
    rgb = rng.uniform(0, 1, (70, 64, 3))
    expected = rgb @ np.array([0.299, 0.587, 0.114])  # ITU-R BT.601 luma (from memory)
    np.testing.assert_allclose(photo_from_array(rgb).pixels, expected, rtol=0, atol=1e-6)


@pytest.mark.parametrize(
    "bad, match",
    [
        (np.zeros((64, 64), dtype=np.int64), "dtype"),
        (np.full((64, 64), 1.5), "0..1"),
        (np.full((64, 64), np.nan), "NaN"),
        (np.zeros((64, 64, 2)), "shape"),
        (np.zeros((10, 64)), "too small"),
    ],
)
def test_array_refused(bad, match):
    with pytest.raises(UnreadablePhotoError, match=match):
        photo_from_array(bad)


def test_is_photo_path():
    assert is_photo_path("a/BW-FL-0412.PNG")
    assert is_photo_path("x.jpeg") and is_photo_path("x.JPG") and is_photo_path("x.tiff")
    assert is_photo_path("x.Tif")
    assert not is_photo_path("x.gif") and not is_photo_path("x.png.txt")
    assert not is_photo_path("png")


# --- only regular files, headers before bytes, and what was left out said plainly ------


def test_a_named_pipe_is_refused_without_waiting_for_a_writer(tmp_path):
    import os
    import threading

    fifo = tmp_path / "BW-FL-0412.png"
    os.mkfifo(fifo)
    outcome = []

    def load():
        try:
            load_photo(fifo)
        except UnreadablePhotoError as exc:
            outcome.append(str(exc))

    reader = threading.Thread(target=load, daemon=True)
    reader.start()
    reader.join(timeout=60)
    if reader.is_alive():  # it waits for a writer: give it one so the thread can end
        with open(fifo, "wb"):
            pass
        reader.join(timeout=60)
        pytest.fail("load_photo waited on a named pipe")
    assert len(outcome) == 1 and "not a regular file" in outcome[0]


@pytest.mark.skipif(not Path("/dev/zero").exists(), reason="no /dev/zero here")
def test_a_device_or_a_link_to_one_is_refused(tmp_path):
    link = tmp_path / "BW-FL-0412.png"
    link.symlink_to("/dev/zero")
    for path in (Path("/dev/zero"), link):
        _one_line_error(path, "not a regular file")


def _bytes_read() -> int:
    with open("/proc/self/io") as fh:
        return next(int(line.split()[1]) for line in fh if line.startswith("rchar:"))


@pytest.mark.skipif(not Path("/proc/self/io").exists(), reason="needs Linux /proc/self/io")
def test_a_huge_file_is_judged_by_its_header_not_read_whole(tmp_path):
    gib = 2**30
    junk = tmp_path / "BW-FL-0412.png"
    with open(junk, "wb") as fh:  # 2 GiB, sparse: no disk space used
        fh.write(b"not an image at all")
        fh.truncate(2 * gib)
    padded = tmp_path / "BW-FL-0413.png"
    with open(padded, "wb") as fh:  # a real 100 x 100 PNG followed by 2 GiB of nothing
        fh.write(_png_claiming(100, 100))
        fh.truncate(2 * gib)
    for path, words in ((junk, "not an image"), (padded, "far more than a 100 x 100")):
        before = _bytes_read()
        _one_line_error(path, words)
        assert _bytes_read() - before < 64 * 2**20


def test_a_multi_page_tiff_and_an_animated_png_say_only_the_first_frame_was_used(tmp_path):
    frames = [Image.fromarray(_ramp((80, 96), 255, np.uint8) // (k + 1)) for k in range(3)]
    for name, extra in (("stack.tif", {}), ("anim.png", {"duration": 100, "loop": 0})):
        path = tmp_path / name
        frames[0].save(path, save_all=True, append_images=frames[1:], **extra)
        photo = load_photo(path)
        assert len(photo.notes) == 1, photo.notes
        assert "3 frames" in photo.notes[0] and "only the first frame" in photo.notes[0]
        # the first frame is what was measured
        np.testing.assert_allclose(photo.pixels * 255, np.asarray(frames[0]), atol=1e-3)


def test_transparency_is_said_and_ignored(tmp_path):
    rgb = np.stack([_ramp((80, 96), 255, np.uint8)] * 3, axis=-1)
    alpha = np.full((80, 96), 255, np.uint8)
    opaque = tmp_path / "opaque.png"
    Image.fromarray(np.dstack([rgb, alpha]), "RGBA").save(opaque)
    assert load_photo(opaque).notes == ()
    alpha[:10] = 0
    clear = tmp_path / "clear.png"
    Image.fromarray(np.dstack([rgb, alpha]), "RGBA").save(clear)
    photo = load_photo(clear)
    assert len(photo.notes) == 1 and "transparency was ignored" in photo.notes[0]
    assert np.array_equal(photo.pixels, load_photo(opaque).pixels)


def test_a_reader_warning_becomes_a_note_not_a_line_on_stderr(tmp_path, monkeypatch, capfd):
    path = tmp_path / "BW-FL-0412.png"
    Image.fromarray(_ramp((80, 96), 255, np.uint8)).save(path)
    real = loading.ImageOps.exif_transpose

    def warns(image, **kwargs):  # as Pillow does for a damaged EXIF block
        warnings.warn("Corrupt EXIF data.  Expecting to read 12 bytes", UserWarning,
                      stacklevel=1)
        return real(image, **kwargs)

    monkeypatch.setattr(loading.ImageOps, "exif_transpose", warns)
    photo = load_photo(path)
    assert photo.notes == ("the image reader passed over a fault in the file: Corrupt EXIF "
                           "data. Expecting to read 12 bytes",)
    assert capfd.readouterr().err == ""
