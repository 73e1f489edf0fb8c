#!/usr/bin/env python3
"""Set Flatsight up in a virtual environment in this folder, ``.venv``, for the station or tests.

    python3 install.py            # Flatsight in .venv: then run .venv/bin/flatsight
    python3 install.py --test     # editable, with the test tools: .venv/bin/python -m pytest

Why a virtual environment: a distribution's own Python (Debian 12, Ubuntu 24.04,
Fedora 38 and later, Homebrew) refuses ``pip install`` into the system (PEP 668,
"externally managed"), and a project folder's own ``.venv`` is what the Python
packaging guides recommend instead. It works the same from inside an active virtual
or conda environment: the new ``.venv`` is made from that environment's Python.

A ``.venv`` already there is reused; one that no longer runs (its Python was removed or
upgraded) is made again. Nothing else is upgraded: pip installs the project and only
the requirements not yet satisfied. pip's output goes to ``.venv/install.log``; when
something fails, one sentence says what to do and the exit status is 1.

Standard library only, and written so that even a Python too old to run Flatsight
(3.6, or 2.7) reads this file and prints the sentence saying what to install; hence no
f-strings or annotations here.
"""

from __future__ import print_function

import argparse
import os
import shutil
import subprocess
import sys

MIN_PYTHON = (3, 11)
PROJECT = os.path.dirname(os.path.abspath(__file__))
VENV = os.path.join(PROJECT, ".venv")
LOG_NAME = "install.log"

# what pip's log says when the machine cannot reach the package index, and what is full
_NETWORK_SIGNS = (
    "NewConnectionError",
    "Failed to establish a new connection",
    "Temporary failure in name resolution",
    "Name or service not known",
    "ConnectTimeoutError",
    "ReadTimeoutError",
    "ProxyError",
    "Could not fetch URL",
    "No matching distribution found",
)
_DISK_SIGNS = ("No space left on device",)


class SetupError(Exception):
    """A failure the person at the keyboard can fix: its message is one plain sentence."""


def python_version():
    """The running Python's version as (major, minor, micro); tests replace it."""
    return tuple(sys.version_info[:3])


def os_release(path="/etc/os-release"):
    """The ID and ID_LIKE words of /etc/os-release (empty where there is none)."""
    words = []
    try:
        with open(path) as f:
            for line in f:
                key, _, value = line.strip().partition("=")
                if key in ("ID", "ID_LIKE"):
                    words.extend(value.strip("\"'").lower().split())
    except (IOError, OSError):
        pass
    return words


def check_python(version=None, executable=None):
    """Raise SetupError unless this Python is new enough for Flatsight."""
    version = python_version() if version is None else tuple(version)
    if version[:2] >= MIN_PYTHON:
        return
    needed = "%d.%d" % MIN_PYTHON
    raise SetupError(
        "Flatsight needs Python %s or newer and %s is Python %s: install Python %s or newer "
        "(from your distribution or python.org) and run install.py with it, for example "
        "python%s install.py."
        % (
            needed,
            executable or sys.executable or "this python",
            ".".join(str(n) for n in version),
            needed,
            needed,
        )
    )


def venv_package_hint(version, distribution, base_prefix=None):
    """What to install for this Python's venv module, given /etc/os-release's ID words."""
    major_minor = "%d.%d" % tuple(version[:2])
    if base_prefix is None:
        base_prefix = getattr(sys, "base_prefix", sys.prefix)
    if set(distribution) & {"debian", "ubuntu"} and base_prefix == "/usr":
        # the distribution's own Python: Debian and Ubuntu ship venv and ensurepip apart
        return "install it with sudo apt install python%s-venv" % major_minor
    return "install the venv module that belongs with this Python %s" % major_minor


def check_venv_support(version=None, executable=None, distribution=None):
    """Raise SetupError unless this Python can make a virtual environment with pip in it."""
    missing = []
    for name in ("venv", "ensurepip"):
        try:
            __import__(name)
        except ImportError:
            missing.append(name)
    if not missing:
        return
    version = python_version() if version is None else tuple(version)
    distribution = os_release() if distribution is None else distribution
    raise SetupError(
        "Python %d.%d at %s cannot make a virtual environment (it has no %s module): %s, "
        "then run install.py again."
        % (
            version[0],
            version[1],
            executable or sys.executable,
            " or ".join(missing),
            venv_package_hint(version, distribution),
        )
    )


def venv_python(venv):
    """The interpreter inside a virtual environment (POSIX or Windows layout)."""
    if os.name == "nt":
        return os.path.join(venv, "Scripts", "python.exe")
    return os.path.join(venv, "bin", "python")


def venv_command(venv, name):
    """A console script inside a virtual environment."""
    if os.name == "nt":
        return os.path.join(venv, "Scripts", name + ".exe")
    return os.path.join(venv, "bin", name)


def venv_is_usable(venv):
    """True when ``venv`` runs a new-enough Python that has pip."""
    probe = "import sys, pip; sys.exit(0 if sys.version_info >= %r else 1)" % (MIN_PYTHON,)
    try:
        with open(os.devnull, "w") as null:
            return subprocess.call([venv_python(venv), "-c", probe], stdout=null, stderr=null) == 0
    except OSError:  # no interpreter there, or it cannot be started
        return False


def same_folder(a, b):
    try:
        return os.path.samefile(a, b)
    except OSError:
        return False


def prepare_venv(venv):
    """Decide what to do with ``venv``: "reuse" it, or "create" it (removing a broken one).

    Raises SetupError when the folder is not a virtual environment (never delete what
    this script did not make) or is broken but is the environment running this script.
    """
    if not os.path.lexists(venv):
        return "create"
    if not os.path.isfile(os.path.join(venv, "pyvenv.cfg")):
        if os.path.isdir(venv) and not os.listdir(venv):
            return "create"  # an empty folder, perhaps from an interrupted first run
        raise SetupError(
            "%s is in the way and is not a virtual environment: move it elsewhere and run "
            "install.py again." % venv
        )
    if venv_is_usable(venv):
        return "reuse"
    if same_folder(sys.prefix, venv):
        raise SetupError(
            "The environment %s this runs in has no pip: run deactivate, then "
            "python3 install.py again to make it anew." % venv
        )
    shutil.rmtree(venv)  # made from a Python that is gone or too old: make it again
    return "create"


def shown(path):
    """``path`` relative to the current folder when it lies inside it, else absolute."""
    try:
        rel = os.path.relpath(path)
    except (ValueError, OSError):  # another drive, or the current folder is gone
        return path
    return path if rel.startswith(os.pardir) else rel


def pip_failure(log_text, log_path):
    """The one sentence for a failed ``pip install``, with the likeliest cause named."""
    if any(sign in log_text for sign in _DISK_SIGNS):
        cause = "the disk is full"
    elif any(sign in log_text for sign in _NETWORK_SIGNS):
        cause = "pip could not download what Flatsight needs: check the network or proxy"
    else:
        cause = "pip stopped with an error"
    return "Could not install Flatsight into %s (%s); pip's own messages are in %s." % (
        shown(os.path.dirname(log_path)),
        cause,
        shown(log_path),
    )


def run_logged(command, log, cwd):
    """Run ``command`` with its output appended to the open file ``log``; its status."""
    log.write("\n$ %s\n" % " ".join(command))
    log.flush()
    try:
        return subprocess.call(command, stdout=log, stderr=subprocess.STDOUT, cwd=cwd)
    except OSError as exc:
        log.write("could not start: %s\n" % exc)
        return 127


def install(test=False, venv=None, project=None):
    """Make or reuse ``venv`` and install the project into it; returns the log's path."""
    venv = VENV if venv is None else venv
    project = PROJECT if project is None else project
    check_python()
    check_venv_support()
    action = prepare_venv(venv)
    if not os.path.isdir(venv):
        os.makedirs(venv)
    log_path = os.path.join(venv, LOG_NAME)
    with open(log_path, "w") as log:
        if action == "create":
            print("install.py: making %s with %s" % (shown(venv), sys.executable))
            if run_logged([sys.executable, "-m", "venv", venv], log, project) != 0:
                log.flush()
                raise SetupError(
                    "Could not make the virtual environment %s; Python's own messages are "
                    "in %s." % (shown(venv), shown(log_path))
                )
        what = "with the test tools, editable" if test else "for the station"
        print(
            "install.py: installing Flatsight into %s %s (a few minutes the first time)"
            % (shown(venv), what)
        )
        target = ["-e", ".[test]"] if test else ["."]
        pip = [
            venv_python(venv),
            "-m",
            "pip",
            "install",
            "--disable-pip-version-check",
            "--no-input",
            "--progress-bar",
            "off",
        ] + target
        if run_logged(pip, log, project) != 0:
            log.flush()
            with open(log_path) as f:
                raise SetupError(pip_failure(f.read(), log_path))
    return log_path


def installed_version(venv):
    """``flatsight X.Y.Z`` as the environment's own command reports it."""
    try:
        out = subprocess.check_output([venv_command(venv, "flatsight"), "--version"])
    except (OSError, subprocess.CalledProcessError):
        return "Flatsight"
    return out.decode("utf-8", "replace").strip().replace("flatsight", "Flatsight", 1)


def main(argv=None):
    parser = argparse.ArgumentParser(
        prog="install.py",
        description="Set Flatsight up in .venv in this folder: for the station "
        "(.venv/bin/flatsight), or with --test for the test suite "
        "(.venv/bin/python -m pytest).",
    )
    parser.add_argument(
        "--test", action="store_true", help="install editable, with the test tools (pytest)"
    )
    args = parser.parse_args(argv)
    try:
        install(test=args.test)
    except SetupError as exc:
        print("install.py: %s" % exc, file=sys.stderr)
        return 1
    except KeyboardInterrupt:
        print("install.py: interrupted; run it again to finish.", file=sys.stderr)
        return 130
    except (IOError, OSError) as exc:  # the folder cannot be written, and the like
        print(
            "install.py: %s: %s; check the folder's permissions and free space."
            % (getattr(exc, "filename", None) or PROJECT, exc.strerror or exc),
            file=sys.stderr,
        )
        return 1
    if args.test:
        then = "run the tests with %s -m pytest" % shown(venv_python(VENV))
    else:
        then = "run %s" % shown(venv_command(VENV, "flatsight"))
    print("install.py: %s is ready in %s; %s" % (installed_version(VENV), shown(VENV), then))
    return 0


if __name__ == "__main__":
    sys.exit(main())
