"""Writing files so that a reader never sees half of one: temporary file, then rename."""

from __future__ import annotations

import contextlib
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path

__all__ = ["atomic_path", "atomic_write_bytes", "atomic_write_text"]


def _umask() -> int:
    """The process's umask, read without changing it where the system allows."""
    try:
        with open("/proc/self/status", encoding="ascii") as fh:
            for line in fh:
                if line.startswith("Umask:"):
                    return int(line.split()[1], 8)
    except (OSError, ValueError):
        pass
    umask = os.umask(0o022)  # elsewhere: set and restore at once
    os.umask(umask)
    return umask


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike, *, suffix: str | None = None) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; on success it replaces ``path`` at once.

    On an exception the temporary file is removed and ``path`` is left as it was.
    ``suffix`` defaults to the target's, so writers that choose a format by suffix
    (Pillow, numpy) still see the right one.
    """
    target = Path(path)
    folder = target.parent if str(target.parent) else Path(".")
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=suffix or target.suffix,
                               dir=folder)
    os.close(fd)
    tmp_path = Path(tmp)
    # mkstemp makes the file private (0600); give it the mode a plain write would have,
    # or the mode of the file it replaces
    try:
        mode = target.stat().st_mode & 0o777
    except OSError:
        mode = 0o666 & ~_umask()
    os.chmod(tmp_path, mode)
    try:
        yield tmp_path
        with open(tmp_path, "rb+") as fh:
            os.fsync(fh.fileno())
        os.replace(tmp_path, target)
    except BaseException:
        with contextlib.suppress(FileNotFoundError):
            tmp_path.unlink()
        raise


def atomic_write_bytes(path: str | os.PathLike, data: bytes) -> None:
    """Write ``data`` to ``path`` all at once or not at all."""
    with atomic_path(path) as tmp:
        tmp.write_bytes(data)


def atomic_write_text(path: str | os.PathLike, text: str, encoding: str = "utf-8") -> None:
    """Write ``text`` to ``path`` all at once or not at all."""
    atomic_write_bytes(path, text.encode(encoding))
