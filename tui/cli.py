"""The `flatsight` command: subcommands for measuring, inspecting and keeping records.

Kept light on purpose: each subcommand's module imports its heavy libraries inside
``run``, so ``flatsight --help`` answers at once.
"""

from __future__ import annotations

import argparse
import contextlib
import importlib
import os
import signal
import sys
import threading

from ..analysis.version import flatsight_version
from .options import EXIT_CODES
from .safe_text import shown

# (module, one-line summary) in the order a shop uses them
COMMANDS = [
    "cmd_measure",
    "cmd_inspect",
    "cmd_stack",
    "cmd_absolute",
    "cmd_records",
    "cmd_watch",
]

DESCRIPTION = """\
Flatsight: flatness of optical flats from a photo of their fringes.

Photograph the part against a reference flat under monochromatic light with
10 to 30 straight tilt fringes across it; Flatsight reports PV, RMS, PVr,
power and irregularity in nm, waves and fringes (one fringe = half a wavelength).

Safety: never look into a laser beam or its reflections, and follow your shop's
laser and glass-handling procedures. Flatsight's figures support, and do not
replace, the shop's calibrated instruments and the customer's acceptance test."""


class OneLineParser(argparse.ArgumentParser):
    """An argument parser whose usage errors are one line (exit status 2)."""

    def error(self, message: str):  # noqa: D401 - argparse's hook
        # the message may quote what was typed, control characters and all
        self.exit(2, f"{self.prog}: error: {shown(message)} (see {self.prog} --help)\n")


def build_parser() -> argparse.ArgumentParser:
    parser = OneLineParser(
        prog="flatsight",
        description=DESCRIPTION,
        epilog=EXIT_CODES + "\nA tolerance (measure --spec) adds 1 (out of tolerance) and 5 "
        "(inconclusive);\nsee 'flatsight measure --help'. Each command's --help gives its own.",
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    pkg = __package__ or "flatsight.tui"
    parser.add_argument(
        "--version",
        action="version",
        version=f"flatsight {flatsight_version()}",
        help="print the installed version and exit",
    )
    sub = parser.add_subparsers(dest="command", metavar="COMMAND",
                                parser_class=OneLineParser)
    for name in COMMANDS:
        try:
            module = importlib.import_module(f"{pkg}.{name}")
        except ModuleNotFoundError as exc:
            if exc.name == f"{pkg}.{name}":
                continue  # a command not installed in this build
            raise
        before = set(sub.choices)
        module.add_parser(sub)
        for added in set(sub.choices) - before:
            if sub.choices[added].get_default("run") is None:
                sub.choices[added].set_defaults(run=module.run)
    return parser


@contextlib.contextmanager
def stopped_cleanly():
    """While inside, SIGTERM and SIGHUP end the command as an exit (status 128 + signal)
    that runs every clean-up on the way out, so a file being written is removed, not
    left behind as a temporary file. The previous handlers come back on leaving."""
    if threading.current_thread() is not threading.main_thread():
        yield
        return

    def stop(signum, frame):
        raise SystemExit(128 + signum)

    previous = {}
    for name in ("SIGTERM", "SIGHUP"):
        if hasattr(signal, name):
            previous[name] = signal.signal(getattr(signal, name), stop)
    try:
        yield
    finally:
        for name, handler in previous.items():
            signal.signal(getattr(signal, name), handler)


def main(argv: list[str] | None = None) -> int:
    """Entry point of the ``flatsight`` console command; returns the exit status."""
    parser = build_parser()
    try:
        args = parser.parse_args(argv)
    except SystemExit as exc:  # argparse: --help (0) or a usage error (2)
        return int(exc.code or 0)
    if not getattr(args, "command", None):
        parser.print_help()
        return 2
    # the station (Textual) looks after its own terminal and signals
    cleanly = stopped_cleanly() if args.command != "inspect" else contextlib.nullcontext()
    try:
        with cleanly:
            return int(args.run(args))
    except KeyboardInterrupt:
        print("flatsight: interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        # the reader went away (e.g. `| head`); nothing more to say
        try:
            sys.stdout = open(os.devnull, "w")  # noqa: SIM115 - silence the final flush
        except OSError:
            pass
        return 0
    except Exception as exc:  # the last guard: one line, never a traceback
        if os.environ.get("FLATSIGHT_DEBUG"):
            raise
        from flatsight.analysis.errors import FlatsightError

        if isinstance(exc, FlatsightError):
            print(f"flatsight: error: {shown(exc)}", file=sys.stderr)
            return 2
        print(f"flatsight: internal error: {type(exc).__name__}: {shown(exc)} "
              "(set FLATSIGHT_DEBUG=1 for details)", file=sys.stderr)
        return 4


def entry() -> None:  # pragma: no cover - console script wrapper
    sys.exit(main())


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
