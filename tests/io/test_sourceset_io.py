"""Tests of tsunamifocus.io.sourceset: source-set files and their one-line errors."""

from __future__ import annotations

import pytest

from tsunamifocus.errors import ScenarioError
from tsunamifocus.io.sourceset import parse_source_set

BASE = '[bathymetry]\npath = "grid.nc"\n[[source]]\nname = "own"\nkind = "point"\nlon = 1.0\nlat = 2.0\n'
OTHER = BASE.replace('"own"', '"other one"')
GOOD = """
[set]
scenario = "base.toml"
[[source]]
name = "p"
kind = "point"
lon = 3.0
lat = 4.0
weight = 2.5
[[from_scenario]]
path = "other.toml"
[[sweep]]
name = "t"
trace = [[150.0, -40.0], [150.0, -35.0], [151.0, -31.0]]
spacing_km = 50
magnitudes = [8.0, 8.5]
magnitude_weights = [3, 1]
dip_deg = [10, 20]
top_depth_km = 6
"""


def write(tmp_path, text):
    (tmp_path / "base.toml").write_text(BASE, encoding="utf-8")
    (tmp_path / "other.toml").write_text(OTHER, encoding="utf-8")
    p = tmp_path / "myset.toml"
    p.write_text(text, encoding="utf-8")
    return p


def test_good_set(tmp_path):
    s = parse_source_set(write(tmp_path, GOOD))
    assert s.name == "myset" and s.top_k == s.scenario.output.top_k
    assert [(m.source.name, m.weight) for m in s.members] == [("p", 2.5), ("other one", 1.0)]
    sw = s.sweeps[0]
    assert sw.magnitude_weights == (3.0, 1.0) and sw.dip_deg == (10.0, 20.0) and sw.rake_deg == 90.0
    # the base scenario's own source is not a member
    assert "own" not in [m.source.name for m in s.members]


@pytest.mark.parametrize("old, new, fragments", [
    ('scenario = "base.toml"', 'scenario = "none.toml"', ["line 3: [set] scenario", "none.toml: scenario file not found"]),
    ("weight = 2.5", "weight = 0", ["line 9: [[source]] #1 weight = 0: expected a number > 0"]),
    ("lon = 3.0", "lon = 3.0\nradius_km = -1", ["[[source]] #1 'p' radius_km = -1"]),
    ("magnitudes = [8.0, 8.5]", "magnitudes = [8.0, 10.5]", ["[[sweep]] #1 't' magnitudes = [8.0, 10.5]",
                                                            ">= 6.5 and <= 9.6 Mw"]),
    ("magnitude_weights = [3, 1]", "magnitude_weights = [3]", ["magnitude_weights: has 1 values; expected 2"]),
    ("dip_deg = [10, 20]", "dip_deg = [10, 20, 30]", ["dip_deg: has 3 values; expected a dip in degrees",
                                                      "a list of 2 dips"]),
    ("dip_deg = [10, 20]", "dip_deg = 95", ["dip_deg = [95]: expected a dip in degrees (> 0 and <= 90)"]),
    ("trace = [[150.0, -40.0], [150.0, -35.0], [151.0, -31.0]]", "trace = [[150.0, -40.0]]",
     ["trace = [[150.0, -40.0]]: expected a line of at least 2 points"]),
    ("trace = [[150.0, -40.0], [150.0, -35.0], [151.0, -31.0]]", "trace = [[150.0, -40.0], [150.0, -40.0]]",
     ["two equal consecutive points"]),
    ("top_depth_km = 6\n", "", ["missing key 'top_depth_km'"]),
    ("[[from_scenario]]", "[[from_scenaro]]", ["unknown section 'from_scenaro'; did you mean [[from_scenario]]?"]),
    ('name = "p"', 'name = "other one"', ["source name 'other one' appears twice"]),
    ('path = "other.toml"', 'path = "base.toml"\n[[from_scenario]]\npath = "base.toml"', ["'own' appears twice"]),
])
def test_bad_sets_are_one_line_errors(tmp_path, old, new, fragments):
    assert old in GOOD
    with pytest.raises(ScenarioError) as exc:
        parse_source_set(write(tmp_path, GOOD.replace(old, new, 1)))
    msg = str(exc.value)
    assert "\n" not in msg and msg.startswith(str(tmp_path / "myset.toml"))
    for f in fragments:
        assert f in msg, (f, msg)


def test_file_problems(tmp_path):
    with pytest.raises(ScenarioError, match="source-set file not found"):
        parse_source_set(tmp_path / "none.toml")
    with pytest.raises(ScenarioError, match="missing section \\[set\\]"):
        parse_source_set(write(tmp_path, "[[source]]\nname = 'x'\n"))
    with pytest.raises(ScenarioError, match="the set has no members"):
        parse_source_set(write(tmp_path, '[set]\nscenario = "base.toml"\n'))
    with pytest.raises(ScenarioError, match="line 2, column"):
        parse_source_set(write(tmp_path, '[set]\nscenario = \n'))
