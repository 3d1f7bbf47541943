"""Tests of tsunamifocus.source.subfaults: a subfault table against a direct sum of Okada rectangles."""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest
from pyproj import Geod, Transformer

from tsunamifocus.constants import GRAVITY, RHO_SEAWATER
from tsunamifocus.errors import ScalingWarning, SourceError
from tsunamifocus.grid import make_grid
from tsunamifocus.io.subfaults import subfault_table_from_text
from tsunamifocus.source.energy import potential_energy
from tsunamifocus.source.okada import okada85
from tsunamifocus.source.rayfan import make_ray_fan
from tsunamifocus.source.subfaults import SubfaultRupture, rupture_from_subfaults
from tsunamifocus.source.summary import summarize_source
from tsunamifocus.source.uplift import uplift_on_grid

UTM = "EPSG:32610"
X0, Y0 = 500e3, 4000e3
HEADER = "lon,lat,depth_km,strike_deg,dip_deg,rake_deg,length_km,width_km,slip_m"


def flat_grid(half_km=300.0, cell_km=4.0, depth_m=4000.0):
    """Projected (UTM) grid centred on (X0, Y0) with constant depth."""
    x = X0 + np.arange(-half_km * 1e3, half_km * 1e3 + 1.0, cell_km * 1e3)
    y = Y0 + np.arange(-half_km * 1e3, half_km * 1e3 + 1.0, cell_km * 1e3)
    return make_grid(np.full((y.size, x.size), depth_m), x, y, UTM)


def plane_model(n_along=4, n_down=3, length_km=40.0, width_km=30.0, strike=10.0, dip=15.0, top_km=5.0,
                rake=80.0, slips=None):
    """Subfaults of one planar fault laid out in the UTM plane: list of dicts (centroids in metres)."""
    s = np.array([math.sin(math.radians(strike)), math.cos(math.radians(strike))])  # along strike
    n = np.array([math.cos(math.radians(strike)), -math.sin(math.radians(strike))])  # down-dip, horizontal
    if slips is None:
        slips = np.linspace(0.0, 8.0, n_along * n_down)  # includes one zero-slip subfault
    start = np.array([X0, Y0]) - 0.5 * n_along * length_km * 1e3 * s  # top-edge start of the whole fault
    out = []
    k = 0
    for i in range(n_along):
        for j in range(n_down):
            c = (start + (i + 0.5) * length_km * 1e3 * s
                 + (j + 0.5) * width_km * 1e3 * math.cos(math.radians(dip)) * n)
            dc = top_km + (j + 0.5) * width_km * math.sin(math.radians(dip))
            out.append(dict(c=c, depth_km=dc, strike=strike, dip=dip, rake=rake, L=length_km, W=width_km,
                            slip=float(slips[k]), s=s, n=n))
            k += 1
    return out


def direct_okada_sum(model, grid):
    """Sum of Okada (1985) rectangles evaluated directly in the plane (his frame, eq. 25-30 via okada85)."""
    X, Y = np.meshgrid(grid.x.values, grid.y.values)
    uz = np.zeros(X.shape)
    for f in model:
        dip = math.radians(f["dip"])
        d_low = (f["depth_km"] + 0.5 * f["W"] * math.sin(dip)) * 1e3
        low_mid = f["c"] + 0.5 * f["W"] * 1e3 * math.cos(dip) * f["n"]
        origin = low_mid - 0.5 * f["L"] * 1e3 * f["s"]  # start of the lower edge
        rx, ry = X - origin[0], Y - origin[1]
        xo = rx * f["s"][0] + ry * f["s"][1]  # Okada's x: along strike
        yo = -(rx * f["n"][0] + ry * f["n"][1])  # Okada's y: up-dip (the fault dips towards -y)
        rake = math.radians(f["rake"])
        uz += okada85(xo, yo, d_low, f["dip"], f["L"] * 1e3, f["W"] * 1e3, f["slip"] * math.cos(rake),
                      f["slip"] * math.sin(rake), 0.0)[2]
    return uz


def table_text(model, depth_at):
    """The model as a subfault table in lon/lat (positions and azimuths converted with pyproj)."""
    to_ll = Transformer.from_crs(UTM, "EPSG:4326", always_xy=True)
    geod = Geod(ellps="WGS84")
    rows = [f"# synthetic slip model, reference point = {depth_at}", HEADER]
    for f in model:
        p = f["c"].copy()
        dep = f["depth_km"]
        if depth_at == "top":
            p = p - 0.5 * f["W"] * 1e3 * math.cos(math.radians(f["dip"])) * f["n"]
            dep = dep - 0.5 * f["W"] * math.sin(math.radians(f["dip"]))
        lon, lat = to_ll.transform(*p)
        lon2, lat2 = to_ll.transform(*(p + 1000.0 * f["s"]))
        az = geod.inv(lon, lat, lon2, lat2)[0] % 360.0  # geodetic strike of the plane direction
        rows.append(f"{lon:.8f},{lat:.8f},{dep:.6f},{az:.6f},{f['dip']},{f['rake']},{f['L']},{f['W']},{f['slip']}")
    return "\n".join(rows) + "\n"


@pytest.fixture(scope="module")
def grid():
    return flat_grid()


@pytest.mark.parametrize("depth_at", ["top", "centroid"])
def test_table_matches_direct_sum_of_okada_rectangles(grid, depth_at):
    model = plane_model()
    ref = direct_okada_sum(model, grid)
    table = subfault_table_from_text(table_text(model, depth_at), depth_at=depth_at, origin="model.csv")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ScalingWarning)
        rup = rupture_from_subfaults(table, name="model", force=True)
    eta = uplift_on_grid(rup, grid).values
    peak = np.abs(ref).max()
    # Okada (1985) is linear in slip and the field of a sum of dislocations is the sum of their
    # fields: the table path must reproduce the direct superposition. The package neglects each
    # subfault's field beyond its window radius (< ~1 % of that subfault's peak, see uplift.py).
    # (measured: 0.4 % of the peak here)
    assert np.abs(eta - ref).max() < 0.01 * peak
    e_ref = 0.5 * RHO_SEAWATER * GRAVITY * np.sum(ref**2) * 4e3 * 4e3  # E = 1/2 rho g sum(eta^2 dA)
    assert potential_energy(uplift_on_grid(rup, grid), grid) == pytest.approx(e_ref, rel=0.01)
    # zero-slip rows stay in the table but launch no Okada rectangle
    assert rup.n_subfaults == 12 and len(rup.segments) == 11


def test_moment_and_magnitude_are_summed():
    model = plane_model()
    table = subfault_table_from_text(table_text(model, "centroid"), depth_at="centroid")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ScalingWarning)
        rup = rupture_from_subfaults(table, rigidity_pa=3.0e10, force=True)
    # M0 = sum(mu L W D) (definition of seismic moment) and Mw = 2/3 (log10 M0 - 9.1) (Hanks & Kanamori 1979)
    m0 = sum(3.0e10 * f["L"] * 1e3 * f["W"] * 1e3 * f["slip"] for f in model)
    assert rup.moment_nm == pytest.approx(m0, rel=1e-6)
    assert rup.mw == pytest.approx((2.0 / 3.0) * (math.log10(m0) - 9.1), abs=1e-6)
    # the model is 4 x 40 km along strike and 3 x 30 km down dip (by construction)
    assert rup.length_km == pytest.approx(160.0, rel=0.005)
    assert rup.width_km == pytest.approx(11 / 12 * 90.0, rel=0.005)  # slipping area / length


def test_per_row_rigidity_enters_the_moment():
    text = (HEADER + ",rigidity_pa\n"
            "140.0,35.0,10,0,20,90,20,20,2.0,3e10\n"
            "140.0,35.2,10,0,20,90,20,20,2.0,\n")
    table = subfault_table_from_text(text, depth_at="top")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ScalingWarning)
        rup = rupture_from_subfaults(table, rigidity_pa=4.0e10, force=True)
    # M0 = mu A D per subfault (definition), the second row with the source's rigidity
    assert rup.moment_nm == pytest.approx((3e10 + 4e10) * 20e3 * 20e3 * 2.0, rel=1e-6)


def test_fan_is_weighted_by_the_summed_uplift(grid):
    # slip only on the northern half of the fault: the energy leaves from there
    slips = np.array([0, 0, 0, 0, 0, 0, 6, 6, 6, 6, 6, 6], dtype=float)
    model = plane_model(slips=slips)
    ref = direct_okada_sum(model, grid)
    table = subfault_table_from_text(table_text(model, "top"), depth_at="top")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ScalingWarning)
        rup = rupture_from_subfaults(table, force=True)
    eta = uplift_on_grid(rup, grid)
    fan = make_ray_fan(eta, grid, 400, seed=1, stop_depth_m=20.0)
    # the fan's energy is the potential energy 1/2 rho g sum(eta^2 dA) of the summed surface
    e_ref = 0.5 * RHO_SEAWATER * GRAVITY * np.sum(ref**2) * 4e3 * 4e3
    assert fan.energy_J == pytest.approx(e_ref, rel=0.01)
    assert fan.weights.sum() == pytest.approx(fan.energy_J - fan.energy_shallow_J, rel=1e-9)
    # launch points lie where the uplift is: north of the fault's centre (Y0), none in the slip-free half
    w = fan.weights / fan.weights.sum()
    assert np.sum(w * fan.y0) > Y0 + 20e3
    assert np.all(fan.y0 > Y0 - 30e3)


def test_summary_of_a_subfault_model(grid):
    model = plane_model()
    table = subfault_table_from_text(table_text(model, "top"), depth_at="top", origin="model.csv")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ScalingWarning)
        rup = rupture_from_subfaults(table, name="model", force=True)
    eta = uplift_on_grid(rup, grid)
    sm = summarize_source(rup, eta, grid)
    assert sm.kind == "subfaults" and sm.segments == []
    assert sm.details["n_subfaults"] == 12 and sm.details["n_slipping"] == 11
    assert sm.details["slip_max_m"] == pytest.approx(8.0)
    # map-view width of the slipping area: 11/12 of 3 x 30 km x cos(15 deg) (by construction)
    assert sm.source_width_km == pytest.approx(11 / 12 * 90.0 * math.cos(math.radians(15.0)), rel=0.01)
    assert "12 subfaults (11 with slip) from model.csv" in str(sm)


def test_tiled_rectangle_equals_the_whole_rectangle(grid):
    # Okada (1985) is linear: coplanar adjacent rectangles with one slip add up to the whole rectangle
    whole = plane_model(n_along=1, n_down=1, length_km=160.0, width_km=90.0, slips=[5.0])
    tiles = plane_model(slips=np.full(12, 5.0))
    t1 = subfault_table_from_text(table_text(whole, "top"), depth_at="top")
    t2 = subfault_table_from_text(table_text(tiles, "centroid"), depth_at="centroid")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", ScalingWarning)
        e1 = uplift_on_grid(rupture_from_subfaults(t1, force=True), grid).values
        e2 = uplift_on_grid(rupture_from_subfaults(t2, force=True), grid).values
    assert np.abs(e1 - e2).max() < 0.02 * np.abs(e1).max()


def test_sane_magnitude_range_applies_to_the_total():
    text = HEADER + "\n140.0,35.0,10,0,20,90,10,10,0.5\n"
    table = subfault_table_from_text(text, depth_at="top", origin="small.csv")
    with pytest.raises(SourceError, match=r"small.csv: .*outside the sane range"):
        rupture_from_subfaults(table)
    assert isinstance(rupture_from_subfaults(table, force=True), SubfaultRupture)
