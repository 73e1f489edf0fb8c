"""How fast several stations log at once: SQLite file against a PostgreSQL server.

    python benchmarks/bench_log.py                  # 8 processes x 200 records on each store
    python benchmarks/bench_log.py --writers 1 --records 400
    python benchmarks/bench_log.py --url postgresql://USER@HOST/DB   # an existing server

Each writer process logs its records one by one as ``flatsight measure`` does (one
transaction per record; on PostgreSQL one connection kept for the batch), every writer
starting at the same moment on a log that does not exist yet, so the first writes also
make the schema.
The record is a real one: ``measure --json`` of a synthetic photo. Afterwards every
record is looked for in the log, and the table gives the throughput of all writers
together and the time single writes took (median, 99th percentile, worst, and worst
leaving out each writer's first write, which also connects and may make the schema).

Without ``--url`` a throwaway PostgreSQL server is started from the machine's own
programs (as the tests do, tests/postgres_server.py), with its default durability
(fsync and synchronous commit on), on a database made anew.
"""

from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent

WRITER = """
import json, sys, time
from flatsight.analysis.records import log
name, count, start_at = sys.argv[2], int(sys.argv[3]), float(sys.argv[4])
location = log.log_location(sys.argv[1])  # as measure does while checking its options
record = json.loads(sys.stdin.read())
time.sleep(max(0.0, start_at - time.time()))
took = []
for i in range(count):
    t0 = time.perf_counter()
    log.record_measurement(location, {**record, "photo": f"{name}-{i}.png"}, part=f"{name}-{i}",
                           operator="Tamsin Ode", station=name)
    took.append(time.perf_counter() - t0)
print(json.dumps(took))
"""


def sample_record() -> dict:
    """``measure --json`` of one synthetic photo (about the size a real record has)."""
    from flatsight.analysis.pipeline import MeasureSettings, measure
    from flatsight.analysis.record import measurement_to_record
    from flatsight.analysis.synthetic import SyntheticSurface, make_fringe_photo

    photo = make_fringe_photo(SyntheticSurface({4: 30.0, 6: -10.0}), shape=(480, 640), seed=1)
    m = measure(photo.image, MeasureSettings(wavelength_nm=632.8, aperture=photo.aperture))
    return json.loads(json.dumps(measurement_to_record(m), default=float))


def run(location: str, writers: int, records: int, record: dict) -> dict:
    """Start the writers together; their write times and the wall time of the whole run.

    The log is made first, by one record written alone (as a shop makes its log once,
    before stations log into it); that first write's time is reported on its own.
    """
    from flatsight.analysis.records import log

    t0 = time.perf_counter()
    log.record_measurement(location, record, part="setup", operator="Tamsin Ode")
    setup = time.perf_counter() - t0
    text = json.dumps(record)
    start_at = time.time() + 2.0 + 0.3 * writers  # after every interpreter has started
    procs = [subprocess.Popen([sys.executable, "-c", WRITER, location, f"w{w}", str(records),
                               str(start_at)], stdin=subprocess.PIPE, stdout=subprocess.PIPE,
                              text=True) for w in range(writers)]
    for p in procs:
        p.stdin.write(text)
        p.stdin.close()
    took, later = [], []  # every write; every write but each writer's first
    for p in procs:
        mine = json.loads(p.stdout.read())
        took += mine
        later += mine[1:]
        if p.wait() != 0:
            sys.exit(f"a writer failed on {location}")
    wall = time.time() - start_at
    found = {r["part"] for r in log.query(location)} - {"setup"}
    wanted = {f"w{w}-{i}" for w in range(writers) for i in range(records)}
    if found != wanted:
        sys.exit(f"{len(wanted - found)} records missing from {location}")
    took.sort()
    return {"n": len(took), "wall": wall, "median": statistics.median(took),
            "p99": took[min(len(took) - 1, int(0.99 * len(took)))], "max": took[-1],
            "max_later": max(later, default=float("nan")), "setup": setup}


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--writers", type=int, default=8)
    ap.add_argument("--records", type=int, default=200, help="records per writer")
    ap.add_argument("--url", help="an existing, empty PostgreSQL database to log into")
    args = ap.parse_args()
    record = sample_record()
    print(f"{args.writers} processes x {args.records} records, each record "
          f"{len(json.dumps(record)) / 1024:.1f} KiB of JSON; every record checked present")
    rows = []
    with tempfile.TemporaryDirectory() as folder:
        rows.append(("SQLite (WAL, local disk)",
                     run(str(Path(folder) / "bench.sqlite"), args.writers, args.records,
                         record)))
    server = None
    url = args.url
    if url is None:
        sys.path.insert(0, str(HERE.parent / "tests"))
        from postgres_server import start_server

        server = start_server()
        url = server.create_database("bench")
    try:
        rows.append(("PostgreSQL (loopback TCP)", run(url, args.writers, args.records, record)))
    finally:
        if server is not None:
            server.close()
    print(f"{'store':<27}{'records':>8}{'records/s':>11}{'median ms':>11}{'p99 ms':>9}"
          f"{'worst ms':>10}{'worst after 1st ms':>20}{'making the log ms':>19}")
    for name, r in rows:
        print(f"{name:<27}{r['n']:>8}{r['n'] / r['wall']:>11.0f}{1000 * r['median']:>11.1f}"
              f"{1000 * r['p99']:>9.1f}{1000 * r['max']:>10.1f}{1000 * r['max_later']:>20.1f}"
              f"{1000 * r['setup']:>19.1f}")
    print("worst: the slowest of all writes, each writer's first included (it connects); "
          "making the log: the one write that made it, alone, before the writers")
    load = Path("/proc/loadavg")
    if load.exists():  # other work on the machine shows in the worst writes
        print(f"load average during the run: {load.read_text().split()[0]}")


if __name__ == "__main__":
    main()
