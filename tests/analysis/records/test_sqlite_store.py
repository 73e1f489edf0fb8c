"""The SQLite store of the log: round trips, many writers, a killed writer, migrations."""

from __future__ import annotations

import json
import os
import signal
import sqlite3
import subprocess
import sys
import textwrap
import time

import pytest
from flatsight.analysis.errors import InspectionLogError, SettingsError
from flatsight.analysis.records import log, sqlite_store


def make_record(photo="BW-FL-0412.png", verdict="pass", pv_nm=41.5, n_terms=36):
    """A record shaped like ``measure --json`` (values invented for the test)."""
    return {
        "photo": photo,
        "photo_sha256": "ab" * 32,
        "wavelength_nm": 632.8,
        "aperture": {"center_x_px": 640.0, "center_y_px": 480.0, "radius_px": 400.0},
        "pv_nm": pv_nm,
        "rms_nm": 8.2,
        "pvr_nm": 44.0,
        "power_nm": -12.5,
        "power_fringes": -12.5 / 316.4,
        "irregularity_nm": 30.1,
        "astigmatism_nm": 14.0,
        "symmetric_irregularity_nm": 4.0,
        "rms_irregularity_nm": 6.0,
        "rms_asymmetric_nm": 5.5,
        "radius_of_curvature_m": None,
        "pv_waves": pv_nm / 632.8,
        "rms_waves": 8.2 / 632.8,
        "zernike": {"ordering": "noll", "coefficients_nm": [0.1 * j for j in range(n_terms)]},
        "quality": {"mean_modulation": 0.6},
        "settings": {"wavelength_nm": 632.8, "n_terms": n_terms},
        "warnings": [],
        "spec": {"tolerance": "3/1(0.5)", "verdict": verdict, "limits": []},
    }


def test_round_trip_keeps_the_whole_record(tmp_path):
    path = tmp_path / "sub" / "inspections.sqlite"
    rec = make_record()
    rid = log.record_measurement(
        path, rec, part="BW-FL-0412", operator="Tamsin Ode", station="bench-2"
    )
    got = log.get(path, rid)
    assert got["record_id"] == rid
    assert got["part"] == "BW-FL-0412" and got["operator"] == "Tamsin Ode"
    assert got["station"] == "bench-2" and got["verdict"] == "pass"
    for key, value in rec.items():
        assert got[key] == value
    assert got["logged_utc"].endswith("Z")
    con = sqlite3.connect(path)
    assert con.execute("PRAGMA journal_mode").fetchone()[0] == "wal"
    assert con.execute("PRAGMA user_version").fetchone()[0] == log.SCHEMA_VERSION
    row = con.execute("SELECT pv_nm, photo_sha256, verdict, spec_text FROM inspections").fetchone()
    assert row == (41.5, "ab" * 32, "pass", "3/1(0.5)")
    con.close()


def test_nan_figures_are_stored_as_null(tmp_path):
    path = tmp_path / "log.sqlite"
    rid = log.record_measurement(path, make_record(pv_nm=float("nan")), part="BW-FL-0001")
    assert log.get(path, rid)["pv_nm"] is None


def test_query_filters_newest_first(tmp_path):
    path = tmp_path / "log.sqlite"
    times = ["2026-11-28T09:00:00.000Z", "2026-11-30T10:00:00.000Z", "2026-12-01T08:30:00.000Z"]
    ids = []
    for i, t in enumerate(times):
        ids.append(
            log.record_measurement(
                path,
                make_record(verdict="fail" if i == 1 else "pass"),
                part="BW-FL-0412" if i != 2 else "BW-FL-0413",
                logged_utc=t,
            )
        )
    assert [r["record_id"] for r in log.query(path)] == ids[::-1]
    assert [r["record_id"] for r in log.query(path, part="BW-FL-0412")] == [ids[1], ids[0]]
    assert [r["record_id"] for r in log.query(path, since="2026-11-30")] == [ids[2], ids[1]]
    assert [r["record_id"] for r in log.query(path, since="2026-11-30T10:00:00.001")] == [ids[2]]
    assert [r["record_id"] for r in log.query(path, verdict="fail")] == [ids[1]]
    assert len(log.query(path, limit=2)) == 2


def test_clear_errors(tmp_path):
    with pytest.raises(SettingsError, match="no inspection log"):
        log.query(tmp_path / "missing.sqlite")
    junk = tmp_path / "junk.sqlite"
    junk.write_bytes(b"this is not a database" * 100)
    with pytest.raises(SettingsError, match="not a readable Flatsight inspection log"):
        log.record_measurement(junk, make_record())
    path = tmp_path / "log.sqlite"
    log.record_measurement(path, make_record())
    with pytest.raises(SettingsError, match="no record 99"):
        log.get(path, 99)
    with pytest.raises(SettingsError, match="not a date"):
        log.query(path, since="last tuesday")


WRITER = textwrap.dedent("""
    import sys
    from flatsight.analysis.records import log
    path, name, count = sys.argv[1], sys.argv[2], int(sys.argv[3])
    record = {
        "photo": "x.png", "wavelength_nm": 632.8, "pv_nm": 1.0,
        "zernike": {"ordering": "noll", "coefficients_nm": [0.5] * 36},
        "settings": {}, "warnings": [],
    }
    for i in range(count):
        rid = log.record_measurement(path, {**record, "photo": f"{name}-{i}.png"},
                                     part=f"{name}-{i}", operator="Ruben Halloway",
                                     station=name)
        print(rid, flush=True)
""")


def _integrity(path):
    con = sqlite3.connect(path)
    try:
        return con.execute("PRAGMA integrity_check").fetchone()[0]
    finally:
        con.close()


def test_several_processes_log_at_once(tmp_path):
    path = tmp_path / "shared.sqlite"
    writers, count = 4, 40
    procs = [
        subprocess.Popen(
            [sys.executable, "-c", WRITER, str(path), f"bench-{w}", str(count)],
            stdout=subprocess.PIPE,
            stderr=subprocess.PIPE,
            text=True,
        )
        for w in range(writers)
    ]
    acknowledged = []
    for p in procs:
        out, err = p.communicate(timeout=240)
        assert p.returncode == 0, err  # nobody failed on a locked database
        acknowledged += [int(x) for x in out.split()]
    rows = log.query(path)
    assert len(rows) == writers * count
    assert sorted(r["record_id"] for r in rows) == sorted(acknowledged)
    assert {r["part"] for r in rows} == {
        f"bench-{w}-{i}" for w in range(writers) for i in range(count)
    }
    assert _integrity(path) == "ok"


def test_a_killed_writer_leaves_the_log_intact(tmp_path):
    path = tmp_path / "killed.sqlite"
    acknowledged = []
    for round_ in range(3):
        p = subprocess.Popen(
            [sys.executable, "-c", WRITER, str(path), f"kill{round_}", "100000"],
            stdout=subprocess.PIPE,
            text=True,
        )
        for _ in range(15 + 7 * round_):
            acknowledged.append(int(p.stdout.readline()))
        time.sleep(0.013 * round_)  # land the kill at different points of a write
        os.kill(p.pid, signal.SIGKILL)
        p.wait(timeout=30)
        p.stdout.close()
        assert p.returncode == -signal.SIGKILL
    assert _integrity(path) == "ok"
    rows = log.query(path)
    ids = {r["record_id"] for r in rows}
    assert set(acknowledged) <= ids  # every record the writer saw committed is there
    for r in rows:  # and nothing half-written: every stored record decodes whole
        assert r["zernike"]["coefficients_nm"] == [0.5] * 36
    # the log still takes records after the kills
    rid = log.record_measurement(path, make_record(), part="BW-FL-0412")
    assert log.get(path, rid)["part"] == "BW-FL-0412"


def version_1_log(path, *, journal="delete"):
    """A log as version 1 of the schema wrote it, with one failed record."""
    con = sqlite3.connect(path)
    con.execute(f"PRAGMA journal_mode = {journal}")
    con.executescript(sqlite_store.MIGRATIONS[0])
    con.execute("PRAGMA user_version = 1")
    con.execute(
        "INSERT INTO inspections (logged_utc, part, record_json) VALUES (?, ?, ?)",
        ("2026-10-01T12:00:00.000Z", "BW-FL-0100", json.dumps(make_record(verdict="fail"))),
    )
    con.commit()
    con.close()


def files_and_bytes(folder):
    return {p.name: p.read_bytes() for p in sorted(folder.iterdir())}


def test_reads_a_version_1_log_as_it_is_and_migrates_it_on_the_first_write(tmp_path):
    path = tmp_path / "old.sqlite"
    version_1_log(path)
    before = files_and_bytes(tmp_path)
    rows = log.query(path)
    assert [(r["part"], r["verdict"]) for r in rows] == [("BW-FL-0100", "fail")]
    assert log.query(path, verdict="fail")[0]["part"] == "BW-FL-0100"
    assert log.get(path, 1)["verdict"] == "fail"
    # reading changed nothing: no migration, no switch to WAL, no new files
    assert files_and_bytes(tmp_path) == before
    log.record_measurement(path, make_record(), part="BW-FL-0101")
    con = sqlite3.connect(path)
    assert con.execute("PRAGMA user_version").fetchone()[0] == log.SCHEMA_VERSION
    assert con.execute("SELECT spec_text FROM inspections").fetchone()[0] == "3/1(0.5)"
    indexes = {r[0] for r in con.execute("SELECT name FROM sqlite_master WHERE type='index'")}
    assert "inspections_part_time" in indexes
    con.close()
    assert [r["part"] for r in log.query(path)][0] == "BW-FL-0101"


def test_refuses_a_log_from_a_newer_version(tmp_path):
    path = tmp_path / "new.sqlite"
    log.record_measurement(path, make_record())
    con = sqlite3.connect(path)
    con.execute("PRAGMA journal_mode = delete")
    con.execute(f"PRAGMA user_version = {log.SCHEMA_VERSION + 1}")
    con.close()
    before = files_and_bytes(tmp_path)
    with pytest.raises(SettingsError, match="newer Flatsight"):
        log.query(path)
    with pytest.raises(SettingsError, match="newer Flatsight"):
        log.record_measurement(path, make_record())
    assert files_and_bytes(tmp_path) == before  # still in its own journal mode, untouched


def test_numpy_values_are_stored_as_plain_json(tmp_path):
    import numpy as np

    path = tmp_path / "log.sqlite"
    rec = make_record()
    rec["zernike"] = {"ordering": "noll", "coefficients_nm": np.array([1.5, np.nan, 2.0])}
    rec["pv_nm"] = np.float32(12.5)
    rid = log.record_measurement(path, rec)
    got = log.get(path, rid)
    assert got["zernike"]["coefficients_nm"] == [1.5, None, 2.0]
    assert got["pv_nm"] == 12.5


def test_another_programs_database_is_refused_untouched(tmp_path):
    path = tmp_path / "orders.sqlite"
    con = sqlite3.connect(path)
    con.execute("CREATE TABLE orders (id INTEGER PRIMARY KEY, customer TEXT)")
    con.execute("INSERT INTO orders (customer) VALUES ('Brindlewick Optical Works')")
    con.commit()
    con.close()
    before = files_and_bytes(tmp_path)
    for attempt in (lambda: log.record_measurement(path, make_record()),
                    lambda: log.query(path), lambda: log.get(path, 1)):
        with pytest.raises(InspectionLogError, match="another program.*left as it was"):
            attempt()
    assert files_and_bytes(tmp_path) == before  # no tables added, no WAL files


def full_disk(monkeypatch):
    """Every new connection may not grow the file: SQLite answers SQLITE_FULL, as it does
    on a full disk ('PRAGMA max_page_count', SQLite documentation, from memory)."""
    real = sqlite3.connect

    def tight(*args, **kwargs):
        con = real(*args, **kwargs)
        pages = con.execute("PRAGMA page_count").fetchone()[0]
        con.execute(f"PRAGMA max_page_count = {max(pages, 1)}")
        return con

    monkeypatch.setattr(sqlite3, "connect", tight)


def test_a_full_disk_is_said_to_be_full_not_a_damaged_log(tmp_path, monkeypatch):
    existing = tmp_path / "log.sqlite"
    log.record_measurement(existing, make_record())
    full_disk(monkeypatch)
    for path in (tmp_path / "new.sqlite", existing):
        with pytest.raises(InspectionLogError, match="the disk is full") as caught:
            log.record_measurement(path, make_record(photo="x" * 5000))
        assert "not a readable" not in str(caught.value)
    monkeypatch.undo()
    assert len(log.query(existing)) == 1  # the log is whole, the failed record absent


def test_a_folder_given_as_the_log_says_so(tmp_path):
    with pytest.raises(InspectionLogError, match="is a folder"):
        log.record_measurement(tmp_path, make_record())
    with pytest.raises(InspectionLogError, match="is a folder"):
        log.query(tmp_path)


def test_get_refuses_an_id_sqlite_cannot_hold(tmp_path):
    path = tmp_path / "log.sqlite"
    log.record_measurement(path, make_record())
    with pytest.raises(SettingsError, match="no record 1180591620717411303424"):
        log.get(path, 1180591620717411303424)


READER = textwrap.dedent("""
    import json, sys
    from flatsight.analysis.records import log
    rows = log.query(sys.argv[1])
    print(json.dumps([[r["part"], r["verdict"]] for r in rows]))
""")


def test_a_reader_without_write_access_reads_the_log(shared_folder, run_as_reader):
    path = shared_folder / "log.sqlite"
    log.record_measurement(path, make_record(verdict="fail"), part="BW-FL-0412")
    log.record_measurement(path, make_record(verdict="pass"), part="BW-FL-0413")
    before = files_and_bytes(shared_folder)
    done = run_as_reader(shared_folder, READER, str(path))
    assert done.returncode == 0, done.stderr
    assert json.loads(done.stdout) == [["BW-FL-0413", "pass"], ["BW-FL-0412", "fail"]]
    assert files_and_bytes(shared_folder) == before
