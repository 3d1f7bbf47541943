"""Command-line interface: a thin layer over the Python API.

Exit codes: 0 success, 1 runtime error, 2 bad input or usage. Errors print one line
``error: ...`` on stderr (a traceback only with ``--debug``). ``-v``/``-q`` are counted and
mapped to logging on stderr.
"""

from __future__ import annotations

import argparse
import contextlib
import errno
import logging
import os
import signal
import sys
import threading
import traceback
import warnings
from collections.abc import Sequence

from ..constants import __version__
from ..errors import MESSAGE_LINE_CHARS, InputError, OutputExistsError, TsunamiFocusError, cut
from ..io.interrupts import request_stop
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
    level = max(logging.DEBUG, min(logging.CRITICAL, logging.WARNING - 10 * verbose + 10 * quiet))
    logging.basicConfig(level=level, stream=sys.stderr, format="%(levelname)s: %(message)s")
    logging.getLogger().setLevel(level)  # also when logging was configured before (a second call)


def _show_warning(message, category, filename, lineno, file=None, line=None) -> None:  # noqa: ARG001
    """Warnings on the command line: one short line through logging (so ``-q`` silences them), no source."""
    logging.getLogger("tsunamifocus").warning("%s: %s", category.__name__, _one_line(message))


def main(argv: Sequence[str] | None = None) -> int:
    """Entry point of the ``tsunamifocus`` command; returns the exit code.

    Called as the program (``argv`` None) and stopped by SIGINT/SIGTERM, the process ends right
    after the clean-up (exit handlers run, outputs already left as they were) instead of returning:
    tearing down the interpreter's modules would add a second or two to the time to stop.
    """
    code = _main(argv)
    if argv is None and code in (EXIT_INTERRUPTED, EXIT_TERMINATED):
        _exit_now(code)
    return code


def _exit_now(code: int) -> None:
    """Flush, remove temporary files, then end the process at once.

    The ordinary exit handlers are not run: they include joining thread pools whose threads may be
    in the middle of a long library call (an ensemble member smoothing a grid), which is exactly
    the wait a stop must not have. Temporary files registered with :class:`weakref.finalize`
    (:mod:`tempfile`, the numba cache fallback) are still removed; the outputs were already left as
    they were by the output folder's own clean-up.
    """
    import os
    import weakref

    logging.shutdown()
    with contextlib.suppress(Exception):
        weakref.finalize._exitfunc()  # the finalizers marked to run at exit
    for f in (sys.stdout, sys.stderr):
        with contextlib.suppress(Exception):
            f.flush()
    os._exit(code)


def _main(argv: Sequence[str] | None) -> int:
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
    shown, warnings.showwarning = warnings.showwarning, _show_warning
    try:
        return int(command.run(args) or 0)
    except KeyboardInterrupt:
        request_stop()  # kernels still running on worker threads stop after their current piece
        print("error: interrupted; outputs were left as they were", file=sys.stderr)
        return EXIT_INTERRUPTED
    except _Terminated:
        request_stop()
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
    except OSError as exc:  # a file a library could not read or write: the file and the reason, exit 2
        if debug:
            traceback.print_exc()
        name = f"{exc.filename}: " if getattr(exc, "filename", None) else ""
        full = "; the disk is full" if exc.errno in (errno.ENOSPC, errno.EDQUOT) else ""
        print(f"error: {name}{_one_line(exc.strerror or exc)}{full}", file=sys.stderr)
        return EXIT_USAGE
    except Exception as exc:  # unexpected: still one line unless --debug
        if debug:
            traceback.print_exc()
        print(f"error: unexpected {type(exc).__name__}: {_one_line(exc)} (run with --debug for details)",
              file=sys.stderr)
        return EXIT_RUNTIME
    finally:
        restore()
        warnings.showwarning = shown


class _Terminated(BaseException):
    """Raised by the SIGTERM handler of the command line so outputs are cleaned up on the way out."""


#: Delay [s] before a signal that arrived inside the compiler's callbacks is delivered again.
_REDELIVER_S = 0.05


def in_compiler(frame) -> bool:
    """True when ``frame`` (the one a signal handler receives) or a caller runs in the JIT compiler's
    Python code (llvmlite, numba's core): loading or compiling a kernel. An exception raised there
    can land in a callback called from C (the object cache of llvmlite), where it cannot propagate:
    it is dropped and the compiler carries on in an undefined state (seen as a segmentation fault)."""
    marks = (f"{os.sep}llvmlite{os.sep}", f"{os.sep}numba{os.sep}core{os.sep}")
    depth = 0
    while frame is not None and depth < 500:
        name = frame.f_code.co_filename
        if any(m in name for m in marks):
            return True
        frame, depth = frame.f_back, depth + 1
    return False


def _deferred(signum: int, frame) -> bool:
    """Inside the compiler: deliver the signal again a moment later (once out of it) and return True."""
    if not in_compiler(frame):
        return False
    t = threading.Timer(_REDELIVER_S, os.kill, (os.getpid(), signum))
    t.daemon = True
    t.start()
    return True


def _catch_sigterm():
    """Turn SIGTERM into :class:`_Terminated` while a command runs (main thread only); both SIGTERM and
    SIGINT also ask kernels running on other threads to stop (:func:`~tsunamifocus.io.interrupts.request_stop`)."""
    if threading.current_thread() is not threading.main_thread():
        return lambda: None
    try:
        old = signal.getsignal(signal.SIGTERM)
    except (ValueError, AttributeError):  # pragma: no cover - platform without SIGTERM
        return lambda: None
    if old not in (signal.SIG_DFL, None):
        return lambda: None

    def handler(signum, frame):
        request_stop()  # kernels on worker threads (ensemble members) stop after their current piece
        if _deferred(signum, frame):
            return
        raise _Terminated()

    def on_sigint(signum, frame):
        request_stop()
        if _deferred(signum, frame):
            return
        raise KeyboardInterrupt

    old_int = signal.getsignal(signal.SIGINT)
    signal.signal(signal.SIGTERM, handler)
    if old_int is signal.default_int_handler:
        signal.signal(signal.SIGINT, on_sigint)

    def restore() -> None:
        signal.signal(signal.SIGTERM, old)
        if old_int is signal.default_int_handler:
            signal.signal(signal.SIGINT, old_int)

    return restore


def _versions_text() -> str:
    v = show_versions()
    return v if isinstance(v, str) else "\n".join(f"{k:12s} {val}" for k, val in v.items())


def _one_line(exc: BaseException | str) -> str:
    """The message on one line, at most :data:`~tsunamifocus.errors.MESSAGE_LINE_CHARS` long (errors.cut)."""
    text = " ".join(str(exc).split()) or type(exc).__name__
    return cut(text, MESSAGE_LINE_CHARS)
