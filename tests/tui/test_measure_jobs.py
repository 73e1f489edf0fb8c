"""`flatsight measure --jobs N` and `watch --jobs N`: photos measured in parallel processes.

What a batch promises whatever the number of processes: the results print in the order
the photos were given (watch: the order they arrived), every photo is logged once, a bad
photo is reported in its turn and the rest are measured, and ctrl+c shows (and keeps)
everything finished. Speed is measured by benchmarks/bench_jobs.py, not here.
"""

from __future__ import annotations

import json
import re
import sys
from pathlib import Path

import pytest
from cli_interrupt import interrupt_once_logged
from flatsight.analysis.records import log as inspection_log
from flatsight.tui.cli import main
from flatsight.tui.parallel import available_cores

W = ["--wavelength", "632.8"]


def run_cli(capsys, *argv) -> tuple[int, str, str]:
    status = main([str(a) for a in argv])
    captured = capsys.readouterr()
    return status, captured.out, captured.err


def _batch(photo_set, tmp_path, n: int) -> list[Path]:
    """``n`` photos of parts BW-FL-0500.. : the session's two good photos, alternately."""
    photos = []
    for k in range(n):
        src = photo_set.good_png if k % 2 == 0 else photo_set.good_tif16
        photos.append(tmp_path / f"BW-FL-{500 + k:04d}{src.suffix}")
        photos[-1].write_bytes(src.read_bytes())
    return photos


def test_results_print_in_the_order_given_and_match_one_at_a_time(photo_set, capsys,
                                                                  tmp_path):
    photos = _batch(photo_set, tmp_path, 5)
    bad = tmp_path / "BW-FL-0599.png"
    bad.write_text("Brindlewick Optical Works: not a photo\n")
    order = [photos[0], photos[1], bad, *photos[2:]]
    runs = {}
    for jobs in (1, 3):
        log = tmp_path / f"log-{jobs}.sqlite"
        status, out, err = run_cli(capsys, "measure", *order, *W, "--json", "--jobs", jobs,
                                   "--log", log)
        assert status == 2, err  # the unreadable file, reported; the rest measured
        assert "Traceback" not in err
        assert [line for line in err.splitlines() if bad.name in line], err
        records = [json.loads(line) for line in out.splitlines()]
        # the order given, the bad file skipped in its place
        assert [Path(r["photo"]).name for r in records] == [p.name for p in order
                                                           if p != bad]
        # every photo logged once, under the id its printed record gives
        logged = {r["record_id"]: Path(r["photo"]).name for r in inspection_log.query(log)}
        assert sorted(logged.values()) == sorted(p.name for p in photos)
        assert all(logged[r["record_id"]] == Path(r["photo"]).name for r in records)
        runs[jobs] = records
    # a photo measured in a worker process gives exactly the figures measured here
    for one, many in zip(runs[1], runs[3], strict=True):
        for key in ("pv_nm", "rms_nm", "pvr_nm", "power_nm", "irregularity_nm"):
            assert one[key] == many[key], key
        assert one["uncertainty"] == many["uncertainty"]


def test_jobs_is_checked_before_anything_is_measured(photo_set, capsys):
    for bad in ("0", "-2", "two", "1e9"):
        status, out, err = run_cli(capsys, "measure", photo_set.good_png, *W, "--no-log",
                                   "--jobs", bad)
        assert status == 2 and out == ""
        assert "--jobs" in err and "Traceback" not in err


def test_available_cores_is_what_this_process_may_use():
    # os.sched_getaffinity (Linux) is the set of CPUs the process may run on; where the
    # system has no such call, the CPU count
    import os

    expected = (len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity")
                else os.cpu_count())
    assert available_cores() == expected


@pytest.mark.skipif(sys.platform == "win32", reason="SIGINT to a child process")
def test_ctrl_c_with_several_processes_shows_and_keeps_everything_finished(photo_set,
                                                                          tmp_path):
    photos = _batch(photo_set, tmp_path, 24)  # far more than finish before the signal
    log = tmp_path / "log.sqlite"
    status, out, err = interrupt_once_logged(["measure", *photos, *W, "--jobs", "2",
                                              "--log", log], log, records=2)
    assert status == 130, err
    assert "interrupted" in err and "Traceback" not in err
    shown = [p.name for p in photos if p.name in out]
    records = [Path(r["photo"]).name for r in inspection_log.query(log)]
    assert records and sorted(records) == sorted(shown)  # every logged result was shown
    assert len(records) < len(photos)  # and the rest were stopped, not finished


def test_watch_measures_photos_that_arrive_together_in_parallel(photo_set, capsys,
                                                                tmp_path):
    folder = tmp_path / "camera"
    folder.mkdir()
    photos = _batch(photo_set, folder, 4)
    (folder / "BW-FL-0599.png").write_text("Brindlewick Optical Works: not a photo\n")
    lines = {}
    for jobs in (1, 2):
        log = tmp_path / f"log-{jobs}.sqlite"
        status = main(["watch", str(folder), *W, "--existing", "--settle", "0",
                       "--interval", "0.01", "--max-files", "5", "--timeout", "600",
                       "--jobs", str(jobs), "--log", str(log)])
        out = capsys.readouterr().out
        assert status == 0, out
        named = [ln for ln in out.splitlines() if "BW-FL-0" in ln]
        # one line per photo (the bad file an error line), each photo logged once
        assert len(named) == 5, out
        assert sum("BW-FL-0599" in ln and "error" in ln for ln in named) == 1
        logged = sorted(Path(r["photo"]).name for r in inspection_log.query(log))
        assert logged == sorted(p.name for p in photos)
        # the same lines, in the same order, whether measured here or in workers
        # (without the time stamp, nor the record id: each is logged as it finishes)
        lines[jobs] = [re.sub(r"#\d+\s*$", "", ln.split("  ", 1)[1]) for ln in named]
        assert "5 photos" in out.splitlines()[-1]
    assert lines[1] == lines[2]


@pytest.mark.skipif(sys.platform == "win32", reason="SIGINT to a child process")
def test_ctrl_c_in_watch_with_several_processes_shows_everything_logged(photo_set,
                                                                       tmp_path):
    folder = tmp_path / "camera"
    folder.mkdir()
    photos = _batch(photo_set, folder, 24)
    log = tmp_path / "log.sqlite"
    status, out, err = interrupt_once_logged(
        ["watch", folder, *W, "--existing", "--settle", "0", "--interval", "0.01",
         "--jobs", "2", "--log", log], log, records=2)
    assert status == 130, err
    assert "Traceback" not in err and "ctrl+c" in out.splitlines()[-1]
    records = [Path(r["photo"]).stem for r in inspection_log.query(log)]
    shown = [p.stem for p in photos if p.stem in out]  # watch's lines name the part
    assert records and sorted(records) == sorted(shown)
    assert len(records) < len(photos)


def test_ctrl_c_while_a_result_is_logged_lands_after_it_is_shown():
    # a ctrl+c that comes between a record's commit and its line on the screen once left
    # a logged result unshown (seen as a flaky test_ctrl_c_in_the_table_view...): within
    # interrupts_held it is only noted, and raised as the block ends
    import os
    import signal

    from flatsight.tui.parallel import interrupts_held

    done = []
    with pytest.raises(KeyboardInterrupt):
        with interrupts_held():
            os.kill(os.getpid(), signal.SIGINT)
            done.append("logged")
            done.append("shown")
    assert done == ["logged", "shown"]
    assert signal.getsignal(signal.SIGINT) is signal.default_int_handler
    with interrupts_held():  # no ctrl+c: nothing raised
        done.append("quiet")
    assert done[-1] == "quiet"


@pytest.mark.skipif(sys.platform == "win32", reason="SIGINT to a child process")
def test_ctrl_c_while_a_worker_sends_its_result_still_exits():
    # a worker stopped in the middle of sending its result left the executor's thread
    # waiting for the rest, and the process hung at exit after "interrupted" (seen once
    # as test_ctrl_c_in_the_table_view... hanging under load). half_sent.py stops a
    # worker there on purpose, and presses ctrl+c only once the pool waits in it
    import subprocess

    script = Path(__file__).with_name("half_sent.py")
    proc = subprocess.run([sys.executable, str(script)], capture_output=True, text=True,
                          timeout=300)
    assert proc.returncode == 0, proc.stdout + proc.stderr
    assert proc.stdout.split() == ["waiting", "for", "the", "rest", "interrupted"]
