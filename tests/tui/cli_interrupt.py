"""Run the command line in a subprocess and press ctrl+c once it has logged something."""

from __future__ import annotations

import signal
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

CLI = "import sys; from flatsight.tui.cli import main; sys.exit(main(sys.argv[1:]))"


def logged_count(log: Path) -> int:
    """Records in the log, read-only (0 while it is not made yet)."""
    try:
        con = sqlite3.connect(f"{log.as_uri()}?mode=ro", uri=True)
        try:
            return con.execute("SELECT count(*) FROM inspections").fetchone()[0]
        finally:
            con.close()
    except sqlite3.Error:
        return 0


def interrupt_once_logged(argv: list[str], log: Path, records: int = 1,
                          ) -> tuple[int, str, str]:
    """Start ``flatsight ARGV``, wait until ``records`` are logged, send SIGINT.

    Returns the exit status, stdout and stderr. Fails the test when nothing is logged
    within five minutes (polling the log, not timing the process).
    """
    proc = subprocess.Popen([sys.executable, "-c", CLI, *map(str, argv)],
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        deadline = time.monotonic() + 300
        logged = 0
        while logged < records and proc.poll() is None and time.monotonic() < deadline:
            time.sleep(0.05)
            logged = logged_count(log)
        assert logged, "no record was logged"
        proc.send_signal(signal.SIGINT)
        out, err = proc.communicate(timeout=300)
    finally:
        proc.kill()
        proc.wait()
    return proc.returncode, out, err
