"""The set-up script, install.py: one plain sentence, and status 1, when something is missing.

Nothing is uninstalled to test this: the script's checks run here with patched values,
or a copy of the script runs in a temporary folder under an environment that hides a
module or pretends to be an old Python. The real install (a new .venv, pip, the whole
suite) is what .ci/run does on Debian's own externally managed Python.
"""

from __future__ import annotations

import ast
import importlib.util
import os
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

SCRIPT = Path(__file__).resolve().parents[1] / "install.py"


@pytest.fixture
def install(tmp_path, monkeypatch):
    """install.py as a module, pointed at a project folder in ``tmp_path``."""
    spec = importlib.util.spec_from_file_location("flatsight_install_script", SCRIPT)
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    monkeypatch.setattr(module, "PROJECT", str(tmp_path))
    monkeypatch.setattr(module, "VENV", str(tmp_path / ".venv"))
    return module


def one_sentence(text: str) -> str:
    """The text, checked to be one line: a sentence, not a traceback or pip's output."""
    lines = text.splitlines()
    assert len(lines) == 1, text
    assert lines[0].startswith("install.py: ") and lines[0].endswith("."), text
    assert "Traceback" not in text
    return lines[0]


def run_copy(tmp_path: Path, *, code: str | None = None, env: dict | None = None):
    """Run a copy of install.py in ``tmp_path`` (so the project's own .venv is never touched)."""
    copy = tmp_path / "install.py"
    shutil.copy(SCRIPT, copy)
    command = (
        [sys.executable, str(copy)] if code is None else [sys.executable, "-c", code, str(copy)]
    )
    return subprocess.run(
        command,
        capture_output=True,
        text=True,
        timeout=60,
        check=False,
        cwd=tmp_path,
        env={**os.environ, **(env or {})},
    )


def test_an_old_python_gets_one_sentence(install, monkeypatch, capsys, tmp_path):
    monkeypatch.setattr(install, "python_version", lambda: (3, 9, 2))
    assert install.main([]) == 1
    out, err = capsys.readouterr()
    line = one_sentence(err)
    assert "needs Python 3.11 or newer" in line and "is Python 3.9.2" in line
    assert out == "" and list(tmp_path.iterdir()) == []  # nothing made


def test_an_old_python_in_a_real_process(tmp_path):
    # the version a 3.9 interpreter would report, set before the script runs
    code = (
        "import runpy, sys; sys.version_info = (3, 9, 18, 'final', 0); "
        "sys.argv = sys.argv[1:]; runpy.run_path(sys.argv[0], run_name='__main__')"
    )
    done = run_copy(tmp_path, code=code)
    assert done.returncode == 1 and done.stdout == ""
    assert "is Python 3.9.18" in one_sentence(done.stderr)
    assert not (tmp_path / ".venv").exists()


def test_the_script_reads_on_old_pythons():
    # Python 3.6's grammar (ast's feature_version), and no f-strings or annotations, so
    # 3.5 and 2.7 get as far as the sentence too (seen by hand with pyenv's 2.7 to 3.10)
    tree = ast.parse(SCRIPT.read_text(encoding="utf-8"), feature_version=(3, 6))
    newer = [
        type(node).__name__
        for node in ast.walk(tree)
        if isinstance(node, ast.JoinedStr | ast.AnnAssign)
        or (isinstance(node, ast.arg) and node.annotation is not None)
        or (isinstance(node, ast.FunctionDef) and node.returns is not None)
    ]
    assert newer == []


def test_a_missing_venv_module_names_the_debian_package(install, monkeypatch, capsys, tmp_path):
    monkeypatch.setitem(sys.modules, "ensurepip", None)  # import ensurepip now fails
    monkeypatch.setattr(install, "python_version", lambda: (3, 11, 2))
    monkeypatch.setattr(install, "os_release", lambda path=None: ["debian"])
    monkeypatch.setattr(sys, "base_prefix", "/usr")  # the distribution's own Python
    assert install.main(["--test"]) == 1
    out, err = capsys.readouterr()
    line = one_sentence(err)
    assert "no ensurepip module" in line and "sudo apt install python3.11-venv" in line
    assert out == "" and list(tmp_path.iterdir()) == []


def test_a_missing_venv_module_in_a_real_process(tmp_path):
    # an ensurepip that cannot be imported, ahead of the real one on the path
    fake = tmp_path / "fake-stdlib" / "ensurepip"
    fake.mkdir(parents=True)
    (fake / "__init__.py").write_text(
        "raise ImportError('no python3-venv here')\n", encoding="utf-8"
    )
    done = run_copy(tmp_path, env={"PYTHONPATH": str(fake.parent)})
    assert done.returncode == 1 and done.stdout == ""
    assert "cannot make a virtual environment" in one_sentence(done.stderr)
    assert not (tmp_path / ".venv").exists()


@pytest.mark.parametrize(
    ("distribution", "base_prefix", "version", "hint"),
    [
        (["debian"], "/usr", (3, 11), "sudo apt install python3.11-venv"),
        (["ubuntu", "debian"], "/usr", (3, 12), "sudo apt install python3.12-venv"),
        (["linuxmint", "ubuntu"], "/usr", (3, 12), "sudo apt install python3.12-venv"),
        # a Python that is not the distribution's: apt would not help it
        (["debian"], "/opt/python3.13", (3, 13), "belongs with this Python 3.13"),
        (["fedora"], "/usr", (3, 12), "belongs with this Python 3.12"),
        ([], "/usr/local", (3, 11), "belongs with this Python 3.11"),
    ],
)
def test_venv_hint_per_system(install, distribution, base_prefix, version, hint):
    assert hint in install.venv_package_hint(version, distribution, base_prefix=base_prefix)


def test_os_release_words(install, tmp_path):
    release = tmp_path / "os-release"
    release.write_text(
        'PRETTY_NAME="Ubuntu 24.04 LTS"\nID=ubuntu\nID_LIKE=debian\n', encoding="utf-8"
    )
    assert install.os_release(str(release)) == ["ubuntu", "debian"]
    assert install.os_release(str(tmp_path / "none")) == []


def test_a_folder_in_the_way_is_left_alone(tmp_path):
    notes = tmp_path / ".venv" / "notes.txt"
    notes.parent.mkdir()
    notes.write_text("not a virtual environment\n", encoding="utf-8")
    done = run_copy(tmp_path)
    assert done.returncode == 1 and "is in the way" in one_sentence(done.stderr)
    assert notes.read_text(encoding="utf-8") == "not a virtual environment\n"


def test_a_broken_environment_is_made_again(install, tmp_path):
    # a .venv whose Python is gone (removed, or upgraded by the distribution)
    venv = tmp_path / ".venv"
    venv.mkdir()
    (venv / "pyvenv.cfg").write_text("home = /usr/bin/gone\n", encoding="utf-8")
    assert install.prepare_venv(str(venv)) == "create"
    assert not venv.exists()
    assert install.prepare_venv(str(tmp_path / "new")) == "create"


@pytest.mark.parametrize(
    ("pip_said", "cause"),
    [
        (
            "WARNING: Retrying ... NewConnectionError: Failed to establish a new connection",
            "pip could not download what Flatsight needs: check the network or proxy",
        ),
        (
            "ERROR: Could not install packages due to an OSError: [Errno 28] No space left on "
            "device",
            "the disk is full",
        ),
        ("error: subprocess-exited-with-error", "pip stopped with an error"),
    ],
)
def test_a_failed_pip_is_one_sentence_naming_its_log(
    install, tmp_path, monkeypatch, pip_said, cause
):
    monkeypatch.chdir(tmp_path)
    line = install.pip_failure(pip_said, str(tmp_path / ".venv" / "install.log"))
    assert line == (
        f"Could not install Flatsight into .venv ({cause}); pip's own messages are "
        "in .venv/install.log."
    )
