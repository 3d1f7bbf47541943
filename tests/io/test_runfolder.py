"""Tests of the atomic output folder and the run manifest (tsunamifocus.outputs).

External references:
* POSIX rename(2): renaming a directory within one file system is atomic (IEEE Std 1003.1).
* POSIX signals: SIGTERM's default action terminates the process; Python turns SIGINT into
  KeyboardInterrupt (Python docs, ``signal`` module); a process killed by a signal that it handles
  by exiting with ``128 + signum`` follows the shell convention (common practice, no source).
* SHA-256 as in FIPS 180-4, computed independently here with :mod:`hashlib`.
* RFC 8259 (JSON): no NaN/Infinity literals.
"""

from __future__ import annotations

import hashlib
import json
import os
import pathlib
import signal
import subprocess
import sys
import textwrap
import time

import numpy
import pytest

from tsunamifocus.errors import DataFileError, InputError, OutputExistsError
from tsunamifocus.io.manifest import MANIFEST_NAME, read_manifest, scenario_from_manifest, show_versions, software_versions, verify_inputs, verify_outputs, write_manifest
from tsunamifocus.io.runfolder import OutputFolder, StageTimer
from tsunamifocus.io.scenario import parse_scenario


def snapshot(folder: pathlib.Path) -> dict[str, str]:
    """Relative path -> sha256 of every file (the folder's exact state)."""
    if not folder.exists():
        return {}
    return {p.relative_to(folder).as_posix(): hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.rglob("*")) if p.is_file()}


def leftovers(final: pathlib.Path) -> list[str]:
    return sorted(p.name for p in final.parent.iterdir() if p.name.startswith(f".{final.name}."))


@pytest.fixture
def previous(tmp_path):
    """An output folder holding the results of an earlier run."""
    final = tmp_path / "runs" / "bay"
    final.mkdir(parents=True)
    (final / "old.txt").write_text("earlier results\n")
    (final / "sub").mkdir()
    (final / "sub" / "fig.png").write_bytes(b"\x89PNG old")
    return final


def test_new_folder_appears_only_on_success(tmp_path):
    final = tmp_path / "a" / "b" / "out"
    with OutputFolder(final) as out:
        out.path("x.txt").write_text("1")
        out.path("figures/f.png").write_bytes(b"png")
        assert not final.exists()  # nothing visible while writing
        assert out.files() == ["figures/f.png", "x.txt"]
    assert snapshot(final).keys() == {"figures/f.png", "x.txt"}
    assert out.committed and leftovers(final) == []


def test_exception_leaves_folder_as_it_was(previous):
    before = snapshot(previous)
    with pytest.raises(RuntimeError, match="boom"):
        with OutputFolder(previous, overwrite=True) as out:
            out.path("old.txt").write_text("half-written")
            raise RuntimeError("boom")
    assert snapshot(previous) == before and leftovers(previous) == []


def test_keyboard_interrupt_leaves_folder_as_it_was(previous):
    before = snapshot(previous)
    with pytest.raises(KeyboardInterrupt):
        with OutputFolder(previous, overwrite=True) as out:
            out.path("new.txt").write_text("x")
            raise KeyboardInterrupt
    assert snapshot(previous) == before and leftovers(previous) == []


def test_refuses_existing_results_without_overwrite(previous):
    before = snapshot(previous)
    with pytest.raises(OutputExistsError, match="already holds results"):
        with OutputFolder(previous):
            pytest.fail("must refuse before the block runs")
    assert snapshot(previous) == before and leftovers(previous) == []
    assert issubclass(OutputExistsError, FileExistsError)


def test_overwrite_replaces_atomically(previous):
    with OutputFolder(previous, overwrite=True) as out:
        out.path("new.txt").write_text("new")
    assert snapshot(previous).keys() == {"new.txt"} and leftovers(previous) == []


def test_empty_folder_accepted_and_file_refused(tmp_path):
    empty = tmp_path / "empty"
    empty.mkdir()
    with OutputFolder(empty) as out:
        out.path("a.txt").write_text("a")
    assert snapshot(empty).keys() == {"a.txt"}
    f = tmp_path / "afile"
    f.write_text("x")
    with pytest.raises(OutputExistsError, match="not a folder"):
        with OutputFolder(f):
            pass


def test_path_refuses_escaping_names(tmp_path):
    with OutputFolder(tmp_path / "o") as out:
        for bad in ("../x.txt", "/etc/x", ""):
            with pytest.raises(InputError):
                out.path(bad)
        out.path("ok.txt").write_text("1")


WRITER = textwrap.dedent("""
    import sys, time
    from tsunamifocus.io.runfolder import OutputFolder
    final, mode = sys.argv[1], sys.argv[2]
    with OutputFolder(final, overwrite=True) as out:
        out.path("old.txt").write_text("NEW CONTENT (partial)")
        out.path("part.bin").write_bytes(b"x" * 100000)
        if mode == "slow":
            print("READY", flush=True)
            time.sleep(60)
        out.path("done.txt").write_text("complete")
    print("COMMITTED", flush=True)
""")


def _start_writer(final, mode):
    env = dict(os.environ)
    return subprocess.Popen([sys.executable, "-c", WRITER, str(final), mode], stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True, env=env)


def _wait_ready(proc):
    line = proc.stdout.readline()
    assert line.strip() == "READY", proc.stderr.read()


@pytest.mark.parametrize("sig,expect_clean", [(signal.SIGTERM, True), (signal.SIGINT, True), (signal.SIGKILL, False)])
def test_interrupted_writer_leaves_folder_and_rerun_succeeds(previous, sig, expect_clean):
    before = snapshot(previous)
    proc = _start_writer(previous, "slow")
    try:
        _wait_ready(proc)
        assert leftovers(previous), "the writer should be working in a temporary sibling"
        proc.send_signal(sig)
        rc = proc.wait(timeout=30)
    finally:
        if proc.poll() is None:
            proc.kill()
    assert rc != 0
    if sig == signal.SIGTERM:
        assert rc == 128 + signal.SIGTERM
    assert snapshot(previous) == before  # final folder exactly as it was
    if expect_clean:
        assert leftovers(previous) == []  # handled signals clean up their temporary folder
    else:
        assert leftovers(previous)  # SIGKILL cannot be handled: temp folder remains ...
    rerun = _start_writer(previous, "fast")
    out, err = rerun.communicate(timeout=60)
    assert rerun.returncode == 0, err
    assert "COMMITTED" in out
    assert snapshot(previous).keys() == {"old.txt", "part.bin", "done.txt"}
    assert (previous / "done.txt").read_text() == "complete"
    assert leftovers(previous) == []  # ... and the rerun removed it (its writer pid is dead)


def test_recovers_old_folder_left_between_renames(tmp_path):
    """A writer that died after moving the old results aside: the next run puts them back first."""
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()
    final = tmp_path / "res"
    aside = tmp_path / f".res.tsunamifocus-old-{dead.pid}-0badc0de"
    aside.mkdir()
    (aside / "result.txt").write_text("previous")
    with pytest.raises(OutputExistsError):
        with OutputFolder(final):
            pass
    assert (final / "result.txt").read_text() == "previous" and leftovers(final) == []


# ---------------------------------------------------------------------------------------------
# Manifest
# ---------------------------------------------------------------------------------------------


@pytest.fixture
def scenario_file(tmp_path):
    d = tmp_path / "case"
    (d / "data").mkdir(parents=True)
    (d / "data" / "grid.nc").write_bytes(b"pretend grid bytes " * 100)
    p = d / "s.toml"
    p.write_text(textwrap.dedent("""
        [bathymetry]
        path = "data/grid.nc"
        [[source]]
        name = "p"
        kind = "point"
        lon = 10.0
        lat = 20.0
        [rays]
        seed = 42
        [ensemble]
        seed = 7
    """), encoding="utf-8")
    return p


def test_manifest_round_trip(tmp_path, scenario_file):
    sc = parse_scenario(scenario_file)
    timer = StageTimer()
    final = tmp_path / "out"
    with OutputFolder(final) as out:
        with timer("writing"):
            out.path("travel_time_min.tif").write_bytes(b"tif bytes")
            out.path("figures/rays.png").write_bytes(b"png bytes")
        mpath = write_manifest(out, scenario=sc, timings=timer.as_dict(), command=["tsunamifocus", "run"],
                               extra={"health": {"energy_error": float("nan")}})
        assert mpath.parent == out.tmp_dir
    m = read_manifest(final)
    raw = (final / MANIFEST_NAME).read_text()
    json.loads(raw, parse_constant=lambda c: pytest.fail(f"non-JSON constant {c}"))  # RFC 8259 strict
    assert m["tool"]["name"] == "tsunamifocus" and m["tool"]["version"]
    assert m["parameters"] == sc.to_dict()
    assert m["seeds"] == {"rays": 42, "ensemble": 7}
    assert "writing" in m["timings_s"] and m["timings_s"]["total"] >= m["timings_s"]["writing"] >= 0
    assert m["extra"]["health"]["energy_error"] is None  # NaN stored as null
    assert "SCREENING ESTIMATES ONLY" in m["caution"]
    # inputs with sha256 computed independently
    ins = {r["role"]: r for r in m["inputs"]}
    grid = scenario_file.parent / "data" / "grid.nc"
    assert ins["bathymetry"]["sha256"] == hashlib.sha256(grid.read_bytes()).hexdigest()
    assert ins["scenario_file"]["sha256"] == hashlib.sha256(scenario_file.read_bytes()).hexdigest()
    # outputs list every other file with its sha256
    outs = {r["path"]: r["sha256"] for r in m["outputs"]}
    assert outs == {"travel_time_min.tif": hashlib.sha256(b"tif bytes").hexdigest(),
                    "figures/rays.png": hashlib.sha256(b"png bytes").hexdigest()}
    # software versions agree with the libraries themselves
    assert m["software"]["numpy"] == numpy.__version__
    assert m["software"]["python"] == sys.version.split()[0]
    # verification and re-running
    assert verify_outputs(m) == [] and verify_inputs(m) == []
    assert scenario_from_manifest(final / MANIFEST_NAME) == sc
    (final / "figures" / "rays.png").write_bytes(b"changed")
    (final / "extra.txt").write_text("x")
    assert verify_outputs(m) == ["changed: figures/rays.png", "not in manifest: extra.txt"]
    assert verify_outputs(m, ignore=("figures/*", "extra.txt")) == []
    grid.write_bytes(b"other grid")
    assert verify_inputs(m) and "changed input bathymetry" in verify_inputs(m)[0]


def test_read_manifest_errors(tmp_path):
    with pytest.raises(DataFileError, match="manifest not found"):
        read_manifest(tmp_path)
    p = tmp_path / "m.json"
    p.write_text('{"format": "tsunamifocus-manifest",\n "x": }')
    with pytest.raises(DataFileError, match=r"line 2: manifest is not valid JSON"):
        read_manifest(p)
    p.write_text('{"format": "something-else"}')
    with pytest.raises(DataFileError, match="not a tsunamifocus manifest"):
        read_manifest(p)


def test_manifest_missing_input_is_an_error(tmp_path, scenario_file):
    sc = parse_scenario(scenario_file)
    (scenario_file.parent / "data" / "grid.nc").unlink()
    with pytest.raises(DataFileError, match="input file 'bathymetry' not found"):
        write_manifest(tmp_path / "m.json", scenario=sc)


def test_versions():
    v = software_versions()
    for key in ("tsunamifocus", "python", "platform", "numpy", "scipy", "xarray", "rasterio",
                "GDAL (rasterio)", "pyproj", "PROJ", "numba", "shapely", "GEOS"):
        assert v.get(key), key
    import pyproj
    import rasterio

    assert v["PROJ"] == pyproj.proj_version_str and v["GDAL (rasterio)"] == rasterio.__gdal_version__
    text = show_versions()
    assert "numpy" in text and numpy.__version__ in text and len(text.splitlines()) == len(v)


def test_stage_timer_accumulates():
    t = StageTimer()
    for _ in range(2):
        with t("a"):
            time.sleep(0.01)
    d = t.as_dict()
    assert d["a"] >= 0.02 and d["total"] >= d["a"]


def test_full_disk_is_named_with_the_file_and_nothing_is_left(tmp_path, monkeypatch):
    """A library's write failure on a full disk ("NetCDF: HDF error" is what netCDF4/HDF5 raise when
    a write fails; ENOSPC is the POSIX errno of a full device) becomes one line naming the file."""
    import errno

    from tsunamifocus.errors import DataFileError
    from tsunamifocus.io import runfolder as R
    from tsunamifocus.io.gis import _atomic_file

    monkeypatch.setattr(R, "_free_bytes", lambda folder: 12_000)  # 12 kB left
    out = tmp_path / "res"
    with pytest.raises(DataFileError) as info, OutputFolder(out) as of:
        with _atomic_file(of.path("layers.nc")):
            raise RuntimeError("NetCDF: HDF error")
    msg = str(info.value)
    assert msg.startswith(f"{out / 'layers.nc'}: the disk is full (0.0 MB free on {tmp_path})"), msg
    assert "NetCDF: HDF error" in msg and "nothing was written" in msg
    assert not out.exists() and [p.name for p in tmp_path.iterdir()] == []
    # an OSError with ENOSPC is a full disk whatever the free space reads afterwards
    monkeypatch.setattr(R, "_free_bytes", lambda folder: 10**9)
    with pytest.raises(DataFileError, match=r"figures/a.png: the disk is full"), OutputFolder(out) as of:
        with _atomic_file(of.path("figures/a.png")):
            raise OSError(errno.ENOSPC, "No space left on device")
