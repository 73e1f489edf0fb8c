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

import numpy as np
import pytest
from flatsight.analysis import inspection_log
from flatsight.analysis.synthetic import SyntheticSurface, make_fringe_photo, write_photo
from flatsight.tui import cmd_watch


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
    assert proc.returncode == 0
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
    record = cmd_watch.measure_photo(folder / "BW-FL-0100.png", args)
    assert record["aperture"]["source"] == "given"
    assert record["aperture"]["radius_px"] == pytest.approx(ap.radius_px, abs=0.01)
    assert len(record["aperture"]["exclusions"]) == 1
    saved = np.load(maps / "BW-FL-0100.npy")
    assert saved.ndim == 2 and np.isfinite(saved).any()
    # a map written into the watched folder would be taken for a new photo: refused
    bad = parser.parse_args(["watch", str(folder), "--wavelength", "632.8", "--no-log",
                             "--save-map", str(folder / "{name}.tif")])
    assert cmd_watch.run(bad) == 2
