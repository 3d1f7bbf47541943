"""End-to-end source sets on the demo coast: outputs, failed members, resuming, local vs cluster."""

from __future__ import annotations

import json
import shutil

import numpy as np
import pandas as pd
import pytest
import rasterio

from tsunamifocus.cli.app import main
from tsunamifocus.io.sourceset import parse_source_set
from tsunamifocus.products.demo import demo_inputs
from tsunamifocus.products.sourceset import compute_source_set, run_source_set
from tsunamifocus.io.memberstore import MemberStore

BASE = """
[bathymetry]
path = "inputs/meridane_elevation.tif"
values = "elevation"
resample_km = 6.0
[[source]]
name = "unused"
kind = "point"
lon = -125.0
lat = -26.0
[rays]
count = 800
max_time_h = 3.0
[coast]
segment_km = 30.0
min_rays = 3
region = [-122.0, -30.2, -116.0, -22.6]
[output]
top_k = 3
"""

SET = """
[set]
name = "test set"
scenario = "base.toml"
[[source]]
name = "hump south"
kind = "point"
lon = -125.0
lat = -28.0
radius_km = 60
weight = 2.0
[[source]]
name = "on land"
kind = "point"
lon = -118.6
lat = -26.0
[[sweep]]
name = "trench"
trace = [[-126.38, -27.84], [-126.36, -25.31]]
spacing_km = 120
magnitudes = [8.0]
dip_deg = 12
top_depth_km = 5
"""


@pytest.fixture(scope="module")
def setdir(tmp_path_factory):
    base = tmp_path_factory.mktemp("set")
    demo_inputs(base / "inputs")
    (base / "base.toml").write_text(BASE, encoding="utf-8")
    (base / "set.toml").write_text(SET, encoding="utf-8")
    return base


@pytest.fixture(scope="module")
def first_run(setdir):
    out = setdir / "out1"
    res = run_source_set(setdir / "set.toml", out, progress=False, scheduler="serial")
    return res, out


def test_outputs_and_failed_member_reported(first_run):
    res, out = first_run
    names = {p.name for p in out.iterdir()}
    assert {"set_segments.gpkg", "set_segments.csv", "set_hotspots.csv", "set_members.csv", "envelope_energy.tif",
            "envelope_lensing_factor.tif", "set_appendix.html", "set_appendix.pdf", "set.json", "figures"} <= names
    m = pd.read_csv(out / "set_members.csv", comment="#")
    # the member on land fails in both attempts (one retry), is reported with its parameters, and is left out
    bad = m[m["source"] == "on land"].iloc[0]
    assert bad["status"] == "failed" and "land" in bad["error"]
    rec = json.loads((out / "set.json").read_text())
    assert rec["failures"][0]["attempts"] == 2 and rec["failures"][0]["params"]["name"] == "on land"
    assert rec["n_succeeded"] == len(m) - 1
    # frequencies are counts over the successful members only: multiples of 1/n
    s = pd.read_csv(out / "set_segments.csv", comment="#")
    n = rec["n_succeeded"]
    for col in ("topk_frequency", "amp_topk_frequency"):  # by lensing factor and by amplitude
        np.testing.assert_allclose((s[col] * n) % 1.0, 0.0, atol=1e-9)
        # every segment's top-k count sums to at most k per member
        assert s[col].sum() * n <= 3 * n + 1e-9
    # the hotspot pairs of both rankings, each consistent with its frequency column
    h = pd.read_csv(out / "set_hotspots.csv", comment="#")
    assert set(h["ranking"]) == {"lensing", "amplitude"}
    for by, col in (("lensing", "topk_frequency"), ("amplitude", "amp_topk_frequency")):
        counts = h[h["ranking"] == by]["segment_id"].value_counts()
        np.testing.assert_allclose(s.set_index("segment_id")[col].reindex(counts.index) * n, counts.to_numpy())
    # cautions in every output (CSV header, GeoTIFF tags, appendix wording)
    assert (out / "set_segments.csv").read_text().startswith("# CAUTION")
    with rasterio.open(out / "envelope_energy.tif") as src:
        assert any("SCREENING" in str(v).upper() for v in src.tags().values())
    html = (out / "set_appendix.html").read_text()
    assert "NOT a probabilistic tsunami hazard assessment" in html
    # the hotspots are lensing-factor hotspots no wave check confirmed: said, with the remedy
    assert "no member is checked against the linear long-wave solver" in html and "--check" in html
    # both rankings' hotspot tables (the amplitude one is what the wave checks hold more closely)
    assert "most often among the top-3 hotspots by lensing factor" in html
    assert "most often among the top-3 hotspots by indicative amplitude" in html
    assert {p.name for p in (out / "figures").iterdir()} == {"hotspot_frequency.png", "envelope_lensing_map.png"}


def test_envelope_is_the_maximum_over_members(first_run, setdir):
    res, out = first_run
    store = MemberStore(setdir / "out1_members")
    ok = res.members[res.members["status"] != "failed"]
    grids = [store.load(k)[1]["energy"] for k in ok["key"]]
    np.testing.assert_array_equal(res.envelope["energy"].values, np.fmax.reduce(grids))


def test_rerun_reuses_members_and_gives_identical_results(first_run, setdir):
    res, out = first_run
    store_dir = setdir / "out1_members"
    # an interrupted run: one finished member lost
    victim = res.members[res.members["status"] != "failed"]["key"].iloc[0]
    (store_dir / f"{victim}.npz").unlink()
    again = run_source_set(setdir / "set.toml", setdir / "out2", progress=False, scheduler="local",
                           store=store_dir)
    st = again.members.set_index("source")["status"]
    assert (st == "resumed").sum() == (res.members["status"] != "failed").sum() - 1
    assert (st == "computed").sum() == 1
    a = pd.read_csv(out / "set_segments.csv", comment="#")
    b = pd.read_csv(setdir / "out2" / "set_segments.csv", comment="#")
    pd.testing.assert_frame_equal(a, b)  # bit-identical values, serial first run vs local threads now
    np.testing.assert_array_equal(res.envelope["lensing_factor"].values, again.envelope["lensing_factor"].values)


@pytest.mark.slow
def test_loopback_cluster_is_bit_identical(setdir, tmp_path):
    """Scheduler and two worker processes started here: the same statistics and envelope, bit for bit."""
    distributed = pytest.importorskip("distributed")
    text = SET.split("[[source]]\nname = \"on land\"")[0].replace("weight = 2.0\n", "weight = 2.0\n\n")
    (setdir / "small.toml").write_text(text + "[[source]]\nname = \"hump north\"\nkind = \"point\"\n"
                                       "lon = -125.0\nlat = -24.5\nradius_km = 60\n", encoding="utf-8")
    sset = parse_source_set(setdir / "small.toml")
    local = compute_source_set(sset, store=MemberStore(tmp_path / "a"), scheduler="local", progress=False)
    with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None,
                                  silence_logs=50) as cluster:
        got = compute_source_set(sset, store=MemberStore(tmp_path / "b"), scheduler=cluster.scheduler_address,
                                 progress=False)
    assert list(got.members["status"]) == ["computed", "computed"]
    pd.testing.assert_frame_equal(local.statistics, got.statistics)
    for n in ("energy", "lensing_factor"):
        np.testing.assert_array_equal(local.envelope[n].values, got.envelope[n].values)


def test_command_line(setdir, capsys):
    shutil.copytree(setdir / "out1_members", setdir / "cli_members")
    code = main(["sourceset", str(setdir / "set.toml"), "--out", str(setdir / "cli"), "--store",
                 str(setdir / "cli_members"), "-q"])
    assert code == 0
    txt = capsys.readouterr().out
    assert "not a probabilistic hazard assessment" in txt and "failed: on land" in txt
    assert "not checked against the linear long-wave solver" in txt
    assert "most often among the top 3 by lensing factor" in txt
    assert "most often among the top 3 by indicative amplitude" in txt
    code = main(["sourceset", str(setdir / "set.toml"), "--out", str(setdir / "cli")])
    assert code == 2  # the filled output folder is refused
    assert "error:" in capsys.readouterr().err


def test_one_reference_ocean_for_the_whole_set(setdir):
    # The set measures every member's lensing against one reference ocean, built once: the base
    # scenario's own source (a 20 km point hump on the demo ocean) fixes its scale, the deep-water
    # wavelength c T with c = sqrt(g h) (long-wave speed, Lamb 1932 art. 170) at the mean depth of
    # the water deeper than 1000 m and T that source's dominant period.
    from tsunamifocus.focusing.analysis import reference_ocean
    from tsunamifocus.studies.sourceset import prepare_set, set_member

    prep = prepare_set(parse_source_set(setdir / "set.toml"))
    ref = prep.reference
    assert ref is not None and prep.scenario.focusing.reference_smooth_km == ref.smooth_km
    h = np.asarray(prep.depth.values, float)
    c = np.sqrt(9.81 * h[np.isfinite(h) & (h > 1000.0)].mean())
    assert 0.5 * c * 60 / 1000 < ref.smooth_km < 5 * c * 3600 / 1000  # a wavelength of a 1-60 min wave
    member = next(m for m in prep.members if m.source.name == "hump south")
    params = {"index": 0, "name": member.source.name, "weight": 1.0, "source": member.source}
    shared = set_member(params, depth=prep.depth, scenario=prep.scenario, segments=prep.segments, reference=ref)
    # the prepared reference gives exactly what the member builds for itself at the same scale
    own = set_member(params, depth=prep.depth, scenario=prep.scenario, segments=prep.segments)
    pd.testing.assert_frame_equal(shared.segments, own.segments)
    again = reference_ocean(prep.depth, ref.smooth_km)
    np.testing.assert_array_equal(again.depth.values, ref.depth.values)
