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
