"""Shared fixtures: small synthetic fringe photos on disk, good and bad, made once per session.

The photos are about 0.3 MP so the whole suite stays quick on a shared two-core machine;
they come from ``analysis/synthetic.py``, the same generator the accuracy table uses.
"""

from __future__ import annotations

import itertools
import os
import shutil
import struct
import subprocess
import sys
import tempfile
import zlib
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pytest
from flatsight.analysis.synthetic import (
    SyntheticPhoto,
    SyntheticSurface,
    make_fringe_photo,
    write_photo,
)

SMALL = (480, 640)  # rows, columns: 0.31 MP


def pytest_configure(config):
    # registered here so that warnings-as-errors does not trip over an unknown mark
    config.addinivalue_line(
        "markers", "slow: runs the whole measurement several times (still part of the default run)"
    )


def clean_photo(surface: SyntheticSurface, **changes) -> SyntheticPhoto:
    """A photo without the camera's faults: no noise, dust, uneven light or tone curve.

    For checks against a textbook method that knows nothing about those faults.
    """
    kw = dict(shape=SMALL, fringes=20.0, angle_deg=30.0, visibility=0.7, level=0.5,
              illumination=0.0, gamma=1.0, noise=0.0, dust=0, bad_pixels=0,
              mount_ring=False, seed=0)
    kw.update(changes)
    return make_fringe_photo(surface, **kw)


def png_with_header_only(path: Path, width: int, height: int) -> None:
    """A PNG whose header claims ``width`` x ``height`` pixels with almost no data behind it.

    Chunk layout from the PNG specification (ISO/IEC 15948, from memory): signature,
    IHDR (13 bytes), IDAT, IEND, each chunk with a CRC-32 of its type and data.
    """

    def chunk(kind: bytes, data: bytes) -> bytes:
        return (struct.pack(">I", len(data)) + kind + data
                + struct.pack(">I", zlib.crc32(kind + data) & 0xFFFFFFFF))

    ihdr = struct.pack(">IIBBBBB", width, height, 8, 0, 0, 0, 0)  # 8-bit grey
    path.write_bytes(b"\x89PNG\r\n\x1a\n" + chunk(b"IHDR", ihdr)
                     + chunk(b"IDAT", zlib.compress(b"\x00" * 16)) + chunk(b"IEND", b""))


@pytest.fixture(scope="session")
def make_clean_photo():
    """:func:`clean_photo`, for test modules (the tests folder is not a package)."""
    return clean_photo


@dataclass(frozen=True)
class PhotoSet:
    """Paths of the session's photos, and the synthetic photos behind the good ones."""

    folder: Path
    good_png: Path
    good_tif16: Path
    good_jpg: Path
    good: SyntheticPhoto
    good16: SyntheticPhoto
    bad: dict[str, Path]
    empty_folder: Path


@pytest.fixture(scope="session")
def photo_set(tmp_path_factory) -> PhotoSet:
    root = tmp_path_factory.mktemp("photos")
    good_dir = root / "good"
    bad_dir = root / "bad"
    empty = root / "empty-folder"
    for d in (good_dir, bad_dir, empty):
        d.mkdir()
    (empty / "notes.txt").write_text("not a photo\n")

    # Part serials of the demo scenario (Brindlewick Optical Works).
    good = make_fringe_photo(SyntheticSurface({4: 40.0, 6: -12.0, 8: 6.0}, ripple_nm=0.6),
                             shape=SMALL, fringes=18.0, angle_deg=30.0, dust=0, seed=3)
    good16 = make_fringe_photo(SyntheticSurface({4: -25.0, 5: 10.0, 11: 5.0}), shape=SMALL,
                               fringes=22.0, angle_deg=110.0, bit_depth=16, dust=0, seed=4)
    good_png = good_dir / "BW-FL-0412_hene.png"
    good_tif = good_dir / "BW-FL-0413_hene.tif"
    good_jpg = root / "BW-FL-0414_hene.jpg"
    write_photo(good, good_png)
    write_photo(good16, good_tif)
    write_photo(good, good_jpg)

    bad: dict[str, Path] = {}

    def put(name: str) -> Path:
        bad[name] = bad_dir / name
        return bad[name]

    put("empty.png").write_bytes(b"")
    put("text.png").write_text("Brindlewick Optical Works: bench-2 notes\n")
    data = good_png.read_bytes()
    put("truncated.png").write_bytes(data[: len(data) // 2])
    png_with_header_only(put("bomb.png"), 30000, 30000)  # 900 MP, twice past Pillow's limit
    write_photo(np.full((1, 1), 0.5), put("one-pixel.png"))
    write_photo(np.full(SMALL, 0.5), put("blank-grey.png"))
    rng = np.random.default_rng(7)
    write_photo(rng.uniform(0.0, 1.0, SMALL), put("noise.png"))
    # closed circular fringes: a strong power term and (almost) no tilt
    rings = make_fringe_photo(SyntheticSurface({4: 900.0}), shape=SMALL, fringes=0.01,
                              angle_deg=0.0, dust=0, seed=5)
    write_photo(rings, put("rings.png"))
    yy, xx = np.mgrid[0 : SMALL[0], 0 : SMALL[1]]
    disk = np.hypot(xx - SMALL[1] / 2, yy - SMALL[0] / 2) < 0.4 * SMALL[0]
    write_photo(np.where(disk, 1.0, 0.02), put("white-disk.png"))
    return PhotoSet(folder=root, good_png=good_png, good_tif16=good_tif, good_jpg=good_jpg,
                    good=good, good16=good16, bad=bad, empty_folder=empty)


def _run_as_reader(folder, code, *args):
    """Run ``code`` as someone who may read but not write ``folder``.

    As root (whom file modes do not stop) the code runs as the unprivileged user
    'nobody', the folder and log staying root's; otherwise the folder and its files
    lose their write permission for the test.
    """
    if os.geteuid() != 0:
        for p in folder.iterdir():
            p.chmod(0o444)
        folder.chmod(0o555)
        try:
            return subprocess.run([sys.executable, "-c", code, *args], capture_output=True,
                                  text=True, timeout=120)
        finally:
            folder.chmod(0o755)
    import pwd

    folder.chmod(0o755)
    for p in folder.iterdir():
        p.chmod(0o644)
    nobody = pwd.getpwnam("nobody")
    if shutil.which("setpriv") is None:
        pytest.skip("running as root without setpriv: cannot become another user")
    as_nobody = ["setpriv", f"--reuid={nobody.pw_uid}", f"--regid={nobody.pw_gid}",
                 "--clear-groups", sys.executable, "-c"]
    probe = subprocess.run([*as_nobody, "import flatsight"], capture_output=True, text=True,
                           timeout=120, cwd="/")
    if probe.returncode != 0:
        pytest.skip(f"user 'nobody' cannot run this Python: {probe.stderr.strip()[-200:]}")
    return subprocess.run([*as_nobody, code, *args], capture_output=True, text=True,
                          timeout=120, cwd="/")


@pytest.fixture
def shared_folder():
    """A folder outside pytest's private temporary tree, so another user can reach it."""
    folder = Path(tempfile.mkdtemp(prefix="flatsight-log-"))
    folder.chmod(0o755)
    yield folder
    folder.chmod(0o755)
    shutil.rmtree(folder, ignore_errors=True)


@pytest.fixture
def run_as_reader():
    """:func:`_run_as_reader`: run Python code as a user who cannot write a folder."""
    return _run_as_reader


@pytest.fixture(scope="session")
def measured(photo_set):
    """One real measurement of the good PNG, for tests about what is done with a result."""
    from flatsight.analysis.pipeline import MeasureSettings, measure

    return measure(str(photo_set.good_png), MeasureSettings(wavelength_nm=632.8))


@pytest.fixture
def quick_measure(measured, monkeypatch):
    """``measure`` answering at once with :func:`measured`, named after the photo asked for,
    so command-line tests about output and logging need not run the analysis each time.
    """
    import dataclasses

    import flatsight.analysis.pipeline as pipeline

    def quick(photo, settings, **_):
        return dataclasses.replace(measured, photo=str(photo))

    monkeypatch.setattr(pipeline, "measure", quick)
    # the stand-in lives in this process: a batch measures one photo at a time here, as
    # with --jobs 1, instead of in worker processes that would run the real analysis
    monkeypatch.setattr("flatsight.tui.parallel.available_cores", lambda: 1)


# --- a real PostgreSQL server for the shared inspection log ---------------------------------

# set by .ci/run: there a missing server is a failure, never a quiet skip
REQUIRE_POSTGRES = "FLATSIGHT_REQUIRE_POSTGRES"


@pytest.fixture(scope="session")
def postgres_server():
    """A PostgreSQL server started for this test run (see tests/postgres_server.py).

    Skips with the reason where none can be had, unless ``FLATSIGHT_REQUIRE_POSTGRES``
    is set (CI), where that fails the tests instead.
    """
    from postgres_server import ServerUnavailable, start_server

    try:
        server = start_server()
    except ServerUnavailable as exc:
        if os.environ.get(REQUIRE_POSTGRES):
            pytest.fail(f"{REQUIRE_POSTGRES} is set but no PostgreSQL server could be "
                        f"started: {exc}")
        pytest.skip(f"no PostgreSQL server could be started: {exc}")
    yield server
    server.close()


@pytest.fixture
def postgres_log(postgres_server):
    """The URL of a new, empty database on the test server (no password in it)."""
    return postgres_server.create_database(f"log_{next(_DATABASES)}")


_DATABASES = itertools.count(1)
