"""The `flatsight` command itself (tui/cli.py): --version and the bare command."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

import pytest
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


STOPPED_MID_WRITE = """
import sys
from flatsight.analysis import atomic
from flatsight.tui import cli

def held_write(path, data):
    # the certificate's write, held open half done until the test stops the process
    with atomic.atomic_path(path) as tmp:
        tmp.write_bytes(data[:100])
        print("writing", flush=True)
        sys.stdin.readline()

atomic.atomic_write_bytes = held_write
sys.exit(cli.main(sys.argv[1:]))
"""


def test_a_stopped_write_leaves_no_temporary_file(measured, tmp_path):
    import signal

    from flatsight.analysis.record import measurement_to_record
    from flatsight.analysis.records.log import record_measurement

    log = tmp_path / "log.sqlite"
    record_measurement(log, measurement_to_record(measured), part="BW-FL-0412")
    out = tmp_path / "certificates"
    out.mkdir()
    with subprocess.Popen(
            [sys.executable, "-c", STOPPED_MID_WRITE, "report", "1", "--log", str(log),
             "--output", str(out / "BW-FL-0412.html")],
            stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=subprocess.PIPE,
            text=True) as proc:
        try:
            assert proc.stdout.readline().strip() == "writing", proc.stderr.read()
            assert [p.name.startswith(".BW-FL-0412.html.") for p in out.iterdir()] == [True]
            proc.send_signal(signal.SIGTERM)  # what `kill` sends
            _, err = proc.communicate(timeout=60)
        finally:
            if proc.poll() is None:
                proc.kill()
    assert proc.returncode == 128 + signal.SIGTERM, err
    assert "Traceback" not in err
    assert list(out.iterdir()) == []  # neither a half certificate nor a hidden temporary file


@pytest.mark.parametrize("command", ["inspect", "stack", "absolute"])
def test_help_lists_only_the_exit_statuses_the_command_gives(command, capsys):
    # issue 9 item 6: inspect promised 1 when out of tolerance but quits with 0, and stack
    # and absolute, which take no --spec, listed the tolerance statuses
    status = main([command, "--help"])
    out = capsys.readouterr().out
    assert status == 0
    statuses = out.split("exit status:", 1)[1]
    assert "out of tolerance" not in statuses and "  1  " not in statuses
    if command == "inspect":
        assert "whatever the verdicts" in statuses
