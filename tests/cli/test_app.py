"""Tests of tsunamifocus.cli.app: the command list, versions and exit codes.

Outside references: the installed distribution's metadata (importlib.metadata) for the version,
and argparse's documented usage-error exit status 2 (Python docs, argparse.ArgumentParser.error).
"""

from __future__ import annotations

import subprocess
import sys
from importlib import metadata

import pytest

from tsunamifocus.cli.app import COMMANDS, build_parser, main


def test_commands_are_listed_explicitly_in_help_order():
    assert [c.NAME for c in COMMANDS] == ["inspect", "demo", "run", "compare", "check", "sourceset"]
    sub = next(a for a in build_parser()._actions if a.dest == "command")
    assert list(sub.choices) == ["inspect", "demo", "run", "compare", "check", "sourceset"]


def test_version_matches_the_distribution_metadata(capsys):
    with pytest.raises(SystemExit) as exc:
        main(["--version"])
    assert exc.value.code == 0
    assert capsys.readouterr().out.strip() == f"tsunamifocus {metadata.version('tsunamifocus')}"


def test_usage_errors_exit_2_and_no_command_prints_help(capsys):
    with pytest.raises(SystemExit) as exc:
        main(["no-such-command"])
    assert exc.value.code == 2
    assert main([]) == 2
    assert "usage: tsunamifocus" in capsys.readouterr().err


def test_module_entry_point_runs_the_same_main():
    r = subprocess.run([sys.executable, "-m", "tsunamifocus.cli", "--version"], capture_output=True, text=True,
                       timeout=120)
    assert r.returncode == 0 and r.stdout.strip() == f"tsunamifocus {metadata.version('tsunamifocus')}"


def test_warnings_are_one_line_and_quiet_silences_them(tmp_path):
    """A grid with one impossible depth (deeper than the deepest sea floor, about 11 km) warns: one
    line without the Python source line by default, nothing with -q."""
    import os
    import subprocess
    import sys

    import numpy as np
    import xarray as xr

    z = np.full((60, 60), -3000.0)
    z[:, -5:] = 40.0
    z[30, 30] = -1e9
    xr.Dataset({"z": (("lat", "lon"), z, {"positive": "up", "units": "m"})},
               coords={"lat": np.linspace(-3, 3, 60), "lon": np.linspace(0, 6, 60)}).to_netcdf(tmp_path / "g.nc")

    def stderr(*opts):
        r = subprocess.run([sys.executable, "-m", "tsunamifocus.cli", *opts, "inspect", str(tmp_path / "g.nc")],
                           capture_output=True, text=True, env=dict(os.environ), timeout=120)
        assert r.returncode == 0, r.stderr
        return [ln for ln in r.stderr.splitlines() if ln.strip()]

    lines = stderr()
    assert len(lines) == 1, lines
    assert lines[0].startswith("WARNING: DataWarning: ") and "1 of 3600 cells" in lines[0], lines
    assert stderr("-q") == []


def test_a_signal_inside_the_jit_compiler_is_delivered_again_after_it():
    # Python runs signal handlers between bytecodes, also inside callbacks that C code calls, where
    # an exception cannot propagate to the caller: it is printed and dropped ("Exception ignored on
    # calling ctypes callback function", as a CI run of the interrupt test showed). llvmlite's
    # object cache calls such a callback while numba loads a kernel, so a KeyboardInterrupt raised
    # there is lost and the compiler goes on in an undefined state (that run ended with a
    # segmentation fault, exit -11, instead of 130). The
    # command line's handlers therefore defer a signal that arrives in the compiler's code and send
    # it again a moment later.
    import os
    import signal
    import time

    from tsunamifocus.cli import app

    def frame_in(path: str):
        code = compile("import sys\nf = sys._getframe()", path, "exec")
        ns: dict = {}
        exec(code, ns)
        return ns["f"]

    assert app.in_compiler(frame_in(os.path.join(os.sep, "venv", "llvmlite", "binding", "executionengine.py")))
    assert app.in_compiler(frame_in(os.path.join(os.sep, "venv", "numba", "core", "dispatcher.py")))
    assert not app.in_compiler(frame_in(os.path.join(os.sep, "work", "tsunamifocus", "propagation", "rays.py")))
    assert not app.in_compiler(None)

    got: list[int] = []
    old = signal.getsignal(signal.SIGUSR1)
    signal.signal(signal.SIGUSR1, lambda s, f: got.append(s))
    try:
        inside = frame_in(os.path.join(os.sep, "venv", "llvmlite", "binding", "ffi.py"))
        assert app._deferred(signal.SIGUSR1, inside) is True  # not raised now ...
        deadline = time.monotonic() + 5.0
        while not got and time.monotonic() < deadline:
            time.sleep(0.01)
        assert got == [signal.SIGUSR1]  # ... but delivered again once out of the compiler
        assert app._deferred(signal.SIGUSR1, frame_in("/work/x.py")) is False
    finally:
        signal.signal(signal.SIGUSR1, old)
