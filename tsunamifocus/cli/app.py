"""Command-line interface: a thin layer over the Python API.

Exit codes: 0 success, 1 runtime error, 2 bad input or usage. Errors print one line
``error: ...`` on stderr (a traceback only with ``--debug``). ``-v``/``-q`` are counted and
mapped to logging on stderr.
"""

from __future__ import annotations

import argparse
import logging
import signal
import sys
import threading
import traceback
from collections.abc import Sequence

from ..constants import __version__
from ..errors import InputError, OutputExistsError, TsunamiFocusError
from ..io.manifest import show_versions
from . import check, compare, demo, inspect, run, sourceset

__all__ = ["main", "build_parser", "COMMANDS"]

log = logging.getLogger("tsunamifocus")

#: The sub-commands, in the order of the help text; each module has NAME, HELP, configure(parser), run(args).
COMMANDS = (inspect, demo, run, compare, check, sourceset)

#: Exit codes.
EXIT_OK, EXIT_RUNTIME, EXIT_USAGE, EXIT_INTERRUPTED, EXIT_TERMINATED = 0, 1, 2, 130, 143


def _add_common(p: argparse.ArgumentParser, top: bool = True) -> None:
    # sub-parsers must not reset what was given before the command name
    d0 = 0 if top else argparse.SUPPRESS
    dF = False if top else argparse.SUPPRESS
    p.add_argument("-v", "--verbose", action="count", default=d0, help="more log output (repeatable)")
    p.add_argument("-q", "--quiet", action="count", default=d0, help="less output (repeatable)")
    p.add_argument("--debug", action="store_true", default=dF, help="show tracebacks on errors")


def build_parser() -> argparse.ArgumentParser:
    """Build the argument parser with every sub-command of :data:`COMMANDS`."""
    parser = argparse.ArgumentParser(
        prog="tsunamifocus",
        description="Screening of coastal tsunami-energy focusing by bathymetric refraction. "
        "Screening estimates only: not a tsunami warning, forecast or inundation map.",
    )
    parser.add_argument("--version", action="version", version=f"tsunamifocus {__version__}")
    parser.add_argument("--show-versions", action="store_true", help="print versions of dependencies and exit")
    _add_common(parser)
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for cmd in COMMANDS:
        sp = sub.add_parser(cmd.NAME, help=cmd.HELP, description=cmd.HELP)
        _add_common(sp, top=False)
        cmd.configure(sp)
    return parser


def _setup_logging(verbose: int, quiet: int) -> None:
    level = logging.WARNING - 10 * verbose + 10 * quiet
    logging.basicConfig(level=max(logging.DEBUG, min(logging.CRITICAL, level)), stream=sys.stderr,
                        format="%(levelname)s: %(message)s")


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``tsunamifocus`` command; returns the exit code."""
    parser = build_parser()
    args = parser.parse_args(argv)
    debug = getattr(args, "debug", False)
    if args.show_versions:
        print(_versions_text())
        return EXIT_OK
    if not args.command:
        parser.print_help(sys.stderr)
        return EXIT_USAGE
    _setup_logging(args.verbose, args.quiet)
    command = {cmd.NAME: cmd for cmd in COMMANDS}[args.command]
    restore = _catch_sigterm()
    try:
        return int(command.run(args) or 0)
    except KeyboardInterrupt:
        print("error: interrupted; outputs were left as they were", file=sys.stderr)
        return EXIT_INTERRUPTED
    except _Terminated:
        print("error: terminated; outputs were left as they were", file=sys.stderr)
        return EXIT_TERMINATED
    except (InputError, FileNotFoundError, OutputExistsError) as exc:
        if debug:
            traceback.print_exc()
        print(f"error: {_one_line(exc)}", file=sys.stderr)
        return EXIT_USAGE
    except TsunamiFocusError as exc:
        if debug:
            traceback.print_exc()
        code = EXIT_USAGE if isinstance(exc, (OSError, ValueError)) else EXIT_RUNTIME
        print(f"error: {_one_line(exc)}", file=sys.stderr)
        return code
    except Exception as exc:  # unexpected: still one line unless --debug
        if debug:
            traceback.print_exc()
        print(f"error: unexpected {type(exc).__name__}: {_one_line(exc)} (run with --debug for details)",
              file=sys.stderr)
        return EXIT_RUNTIME
    finally:
        restore()


class _Terminated(BaseException):
    """Raised by the SIGTERM handler of the command line so outputs are cleaned up on the way out."""


def _catch_sigterm():
    """Turn SIGTERM into :class:`_Terminated` while a command runs (main thread only)."""
    if threading.current_thread() is not threading.main_thread():
        return lambda: None
    try:
        old = signal.getsignal(signal.SIGTERM)
    except (ValueError, AttributeError):  # pragma: no cover - platform without SIGTERM
        return lambda: None
    if old not in (signal.SIG_DFL, None):
        return lambda: None

    def handler(signum, frame):
        raise _Terminated()

    signal.signal(signal.SIGTERM, handler)
    return lambda: signal.signal(signal.SIGTERM, old)


def _versions_text() -> str:
    v = show_versions()
    return v if isinstance(v, str) else "\n".join(f"{k:12s} {val}" for k, val in v.items())


def _one_line(exc: BaseException) -> str:
    return " ".join(str(exc).split()) or type(exc).__name__
