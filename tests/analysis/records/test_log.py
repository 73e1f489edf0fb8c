"""The log's one interface on both stores: eight stations starting at once on a new log."""

from __future__ import annotations

import subprocess
import sys
import textwrap
import time

import pytest
from flatsight.analysis.records import log

WRITER = textwrap.dedent("""
    import sys, time
    from flatsight.analysis.records import log
    name, count, start_at = sys.argv[2], int(sys.argv[3]), float(sys.argv[4])
    location = log.log_location(sys.argv[1])
    record = {"photo": "x.png", "wavelength_nm": 632.8, "pv_nm": 1.0,
              "zernike": {"ordering": "noll", "coefficients_nm": [0.5] * 36}}
    time.sleep(max(0.0, start_at - time.time()))  # every writer finds no log yet
    for i in range(count):
        rid = log.record_measurement(location, {**record, "photo": f"{name}-{i}.png"},
                                     part=f"{name}-{i}", operator="Ruben Halloway", station=name)
        print(rid, flush=True)
""")


@pytest.fixture(params=["sqlite", "postgresql"])
def new_log(request, tmp_path):
    """A log that does not exist yet: an SQLite path, or an empty PostgreSQL database."""
    if request.param == "sqlite":
        return str(tmp_path / "shared.sqlite")
    return request.getfixturevalue("postgres_log")


def test_eight_writers_starting_at_once_make_the_log_once_and_lose_nothing(new_log):
    writers, count = 8, 25
    start_at = time.time() + 4.0  # after every interpreter has started
    procs = [subprocess.Popen([sys.executable, "-c", WRITER, new_log, f"bench-{w}",
                               str(count), str(start_at)],
                              stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
             for w in range(writers)]
    acknowledged = []
    for p in procs:
        out, err = p.communicate(timeout=240)
        assert p.returncode == 0, err  # nobody tripped over another's making of the log
        acknowledged += [int(x) for x in out.split()]
    rows = log.query(new_log)
    assert len(rows) == writers * count
    assert sorted(r["record_id"] for r in rows) == sorted(acknowledged)
    assert {r["part"] for r in rows} == {f"bench-{w}-{i}" for w in range(writers)
                                         for i in range(count)}


def test_a_record_that_supersedes_another_hides_it_but_never_loses_it(new_log):
    # the station's rule (README, "The inspection station"): one photo measured again in a
    # session counts once; the replaced record stays in the log and is found by its id
    first = log.record_measurement(new_log, {"pv_nm": 90.0}, part="BW-FL-0412")
    second = log.record_measurement(new_log, {"pv_nm": 80.0, "supersedes": first},
                                    part="BW-FL-0412")
    other = log.record_measurement(new_log, {"pv_nm": 70.0}, part="BW-FL-0413")
    assert [r["record_id"] for r in log.query(new_log)] == [other, second]
    assert [r["record_id"] for r in log.query(new_log, part="BW-FL-0412")] == [second]
    # a limit counts the records shown, not the replaced ones left out
    assert [r["record_id"] for r in log.query(new_log, part="BW-FL-0412", limit=1)] == [second]
    every = log.query(new_log, superseded=True)
    assert [(r["record_id"], r.get("superseded_by")) for r in every] == [
        (other, None), (second, None), (first, second)]
    assert log.get(new_log, first)["superseded_by"] == second
    assert log.get(new_log, first)["pv_nm"] == 90.0
    assert "superseded_by" not in log.get(new_log, second)
