"""Tests of tsunamifocus.io.styles and of the style files the GIS writers add.

External references:
* matplotlib (reference library): ``matplotlib.colors.LogNorm`` and the named colour maps
  ``PuOr_r``, ``magma_r``, ``viridis``; a colour scale here must give matplotlib's colours.
* QGIS default-style store in a GeoPackage: table ``layer_styles`` with the columns f_table_catalog,
  f_table_schema, f_table_name, f_geometry_column, styleName, styleQML, styleSLD, useAsDefault,
  description, owner, ui, update_time (as QGIS creates it; common practice, no source), read back
  with the standard library's sqlite3 and with pyogrio (GDAL/OGR).
* GeoPackage 1.2 (OGC 12-128r15) table ``gpkg_contents``, data_type ``attributes``.
* OGC Styled Layer Descriptor 1.0 (OGC 02-070) and Filter Encoding 1.0 (OGC 02-059): rule, filter
  and stroke elements, parsed with xml.etree.
* QGIS expressions of the form ``"field" > a AND "field" <= b`` are also valid SQLite SQL, so
  SQLite evaluates the rule filters on the GeoPackage's own table.
"""

from __future__ import annotations

import math
import sqlite3
import xml.etree.ElementTree as ET

import matplotlib
import numpy as np
import pandas as pd
import pyogrio
import pyogrio.raw
import pytest
import shapely
from matplotlib import colors as mcolors

from tsunamifocus.cautions import caution_text
from tsunamifocus.grid import make_grid
from tsunamifocus.io import styles
from tsunamifocus.io.gis import write_cog, write_segments
from tsunamifocus.io.styles import energy_scale, lensing_scale, travel_time_scale

QGIS_LAYER_STYLES_COLUMNS = ["id", "f_table_catalog", "f_table_schema", "f_table_name", "f_geometry_column",
                             "styleName", "styleQML", "styleSLD", "useAsDefault", "description", "owner", "ui",
                             "update_time"]
SLD = {"sld": "http://www.opengis.net/sld", "ogc": "http://www.opengis.net/ogc"}


def _hex(rgba):
    return mcolors.to_hex(rgba[:3]).lower()


def _lensing_values(n=400, seed=1):
    rng = np.random.default_rng(seed)
    return np.exp(rng.normal(0.0, 0.6, n))


# ----------------------------------------------------------------------------- scales vs matplotlib
def test_lensing_scale_gives_matplotlibs_colours():
    v = _lensing_values()
    sc = lensing_scale(v, v[:50])
    assert sc.cmap == "PuOr_r" and sc.kind == "log"
    assert sc.vmin == pytest.approx(1.0 / sc.vmax) and sc.vmax in (1.5, 2.0, 3.0, 5.0, 10.0, 20.0, 50.0, 100.0)
    norm = mcolors.LogNorm(vmin=sc.vmin, vmax=sc.vmax, clip=False)
    cmap = matplotlib.colormaps["PuOr_r"]
    probe = np.array([1e-3, sc.vmin, 0.5, 0.9, 1.0, 1.2, 2.0, sc.vmax, 1e3])
    # LogNorm without clipping sends values beyond the ends below 0 / above 1: the colour map's
    # under/over colours, which default to its end colours (the colour bar's arrows)
    np.testing.assert_allclose(sc.rgba(probe), cmap(norm(probe)), atol=0)
    # no value: NaN and non-positive factors
    assert np.isnan(sc.rgba(np.array([np.nan, 0.0, -1.0]))).all()
    # 1 = no focusing sits in the middle of the diverging map
    assert sc.normalise(1.0) == pytest.approx(0.5)


def test_energy_scale_gives_matplotlibs_colours_and_the_figures_opacity():
    rng = np.random.default_rng(2)
    e = rng.lognormal(15.0, 2.0, 5000)
    sc = energy_scale(e)
    pos = e[e > 0]
    vmax = np.percentile(pos, 99.5)
    assert sc.vmax == pytest.approx(vmax) and sc.vmin == pytest.approx(max(np.percentile(pos, 5.0), vmax * 1e-4))
    norm = mcolors.LogNorm(vmin=sc.vmin, vmax=sc.vmax, clip=True)
    probe = np.array([sc.vmin, np.sqrt(sc.vmin * sc.vmax), sc.vmax])
    t = np.asarray(norm(probe))
    want = matplotlib.colormaps["magma_r"](t)
    want[:, 3] = 0.15 + 0.85 * t**0.8
    np.testing.assert_allclose(sc.rgba(probe), want, atol=1e-12)
    assert energy_scale(np.array([np.nan, 0.0])) is None


def test_travel_time_classes_at_the_contour_interval():
    tt = np.linspace(12.0, 290.0, 100)
    sc = travel_time_scale(tt)
    # the lensing map's contour interval: at most 12 steps over the range -> 30 min for 278 min
    assert styles.nice_time_step(290.0 - 12.0) == 30.0
    assert sc.ticks == tuple(float(x) for x in range(0, 301, 30))
    classes = sc.classes()
    assert len(classes) == 10 and classes[0][:3] == (0.0, 30.0, "0 - 30")
    assert _hex(classes[0][3]) == _hex(matplotlib.colormaps["viridis"](0.05))


# ----------------------------------------------------------------------------- raster sidecars
def _geo(values, name):
    ny, nx = values.shape
    return make_grid(values, 10.0 + 0.1 * np.arange(nx), -5.0 + 0.1 * np.arange(ny), "EPSG:4326", name=name)


def _qml_items(path):
    root = ET.fromstring(path.read_text(encoding="utf-8").split("\n", 1)[1])
    shader = root.find(".//colorrampshader")
    return shader, [(it.get("value"), it.get("label"), it.get("color"), int(it.get("alpha")))
                    for it in shader.findall("item")]


def test_lensing_raster_gets_a_qml_with_the_figures_legend(tmp_path):
    lf = _lensing_values(60 * 80).reshape(60, 80)
    p = write_cog(_geo(lf, "lensing_factor"), tmp_path / "lensing_factor.tif")
    qml = tmp_path / "lensing_factor.qml"
    assert qml.is_file()
    assert "CAUTION" in qml.read_text(encoding="utf-8") and caution_text().splitlines()[0][:30] in qml.read_text()
    sc = lensing_scale(lf)
    shader, items = _qml_items(qml)
    assert shader.get("colorRampType") == "INTERPOLATED" and shader.get("clip") == "0"  # ends extended
    assert [float(v) for v, *_ in items] == pytest.approx(list(sc.ticks))
    assert [lab for _, lab, *_ in items] == [styles.tick_label(t) for t in styles.log_ticks(sc.vmax)]
    norm = mcolors.LogNorm(vmin=sc.vmin, vmax=sc.vmax)
    for v, _, colour, alpha in items:
        assert colour == _hex(matplotlib.colormaps["PuOr_r"](norm(float(v))))
        assert alpha == 255
    assert p.exists()


def test_energy_and_travel_time_rasters_get_qmls_other_layers_none(tmp_path):
    rng = np.random.default_rng(4)
    e = rng.lognormal(15.0, 2.0, (30, 40))
    write_cog(_geo(e, "energy"), tmp_path / "energy.tif")
    _, items = _qml_items(tmp_path / "energy.qml")
    sc = energy_scale(e)
    assert [float(v) for v, *_ in items] == pytest.approx(list(sc.ticks))
    assert items[0][3] == round(255 * 0.15) and items[-1][3] == 255  # the figure's opacity ramp
    tt = np.linspace(0.0, 95.0, 30 * 40).reshape(30, 40)
    write_cog(_geo(tt, "travel_time_min"), tmp_path / "travel_time_min.tif")
    shader, items = _qml_items(tmp_path / "travel_time_min.qml")
    assert shader.get("colorRampType") == "DISCRETE"
    assert [v for v, *_ in items][-1] == "inf" and float(items[0][0]) == 10.0  # 10-min classes over 95 min
    # a layer the figures do not draw gets no style; style=None switches it off
    write_cog(_geo(tt, "wave_max_amplitude"), tmp_path / "w.tif")
    write_cog(_geo(_lensing_values(1200).reshape(30, 40), "lensing_factor"), tmp_path / "n.tif", style=None)
    assert not (tmp_path / "w.qml").exists() and not (tmp_path / "n.qml").exists()


def test_antimeridian_alternative_gets_the_same_style(tmp_path):
    lon = 170.05 + 0.1 * np.arange(200)
    lat = -1.95 + 0.1 * np.arange(40)
    lf = _lensing_values(40 * 200).reshape(40, 200)
    write_cog(make_grid(lf, lon, lat, "EPSG:4326", name="lensing_factor"), tmp_path / "lensing_factor.tif")
    assert (tmp_path / "lensing_factor_lon180.vrt").is_file()
    assert (tmp_path / "lensing_factor_lon180.qml").read_text() == (tmp_path / "lensing_factor.qml").read_text()


# ----------------------------------------------------------------------------- GeoPackage layer_styles
@pytest.fixture
def styled_gpkg(tmp_path):
    vals = [0.1, 0.4, 0.8, 1.0, 1.3, 2.5, 4.0, 30.0, np.nan, 0.0]
    table = pd.DataFrame({
        "segment_id": [f"S{i:04d}" for i in range(len(vals))],
        "lensing_factor": vals,
        "geometry": [shapely.LineString([(i, 0.0), (i + 0.5, 0.5)]) for i in range(len(vals))],
    })
    raster = _lensing_values(500)
    sc = lensing_scale(raster, np.asarray(vals, dtype=float))
    out = write_segments(table, tmp_path / "segments", "EPSG:32633", style=sc)
    return out["gpkg"], sc, table


def test_gpkg_carries_a_default_style_qgis_reads(styled_gpkg):
    gpkg, sc, table = styled_gpkg
    con = sqlite3.connect(gpkg)
    try:
        cols = [r[1] for r in con.execute("PRAGMA table_info(layer_styles)")]
        assert cols == QGIS_LAYER_STYLES_COLUMNS
        rows = con.execute("SELECT f_table_catalog, f_table_schema, f_table_name, f_geometry_column, useAsDefault, "
                           "styleQML, styleSLD, update_time FROM layer_styles").fetchall()
        kind = con.execute("SELECT data_type FROM gpkg_contents WHERE table_name = 'layer_styles'").fetchone()
    finally:
        con.close()
    assert len(rows) == 1
    cat, schema, tname, gcol, default, qml, sld, stamp = rows[0]
    assert (cat, schema, tname, default) == ("", "", "segments", 1)
    assert gcol == pyogrio.read_info(gpkg, layer="segments")["geometry_name"]
    assert kind == ("attributes",)
    assert stamp == "1970-01-01T00:00:00.000Z"  # reproducible (SOURCE_DATE_EPOCH unset)
    # GDAL sees the table too (QGIS reads it through OGR)
    meta, _, _, fields = pyogrio.raw.read(gpkg, layer="layer_styles")
    assert "styleQML" in list(meta["fields"]) and "CAUTION" in qml

    root = ET.fromstring(qml.split("\n", 1)[1])
    rules = root.findall(".//rules/rule")
    classes = sc.classes()
    assert len(rules) == len(classes) + 1
    symbols = {s.get("name"): s for s in root.findall(".//symbols/symbol")}
    for rule, (lo, hi, label, rgba) in zip(rules, classes, strict=False):
        assert rule.get("label") == label
        layers = symbols[rule.get("symbol")].findall("layer")
        colour = {o.get("name"): o.get("value") for o in layers[1].iter("Option")}["line_color"]
        assert colour.split(",")[:3] == [str(int(round(255 * c))) for c in rgba[:3]]
        casing = {o.get("name"): o.get("value") for o in layers[0].iter("Option")}
        assert casing["line_color"].startswith("0,0,0") and float(casing["line_width"]) == styles.SEGMENT_CASING_PT
    assert rules[-1].get("filter") == "ELSE"
    grey = {o.get("name"): o.get("value") for o in symbols[rules[-1].get("symbol")].findall("layer")[1].iter("Option")}
    assert grey["line_color"].startswith("153,153,153")  # matplotlib grey "0.6", the figure's no-value colour

    sroot = ET.fromstring(sld.split("-->\n", 1)[1])
    srules = sroot.findall(".//sld:Rule", SLD)
    assert len(srules) == len(rules)
    assert srules[-1].find("sld:ElseFilter", SLD) is not None
    for srule, (_, _, label, rgba) in zip(srules, classes, strict=False):
        assert srule.find("sld:Title", SLD).text == label
        strokes = [p.text for p in srule.findall(".//sld:CssParameter[@name='stroke']", SLD)]
        assert strokes == ["#000000", _hex(rgba)]


def test_gpkg_rule_filters_put_every_valued_segment_in_one_class(styled_gpkg):
    # SQLite evaluates the QGIS filter expressions on the layer's own table: every segment with a
    # positive lensing factor falls in exactly one class, the others only in the ELSE rule.
    gpkg, sc, table = styled_gpkg
    con = sqlite3.connect(gpkg)
    try:
        qml = con.execute("SELECT styleQML FROM layer_styles").fetchone()[0]
        root = ET.fromstring(qml.split("\n", 1)[1])
        hits: dict[str, list[int]] = {}
        for i, rule in enumerate(root.findall(".//rules/rule")[:-1]):
            for (sid,) in con.execute(f"SELECT segment_id FROM segments WHERE {rule.get('filter')}"):
                hits.setdefault(sid, []).append(i)
    finally:
        con.close()
    vals = table.set_index("segment_id")["lensing_factor"]
    for sid, v in vals.items():
        if np.isfinite(v) and v > 0:
            assert len(hits.get(sid, [])) == 1, (sid, v, hits.get(sid))
            lo, hi, *_ = sc.classes()[hits[sid][0]]
            assert lo < v <= hi
        else:
            assert sid not in hits


def test_default_gpkg_style_from_the_table_and_none_on_request(tmp_path):
    table = pd.DataFrame({"segment_id": ["A", "B"], "lensing_factor": [0.5, 3.0],
                          "geometry": [shapely.LineString([(0, 0), (1, 1)]), shapely.LineString([(1, 1), (2, 2)])]})
    a = write_segments(table, tmp_path / "a", "EPSG:32633", formats=("gpkg",))["gpkg"]
    b = write_segments(table, tmp_path / "b", "EPSG:32633", formats=("gpkg",), style=None)["gpkg"]
    assert "layer_styles" in [n for n, _ in pyogrio.list_layers(a)]
    assert [n for n, _ in pyogrio.list_layers(b)] == ["segments"]


# ----------------------------------------------------------------------------- one definition
def test_the_lensing_figure_and_the_gis_styles_use_one_scale(tmp_path, monkeypatch):
    from tsunamifocus.products import figures

    seen = []
    real = figures.lensing_scale

    def spy(raster, segment_values=None, layer="lensing_factor"):
        sc = real(raster, segment_values, layer)
        seen.append(sc)
        return sc

    monkeypatch.setattr(figures, "lensing_scale", spy)
    lf = _lensing_values(30 * 40, seed=7).reshape(30, 40) ** 3
    depth = _geo(np.full((30, 40), 1000.0), "depth")
    seg = pd.DataFrame({"segment_id": ["S1", "S2"], "lensing_factor": [1.2, 40.0],
                        "geometry": [shapely.LineString([(10.5, -4.5), (11.0, -4.0)]),
                                     shapely.LineString([(11.0, -4.0), (11.5, -3.5)])]})
    figures.plot_lensing_map(depth, _geo(lf, "lensing_factor"), None, seg, 2, out_path=tmp_path / "m.png")
    assert len(seen) == 1
    fig_scale = seen[0]
    # the run writes its styles with the scale computed from the same raster and segment values
    run_scale = lensing_scale(lf, seg["lensing_factor"].to_numpy(float))
    assert (fig_scale.vmin, fig_scale.vmax, fig_scale.ticks) == (run_scale.vmin, run_scale.vmax, run_scale.ticks)
    write_cog(_geo(lf, "lensing_factor"), tmp_path / "lf.tif", style=run_scale)
    _, items = _qml_items(tmp_path / "lf.qml")
    assert [float(v) for v, *_ in items] == pytest.approx(list(fig_scale.ticks))
    assert math.isclose(fig_scale.vmax, max(float(v) for v, *_ in items))
