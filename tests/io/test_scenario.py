"""Tests of the scenario-file parser (tsunamifocus.scenario).

External references used below:
* TOML v1.0.0 specification (toml.io/en/v1.0.0): a TOML file must be UTF-8; ``[[x]]`` is an array
  of tables; integers and floats are distinct types.
* Dip of a fault plane lies in (0, 90] degrees and rake in [-180, 180] degrees (Aki & Richards,
  Quantitative Seismology, 2nd ed., section 4.2 -- value from memory).
* Latitude lies in [-90, 90] degrees (definition of geodetic latitude).
* Moment magnitude (Hanks & Kanamori 1979); the sane range 6.5-9.6 without ``force`` is the one
  agreed in the project's sources specification.
"""

from __future__ import annotations

import importlib.util

import json
import math
import pathlib
import re
import string
import tempfile

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from tsunamifocus.constants import RIGIDITY_PA
from tsunamifocus.errors import InputError, ScenarioError
from tsunamifocus.constants import DEFAULTS
from tsunamifocus.io.scenario import (
    FaultSegmentConfig,
    Scenario,
    parse_scenario,
    scenario_from_dict,
    scenario_schema,
    scenario_table_markdown,
)

REPO = pathlib.Path(__file__).resolve().parents[2]

GOOD = """\
[scenario]
name = "Invented bay"
description = "test"

[bathymetry]
path = "data/grid.nc"
values = "elevation"
crop = [130.0, 30.0, 140.0, 40.0]

[[source]]
name = "trench north"
trace = [[135.0, 33.0], [136.0, 34.0]]
top_depth_km = 5
dip_deg = 12
magnitude = 8.5

[[source]]
name = "two segments"
magnitude = 8.8
[[source.segment]]
trace = [[135.0, 33.0], [136.0, 34.0]]
top_depth_km = 5
dip_deg = 12
[[source.segment]]
trace = [[136.0, 34.0], [137.0, 35.0]]
top_depth_km = 6
dip_deg = 15
width_km = 80

[[source]]
name = "quick check"
kind = "point"
lon = 138.0
lat = 32.0
radius_km = 40

[rays]
count = 5000
stop_depth_m = 30

[coast]
from = "coast/lines.geojson"

[[point]]
name = "Harbour A"
lon = 135.5
lat = 34.5

[[point]]
name = "Gauge 2"
lon = 136.5
lat = 35.5

[output]
folder = "../results/bay"
top_k = 5

[ensemble]
members = 8
bathy_rms = 0.03
strike_deg = 5
scheduler = "tcp://10.0.0.5:8786"
"""


def _write(tmp_path: pathlib.Path, text: str, name: str = "scen.toml") -> pathlib.Path:
    d = tmp_path / "scen"
    d.mkdir(exist_ok=True)
    p = d / name
    p.write_text(text, encoding="utf-8")
    return p


def test_crop_across_antimeridian_accepted(tmp_path):
    # [120, 0, -110, 65] is a lon/lat box across the antimeridian written in -180..180 numbers
    # (120..250 E; common practice, no source); it used to be refused as "xmin < xmax". It is
    # kept as written (the loader resolves it against the grid's CRS) and round-trips.
    p = _write(tmp_path, GOOD.replace("crop = [130.0, 30.0, 140.0, 40.0]", "crop = [120, 0, -110, 65]"))
    sc = parse_scenario(p)
    assert sc.bathymetry.crop == (120.0, 0.0, -110.0, 65.0)
    assert scenario_from_dict(sc.to_dict()).bathymetry.crop == (120.0, 0.0, -110.0, 65.0)


def test_valid_file_defaults_and_paths(tmp_path, monkeypatch):
    p = _write(tmp_path, GOOD)
    monkeypatch.chdir(tmp_path)  # relative paths must resolve against the file, not the cwd
    sc = parse_scenario(p)
    base = p.parent.resolve()
    assert sc.bathymetry.path == base / "data" / "grid.nc"
    assert sc.coast.source == base / "coast" / "lines.geojson"
    assert sc.output.folder == (base.parent / "results" / "bay").resolve()
    assert sc.bathymetry.crop == (130.0, 30.0, 140.0, 40.0)
    # defaults filled (documented in docs/scenario.md)
    assert sc.rays.max_time_h == 24.0 and sc.rays.seed == 0 and sc.rays.step_s is None
    assert sc.coast.isobath_m == 30.0  # defaults to rays.stop_depth_m
    # left open ("auto"): the run chooses them and records what it used (studies/settings.py)
    assert sc.coast.segment_km is None and sc.rays.count == 5000
    assert sc.coast.region is None and sc.coast.max_distance_m is None
    s0, s1, s2 = sc.sources
    assert s0.kind == "fault" and len(s0.segments) == 1 and s0.segments[0].magnitude == 8.5
    assert s0.segments[0].rake_deg == 90.0 and s0.segments[0].rigidity_pa == RIGIDITY_PA
    assert isinstance(s0.segments[0].dip_deg, float)  # TOML integer 12 accepted as a number
    assert s1.magnitude == 8.8 and [g.dip_deg for g in s1.segments] == [12.0, 15.0]
    assert s2.kind == "point" and s2.radius_km == 40.0 and s2.amplitude_m == 1.0
    assert [q.name for q in sc.points] == ["Harbour A", "Gauge 2"]
    assert sc.ensemble.members == 8 and sc.ensemble.bathy_corr_km == 20.0
    assert sc.file == p.resolve()
    assert sc.seeds == {"rays": 0, "ensemble": 0}
    assert set(sc.input_files) == {"bathymetry", "coastline"}


def test_minimal_file_name_from_stem_and_default_output(tmp_path):
    p = _write(tmp_path, '[bathymetry]\npath = "g.tif"\n[[source]]\nname = "p"\nkind = "point"\n'
               "lon = 1\nlat = 2\n", name="my run.toml")
    sc = parse_scenario(p)
    assert sc.name == "my run"
    assert sc.output.folder == p.parent.resolve() / "my_run_results"
    assert sc.coast.source == "grid" and sc.points == ()
    assert sc.ensemble.members == 0


def _mod(old: str, new: str) -> str:
    assert old in GOOD, old
    return GOOD.replace(old, new, 1)


# Each case: (modified text, regex fragments that must all appear in the message).
BAD_CASES = [
    ("unknown key with suggestion", _mod("count = 5000", "cuont = 5000"),
     [r"\[rays\]", r"unknown key 'cuont'", r"did you mean 'count'\?", r"line 38"]),
    ("unknown section", _mod("[rays]", "[ray]"), [r"unknown section 'ray'", r"did you mean \[rays\]"]),
    ("integer expected", _mod("count = 5000", "count = 12.5"),
     [r"\[rays\] count = 12\.5", r"expected an integer >= 8"]),
    ("string for number", _mod("count = 5000", 'count = "many"'), [r"count = \"many\"", r"an integer"]),
    ("fan rotations out of range", _mod("count = 5000", "count = 5000\nrotations = 0"),
     [r"\[rays\] rotations = 0", r"an integer >= 1 and <= 16"]),
    ("fan rotations not an integer", _mod("count = 5000", "count = 5000\nrotations = 2.5"),
     [r"\[rays\] rotations = 2\.5", r"an integer"]),
    ("negative stop depth with unit", _mod("stop_depth_m = 30", "stop_depth_m = -3"),
     [r"stop_depth_m = -3", r"> 0 and <= 2000 m"]),
    ("dip out of range", _mod("dip_deg = 12\nmagnitude = 8.5", "dip_deg = 95\nmagnitude = 8.5"),
     [r"\[\[source\]\] #1 'trench north' dip_deg = 95", r"> 0 and <= 90 degrees"]),
    ("zero dip", _mod("dip_deg = 12\nmagnitude = 8.5", "dip_deg = 0\nmagnitude = 8.5"), [r"dip_deg = 0", r"> 0"]),
    ("magnitude outside sane range", _mod("magnitude = 8.5", "magnitude = 9.9"),
     [r"magnitude = 9\.9", r">= 6\.5 and <= 9\.6 Mw", r"force = true"]),
    ("slip and magnitude both", _mod("dip_deg = 12\nmagnitude = 8.5", "dip_deg = 12\nmagnitude = 8.5\nslip_m = 2"),
     [r"exactly one of slip_m \(m\) or magnitude"]),
    ("slip without width", _mod("dip_deg = 12\nmagnitude = 8.5", "dip_deg = 12\nslip_m = 2"),
     [r"width_km", r"km"]),
    ("latitude out of range", _mod("lat = 34.5", "lat = 134.5"),
     [r"\[\[point\]\] #1 'Harbour A' lat = 134\.5", r">= -90 and <= 90 degrees"]),
    ("bad choice with suggestion", _mod('values = "elevation"', 'values = "Elevations"'),
     [r'values = "Elevations"', r'did you mean "elevation"']),
    ("single brackets for array",
     GOOD.replace('[[point]]\nname = "Gauge 2"\nlon = 136.5\nlat = 35.5\n', "").replace("[[point]]", "[point]"),
     [r"\[point\]: must be an array of tables: write \[\[point\]\]"]),
    ("crop box inverted", _mod("crop = [130.0, 30.0, 140.0, 40.0]", "crop = [140.0, 30.0, 130.0, 40.0]"),
     [r"crop = \[140\.0, 30\.0, 130\.0, 40\.0\]", r"xmin < xmax"]),
    ("trace of one point", _mod("trace = [[135.0, 33.0], [136.0, 34.0]]\ntop_depth_km = 5\ndip_deg = 12\nmagnitude",
                                "trace = [[135.0, 33.0]]\ntop_depth_km = 5\ndip_deg = 12\nmagnitude"),
     [r"trace = ", r"two points \[\[lon, lat\], \[lon, lat\]\]"]),
    ("zero-length trace", _mod("trace = [[135.0, 33.0], [136.0, 34.0]]\ntop_depth_km = 5\ndip_deg = 12\nmagnitude",
                               "trace = [[135.0, 33.0], [135.0, 33.0]]\ntop_depth_km = 5\ndip_deg = 12\nmagnitude"),
     [r"zero-length trace"]),
    ("point key in fault source", _mod('name = "trench north"', 'name = "trench north"\nradius_km = 3'),
     [r"'radius_km' belongs to a point source", r'kind = "point"']),
    ("fault key in point source", _mod("radius_km = 40", "radius_km = 40\ndip_deg = 10"),
     [r"'dip_deg' belongs to a fault source"]),
    ("duplicate source name", _mod('name = "two segments"', 'name = "trench north"'),
     [r"duplicate source name 'trench north'"]),
    ("duplicate point name", _mod('name = "Gauge 2"', 'name = "Harbour A"'), [r"duplicate point name 'Harbour A'"]),
    ("bad scheduler address", _mod('scheduler = "tcp://10.0.0.5:8786"', 'scheduler = "my cluster"'),
     [r"scheduler = \"my cluster\"", r"tcp://"]),
    ("relative rms too large", _mod("bathy_rms = 0.03", "bathy_rms = 3"), [r"bathy_rms = 3", r"fraction of depth"]),
    ("bool expected", _mod("top_k = 5", "top_k = 5\nfigures = 1"), [r"figures = 1", r"true or false"]),
    ("bool is not a number", _mod("top_k = 5", "top_k = true"), [r"top_k = true", r"an integer"]),
    ("nan rejected", _mod("stop_depth_m = 30", "stop_depth_m = nan"), [r"stop_depth_m = nan", r"a number"]),
    ("missing required key", _mod("top_depth_km = 6\n", ""), [r"missing key 'top_depth_km'", r"km"]),
    ("missing bathymetry", GOOD.replace('[bathymetry]\npath = "data/grid.nc"', "[bathymetry]"),
     [r"\[bathymetry\]: missing key 'path'"]),
    ("no sources", GOOD[: GOOD.index("[[source]]")] + GOOD[GOOD.index("[rays]"):], [r"missing \[\[source\]\]"]),
    ("top-level key points to its section", "name = \"x\"\n" + GOOD,
     [r"unknown top-level key 'name'", r"\[scenario\]"]),
    ("empty name", _mod('name = "Harbour A"', 'name = "  "'), [r"non-empty"]),
    ("both segment forms", _mod("name = \"two segments\"\nmagnitude = 8.8",
                                "name = \"two segments\"\nmagnitude = 8.8\ndip_deg = 3"),
     [r"given both directly and in \[\[source.segment\]\]"]),
    ("segment magnitude with total magnitude",
     _mod("dip_deg = 15\nwidth_km = 80", "dip_deg = 15\nwidth_km = 80\nmagnitude = 8"), [r"total magnitude"]),
    ("total magnitude unused", _mod("dip_deg = 12\n[[source.segment]]", "dip_deg = 12\nslip_m = 1\n[[source.segment]]")
     .replace("dip_deg = 15\nwidth_km = 80", "dip_deg = 15\nwidth_km = 80\nslip_m = 2"),
     [r"total magnitude would be unused"]),
    ("zero point amplitude", _mod("radius_km = 40", "radius_km = 40\namplitude_m = 0"), [r"non-zero"]),
    ("lat/lon swapped in a point", _mod("lon = 135.5\nlat = 34.5", "lon = 34.5\nlat = 135.5"),
     [r"lat = 135\.5", r"are lon and lat swapped\?"]),
    ("lat/lon swapped in a trace", _mod("trace = [[135.0, 33.0], [136.0, 34.0]]", "trace = [[33.0, 135.0], [34.0, 136.0]]"),
     [r"are lon and lat swapped\? \(lon first\)"]),
    ("syntax error with line", _mod("count = 5000", "count = [1"), [r"line 3\d, column \d+", r"invalid TOML"]),
    ("region latitudes inverted", _mod("[coast]", "[coast]\nregion = [-125, 49, -117, 32]"),
     [r"\[coast\] region = \[-125, 49, -117, 32\]", r"lat_min < lat_max"]),
    ("region of zero width", _mod("[coast]", "[coast]\nregion = [235, 32, -125, 49]"),
     [r"zero width in longitude"]),
    ("region of 3 numbers", _mod("[coast]", "[coast]\nregion = [-125, 32, -117]"),
     [r"region = \[-125, 32, -117\]", r"4 numbers \[lon_min, lat_min, lon_max, lat_max\]"]),
    ("negative max distance", _mod("[coast]", "[coast]\nmax_distance_m = -5"), [r"max_distance_m = -5", r"> 0"]),
]


@pytest.mark.parametrize("text,fragments", [c[1:] for c in BAD_CASES], ids=[c[0] for c in BAD_CASES])
def test_bad_scenarios(tmp_path, text, fragments):
    p = _write(tmp_path, text)
    with pytest.raises(ScenarioError) as ei:
        parse_scenario(p)
    msg = str(ei.value)
    assert "\n" not in msg  # one-line message (project rule)
    assert msg.startswith(str(p))  # names the file
    for frag in fragments:
        assert re.search(frag, msg), f"{frag!r} not in {msg!r}"
    assert isinstance(ei.value, InputError) and isinstance(ei.value, ValueError)


def test_force_widens_magnitude_range(tmp_path):
    p = _write(tmp_path, _mod("magnitude = 8.5", "force = true\nmagnitude = 9.9"))
    assert parse_scenario(p).sources[0].segments[0].magnitude == 9.9


def test_not_utf8_names_line(tmp_path):
    # TOML v1.0.0: "A TOML file must be a valid UTF-8 encoded Unicode document."
    raw = GOOD.encode("utf-8").replace(b'description = "test"', b'description = "caf\xe9"')
    p = tmp_path / "latin1.toml"
    p.write_bytes(raw)
    with pytest.raises(ScenarioError, match=r"latin1\.toml: line 3: not UTF-8"):
        parse_scenario(p)


def test_utf8_bom_accepted(tmp_path):
    p = tmp_path / "bom.toml"
    p.write_bytes(b"\xef\xbb\xbf" + GOOD.encode("utf-8"))
    assert parse_scenario(p).name == "Invented bay"


def test_missing_and_folder(tmp_path):
    with pytest.raises(ScenarioError, match="scenario file not found"):
        parse_scenario(tmp_path / "nope.toml")
    with pytest.raises(ScenarioError, match="is a folder"):
        parse_scenario(tmp_path)


def test_to_dict_json_and_round_trips(tmp_path):
    sc = parse_scenario(_write(tmp_path, GOOD))
    d = sc.to_dict()
    text = json.dumps(d, allow_nan=False)  # strict JSON for the manifest
    again = scenario_from_dict(json.loads(text), base_dir="/somewhere/else")
    assert again == sc and again.to_dict() == d
    # the effective TOML written with the outputs reads back to the same scenario
    q = tmp_path / "effective.toml"
    q.write_text(sc.to_toml(), encoding="utf-8")
    assert parse_scenario(q) == sc
    assert "SCREENING ESTIMATES ONLY" in sc.to_toml()


def test_coast_region_and_distances_round_trip(tmp_path):
    # a box across the antimeridian (lon_min > lon_max) and one in -180..180 numbers are both kept as
    # written; the manifest form (to_dict -> JSON) and the output TOML read back to the same scenario
    for box in ([170.0, -50.0, -170.0, -30.0], [-125.0, 32.0, -117.0, 49.0], [235.0, 32.0, 243.0, 49.0]):
        text = _mod("[coast]", f"[coast]\nregion = {box}\nmax_distance_m = 40000\npoint_max_distance_km = 12.5")
        sc = parse_scenario(_write(tmp_path, text))
        assert sc.coast.region == tuple(box)
        assert sc.coast.max_distance_m == 40000.0 and sc.coast.point_max_distance_km == 12.5
        d = json.loads(json.dumps(sc.to_dict(), allow_nan=False))
        assert scenario_from_dict(d, base_dir="/elsewhere") == sc
        q = tmp_path / "effective.toml"
        q.write_text(sc.to_toml(), encoding="utf-8")
        assert parse_scenario(q) == sc


def test_from_dict_errors_name_origin():
    d = {"bathymetry": {"path": "g.nc"}, "source": [{"name": "p", "kind": "point", "lon": 1.0, "lat": 400.0}]}
    with pytest.raises(ScenarioError, match=r"^run/manifest\.json: \[\[source\]\] #1 'p' lat = 400\.0"):
        scenario_from_dict(d, "/", origin="run/manifest.json")


def test_schema_documented():
    """Every key of the schema appears in docs/scenario.md (docs and code agree)."""
    doc = (REPO / "docs" / "scenario.md").read_text(encoding="utf-8")
    schema = scenario_schema()
    for sec, keys in schema.items():
        assert f"[{sec}]" in doc, sec
        for k in keys:
            assert f"`{k['key']}`" in doc, f"[{sec}] {k['key']} not documented"


# ---------------------------------------------------------------------------------------------
# Property-based round trip (hypothesis)
# ---------------------------------------------------------------------------------------------


def fl(lo, hi):
    return st.floats(lo, hi, allow_nan=False, allow_infinity=False)


names = st.text(alphabet=string.ascii_letters + string.digits + " -_.'\u00e9\u00fc", min_size=1,
                max_size=24).filter(lambda s: s.strip() != "")
lonlat = st.tuples(fl(-180, 360), fl(-90, 90))
trace = st.lists(lonlat, min_size=2, max_size=2).filter(lambda t: t[0] != t[1]).map(lambda t: [list(p) for p in t])

seg_geom = {"trace": trace, "top_depth_km": fl(0, 100), "dip_deg": fl(0.01, 90)}
seg_opt = {"rake_deg": fl(-180, 180), "rigidity_pa": fl(1e9, 2e11)}
seg_slip = st.fixed_dictionaries({**seg_geom, "slip_m": fl(0.01, 100), "width_km": fl(1, 1000)}, optional=seg_opt)
seg_mag = st.fixed_dictionaries({**seg_geom, "magnitude": fl(6.5, 9.6)},
                                optional={**seg_opt, "width_km": fl(1, 1000)})
seg_bare = st.fixed_dictionaries(seg_geom, optional={**seg_opt, "width_km": fl(1, 1000)})


@st.composite
def sources(draw):
    kind = draw(st.sampled_from(["short", "segments", "total", "point"]))
    if kind == "short":
        return draw(st.one_of(seg_slip, seg_mag))
    if kind == "segments":
        return {"segment": draw(st.lists(st.one_of(seg_slip, seg_mag), min_size=1, max_size=3))}
    if kind == "total":
        return {"magnitude": draw(fl(6.5, 9.6)), "segment": draw(st.lists(seg_bare, min_size=1, max_size=3))}
    return draw(st.fixed_dictionaries({"kind": st.just("point"), "lon": fl(-180, 360), "lat": fl(-90, 90)},
                                      optional={"radius_km": fl(0.1, 2000),
                                                "amplitude_m": fl(-100, 100).filter(lambda a: a != 0)}))


@st.composite
def scenario_dicts(draw):
    srcs = draw(st.lists(sources(), min_size=1, max_size=3))
    src_names = draw(st.lists(names, min_size=len(srcs), max_size=len(srcs), unique=True))
    for s, n in zip(srcs, src_names):
        s["name"] = n
    d = {"bathymetry": draw(st.fixed_dictionaries(
        {"path": st.sampled_from(["grid.nc", "sub/g.tif", "/abs/path/relief.asc"])},
        optional={"values": st.sampled_from(["auto", "elevation", "depth"]), "variable": names,
                  "crop_margin_km": fl(0, 5000), "resample_km": fl(0.01, 500), "smooth_km": fl(0.01, 1000),
                  "max_memory_gb": fl(0.01, 4096),
                  "crop": st.tuples(fl(-1e6, 0), fl(-1e6, 0), fl(1, 1e6), fl(1, 1e6)).map(list)})),
        "source": srcs}
    opt = {
        "scenario": st.fixed_dictionaries({}, optional={"name": names, "description": st.text(
            # free text: any visible characters and line breaks; controls, format characters (bidi
            # overrides) and separators are refused (Unicode general categories Cc, Cf, Zl, Zp ...)
            st.characters(blacklist_categories=("Cc", "Cf", "Zl", "Zp", "Cs", "Co", "Cn"),
                          whitelist_characters="\n\t"), max_size=40)}),
        "rays": st.fixed_dictionaries({}, optional={
            "count": st.integers(8, 10**8), "stop_depth_m": fl(0.01, 2000), "max_time_h": fl(0.01, 72),
            "step_s": fl(0.01, 3600), "seed": st.integers(0, 2**63 - 1)}),
        "focusing": st.fixed_dictionaries({}, optional={"reference_smooth_km": fl(0.01, 5000),
                                                         "period_s": fl(0.01, 36000)}),
        "coast": st.fixed_dictionaries({}, optional={
            "from": st.sampled_from(["grid", "coast.gpkg"]), "layer": names, "name_field": names,
            "isobath_m": fl(0.01, 2000), "segment_km": fl(0.01, 1000), "min_rays": st.integers(1, 10**6)}),
        "output": st.fixed_dictionaries({}, optional={"folder": st.sampled_from(["out", "../o"]),
                                                       "top_k": st.integers(1, 10000), "figures": st.booleans(),
                                                       "report": st.booleans()}),
        "ensemble": st.fixed_dictionaries({}, optional={
            "members": st.integers(0, 10**6), "seed": st.integers(0, 2**63 - 1), "bathy_rms": fl(0, 0.5),
            "bathy_corr_km": fl(0.01, 5000), "strike_deg": fl(0, 90), "dip_deg": fl(0, 45),
            "along_km": fl(0, 1000), "across_km": fl(0, 500), "magnitude": fl(0, 1),
            "launch_jitter_deg": fl(0, 10),
            "scheduler": st.sampled_from(["local", "tcp://127.0.0.1:8786", "node7:8786"])}),
    }
    for sec, strat in opt.items():
        if draw(st.booleans()):
            d[sec] = draw(strat)
    pts = draw(st.lists(st.tuples(names, fl(-180, 360), fl(-90, 90)), max_size=3, unique_by=lambda t: t[0]))
    if pts:
        d["point"] = [{"name": n, "lon": lo, "lat": la} for n, lo, la in pts]
    return d


def _same_number(a, b):
    return a == b or (isinstance(a, float) and isinstance(b, float) and math.isclose(a, b))


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(scenario_dicts())
def test_property_round_trip(d):
    with tempfile.TemporaryDirectory() as tmp:
        sc = parse_from = scenario_from_dict(d, tmp)
        out = sc.to_dict()
        # every given scalar value survives (numbers as numbers, paths resolved)
        for sec in ("rays", "focusing", "ensemble", "output", "coast"):
            for k, v in d.get(sec, {}).items():
                if k in ("folder", "from") and v != "grid":
                    assert pathlib.Path(out[sec][k]) == (pathlib.Path(tmp) / v).resolve()
                else:
                    assert _same_number(out[sec][k], v), (sec, k)
        again = scenario_from_dict(json.loads(json.dumps(out)), "/unrelated")
        assert again == parse_from
        assert again.to_dict() == out
        # and through the TOML text
        p = pathlib.Path(tmp) / "eff.toml"
        p.write_text(sc.to_toml(), encoding="utf-8")
        assert parse_scenario(p) == sc
        assert all(isinstance(g, FaultSegmentConfig) for s in sc.sources for g in s.segments)
        assert isinstance(sc, Scenario)


def test_to_source_builds_source_objects(tmp_path):
    """The parsed sources feed the source module unchanged (Hanks & Kanamori 1979 round trip)."""
    source = pytest.importorskip("tsunamifocus.source.faults")
    sc = parse_scenario(_write(tmp_path, GOOD))
    rup = source.source_from_config(sc.sources[1])
    assert isinstance(rup, source.Rupture) and len(rup.segments) == 2
    # the total moment of the rupture matches the requested Mw 8.8
    m0 = sum(s.moment_nm(d) for s, d in zip(rup.segments, rup.slips_m))
    assert abs(float(source.magnitude_from_moment(m0)) - 8.8) < 1e-6
    pt = source.source_from_config(sc.sources[2])
    assert isinstance(pt, source.PointSource) and (pt.x, pt.y, pt.radius_km) == (138.0, 32.0, 40.0)


def test_docs_example_parses(tmp_path):
    """The example in docs/scenario.md is a valid scenario (docs stay true)."""
    doc = (REPO / "docs" / "scenario.md").read_text(encoding="utf-8")
    block = re.search(r"```toml\n(.*?)```", doc, flags=re.S).group(1)
    sc = parse_scenario(_write(tmp_path, block))
    assert sc.sources[0].magnitude == 8.8 and len(sc.sources[0].segments) == 2
    assert sc.ensemble.members == 16


def test_bundled_sample_scenarios_parse():
    """Every bundled sample scenario is valid against the schema, and its data paths exist."""
    files = sorted((REPO / "sample_scenarios").glob("*.toml"))
    if not files:
        pytest.skip("no sample scenario bundled yet")
    for f in files:
        sc = parse_scenario(f)
        assert sc.bathymetry.path.is_file(), sc.bathymetry.path
        assert sc.bathymetry.path.is_relative_to(f.parent.resolve())


# ---------------------------------------------------------------------------------------------
# One table of defaults; generated documentation
# ---------------------------------------------------------------------------------------------


def test_doc_tables_are_the_generated_ones():
    """docs/scenario.md shows, under each section heading, exactly the table generated from the schema
    (regenerate with ``python docs/make_scenario_tables.py``)."""
    doc = (REPO / "docs" / "scenario.md").read_text(encoding="utf-8")
    spec = importlib.util.spec_from_file_location("make_scenario_tables", REPO / "docs" / "make_scenario_tables.py")
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    assert mod.regenerate(doc) == doc
    for sec in scenario_schema():
        assert scenario_table_markdown(sec) in doc, sec


def test_defaults_table_is_the_schema_and_dataclass_source():
    """Every default of constants.DEFAULTS is the schema's default and the parsed value of a minimal file."""
    schema = scenario_schema()
    for sec, table in DEFAULTS.items():
        keys = {k["key"]: k for k in schema[sec]}
        for key, value in table.items():
            assert keys[key]["default"] == value, (sec, key)
    sc = scenario_from_dict({"bathymetry": {"path": "g.nc"},
                             "source": [{"name": "p", "kind": "point", "lon": 1.0, "lat": 2.0}]}, "/")
    for sec in ("rays", "output", "ensemble"):
        for key, value in DEFAULTS[sec].items():
            assert getattr(getattr(sc, sec), key) == value, (sec, key)
    assert sc.coast.isobath_m == DEFAULTS["rays"]["stop_depth_m"]
    assert sc.sources[0].radius_km == DEFAULTS["source"]["radius_km"]
    assert sc.bathymetry.max_memory_gb == DEFAULTS["bathymetry"]["max_memory_gb"]
