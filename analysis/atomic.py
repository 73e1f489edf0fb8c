"""Writing files so that a reader never sees half of one: temporary file, then rename.

The temporary file is removed when the write fails or the process is stopped (the
command line turns SIGTERM into an exit that runs clean-up). A process killed outright
(SIGKILL, a power cut) cannot clean up: its temporary file carries this host and the
process id, and the next write of the same file removes it once that process is gone.
"""

from __future__ import annotations

import contextlib
import hashlib
import os
import socket
import tempfile
import time
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


def _host_tag() -> str:
    """A short, file-name-safe tag of this host, so a shared folder's temporary files
    are only ever cleared by the host that wrote them."""
    return hashlib.sha256(socket.gethostname().encode("utf-8", "replace")).hexdigest()[:8]


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except OSError:  # another user's process, or a system without the call: assume alive
        return True
    return True


#: A temporary file younger than this is never cleared (its writer may be starting up).
STALE_AFTER_S = 60.0


def _clear_stale(folder: Path, prefix: str, suffix: str) -> None:
    """Remove temporary files of ``prefix`` left by killed processes of this host."""
    mine = f"{prefix}{_host_tag()}-"
    now = time.time()
    try:
        candidates = [p for p in folder.iterdir()
                      if p.name.startswith(mine) and p.name.endswith(suffix)]
    except OSError:
        return
    for stale in candidates:
        pid_text = stale.name[len(mine):].split("-", 1)[0]
        try:
            old = now - stale.stat().st_mtime > STALE_AFTER_S
        except OSError:
            continue
        if pid_text.isdigit() and old and not _alive(int(pid_text)):
            with contextlib.suppress(OSError):
                stale.unlink()


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike, *, suffix: str | None = None) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; on success it replaces ``path`` at once.

    On an exception the temporary file is removed and ``path`` is left as it was.
    ``suffix`` defaults to the target's, so writers that choose a format by suffix
    (Pillow, numpy) still see the right one. Temporary files of the same target left
    by processes of this host that were killed are removed first.
    """
    target = Path(path)
    folder = target.parent if str(target.parent) else Path(".")
    prefix = f".{target.name}.flatsight-"
    suffix = suffix or target.suffix
    _clear_stale(folder, prefix, suffix)
    fd, tmp = tempfile.mkstemp(prefix=f"{prefix}{_host_tag()}-{os.getpid()}-", suffix=suffix,
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
