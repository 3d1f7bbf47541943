"""A sea-surface raster written from a fault's own uplift, run like the fault: same energy, same ranking."""

from __future__ import annotations

import dataclasses

import numpy as np
import pytest
import rasterio
from affine import Affine
from pyproj import Transformer
from scipy.stats import spearmanr

from tsunamifocus.io.bathymetry import load_bathymetry
from tsunamifocus.io.scenario import SourceConfig, parse_scenario
from tsunamifocus.products.demo import demo_inputs
from tsunamifocus.source.uplift import uplift_on_grid
from tsunamifocus.studies.run import _segments_for, analyse_source, build_source, load_scenario_bathymetry


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    base = tmp_path_factory.mktemp("sources")
    sc = parse_scenario(demo_inputs(base / "inputs"))
    sc = dataclasses.replace(sc, rays=dataclasses.replace(sc.rays, count=3000),
                             ensemble=dataclasses.replace(sc.ensemble, members=0))
    depth = load_scenario_bathymetry(sc)
    return base, sc, depth, _segments_for(depth, sc)


def test_raster_of_the_fault_uplift_gives_the_fault_energy_and_ranking(demo):
    base, sc, depth, seg = demo
    fault = analyse_source(depth, sc, sc.sources[0], segments=seg, all_bands=False)
    # the fault's uplift computed on the lon/lat version of the demo grid, written by rasterio as a
    # lon/lat GeoTIFF: another CRS and another grid than the projected grid of the run
    dll = load_bathymetry(base / "inputs" / "meridane_depth_lonlat.nc", values="depth")
    eta = uplift_on_grid(build_source(sc.sources[0]), dll)
    x, y = eta.lon.values, eta.lat.values
    dx, dy = float(x[1] - x[0]), float(y[1] - y[0])
    p = base / "fault_eta.tif"
    with rasterio.open(p, "w", driver="GTiff", height=y.size, width=x.size, count=1, dtype="float64",
                       crs="EPSG:4326", transform=Affine(dx, 0.0, x[0] - dx / 2, 0.0, -dy, y[-1] + dy / 2)) as dst:
        dst.write(eta.values[::-1], 1)
    raster = analyse_source(depth, sc, SourceConfig(name="raster", kind="surface", path=p), segments=seg,
                            all_bands=False)
    # issue target: the same energy within 1 % (E = 1/2 rho g integral eta^2 dA of both surfaces)
    assert raster.summary.energy_J == pytest.approx(fault.summary.energy_J, rel=0.01)
    # the same dominant period from the raster's spectrum as from the fault's geometry (rule of thumb)
    assert raster.period_s == pytest.approx(fault.period_s, rel=0.05)
    # the same ranking: the same top 5 up to near-ties, rank correlation over the coast (scipy).
    # (At this test's 3000 rays and one band, segments within a few per cent of each other may
    # swap between the two surfaces: here the fifth and sixth, S0060 and S0064, 1.4 % apart.)
    fa = fault.focusing.segments.set_index("segment_id")["lensing_factor"]
    ra = raster.focusing.segments.set_index("segment_id")["lensing_factor"].reindex(fa.index)
    a = fault.focusing.ranking["segment_id"].head(5).tolist()
    b = raster.focusing.ranking["segment_id"].head(5).tolist()
    assert len(set(a) & set(b)) >= 4
    for sid in set(a) ^ set(b):  # a swap at the edge of the top 5 is a near-tie in both runs
        assert fa[sid] == pytest.approx(fa[a[-1]], rel=0.05) and ra[sid] == pytest.approx(ra[b[-1]], rel=0.05)
    ok = np.isfinite(fa) & np.isfinite(ra)
    assert ok.sum() > 30
    assert spearmanr(fa[ok], ra[ok])[0] > 0.98


def test_subfault_source_from_a_scenario(demo, tmp_path):
    base, sc, depth, seg = demo
    # one row per half of the demo rupture's trace, slip on the northern half only (centroid positions)
    (lo1, la1), (lo2, la2) = sc.sources[0].segments[0].trace
    lat_mid = 0.5 * (la1 + la2)
    text = ("lon,lat,depth_km,strike_deg,dip_deg,rake_deg,length_km,width_km,slip_m\n"
            f"{lo1 + 0.5:.4f},{0.5 * (la1 + lat_mid):.4f},16.4,0.4,12,90,140,110,0\n"
            f"{lo1 + 0.5:.4f},{0.5 * (lat_mid + la2):.4f},16.4,0.4,12,90,140,110,10\n")
    (tmp_path / "model.csv").write_text(text)
    cfg = SourceConfig(name="half", kind="subfaults", path=tmp_path / "model.csv", depth_at="centroid")
    src = build_source(cfg)
    # M0 = mu L W D of the one slipping row (definition), 40 GPa default rigidity
    assert src.moment_nm == pytest.approx(4e10 * 140e3 * 110e3 * 10.0, rel=1e-6)
    a = analyse_source(depth, sc, cfg, segments=seg, all_bands=False, n_rays=1000)
    assert a.summary.kind == "subfaults"
    # the fan leaves from the slipping (northern) half: launch latitudes north of the trace's middle
    lon, lat = Transformer.from_crs(depth.spatial_ref.attrs["crs_wkt"], "EPSG:4326",
                                    always_xy=True).transform(a.fan.x0, a.fan.y0)
    assert np.average(lat, weights=a.fan.weights) > lat_mid


def test_the_wavelength_fraction_reaches_the_oceans_the_rays_are_traced_over(demo):
    """Sensitivity studies set the oceans' smoothing width through ``analyse_source``."""
    base, sc, depth, seg = demo
    narrow = analyse_source(depth, sc, sc.sources[0], segments=seg, all_bands=False, n_rays=1000,
                            wavelength_fraction=0.06, keep_paths=0)
    wide = analyse_source(depth, sc, sc.sources[0], segments=seg, all_bands=False, n_rays=1000, keep_paths=0)
    assert narrow.focusing.ray_depth.attrs["wavelength_fraction"] == pytest.approx(0.06)
    assert wide.focusing.ray_depth.attrs["wavelength_fraction"] == pytest.approx(0.25)
    # a narrower Gaussian keeps more of the sea floor's relief: the traced depths vary more
    # (a Gaussian average never widens a field's range; common practice, no source)
    d0 = np.asarray(depth.values, float)
    deep = np.isfinite(d0) & (d0 > 1000.0)
    assert np.std(narrow.focusing.ray_depth.values[deep]) > np.std(wide.focusing.ray_depth.values[deep])
