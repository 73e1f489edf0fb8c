"""The PostgreSQL store of the inspection log, against a real server started for the tests.

Round trips, filters, migrations, another program's database and a newer log refused
untouched, a read-only role, passwords never shown (eight writers at once: test_log.py).
"""

from __future__ import annotations

import json

import pytest
from flatsight.analysis.errors import InspectionLogError, SettingsError
from flatsight.analysis.records import log, postgres_store
from test_sqlite_store import make_record


def test_round_trip_keeps_the_whole_record(postgres_server, postgres_log):
    rec = make_record()
    rid = log.record_measurement(postgres_log, rec, part="BW-FL-0412", operator="Tamsin Ode",
                                 station="bench-2")
    got = log.get(postgres_log, rid)
    assert got["record_id"] == rid
    assert (got["part"], got["operator"], got["station"], got["verdict"]) == (
        "BW-FL-0412", "Tamsin Ode", "bench-2", "pass")
    for key, value in rec.items():
        assert got[key] == value
    assert got["logged_utc"].endswith("Z")
    db = postgres_log.rsplit("/", 1)[1]
    assert postgres_server.admin("SELECT version FROM flatsight_log_schema",
                                 database=db) == [(log.SCHEMA_VERSION,)]
    row = postgres_server.admin(
        "SELECT pv_nm, photo_sha256, verdict, spec_text, record_json FROM inspections",
        database=db)[0]
    assert row[:4] == (41.5, "ab" * 32, "pass", "3/1(0.5)")
    assert json.loads(row[4]) == rec  # the record's JSON as written, whole


def test_nan_and_numpy_values_are_stored_as_plain_json(postgres_log):
    import numpy as np

    rec = make_record(pv_nm=float("nan"))
    rec["zernike"] = {"ordering": "noll", "coefficients_nm": np.array([1.5, np.nan, 2.0])}
    rec["rms_nm"] = np.float32(12.5)
    got = log.get(postgres_log, log.record_measurement(postgres_log, rec))
    assert got["pv_nm"] is None and got["rms_nm"] == 12.5
    assert got["zernike"]["coefficients_nm"] == [1.5, None, 2.0]


def test_query_filters_newest_first(postgres_log):
    times = ["2026-11-28T09:00:00.000Z", "2026-11-30T10:00:00.000Z", "2026-12-01T08:30:00.000Z"]
    ids = [log.record_measurement(postgres_log, make_record(verdict="fail" if i == 1 else "pass"),
                                  part="BW-FL-0412" if i != 2 else "BW-FL-0413", logged_utc=t)
           for i, t in enumerate(times)]

    def found(**filters):
        return [r["record_id"] for r in log.query(postgres_log, **filters)]

    assert found() == ids[::-1]
    assert found(part="BW-FL-0412") == [ids[1], ids[0]]
    assert found(since="2026-11-30") == [ids[2], ids[1]]
    assert found(since="2026-11-30T10:00:00.001") == [ids[2]]
    assert found(verdict="fail") == [ids[1]]
    assert found(limit=2) == ids[:0:-1]
    assert found(part="BW-FL-0412'; DROP TABLE inspections; --") == []  # a parameter, not SQL
    assert len(found()) == 3
    with pytest.raises(SettingsError, match="no record 99"):
        log.get(postgres_log, 99)


def test_an_empty_database_holds_no_records_and_reading_makes_nothing(postgres_server,
                                                                      postgres_log):
    assert log.query(postgres_log) == []
    db = postgres_log.rsplit("/", 1)[1]
    assert postgres_server.admin("SELECT count(*) FROM pg_tables WHERE schemaname = 'public'",
                                 database=db) == [(0,)]


def version_1_log(server, url):
    """A log as version 1 of the schema wrote it, with one failed record."""
    db = url.rsplit("/", 1)[1]
    server.admin(postgres_store.MIGRATIONS[0], database=db)
    server.admin("INSERT INTO inspections (logged_utc, part, record_json) VALUES (%s, %s, %s)",
                 ("2026-10-01T12:00:00.000Z", "BW-FL-0100",
                  json.dumps(make_record(verdict="fail"))), database=db)
    return db


def columns(server, db):
    return {r[0] for r in server.admin(
        "SELECT column_name FROM information_schema.columns WHERE table_name = 'inspections'",
        database=db)}


def test_reads_a_version_1_log_as_it_is_and_migrates_it_on_the_first_write(postgres_server,
                                                                          postgres_log):
    db = version_1_log(postgres_server, postgres_log)
    before = columns(postgres_server, db)
    assert [(r["part"], r["verdict"]) for r in log.query(postgres_log)] == [("BW-FL-0100",
                                                                              "fail")]
    assert log.query(postgres_log, verdict="fail")[0]["part"] == "BW-FL-0100"
    assert log.get(postgres_log, 1)["verdict"] == "fail"
    # reading changed nothing
    assert columns(postgres_server, db) == before and "verdict" not in before
    assert postgres_server.admin("SELECT version FROM flatsight_log_schema", database=db) == [
        (1,)]
    log.record_measurement(postgres_log, make_record(), part="BW-FL-0101")
    assert postgres_server.admin("SELECT version FROM flatsight_log_schema", database=db) == [
        (log.SCHEMA_VERSION,)]
    assert postgres_server.admin("SELECT part, spec_text, verdict FROM inspections "
                                 "ORDER BY record_id", database=db) == [
        ("BW-FL-0100", "3/1(0.5)", "fail"), ("BW-FL-0101", "3/1(0.5)", "pass")]
    indexes = {r[0] for r in postgres_server.admin(
        "SELECT indexname FROM pg_indexes WHERE tablename = 'inspections'", database=db)}
    assert "inspections_part_time" in indexes


def test_refuses_a_log_from_a_newer_version(postgres_server, postgres_log):
    log.record_measurement(postgres_log, make_record())
    db = postgres_log.rsplit("/", 1)[1]
    postgres_server.admin("UPDATE flatsight_log_schema SET version = %s",
                          (log.SCHEMA_VERSION + 1,), database=db)
    for attempt in (lambda: log.query(postgres_log),
                    lambda: log.record_measurement(postgres_log, make_record())):
        with pytest.raises(SettingsError, match="newer Flatsight"):
            attempt()
    assert postgres_server.admin("SELECT count(*) FROM inspections", database=db) == [(1,)]


def test_another_programs_database_is_refused_untouched(postgres_server, postgres_log):
    db = postgres_log.rsplit("/", 1)[1]
    postgres_server.admin("CREATE TABLE orders (id serial PRIMARY KEY, customer text)",
                          database=db)
    for attempt in (lambda: log.record_measurement(postgres_log, make_record()),
                    lambda: log.query(postgres_log), lambda: log.get(postgres_log, 1)):
        with pytest.raises(InspectionLogError, match="another program.*left as it was"):
            attempt()
    assert postgres_server.admin("SELECT tablename FROM pg_tables WHERE schemaname = 'public'",
                                 database=db) == [("orders",)]


def test_a_role_granted_only_select_reads_and_cannot_write(postgres_server, postgres_log):
    log.record_measurement(postgres_log, make_record(verdict="fail"), part="BW-FL-0412")
    db = postgres_log.rsplit("/", 1)[1]
    qa = postgres_server.create_role(f"flatsight_qa_{db}")
    postgres_server.admin(f"GRANT SELECT ON ALL TABLES IN SCHEMA public TO {qa}", database=db)
    as_qa = postgres_server.url(db, user=qa)
    assert [(r["part"], r["verdict"]) for r in log.query(as_qa)] == [("BW-FL-0412", "fail")]
    with pytest.raises(InspectionLogError, match="may not") as caught:
        log.record_measurement(as_qa, make_record())
    assert "\n" not in str(caught.value)
    assert len(log.query(postgres_log)) == 1


@pytest.mark.parametrize("form", ["userinfo", "query"])
def test_a_password_in_the_url_is_never_shown(postgres_server, postgres_log, form):
    secret = "Brindlewick-s3cret"
    host, db = postgres_log.split("@", 1)[1].split("/")
    url = (f"postgresql://flatsight_admin:{secret}@{host}/{db}" if form == "userinfo"
           else f"postgresql://flatsight_admin@{host}/{db}?password={secret}&sslmode=disable")
    with pytest.raises(InspectionLogError, match="password authentication failed") as caught:
        log.record_measurement(url, make_record())
    message = str(caught.value)
    assert secret not in message and "\n" not in message
    assert f"postgresql://flatsight_admin@{host}/{db}" in message
    location = log.log_location(url)
    assert secret not in f"{location} {location!r} {[location]}"
    assert location.password == secret  # kept for the driver, only never shown
    right = postgres_server.passwords["flatsight_admin"]
    rid = log.record_measurement(url.replace(secret, right), make_record())
    assert log.get(postgres_log, rid)["photo"] == "BW-FL-0412.png"
    nowhere = f"postgresql://flatsight_admin:{right}@{host}/no_such_database"
    with pytest.raises(InspectionLogError, match="does not exist") as caught:
        log.query(nowhere)
    assert right not in str(caught.value)


def test_a_server_that_cannot_be_reached_is_one_line(postgres_server):
    url = f"postgresql://flatsight_admin:pw@127.0.0.1:{postgres_server.port + 1}/log?x=1"
    with pytest.raises(InspectionLogError, match="cannot be reached") as caught:
        log.record_measurement(url.replace("?x=1", ""), make_record())
    assert ":pw@" not in str(caught.value) and "\n" not in str(caught.value)
    with pytest.raises(InspectionLogError, match="not a PostgreSQL URL") as caught:
        log.log_location(url)  # an unknown parameter: refused before connecting
    assert ":pw@" not in str(caught.value)


def test_a_service_name_selects_the_database(postgres_server, postgres_log, tmp_path,
                                             monkeypatch):
    host, db = postgres_log.split("@", 1)[1].split("/")
    services = tmp_path / "pg_service.conf"
    services.write_text(f"[flatsight-shop]\nhost={host.split(':')[0]}\n"
                        f"port={postgres_server.port}\ndbname={db}\nuser=flatsight_admin\n")
    monkeypatch.setenv("PGSERVICEFILE", str(services))
    rid = log.record_measurement("service=flatsight-shop", make_record(), part="BW-FL-0412")
    assert log.get(postgres_log, rid)["part"] == "BW-FL-0412"


def test_a_kept_connection_lost_to_a_restart_is_opened_anew(postgres_server, postgres_log):
    first = log.record_measurement(postgres_log, make_record(), part="BW-FL-0412")
    postgres_server.stop()  # the connection this process kept for writing dies with it
    postgres_server.start()
    second = log.record_measurement(postgres_log, make_record(), part="BW-FL-0413")
    assert [r["record_id"] for r in log.query(postgres_log)] == [second, first]
