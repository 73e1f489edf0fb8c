"""``flatsight watch``: photos written slowly into a folder, a bad file among them, ctrl+c."""

from __future__ import annotations

import argparse
import functools
import io
import os
import shutil
import signal
import subprocess
import sys
import threading
import time

import numpy as np
import pytest
from flatsight.analysis.records import log as inspection_log
from flatsight.analysis.synthetic import SyntheticSurface, make_fringe_photo, write_photo
from flatsight.tui import cmd_watch
from test_presets_per_photo import PRESETS  # the same two benches as measure's test


def parser():
    p = argparse.ArgumentParser(prog="flatsight")
    cmd_watch.add_parser(p.add_subparsers(dest="command"))
    return p


def photo_bytes(tmp_path, name, zernike_nm, seed):
    """A synthetic fringe photo (analysis/synthetic.py) as PNG bytes."""
    photo = make_fringe_photo(SyntheticSurface(zernike_nm), shape=(360, 480), seed=seed)
    staging = tmp_path / "staging"
    staging.mkdir(exist_ok=True)
    write_photo(photo, staging / name)
    return (staging / name).read_bytes()


def camera_steps(path, data, *, chunks=6):
    """A slow camera or network copy writing ``path``: one piece of ``data`` a step."""
    step = -(-len(data) // chunks)

    def write_piece(i):
        with open(path, "ab") as fh:
            fh.write(data[i:i + step])
            fh.flush()
            os.fsync(fh.fileno())

    return [functools.partial(write_piece, i) for i in range(0, len(data), step)]


class VirtualTime:
    """The watch's clock and pause: each pause moves the clock on and lets the camera
    write its next piece, so what the watch sees depends on its own steps, never on how
    fast the machine is."""

    def __init__(self, steps):
        self.now = 0.0
        self.steps = list(steps)

    def clock(self) -> float:
        return self.now

    def pause(self, seconds: float) -> None:
        self.now += seconds
        if self.steps:
            self.steps.pop(0)()


def test_watch_measures_slowly_written_photos_and_survives_a_bad_one(tmp_path, capsys,
                                                                    monkeypatch):
    folder = tmp_path / "camera"
    folder.mkdir()
    log = tmp_path / "log.sqlite"
    # power only (69 nm) passes "3/1(-), pvr<=150nm"; spherical a11 = 60 nm (PV 201 nm:
    # Noll's Z11 = sqrt(5)(6 rho^4 - 6 rho^2 + 1) spans 1.5 sqrt(5) = 3.354 over the disk,
    # Noll, JOSA 66(3), 207, 1976) fails its PVr limit
    good_a = photo_bytes(tmp_path, "a.png", {4: 20.0}, 1)
    good_b = photo_bytes(tmp_path, "b.png", {4: 10.0, 11: 60.0}, 2)
    truncated = good_a[: len(good_a) // 2]  # a camera that died mid-write
    (folder / "BW-FL-0400.png").write_bytes(good_a)  # already there: left alone
    (folder / "notes.txt").write_text("not a photo")

    seen_sizes = {}
    real_measure = cmd_watch.measure_photo

    def spying_measure(path, args):
        seen_sizes[path.name] = path.stat().st_size
        return real_measure(path, args)

    monkeypatch.setattr(cmd_watch, "measure_photo", spying_measure)

    # the camera writes one piece each time the watch pauses (every 0.05 s of its clock):
    # a photo's size keeps changing while it is written, then stays put
    steps = [*camera_steps(folder / "BW-FL-0412.png", good_a),
             *camera_steps(folder / "BW-FL-0413.png", truncated, chunks=3),
             *camera_steps(folder / "BW-FL-0414.png", good_b)]
    virtual = VirtualTime(steps)
    monkeypatch.setattr(cmd_watch, "clock", virtual.clock)
    monkeypatch.setattr(cmd_watch, "pause", virtual.pause)
    args = parser().parse_args([
        "watch", str(folder), "--wavelength", "632.8", "--spec", "3/1(-), pvr<=150nm",
        "--log", str(log), "--operator", "Ruben Halloway", "--station", "bench-2",
        "--settle", "0.4", "--interval", "0.05", "--max-files", "3", "--timeout", "60"])
    status = cmd_watch.run(args)
    out = capsys.readouterr().out
    assert status == 0
    lines = out.splitlines()
    assert lines[0].startswith("watching ")
    part_lines = [ln for ln in lines[1:-1]]
    assert len(part_lines) == 3, out
    by_part = {name: [ln for ln in part_lines if name in ln]
               for name in ("BW-FL-0412", "BW-FL-0413", "BW-FL-0414")}
    assert all(len(v) == 1 for v in by_part.values()), out
    assert "PASS" in by_part["BW-FL-0412"][0]
    # the truncated photo: one error line (it may come after the next photo, since the
    # watch gives a file that never decodes a little longer), and the watch goes on
    assert "BW-FL-0413.png: error:" in by_part["BW-FL-0413"][0]
    assert "FAIL" in by_part["BW-FL-0414"][0]
    assert lines[-1] == ("watch stopped (--max-files reached): 3 photos, 1 pass, 1 fail, "
                         "0 inconclusive, 0 without tolerance, 1 errors")
    # nothing was measured half-written: each good photo was whole when measured
    assert seen_sizes["BW-FL-0412.png"] == len(good_a)
    assert seen_sizes["BW-FL-0414.png"] == len(good_b)
    assert "BW-FL-0400.png" not in seen_sizes
    rows = inspection_log.query(log)
    assert [(r["part"], r["verdict"], r["operator"]) for r in rows] == [
        ("BW-FL-0414", "fail", "Ruben Halloway"), ("BW-FL-0412", "pass", "Ruben Halloway")]
    # the logged figures are the engine's: power of a4 = 20 nm is -2 sqrt(3) a4 = -69.3 nm
    # (Noll's Z4 = sqrt(3)(2 rho^2 - 1), Noll 1976: the centre stands 2 sqrt(3) a4 below
    # the rim; analysis/figures.py's sign), within the FFT method's error
    assert rows[1]["power_nm"] == pytest.approx(-2 * np.sqrt(3) * 20.0, abs=5.0)


def test_folder_watcher_waits_for_a_stable_size(tmp_path):
    now = [0.0]
    w = cmd_watch.FolderWatcher(tmp_path, settle_s=1.0, clock=lambda: now[0])
    target = tmp_path / "BW-FL-0500.png"
    data = io.BytesIO()
    from PIL import Image

    Image.fromarray(np.zeros((8, 8), np.uint8)).save(data, format="PNG")
    target.write_bytes(data.getvalue()[:20])
    assert w.poll() == []
    now[0] = 0.9
    target.write_bytes(data.getvalue())  # grew: the settle clock starts again
    assert w.poll() == []
    now[0] = 1.5
    assert w.poll() == []  # stable only 0.6 s
    now[0] = 2.0
    assert w.poll() == [target]
    now[0] = 5.0
    assert w.poll() == []  # handed out once
    os.utime(target, ns=(10**18, 10**18))  # rewritten later: measured again
    assert w.poll() == []
    now[0] = 6.5
    assert w.poll() == [target]


def test_usage_errors_exit_2(tmp_path, capsys):
    p = parser()
    assert cmd_watch.run(p.parse_args(["watch", str(tmp_path / "nope"), "-w", "632.8"])) == 2
    assert "is not a folder" in capsys.readouterr().err
    assert cmd_watch.run(p.parse_args(["watch", str(tmp_path)])) == 2
    assert "--wavelength" in capsys.readouterr().err
    assert cmd_watch.run(p.parse_args(["watch", str(tmp_path), "-w", "hene",
                                       "--spec", "3/1(0.5"])) == 2
    assert "at character 8" in capsys.readouterr().err


def test_ctrl_c_stops_cleanly(tmp_path):
    code = ("import sys; from flatsight.tui.cli import main; sys.exit(main())")
    proc = subprocess.Popen(
        [sys.executable, "-c", code, "watch", str(tmp_path), "--wavelength", "hene",
         "--no-log", "--interval", "0.05"],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    first = proc.stdout.readline()
    assert first.startswith("watching "), first + proc.stderr.read()
    # the watch prints that line inside the block that turns ctrl+c into its summary, so
    # the signal may come at once: nothing here waits for the watch to reach any state
    proc.send_signal(signal.SIGINT)
    out, err = proc.communicate(timeout=30)
    assert proc.returncode == 130  # README, exit status: 130 interrupted
    assert "watch stopped (ctrl+c): 0 photos" in out
    assert "Traceback" not in err and "Traceback" not in out


def test_watch_applies_aperture_exclusions_and_saves_maps(tmp_path, photo_set):
    # The options `measure` has for one photo apply to every photo the watch sees.
    folder = tmp_path / "camera"
    folder.mkdir()
    maps = tmp_path / "maps"
    maps.mkdir()
    shutil.copy(photo_set.good_png, folder / "BW-FL-0100.png")
    ap = photo_set.good.aperture
    parser = argparse.ArgumentParser()
    sub = parser.add_subparsers()
    cmd_watch.add_parser(sub)
    args = parser.parse_args([
        "watch", str(folder), "--wavelength", "632.8", "--existing", "--no-log",
        "--max-files", "1", "--interval", "0.05", "--settle", "0",
        "--aperture", f"{ap.center_x_px},{ap.center_y_px},{ap.radius_px}",
        "--exclude", f"{ap.center_x_px},{ap.center_y_px},{0.1 * ap.radius_px}",
        "--save-map", str(maps / "{name}.npy"),
    ])
    record, map_error = cmd_watch.measure_photo(folder / "BW-FL-0100.png", args)
    assert map_error is None
    assert record["aperture"]["source"] == "given"
    assert record["aperture"]["radius_px"] == pytest.approx(ap.radius_px, abs=0.01)
    assert len(record["aperture"]["exclusions"]) == 1
    saved = np.load(maps / "BW-FL-0100.npy")
    assert saved.ndim == 2 and np.isfinite(saved).any()
    # a map written into the watched folder would be taken for a new photo: refused
    bad = parser.parse_args(["watch", str(folder), "--wavelength", "632.8", "--no-log",
                             "--save-map", str(folder / "{name}.tif")])
    assert cmd_watch.run(bad) == 2


# --- one bad file, a vanished folder, a stalled writer, a log that cannot be written -------


def run_watch(capsys, *argv):
    args = parser().parse_args(["watch", *map(str, argv)])
    status = cmd_watch.run(args)
    captured = capsys.readouterr()
    return status, captured.out, captured.err


def test_each_bad_file_gives_one_error_line_and_the_watch_goes_on(tmp_path, photo_set,
                                                                 capsys):
    folder = tmp_path / "camera"
    folder.mkdir()
    shutil.copy(photo_set.bad["bomb.png"], folder / "BW-FL-0401-bomb.png")
    os.symlink("BW-FL-0402-loop.png", folder / "BW-FL-0402-loop.png")  # a link to itself
    os.symlink(tmp_path / "nowhere.png", folder / "BW-FL-0403-dangling.png")
    os.mkfifo(folder / "BW-FL-0404-pipe.png")  # opening it would wait for a writer forever
    (folder / "BW-FL-0405-empty.png").write_bytes(b"")
    shutil.copy(photo_set.good_png, folder / "BW-FL-0412.png")
    status, out, err = run_watch(capsys, folder, "-w", "632.8", "--no-log", "--existing",
                                 "--settle", "0.1", "--interval", "0.05", "--max-files", "6",
                                 "--timeout", "120")
    assert status == 0, out + err
    assert err == ""  # no Pillow warning, no traceback
    lines = out.splitlines()[1:-1]
    errors = {name: [ln for ln in lines if f"BW-FL-040{k}-{name}.png: error:" in ln]
              for k, name in enumerate(["bomb", "loop", "dangling", "pipe", "empty"], 1)}
    assert all(len(found) == 1 for found in errors.values()), out
    assert "safety limit" in errors["bomb"][0]
    assert "left alone" in errors["loop"][0] and "link to nothing" in errors["dangling"][0]
    assert "not a regular file" in errors["pipe"][0]
    assert "empty (0 bytes)" in errors["empty"][0]
    assert len([ln for ln in lines if ln.split()[1:2] == ["BW-FL-0412"]]) == 1
    assert "internal error" not in out
    assert out.splitlines()[-1].endswith("6 photos, 0 pass, 0 fail, 0 inconclusive, "
                                         "1 without tolerance, 5 errors")


class Lines:
    """The lines a process prints, read in a thread, waited for by content (no sleeps)."""

    def __init__(self, proc):
        import queue

        self.seen: list[str] = []
        self._queue = queue.Queue()
        self._thread = threading.Thread(target=self._read, args=(proc.stdout,), daemon=True)
        self._thread.start()

    def _read(self, stream):
        for line in stream:
            self._queue.put(line.rstrip("\n"))
        self._queue.put(None)

    def wait_for(self, text, timeout=120):
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            import queue

            try:
                line = self._queue.get(timeout=max(0.01, deadline - time.monotonic()))
            except queue.Empty:
                break
            if line is None:
                break
            self.seen.append(line)
            if text in line:
                return line
        raise AssertionError(f"no line with {text!r}; saw:\n" + "\n".join(self.seen))


def test_a_vanished_folder_is_waited_for(tmp_path, photo_set):
    folder = tmp_path / "camera"
    folder.mkdir()
    code = "import sys; from flatsight.tui.cli import main; sys.exit(main())"
    proc = subprocess.Popen(
        [sys.executable, "-c", code, "watch", str(folder), "-w", "hene", "--no-log",
         "--interval", "0.05", "--settle", "0.1", "--max-files", "1", "--timeout", "300"],
        stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
    try:
        lines = Lines(proc)
        lines.wait_for("watching ")
        shutil.rmtree(folder)
        lines.wait_for("cannot be looked at")
        folder.mkdir()
        lines.wait_for("is back")
        shutil.copy(photo_set.good_png, folder / "BW-FL-0412.png")
        lines.wait_for("BW-FL-0412")
        _, err = proc.communicate(timeout=120)
    finally:
        proc.kill()
        proc.wait()
    assert proc.returncode == 0, err
    assert "Traceback" not in err


def test_a_stalled_writer_is_one_error_until_its_photo_measures(tmp_path, photo_set, capsys):
    now = [0.0]
    watcher = cmd_watch.FolderWatcher(tmp_path, settle_s=0.5, give_up_s=2.0,
                                      clock=lambda: now[0])
    args = parser().parse_args(["watch", str(tmp_path), "-w", "632.8", "--no-log"])
    tally = cmd_watch.Tally()
    target = tmp_path / "BW-FL-0412.png"
    data = photo_set.good_png.read_bytes()

    def stall_at(fraction):
        target.write_bytes(data[: int(len(data) * fraction)])
        for step in (0.1, 3.0):  # seen, then stable past the give-up time
            now[0] += step
            for path in watcher.poll():
                cmd_watch._handle(path, args, tally)

    stall_at(0.3)
    stall_at(0.6)  # the writer went on, then stalled again
    assert tally.counts["error"] == 1 and tally.total() == 1
    stall_at(1.0)  # finished
    out = capsys.readouterr().out
    assert tally.counts == {"error": 0, "measured": 1}
    assert len([ln for ln in out.splitlines() if "error" in ln]) == 1
    assert len(out.splitlines()) == 2


def test_results_are_shown_when_the_log_cannot_be_written(tmp_path, quick_measure, photo_set,
                                                         capsys):
    folder = tmp_path / "camera"
    folder.mkdir()
    maps = tmp_path / "maps"
    maps.mkdir()
    # two photos of one stem: each keeps its own map
    shutil.copy(photo_set.good_png, folder / "BW-FL-0412.png")
    shutil.copy(photo_set.good_tif16, folder / "BW-FL-0412.tif")
    status, out, err = run_watch(capsys, folder, "-w", "632.8", "--log", tmp_path,
                                 "--existing", "--settle", "0", "--interval", "0.05",
                                 "--max-files", "2", "--timeout", "120",
                                 "--save-map", maps / "{name}.npy")
    assert status == 2, out + err
    lines = out.splitlines()
    measured = [ln for ln in lines if "BW-FL-0412" in ln and "PV" in ln]
    assert len(measured) == 2 and all(ln.endswith("not logged") for ln in measured)
    assert len([ln for ln in lines if "cannot write the log" in ln]) == 1
    assert lines[-1].endswith("2 not logged")
    assert sorted(p.name for p in maps.iterdir()) == ["BW-FL-0412-2.npy", "BW-FL-0412.npy"]




def test_a_map_that_cannot_be_written_keeps_the_photos_line_and_record(tmp_path, quick_measure,
                                                                      photo_set, capsys):
    # issue 9: a --save-map write failure dropped the photo. A "maps folder" that is a
    # regular file stops root as well as anyone (ENOTDIR), unlike a read-only folder
    folder = tmp_path / "camera"
    folder.mkdir()
    shutil.copy(photo_set.good_png, folder / "BW-FL-0412.png")
    maps = tmp_path / "maps"
    maps.write_text("a file where the maps folder should be")
    log = tmp_path / "log.sqlite"
    status, out, err = run_watch(capsys, folder, "-w", "632.8", "--log", log, "--existing",
                                 "--settle", "0", "--interval", "0.05", "--max-files", "1",
                                 "--timeout", "120", "--save-map", maps / "{name}.npy")
    assert status == 2, out + err
    lines = out.splitlines()
    assert len([ln for ln in lines if "BW-FL-0412" in ln and "PV" in ln]) == 1
    problem = [ln for ln in lines if "cannot write the height map" in ln]
    assert len(problem) == 1 and str(maps / "BW-FL-0412.npy") in problem[0]
    assert "logged without the map" in problem[0]
    assert lines[-1].endswith("1 map not written")
    records = inspection_log.query(log)
    assert len(records) == 1 and "height_map_path" not in records[0]


def test_watch_takes_each_photos_bench_from_the_presets_photos_table(tmp_path, photo_set,
                                                                   measured, monkeypatch,
                                                                   capsys):
    # issue 9 item 7: watch ignored [photos] and asked for --wavelength, unlike measure.
    # He-Ne 632.8 nm and sodium D 589.3 nm (common practice; references.md)
    import dataclasses

    import flatsight.analysis.pipeline as pipeline

    used = {}

    def quick(photo, settings, **_):
        used[os.path.basename(photo)] = settings.wavelength_nm
        return dataclasses.replace(measured, photo=str(photo), settings=settings)

    monkeypatch.setattr(pipeline, "measure", quick)
    folder = tmp_path / "camera"
    folder.mkdir()
    for name in ("BW-FL-0001_hene.png", "BW-FL-0002_sodium.png", "BW-FL-0003.png"):
        shutil.copy(photo_set.good_png, folder / name)
    presets = tmp_path / "presets.toml"
    presets.write_text(PRESETS, encoding="utf-8")
    log = tmp_path / "log.sqlite"
    # --jobs 1: the stand-in analysis above lives in this process, not in workers
    status, out, err = run_watch(capsys, folder, "--presets", presets, "--log", log,
                                 "--jobs", "1", "--existing", "--settle", "0", "--interval", "0.01",
                                 "--max-files", "3", "--timeout", "60")
    assert status == 0, out + err
    assert used == {"BW-FL-0001_hene.png": 632.8, "BW-FL-0002_sodium.png": 589.3}
    assert [ln for ln in out.splitlines() if "BW-FL-0003.png: error: no test wavelength"]
    stations = {r["part"]: r["station"] for r in inspection_log.query(log)}
    assert stations == {"BW-FL-0001_hene": "bench-2", "BW-FL-0002_sodium": "bench-1"}


# --- closed fringes: the ring sign (issue 10) -------------------------------------------------


def test_watch_passes_the_ring_sign_and_method_from_the_command_line_or_the_preset(
        tmp_path, photo_set, measured, monkeypatch, capsys):
    import dataclasses

    import flatsight.analysis.pipeline as pipeline

    used = {}

    def quick(photo, settings, **_):
        used[os.path.basename(photo)] = (settings.ring_sign, settings.method)
        return dataclasses.replace(measured, photo=str(photo), settings=settings)

    monkeypatch.setattr(pipeline, "measure", quick)
    folder = tmp_path / "camera"
    folder.mkdir()
    for name in ("BW-FL-0440_plate.png", "BW-FL-0441.png"):
        shutil.copy(photo_set.good_png, folder / name)
    presets = tmp_path / "presets.toml"
    presets.write_text('[presets.test-plate]\nwavelength_nm = 589.3\nring_sign = "concave"\n'
                       'method = "intensity-fit"\n[photos]\n"*_plate.*" = "test-plate"\n',
                       encoding="utf-8")
    # --jobs 1: the stand-in analysis above lives in this process, not in workers
    common = ("--jobs", "1", "--existing", "--settle", "0", "--interval", "0.01",
              "--max-files", "2", "--timeout", "60", "--no-log")
    status, out, err = run_watch(capsys, folder, "-w", "sodium", "--ring-sign", "convex",
                                 "--method", "intensity-fit", *common)
    assert status == 0, out + err
    assert used == {"BW-FL-0440_plate.png": ("convex", "intensity-fit"),
                    "BW-FL-0441.png": ("convex", "intensity-fit")}
    used.clear()
    # the preset's ring_sign and method for the photo its [photos] pattern names; the
    # command line's --ring-sign would win over it, as in measure
    status, out, err = run_watch(capsys, folder, "--presets", presets, "-w", "sodium",
                                 *common)
    assert status == 0, out + err
    assert used == {"BW-FL-0440_plate.png": ("concave", "intensity-fit"),
                    "BW-FL-0441.png": (None, "auto")}


def test_watch_refuses_a_bad_ring_sign_as_a_usage_error(tmp_path, capsys):
    with pytest.raises(SystemExit) as info:
        parser().parse_args(["watch", str(tmp_path), "-w", "hene", "--ring-sign", "flat"])
    assert info.value.code == 2
    assert "--ring-sign" in capsys.readouterr().err


@pytest.mark.slow
def test_watch_measures_closed_rings_once_the_sign_is_stated(tmp_path, photo_set, capsys):
    # the suite's closed-ring photo (tests/conftest.py): without a sign one error line that
    # names --ring-sign, and the watch goes on; with --ring-sign convex measured, and the
    # record says the sign was stated
    folder = tmp_path / "camera"
    folder.mkdir()
    shutil.copy(photo_set.bad["rings.png"], folder / "BW-FL-0440.png")
    log = tmp_path / "log.sqlite"
    common = ("--jobs", "1", "--existing", "--settle", "0", "--interval", "0.01",
              "--max-files", "1", "--timeout", "120", "--log", log)
    status, out, _ = run_watch(capsys, folder, "-w", "hene", *common)
    errors = [ln for ln in out.splitlines() if "BW-FL-0440.png: error:" in ln]
    assert status == 0 and len(errors) == 1 and "--ring-sign" in errors[0]
    assert "1 errors" in out.splitlines()[-1]
    assert not log.exists()  # nothing was logged
    status, out, _ = run_watch(capsys, folder, "-w", "hene", "--ring-sign", "convex", *common)
    assert status == 0, out
    record = inspection_log.query(log)[0]
    assert record["quality"]["sign"] == "stated"
    assert record["settings"]["ring_sign"] == "convex"
    assert record["power_nm"] > 0  # convex: centre high (README, "Sign")
