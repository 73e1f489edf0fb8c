"""The version Flatsight reports (analysis/version.py) is the one the project declares."""

from __future__ import annotations

import tomllib
from importlib import metadata
from pathlib import Path

from flatsight.analysis.version import flatsight_version

PYPROJECT = Path(__file__).resolve().parents[2] / "pyproject.toml"


def test_the_version_is_the_installed_distributions():
    assert flatsight_version() == metadata.version("flatsight")


def test_the_installed_version_is_the_one_pyproject_declares():
    # an install older than the source tree would stamp records with the wrong version
    declared = tomllib.loads(PYPROJECT.read_text(encoding="utf-8"))["project"]["version"]
    assert flatsight_version() == declared
