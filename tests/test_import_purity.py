"""The measurement library never pulls in a user-interface package.

After harlequin's pattern: import the library in a fresh interpreter and look at
``sys.modules``. A subprocess, because this test process may already hold textual
or rich from other tests.
"""

from __future__ import annotations

import json
import pkgutil
import subprocess
import sys

import flatsight.analysis

UI_PACKAGES = ("textual", "rich")


def analysis_modules() -> list[str]:
    return sorted(info.name for info in pkgutil.walk_packages(flatsight.analysis.__path__,
                                                              "flatsight.analysis."))


def loaded_after(code: str) -> list[str]:
    probe = (
        "import json, sys\n"
        f"{code}\n"
        "print(json.dumps(sorted(sys.modules)))\n"
    )
    done = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True,
                          timeout=120, check=False)
    assert done.returncode == 0, done.stderr
    return json.loads(done.stdout.strip().splitlines()[-1])


def ui_modules(modules: list[str]) -> list[str]:
    return [m for m in modules if m.split(".")[0] in UI_PACKAGES]


def test_the_module_list_is_complete():
    names = analysis_modules()
    # the stages DEVELOPERS.md lists, at least
    for stage in ("loading", "aperture", "demodulation", "unwrapping", "zernike", "figures",
                  "pipeline", "record", "atomic", "errors", "synthetic", "records.log",
                  "records.sqlite_store", "records.postgres_store"):
        assert f"flatsight.analysis.{stage}" in names


def test_analysis_imports_no_user_interface():
    modules = analysis_modules()
    code = "import flatsight.analysis\n" + "".join(f"import {m}\n" for m in modules)
    loaded = loaded_after(code)
    assert set(modules) <= set(loaded)  # the probe really imported them
    assert ui_modules(loaded) == []


def test_a_measurement_loads_no_user_interface():
    # running the pipeline (its lazy imports included) stays clear of textual and rich
    code = (
        "from flatsight.analysis.synthetic import SyntheticSurface, make_fringe_photo\n"
        "from flatsight.analysis.pipeline import MeasureSettings, measure\n"
        "from flatsight.analysis.record import measurement_to_record\n"
        "p = make_fringe_photo(SyntheticSurface({4: 20.0}), shape=(240, 320), seed=1)\n"
        "measurement_to_record(measure(p.image, MeasureSettings(aperture=p.aperture)))\n"
    )
    assert ui_modules(loaded_after(code)) == []


def test_command_line_help_does_not_load_the_station():
    # house style: the command line never imports the Textual app; --help stays light
    code = (
        "import contextlib, io\n"
        "from flatsight.tui.cli import main\n"
        "with contextlib.redirect_stdout(io.StringIO()):\n"
        "    assert main(['--help']) == 0\n"
    )
    loaded = loaded_after(code)
    assert [m for m in loaded if m.split(".")[0] == "textual"] == []
    assert "flatsight.tui.app" not in loaded
