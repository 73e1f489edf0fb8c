"""A shop's shared inspection log on PostgreSQL, through the command line, on a real server.

Stations write with one role, the QA office reads with a role that may only select;
presets and station.toml name the log; a password is never printed; a server that goes
away mid-batch loses no result.
"""

from __future__ import annotations

import json

import pytest
from flatsight.analysis.records import log as inspection_log
from test_measure_cli import W, assert_log_refused, json_lines, run_cli, three_photos

SECRET = "Brindlewick-s3cret"


@pytest.fixture
def shop_log(postgres_server):
    """A log set up as the README says: a station role owning the database, a QA role
    that the station's tables grant SELECT to. Returns (station URL, QA URL)."""
    db = f"shop_{len(postgres_server.passwords)}"
    station = postgres_server.create_role(f"flatsight_station_{db}")
    qa = postgres_server.create_role(f"flatsight_qa_{db}")
    postgres_server.admin(f"CREATE DATABASE {db} OWNER {station}")
    postgres_server.admin(f"ALTER DEFAULT PRIVILEGES FOR ROLE {station} IN SCHEMA public "
                          f"GRANT SELECT ON TABLES TO {qa}", database=db)
    return postgres_server.url(db, user=station), postgres_server.url(db, user=qa)


def test_stations_write_and_the_qa_office_reads_the_shared_log(quick_measure, photo_set,
                                                               shop_log, tmp_path, capsys):
    station, qa = shop_log
    photos = three_photos(tmp_path, photo_set)
    status, out, err = run_cli(capsys, "measure", *photos[:2], *W, "--log", station, "--json",
                               "--spec", "pv<=1000nm", "--operator", "Tamsin Ode")
    assert status == 0, err
    ids = [r["record_id"] for r in json_lines(out)]
    status, out, err = run_cli(capsys, "history", "--log", qa, "--json")
    assert status == 0, err
    rows = json_lines(out)
    assert [r["record_id"] for r in rows] == ids[::-1]
    assert [r["part"] for r in rows] == ["BW-FL-0413", "BW-FL-0412"]
    status, out, err = run_cli(capsys, "history", "--log", qa)
    assert status == 0 and f"2 inspections in {qa}" in out
    status, out, err = run_cli(capsys, "trend", "--log", qa)
    assert status == 0 and "pass rate 2/2" in out
    cert = tmp_path / "cert.html"
    status, out, err = run_cli(capsys, "report", str(ids[0]), "--log", qa, "-o", cert)
    assert status == 0, err
    assert f"from record {ids[0]} of {qa}" in out and "BW-FL-0412" in cert.read_text()
    # the QA role may not write: the result is shown, named as not logged, exit 2
    status, out, err = run_cli(capsys, "measure", photos[2], *W, "--log", qa, "--json")
    assert status == 2
    assert_log_refused(err, [photos[2].name], "may not")
    assert "record_id" not in json.loads(out)
    assert len(inspection_log.query(qa)) == 2


def test_a_server_gone_mid_batch_still_measures_and_shows_every_photo(
        quick_measure, photo_set, postgres_server, postgres_log, tmp_path, capsys, monkeypatch):
    import flatsight.analysis.pipeline as pipeline

    photos = three_photos(tmp_path, photo_set)
    quick, measured = pipeline.measure, []

    def measure_then_lose_the_server(photo, settings, **kwargs):
        measured.append(photo)
        if len(measured) == 2:  # the first photo is logged; then the server goes away
            postgres_server.stop()
        return quick(photo, settings, **kwargs)

    monkeypatch.setattr(pipeline, "measure", measure_then_lose_the_server)
    try:
        status, out, err = run_cli(capsys, "measure", *photos, *W, "--log", postgres_log,
                                   "--json")
    finally:
        postgres_server.start()
    assert status == 2
    assert measured == [str(p) for p in photos]  # every photo measured
    records = json_lines(out)
    assert [r["photo"].rsplit("/", 1)[1] for r in records] == [p.name for p in photos]
    assert [("record_id" in r) for r in records] == [True, False, False]
    assert_log_refused(err, [p.name for p in photos[1:]], "cannot be reached")
    assert [r["record_id"] for r in inspection_log.query(postgres_log)] == [
        records[0]["record_id"]]


def test_a_password_on_the_command_line_is_never_printed(quick_measure, photo_set,
                                                        postgres_server, postgres_log,
                                                        tmp_path, capsys):
    host_db = postgres_log.split("@", 1)[1]
    shown_url = f"postgresql://flatsight_admin@{host_db}"
    photo = three_photos(tmp_path, photo_set)[0]
    wrong = f"postgresql://flatsight_admin:{SECRET}@{host_db}"
    status, out, err = run_cli(capsys, "measure", photo, *W, "--log", wrong, "--json")
    assert status == 2 and SECRET not in out + err
    assert_log_refused(err, [photo.name], shown_url, "password authentication failed")
    right = postgres_log.replace("flatsight_admin@",
                                 f"flatsight_admin:{postgres_server.passwords['flatsight_admin']}@")
    status, out, err = run_cli(capsys, "measure", photo, *W, "--log", right, "--json")
    assert status == 0 and "record_id" in json.loads(out)
    for argv in (["history", "--log", right], ["report", "1", "--log", right, "-o",
                                                tmp_path / "c.html"]):
        status, out, err = run_cli(capsys, *argv)
        assert status == 0, err
        assert shown_url in out and postgres_server.passwords["flatsight_admin"] not in out
    empty = tmp_path / "empty"
    empty.mkdir()
    status, out, err = run_cli(capsys, "watch", empty, *W, "--log", wrong, "--timeout", "0")
    assert status == 0 and f"logging to {shown_url}" in out and SECRET not in out + err
    # a malformed URL is a usage error before any photo, the password left out
    status, out, err = run_cli(capsys, "history", "--log",
                               f"postgresql://flatsight_admin:{SECRET}@{host_db}?nonsense=1")
    assert status == 2 and SECRET not in out + err and "not a PostgreSQL URL" in err


def test_presets_and_station_toml_name_the_shared_log(quick_measure, photo_set, postgres_log,
                                                      tmp_path, capsys, monkeypatch):
    photo = three_photos(tmp_path, photo_set)[0]
    presets = tmp_path / "presets.toml"
    presets.write_text(f'[presets.bench-2]\nwavelength_nm = 632.8\nlog = "{postgres_log}"\n')
    status, out, err = run_cli(capsys, "measure", photo, "--preset", "bench-2", "--presets",
                               presets, "--json")
    assert status == 0, err
    first = json.loads(out)["record_id"]
    # station.toml's log is every command's log when --log is not given
    monkeypatch.setenv("XDG_CONFIG_HOME", str(tmp_path / "config"))
    config = tmp_path / "config" / "flatsight" / "station.toml"
    config.parent.mkdir(parents=True)
    config.write_text(f'[station]\nwavelength_nm = 632.8\nlog = "{postgres_log}"\n')
    status, out, err = run_cli(capsys, "measure", photo, *W, "--json")
    assert status == 0, err
    second = json.loads(out)["record_id"]
    status, out, err = run_cli(capsys, "history", "--json")
    assert status == 0, err
    assert [r["record_id"] for r in json_lines(out)] == [second, first]
    # a password written into either file is refused, and not printed
    with_password = postgres_log.replace("flatsight_admin@", f"flatsight_admin:{SECRET}@")
    config.write_text(f'[station]\nlog = "{with_password}"\n')
    status, out, err = run_cli(capsys, "history")
    assert status == 2 and SECRET not in out + err and "~/.pgpass" in err
    presets.write_text(f'[presets.bench-2]\nwavelength_nm = 632.8\nlog = "{with_password}"\n')
    status, out, err = run_cli(capsys, "measure", photo, "--preset", "bench-2", "--presets",
                               presets, "--log", tmp_path / "local.sqlite")
    assert status == 2 and SECRET not in out + err and "~/.pgpass" in err


def test_the_station_logs_to_and_reads_the_shared_log(postgres_server, postgres_log):
    from flatsight.tui.station_log import StationRecorder, entry_options, read_log, record_result

    right = postgres_log.replace("flatsight_admin@",
                                 f"flatsight_admin:{postgres_server.passwords['flatsight_admin']}@")
    recorder = StationRecorder(inspection_log.log_location(right), {"spec": "pv<=100nm"})
    outcome = record_result(entry_options(recorder, None, "BW-FL-0412_hene.png"),
                            {"photo": "BW-FL-0412_hene.png", "pv_nm": 40.0})
    assert outcome.error is None and outcome.verdict == "pass"
    rows, verdicts, note = read_log(recorder.log_path, parts=["BW-FL-0412_hene"])
    assert note is None and verdicts == {"BW-FL-0412_hene": "pass"}
    assert [r["record_id"] for r in rows] == [outcome.record_id]
    postgres_server.stop()
    try:
        rows, verdicts, note = read_log(recorder.log_path)
        lost = record_result(entry_options(recorder, None, "BW-FL-0413.png"),
                             {"photo": "BW-FL-0413.png", "pv_nm": 140.0})
    finally:
        postgres_server.start()
    assert rows == [] and "cannot be reached" in note
    assert lost.verdict == "fail" and lost.record_id is None and "cannot be reached" in lost.error
    secret = postgres_server.passwords["flatsight_admin"]
    assert secret not in note + lost.error and "flatsight_admin@" in lost.error
