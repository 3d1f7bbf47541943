"""Scenario sections of the sources read from files: subfault tables and sea-surface rasters."""

from __future__ import annotations

import pathlib

import pytest

from tsunamifocus.errors import ScenarioError
from tsunamifocus.io.scenario import parse_scenario, scenario_from_dict

HEADER = "lon,lat,depth_km,strike_deg,dip_deg,rake_deg,length_km,width_km,slip_m"

BASE = """
[bathymetry]
path = "grid.nc"
"""

SUB = BASE + """
[[source]]
name = "model"
kind = "subfaults"
path = "model.csv"
depth_at = "centroid"
"""

SURF = BASE + """
[[source]]
name = "slide"
kind = "surface"
path = "slide.nc"
variable = "eta"
"""


def scen(tmp_path: pathlib.Path, text: str, csv: str | None = HEADER + "\n140,35,20,10,15,90,20,20,2\n"):
    if csv is not None:
        (tmp_path / "model.csv").write_text(csv, encoding="utf-8")
    (tmp_path / "slide.nc").write_bytes(b"CDF\x01")  # existence is checked while parsing; content at run time
    p = tmp_path / "scen.toml"
    p.write_text(text, encoding="utf-8")
    return p


def test_subfault_source_parses_and_round_trips(tmp_path):
    sc = parse_scenario(scen(tmp_path, SUB))
    s = sc.sources[0]
    assert (s.kind, s.depth_at, s.path) == ("subfaults", "centroid", (tmp_path / "model.csv").resolve())
    assert sc.input_files["source model"] == s.path  # hashed into the manifest like the grid
    d = sc.to_dict()
    assert d["source"][0] == {"name": "model", "kind": "subfaults", "force": False, "path": str(s.path),
                              "depth_at": "centroid"}
    assert scenario_from_dict(d, "/elsewhere") == sc
    again = tmp_path / "again.toml"
    again.write_text(sc.to_toml(), encoding="utf-8")
    assert parse_scenario(again) == sc


def test_surface_source_parses_and_round_trips(tmp_path):
    sc = parse_scenario(scen(tmp_path, SURF))
    s = sc.sources[0]
    assert (s.kind, s.variable, s.path.name) == ("surface", "eta", "slide.nc")
    assert scenario_from_dict(sc.to_dict(), "/") == sc


@pytest.mark.parametrize("text, csv, fragments", [
    (SUB.replace('depth_at = "centroid"\n', ""), None, ["line 5", "missing key 'depth_at'"]),
    (SUB.replace('"centroid"', '"middle"'), None, ["line 9", 'depth_at = "middle"', '"top" or "centroid"']),
    (SUB + "magnitude = 8.0\n", None, ["key 'magnitude' does not apply to kind = \"subfaults\""]),
    (SUB + "lon = 3.0\n", None, ["key 'lon' does not apply to kind = \"subfaults\""]),
    (SUB + "deptth = 3.0\n", None, ["unknown key 'deptth'", "did you mean 'depth_at'"]),
    (SURF + 'depth_at = "top"\n', None, ["key 'depth_at' does not apply to kind = \"surface\""]),
    (SURF.replace("slide.nc", "none.nc"), None, ["line 8", "none.nc: not found", "sea-surface raster"]),
    (SUB, HEADER + "\n140,35,20,10,95,90,20,20,2\n",
     ["line 8: [[source]] #1 'model' path: ", "model.csv:2: column 'dip_deg' = '95'"]),
    (SUB.replace("model.csv", "none.csv"), None, ["none.csv: subfault table not found"]),
    (BASE + '[[source]]\nname = "f"\ntrace = [[1, 2], [1, 3]]\ntop_depth_km = 5\ndip_deg = 10\nslip_m = 1\n'
     'width_km = 50\npath = "model.csv"\n', None, ["key 'path' belongs to a subfaults or surface source"]),
    (BASE + '[[source]]\nname = "p"\nkind = "point"\nlon = 1\nlat = 2\npath = "x.csv"\n', None,
     ["key 'path' belongs to a subfaults or surface source"]),
    (SUB + "[ensemble]\nmembers = 4\nalong_km = 10\n", None,
     ["[ensemble] along_km", 'kind = "subfaults"', "set them to 0"]),
])
def test_bad_source_sections_are_one_line_errors(tmp_path, text, csv, fragments):
    with pytest.raises(ScenarioError) as exc:
        parse_scenario(scen(tmp_path, text, **({} if csv is None else {"csv": csv})))
    msg = str(exc.value)
    assert "\n" not in msg
    for f in fragments:
        assert f in msg, (f, msg)


def test_ensemble_without_source_perturbations_is_accepted(tmp_path):
    sc = parse_scenario(scen(tmp_path, SUB + "[ensemble]\nmembers = 4\nbathy_rms = 0.02\nlaunch_jitter_deg = 1\n"))
    assert sc.ensemble.members == 4
