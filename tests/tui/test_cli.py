"""The `flatsight` command itself (tui/cli.py): --version and the bare command."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

from flatsight.analysis.version import flatsight_version
from flatsight.tui.cli import main


def test_version_prints_the_package_version(capsys):
    assert main(["--version"]) == 0
    out, err = capsys.readouterr()
    assert out == f"flatsight {flatsight_version()}\n" and err == ""


def test_version_from_a_fresh_process():
    # as a shop's IT person would check an install: the environment's own console script
    exe = Path(sys.executable).with_name("flatsight")
    command = [str(exe)] if exe.exists() else [sys.executable, "-m", "flatsight.tui.cli"]
    done = subprocess.run(
        command + ["--version"],
        capture_output=True,
        text=True,
        timeout=60,
        check=False,
    )
    assert done.returncode == 0, done.stderr
    assert done.stdout.strip() == f"flatsight {flatsight_version()}"


def test_no_command_prints_the_help_and_status_2(capsys):
    assert main([]) == 2
    assert "--version" in capsys.readouterr().out
