"""Tests of the all-or-nothing file writes (analysis/atomic.py)."""

from __future__ import annotations

import os
import stat
import subprocess
import sys
import time
from pathlib import Path

import pytest
from flatsight.analysis.atomic import atomic_path, atomic_write_bytes, atomic_write_text


def names(folder: Path) -> list[str]:
    return sorted(p.name for p in folder.iterdir())


def test_write_new_and_replace(tmp_path):
    target = tmp_path / "BW-FL-0412.json"
    atomic_write_text(target, '{"pv_nm": 31.6}\n')
    assert target.read_text() == '{"pv_nm": 31.6}\n'
    target.write_bytes(b"x" * 100000)  # a longer old file: nothing of it may remain
    atomic_write_bytes(target, b"short")
    assert target.read_bytes() == b"short"
    assert names(tmp_path) == ["BW-FL-0412.json"]


def test_text_encoding(tmp_path):
    target = tmp_path / "note.txt"
    atomic_write_text(target, "Tamsin Ode, λ/20 at 632.8 nm, 3 °C")
    assert target.read_bytes() == "Tamsin Ode, λ/20 at 632.8 nm, 3 °C".encode()


def test_temporary_file_sits_beside_the_target_with_its_suffix(tmp_path):
    target = tmp_path / "maps" / "BW-FL-0412.tif"
    target.parent.mkdir()
    with atomic_path(target) as tmp:
        # same folder: the rename is atomic only within one file system
        assert tmp.parent == target.parent
        assert tmp.suffix == ".tif"  # Pillow and numpy choose the format by suffix
        assert tmp != target and not target.exists()
        tmp.write_bytes(b"data")
    assert target.read_bytes() == b"data"
    assert names(target.parent) == ["BW-FL-0412.tif"]


def test_an_error_leaves_the_old_file(tmp_path):
    target = tmp_path / "record.json"
    target.write_text("old")

    class Boom(Exception):
        pass

    with pytest.raises(Boom):
        with atomic_path(target) as tmp:
            tmp.write_text("half of the new")
            raise Boom
    assert target.read_text() == "old"
    assert names(tmp_path) == ["record.json"]


def test_interrupt_leaves_the_old_file(tmp_path):
    # ctrl+c in the middle of a write (a BaseException, not an Exception)
    target = tmp_path / "record.json"
    target.write_text("old")
    with pytest.raises(KeyboardInterrupt):
        with atomic_path(target) as tmp:
            tmp.write_text("half")
            raise KeyboardInterrupt
    assert target.read_text() == "old"
    assert names(tmp_path) == ["record.json"]


def test_failed_rename_leaves_no_temporary_file(tmp_path):
    target = tmp_path / "taken"
    target.mkdir()
    (target / "inside").write_text("keep")
    with pytest.raises(OSError):
        atomic_write_text(target, "cannot replace a folder that holds files")
    assert names(tmp_path) == ["taken"]
    assert (target / "inside").read_text() == "keep"


def test_relative_path_in_the_current_folder(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    atomic_write_text("plain.txt", "here")
    assert (tmp_path / "plain.txt").read_text() == "here"
    assert names(tmp_path) == ["plain.txt"]


def test_missing_folder_is_an_error(tmp_path):
    with pytest.raises(OSError):
        atomic_write_text(tmp_path / "no-such-folder" / "x.txt", "data")


@pytest.mark.skipif(os.name != "posix", reason="POSIX permission bits")
def test_written_file_has_ordinary_permissions(tmp_path):
    # BUG (found while writing these tests): tempfile.mkstemp creates the temporary file
    # with mode 0600, and the rename keeps it, so every record, map or certificate written
    # through atomic.py is private to its writer, unlike a plain open() (0666 & ~umask).
    # synthetic.write_photo works around this with os.chmod(tmp, 0o644); atomic.py does not.
    plain = tmp_path / "plain.txt"
    plain.write_text("x")
    target = tmp_path / "atomic.txt"
    atomic_write_text(target, "x")
    assert stat.S_IMODE(target.stat().st_mode) == stat.S_IMODE(plain.stat().st_mode)


def test_a_temporary_file_of_a_killed_writer_is_cleared_by_the_next_write(tmp_path):
    from flatsight.analysis import atomic

    target = tmp_path / "BW-FL-0412.json"
    gone = subprocess.run([sys.executable, "-c", "import os; print(os.getpid())"],
                          capture_output=True, text=True, check=True)
    dead_pid = int(gone.stdout)  # that process has ended
    host = atomic._host_tag()
    stale = tmp_path / f".BW-FL-0412.json.flatsight-{host}-{dead_pid}-abc123.json"
    running = tmp_path / f".BW-FL-0412.json.flatsight-{host}-{os.getpid()}-def456.json"
    other_host = tmp_path / f".BW-FL-0412.json.flatsight-00000000-{dead_pid}-ghi789.json"
    young = tmp_path / f".BW-FL-0412.json.flatsight-{host}-{dead_pid}-jkl012.json"
    long_ago = time.time() - 10 * atomic.STALE_AFTER_S
    for p in (stale, running, other_host, young):
        p.write_text("half")
    for p in (stale, running, other_host):
        os.utime(p, (long_ago, long_ago))
    atomic_write_text(target, "{}\n")
    # only the old file of a dead process of this host goes; the rest may still be written
    assert names(tmp_path) == sorted(["BW-FL-0412.json", running.name, other_host.name,
                                      young.name])
