"""Command-line interface: a thin layer over the Python API.

Exit codes: 0 success, 1 runtime error, 2 bad input or usage. Errors print one line
``error: ...`` on stderr (a traceback only with ``--debug``). ``-v``/``-q`` are counted and
mapped to logging on stderr.
"""

from __future__ import annotations

import argparse
import json
import logging
import pathlib
import sys
import traceback
from collections.abc import Callable, Sequence

from . import __version__
from .errors import InputError, OutputExistsError, TsunamiFocusError

__all__ = ["main", "build_parser"]

log = logging.getLogger("tsunamifocus")

#: Sub-commands register here: name -> (function(args) -> int, configure(parser)).
_COMMANDS: dict[str, tuple[Callable[[argparse.Namespace], int], Callable[[argparse.ArgumentParser], None], str]] = {}


# ----------------------------------------------------------------------------- inspect
def _configure_inspect(p: argparse.ArgumentParser) -> None:
    p.add_argument("path", help="bathymetry grid (GeoTIFF, NetCDF, ESRI ASCII ...)")
    p.add_argument("--values", choices=["auto", "elevation", "depth"], default="auto",
                   help="stored numbers are elevation (negative below sea level) or depth (positive down)")
    p.add_argument("--variable", help="NetCDF variable name, if the file has several")
    p.add_argument("--crs", help="CRS to assume when the file has none (e.g. EPSG:4326)")
    p.add_argument("--units", help="vertical units when the file declares none (m or ft)")
    p.add_argument("--max-memory-gb", type=float, default=None, help="refuse grids needing more memory")
    p.add_argument("--json", action="store_true", help="print the summary as JSON")


def _run_inspect(args: argparse.Namespace) -> int:
    from .bathymetry import load_bathymetry
    from .gridsummary import format_summary, summarize_grid

    depth = load_bathymetry(
        args.path, values=args.values, variable=args.variable, crs=args.crs, units=args.units,
        max_memory_gb=args.max_memory_gb,
    )
    s = summarize_grid(depth)
    if args.json:
        print(json.dumps(s, indent=2, default=float))
    else:
        print(format_summary(s))
    return 0


_COMMANDS["inspect"] = (_run_inspect, _configure_inspect, "summarise a bathymetry grid")


# ----------------------------------------------------------------------------- demo
def _configure_demo(p: argparse.ArgumentParser) -> None:
    p.add_argument("--out", default="tsunamifocus-demo", help="output folder (default: ./tsunamifocus-demo)")
    p.add_argument("--overwrite", action="store_true", help="replace an existing output folder")
    p.add_argument("--rays", type=int, default=None, help="override the ray count of the demo scenario")
    p.add_argument("--scheduler", default=None, help="dask.distributed scheduler address for the ensemble")


def _run_demo(args: argparse.Namespace) -> int:
    out = pathlib.Path(args.out)
    try:
        from .pipeline import run_demo  # the end-to-end pipeline
    except ImportError:
        run_demo = None
    if run_demo is not None:
        if args.rays is not None and args.rays < 1:
            raise InputError(f"--rays {args.rays}: expected a positive number of rays")
        return run_demo(out, overwrite=args.overwrite, rays=args.rays, scheduler=args.scheduler,
                        progress=getattr(args, "quiet", 0) == 0)
    from .bathymetry import load_bathymetry
    from .demo import write_demo_data
    from .gridsummary import format_summary, summarize_grid

    if out.exists() and any(out.iterdir()) and not args.overwrite:
        raise OutputExistsError(f"{out}: folder is not empty; pass --overwrite or choose another --out")
    paths = write_demo_data(out)
    for kind, p in paths.items():
        print(f"== demo bathymetry ({kind}): {p}")
        print(format_summary(summarize_grid(load_bathymetry(p, values="auto"))))
        print()
    return 0


_COMMANDS["demo"] = (_run_demo, _configure_demo, "run the bundled invented demo scenario")


# ----------------------------------------------------------------------------- main
def _add_common(p: argparse.ArgumentParser, top: bool = True) -> None:
    # sub-parsers must not reset what was given before the command name
    d0 = 0 if top else argparse.SUPPRESS
    dF = False if top else argparse.SUPPRESS
    p.add_argument("-v", "--verbose", action="count", default=d0, help="more log output (repeatable)")
    p.add_argument("-q", "--quiet", action="count", default=d0, help="less output (repeatable)")
    p.add_argument("--debug", action="store_true", default=dF, help="show tracebacks on errors")


def build_parser() -> argparse.ArgumentParser:
    """Build the argument parser with every registered sub-command."""
    _load_plugins()
    parser = argparse.ArgumentParser(
        prog="tsunamifocus",
        description="Screening of coastal tsunami-energy focusing by bathymetric refraction. "
        "Screening estimates only: not a tsunami warning, forecast or inundation map.",
    )
    parser.add_argument("--version", action="version", version=f"tsunamifocus {__version__}")
    parser.add_argument("--show-versions", action="store_true", help="print versions of dependencies and exit")
    _add_common(parser)
    sub = parser.add_subparsers(dest="command", metavar="COMMAND")
    for name, (_run, configure, help_) in _COMMANDS.items():
        sp = sub.add_parser(name, help=help_, description=help_)
        _add_common(sp, top=False)
        configure(sp)
    return parser


def _load_plugins() -> None:
    """Import optional command modules (run, compare, check) when they exist."""
    import importlib

    for mod in ("tsunamifocus.commands",):
        try:
            importlib.import_module(mod)
        except ModuleNotFoundError as exc:
            if exc.name != mod:
                raise


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
        return 0
    if not args.command:
        parser.print_help(sys.stderr)
        return 2
    _setup_logging(args.verbose, args.quiet)
    run = _COMMANDS[args.command][0]
    restore = _catch_sigterm()
    try:
        return int(run(args) or 0)
    except KeyboardInterrupt:
        print("error: interrupted; outputs were left as they were", file=sys.stderr)
        return 130
    except _Terminated:
        print("error: terminated; outputs were left as they were", file=sys.stderr)
        return 143
    except (InputError, FileNotFoundError, OutputExistsError) as exc:
        if debug:
            traceback.print_exc()
        print(f"error: {_one_line(exc)}", file=sys.stderr)
        return 2
    except TsunamiFocusError as exc:
        if debug:
            traceback.print_exc()
        code = 2 if isinstance(exc, (OSError, ValueError)) else 1
        print(f"error: {_one_line(exc)}", file=sys.stderr)
        return code
    except Exception as exc:  # unexpected: still one line unless --debug
        if debug:
            traceback.print_exc()
        print(f"error: unexpected {type(exc).__name__}: {_one_line(exc)} (run with --debug for details)",
              file=sys.stderr)
        return 1
    finally:
        restore()


class _Terminated(BaseException):
    """Raised by the SIGTERM handler of the command line so outputs are cleaned up on the way out."""


def _catch_sigterm():
    """Turn SIGTERM into :class:`_Terminated` while a command runs (main thread only)."""
    import signal
    import threading

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
    try:
        from .outputs import show_versions  # full report, when available
    except ImportError:
        show_versions = None
    if show_versions is not None:
        v = show_versions()
        return v if isinstance(v, str) else "\n".join(f"{k:12s} {val}" for k, val in v.items())
    import platform

    import numpy

    return f"tsunamifocus {__version__}\npython       {platform.python_version()}\nnumpy        {numpy.__version__}"


def _one_line(exc: BaseException) -> str:
    return " ".join(str(exc).split()) or type(exc).__name__


if __name__ == "__main__":  # pragma: no cover
    # run through the imported module: plugin commands (run, compare, check) register into
    # tsunamifocus.cli._COMMANDS, not into this __main__ copy
    from tsunamifocus.cli import main as _main

    sys.exit(_main())
