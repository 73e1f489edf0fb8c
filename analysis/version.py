"""The installed Flatsight's version, for records, summaries, certificates and ``--version``."""

from __future__ import annotations

from importlib import metadata

__all__ = ["flatsight_version"]


def flatsight_version() -> str:
    """The version of the installed ``flatsight`` distribution (``"unknown"`` if not installed).

    Read from the installed package's metadata, so it is the version pip installed,
    whichever way (wheel, editable, pipx) that was.
    """
    try:
        return metadata.version("flatsight")
    except metadata.PackageNotFoundError:  # pragma: no cover - running from a bare tree
        return "unknown"
