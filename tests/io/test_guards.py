"""The output-folder guard (io/guards.py): what ``--overwrite`` may replace, inputs, links, writability.

The rules checked are the project's own (issue 16: never lose a user's files); POSIX facts used:
a symbolic link is a separate directory entry, so renaming it moves the link, not its target
(IEEE Std 1003.1, rename()).
"""

from __future__ import annotations

import json

import pytest

from tsunamifocus.errors import InputError, OutputExistsError
from tsunamifocus.io.guards import check_output_folder, output_kind
from tsunamifocus.io.runfolder import OutputFolder


def _manifest(d, parameters=True):
    d.mkdir(parents=True, exist_ok=True)
    (d / "manifest.json").write_text(json.dumps({"format": "tsunamifocus-manifest", "format_version": 1,
                                                 "parameters": {"x": 1} if parameters else None}))
    return d


def test_output_kinds(tmp_path):
    assert output_kind(_manifest(tmp_path / "run")) == "run"
    chk = _manifest(tmp_path / "chk", parameters=False)
    (chk / "agreement.json").write_text("{}")
    assert output_kind(chk) == "wave_check"
    (tmp_path / "cmp").mkdir()
    (tmp_path / "cmp" / "comparison.json").write_text("{}")
    assert output_kind(tmp_path / "cmp") == "comparison"
    multi = tmp_path / "multi"  # a run of two sources: one run folder each plus their comparison
    _manifest(multi / "a")
    _manifest(multi / "b")
    (multi / "comparison").mkdir()
    assert output_kind(multi) == "run"
    (multi / "notes.txt").write_text("mine")
    assert output_kind(multi) is None  # a user's file among them: not an output folder


def test_overwrite_replaces_an_earlier_run_only(tmp_path):
    run = _manifest(tmp_path / "run")
    assert check_output_folder(run, overwrite=True, kind="run") == run
    with pytest.raises(OutputExistsError, match="replaces only an earlier comparison output"):
        check_output_folder(run, overwrite=True, kind="comparison")
    with pytest.raises(OutputExistsError, match="not empty; pass --overwrite"):
        check_output_folder(run, overwrite=False, kind="run")


def test_output_may_not_hold_or_lie_in_an_input(tmp_path):
    grid = tmp_path / "data" / "grid.tif"
    grid.parent.mkdir()
    grid.write_bytes(b"x")
    with pytest.raises(InputError, match="holds the input bathymetry"):
        check_output_folder(tmp_path, overwrite=True, kind="run", inputs={"bathymetry": grid})
    with pytest.raises(InputError, match="lies inside the input run folder"):
        check_output_folder(tmp_path / "data" / "out", overwrite=False, kind="run",
                            inputs=[("run folder", tmp_path / "data")])
    assert grid.read_bytes() == b"x"


def test_output_folder_refuses_a_link_and_leaves_it(tmp_path):
    real = _manifest(tmp_path / "real")
    link = tmp_path / "link"
    link.symlink_to(real)
    with pytest.raises(OutputExistsError, match="symbolic link"), OutputFolder(link, overwrite=True):
        pass
    assert link.is_symlink() and (real / "manifest.json").is_file()
    assert sorted(p.name for p in tmp_path.iterdir()) == ["link", "real"]  # no hidden leftovers
