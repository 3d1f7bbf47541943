"""Tests of the command-line interface: output, JSON, exit codes and one-line errors."""

from __future__ import annotations

import json
import subprocess
import sys

import numpy as np
import pytest

from tsunamifocus.cli.app import main
from tsunamifocus.grid import make_grid
from tsunamifocus.io.gis import write_cog


def test_inspect_real_grid_json(etopo_path, capsys):
    assert main(["inspect", str(etopo_path), "--values", "elevation", "--json"]) == 0
    s = json.loads(capsys.readouterr().out)
    assert s["shape"] == [1801, 3600] and s["lon_periodic"] is True
    # c = sqrt(g h) at the deepest cell, 10714 m: sqrt(9.81 * 10714) = 324.2 m/s
    assert s["speed_max_ms"] == pytest.approx((9.81 * 10714.0) ** 0.5, rel=1e-6)
    assert 0.0 < s["shortest_period_s"] < s["longest_ray_period_s"]


def test_inspect_text_and_errors(etopo_path, tmp_path, capsys):
    # the global relief grid has no sign metadata, but its minimum (-10,714 m) is deeper than
    # any land is high (Everest 8,849 m; common practice, no source): elevation, decided
    assert main(["inspect", str(etopo_path)]) == 0
    assert "sign            values: minimum -10,714 m" in capsys.readouterr().out
    # values all within +/-8,900 m and no metadata: still ambiguous, refused in one line
    v = np.linspace(-3000.0, 2000.0, 20).reshape(4, 5)
    g = make_grid(v, 1000.0 * np.arange(5), 1000.0 * np.arange(4), "EPSG:32633", name="z")
    amb = write_cog(g, tmp_path / "z.tif", description="z", units="m")
    assert main(["inspect", str(amb)]) == 2
    err = capsys.readouterr().err
    assert err.startswith("error: ") and err.count("\n") == 1 and "Traceback" not in err
    assert "cannot tell" in err and "values='elevation'" in err
    assert main(["inspect", "/no/such/file.tif"]) == 2
    assert "file not found" in capsys.readouterr().err


def test_inspect_demo_grids(tmp_path, capsys):
    from tsunamifocus.products.demo import write_demo_data

    paths = write_demo_data(tmp_path)
    for p in paths.values():
        assert main(["inspect", str(p)]) == 0
        out = capsys.readouterr().out
        assert "long-wave speed" in out and "ray theory" in out and "memory" in out
        # the period limits are of the raw grid; a run's bands see it averaged over a quarter wavelength
        assert "averaged over 0.25 of the band's wavelength" in out


def test_console_script_exit_code_no_traceback(tmp_path):
    bad = tmp_path / "bad.tif"
    bad.write_bytes(b"not a grid at all")
    r = subprocess.run([sys.executable, "-m", "tsunamifocus.cli", "inspect", str(bad)],
                       capture_output=True, text=True)
    assert r.returncode == 2
    assert r.stderr.startswith("error: ") and "Traceback" not in r.stderr
    r = subprocess.run([sys.executable, "-m", "tsunamifocus.cli", "--debug", "inspect", str(bad)],
                       capture_output=True, text=True)
    assert r.returncode == 2 and "Traceback" in r.stderr


def test_version_and_usage(capsys):
    with pytest.raises(SystemExit) as e:
        main(["--version"])
    assert e.value.code == 0
    assert main([]) == 2
