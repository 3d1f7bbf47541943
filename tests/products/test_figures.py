"""Tests of tsunamifocus.figures on synthetic projected and lon/lat inputs.

The inputs are invented (a smooth random bathymetry with a wavy coast to the north); the
checks look at the written PNG files (signature, size, dpi, text chunks) and at the pixels
(colour-map centring, hatching of unreliable bars), not at hard-coded images.
"""

from __future__ import annotations

import math
import struct
import zlib

import numpy as np
import pandas as pd
import pytest
from shapely.geometry import LineString, Polygon

from tsunamifocus.products import figures
from tsunamifocus.constants import GRAVITY
from tsunamifocus.errors import InputError
from tsunamifocus.grid import make_grid
from tsunamifocus.ocean.randomfield import gaussian_random_field

PNG_SIGNATURE = b"\x89PNG\r\n\x1a\n"  # PNG specification (ISO/IEC 15948), section 5.2


# --------------------------------------------------------------------------------------
# synthetic inputs
# --------------------------------------------------------------------------------------


def _coast_y(x, y_coast, amp, wavelength):
    return y_coast + amp * np.sin(2 * np.pi * x / wavelength)


def synthetic_case(geographic: bool, n_seg: int = 18, seed: int = 3) -> dict:
    """Invented region: ocean to the south, wavy coast to the north, source in the south."""
    if geographic:
        x = np.linspace(150.0, 154.0, 161)  # lon
        y = np.linspace(-41.0, -38.0, 121)  # lat
        crs = "EPSG:4326"
        kx = math.pi / 180 * 6371008.8 * math.cos(math.radians(-39.5))
        ky = math.pi / 180 * 6371008.8
        spacing = ((x[1] - x[0]) * kx, (y[1] - y[0]) * ky)
        y_coast, amp, wl = -38.6, 0.12, 1.3
        src = (151.5, -40.5)
        scale = (kx, ky)
    else:
        # UTM 33S (a real projected CRS, about 40 S, west of the central meridian)
        x0, y0 = 300e3, 5.5e6
        x = x0 + np.arange(0.0, 400e3 + 1, 2.5e3)
        y = y0 + np.arange(0.0, 300e3 + 1, 2.5e3)
        crs = "EPSG:32733"
        spacing = (2.5e3, 2.5e3)
        y_coast, amp, wl = y0 + 255e3, 10e3, 130e3
        src = (x0 + 150e3, y0 + 40e3)
        scale = (1.0, 1.0)
    X, Y = np.meshgrid(x, y)
    yc = _coast_y(X, y_coast, amp, wl)
    dist = (yc - Y) * scale[1]  # metres seaward of the coast
    h = np.clip(dist / 60e3, -1, 1) * 3000.0 + 40.0
    h = h * (1 + gaussian_random_field(h.shape, spacing, 20e3, rms=0.08, seed=seed))
    h = np.where(dist < 0, -50.0, np.maximum(h, 5.0))
    h[5:9, 10:14] = np.nan  # a small no-data hole
    depth = make_grid(h, x, y, crs)
    r = np.hypot((X - src[0]) * scale[0], (Y - src[1]) * scale[1])
    c = np.sqrt(GRAVITY * np.where(h > 0, h, np.nan))
    tt = r / np.nanmean(c) / 60.0
    tt = np.where(np.isfinite(h) & (h > 0), tt, np.nan)
    travel = make_grid(tt, x, y, crs, name="travel_time_min")
    lf = np.exp(gaussian_random_field(h.shape, spacing, 15e3, rms=0.5, seed=seed + 1))
    lf = np.where(np.isfinite(h) & (h > 0), lf, np.nan)
    lensing = make_grid(lf, x, y, crs, name="lensing_factor")
    en = np.exp(gaussian_random_field(h.shape, spacing, 6e3, rms=1.4, seed=seed + 2)) / (1 + r / 50e3)
    en = np.where(np.isfinite(h) & (h > 0), en * 1e9, 0.0)
    energy = make_grid(en, x, y, crs, name="energy")
    # paths: wiggly rays from the source
    rng = np.random.default_rng(seed)
    paths = []
    for az in np.linspace(-70, 70, 80):
        s = np.linspace(0, 1, 60)
        ang = np.radians(az) + 0.15 * np.cumsum(rng.normal(0, 0.05, s.size))
        L = (y_coast - src[1]) * 1.05
        px = src[0] + np.cumsum(np.sin(ang)) * L / s.size * (scale[1] / scale[0])
        py = src[1] + np.cumsum(np.cos(ang)) * L / s.size
        paths.append(np.column_stack([px, py]))
    # coastline and segments
    xs = np.linspace(x[3], x[-4], n_seg + 1)
    rows = []
    for i in range(n_seg):
        xx = np.linspace(xs[i], xs[i + 1], 8)
        geom = LineString(np.column_stack([xx, _coast_y(xx, y_coast, amp, wl) - 0.01 * (y[-1] - y[0])]))
        mid = geom.interpolate(0.5, normalized=True)
        lfi = float(np.exp(rng.normal(0.2, 0.5)))
        rows.append(
            dict(
                segment_id=f"S{i + 1:04d}",
                name=f"Segment {i + 1}" if i % 3 else "",
                length_m=float(geom.length * scale[0]),
                x_mid=mid.x,
                y_mid=mid.y,
                lon_mid=mid.x,
                lat_mid=mid.y,
                normal_azimuth_deg=180.0,
                geometry=geom,
                lensing_factor=lfi,
                lensing_lo=lfi * 0.7,
                lensing_hi=lfi * 1.45,
                amp_1m_m=lfi * 0.8,
                amp_lo=lfi * 0.55,
                amp_hi=lfi * 1.2,
                reliable=bool(i % 5 != 2),
            )
        )
    seg = pd.DataFrame(rows)
    seg["rank_lensing"] = seg["lensing_factor"].rank(ascending=False, method="first").astype(int)
    seg["rank_amplitude"] = seg["amp_1m_m"].rank(ascending=False, method="first").astype(int)
    coast = LineString(np.column_stack([x, _coast_y(x, y_coast, amp, wl) - 0.01 * (y[-1] - y[0])]))
    dxs, dys = (0.5, 0.25) if geographic else (60e3, 25e3)
    fault = Polygon(
        [
            (src[0] - dxs, src[1] - dys),
            (src[0] + dxs, src[1] - dys),
            (src[0] + dxs, src[1] + dys),
            (src[0] - dxs, src[1] + dys),
        ]
    )
    Xe, Ye = (X - src[0]) * scale[0], (Y - src[1]) * scale[1]
    eta = 2.0 * np.exp(-((Xe - 10e3) ** 2 + Ye**2) / (2 * 25e3**2)) - 0.8 * np.exp(
        -((Xe + 40e3) ** 2 + Ye**2) / (2 * 25e3**2)
    )
    uplift = make_grid(eta, x, y, crs, name="eta")
    return dict(
        depth=depth,
        travel=travel,
        lensing=lensing,
        energy=energy,
        paths=paths,
        segments=seg,
        coast=coast,
        fault=fault,
        eta=uplift,
    )


@pytest.fixture(scope="module", params=[False, True], ids=["projected", "lonlat"])
def case(request):
    return synthetic_case(request.param)


# --------------------------------------------------------------------------------------
# PNG readers (stdlib only)
# --------------------------------------------------------------------------------------


def png_chunks(path):
    """Yield (type, data) of the chunks of a PNG file (PNG specification section 5.3)."""
    data = path.read_bytes()
    assert data[:8] == PNG_SIGNATURE
    pos = 8
    while pos < len(data):
        (length,) = struct.unpack(">I", data[pos : pos + 4])
        ctype = data[pos + 4 : pos + 8]
        yield ctype, data[pos + 8 : pos + 8 + length]
        pos += 12 + length


def png_info(path):
    """Width, height, pixels per metre and tEXt/iTXt keywords of a PNG."""
    info = {"text": {}}
    for ctype, chunk in png_chunks(path):
        if ctype == b"IHDR":
            info["width"], info["height"] = struct.unpack(">II", chunk[:8])
        elif ctype == b"pHYs":
            info["ppm"] = struct.unpack(">IIB", chunk)
        elif ctype == b"tEXt":
            k, v = chunk.split(b"\x00", 1)
            info["text"][k.decode("latin-1")] = v.decode("latin-1")
        elif ctype == b"zTXt":
            k, rest = chunk.split(b"\x00", 1)
            info["text"][k.decode("latin-1")] = zlib.decompress(rest[1:]).decode("latin-1")
        elif ctype == b"iTXt":
            k, rest = chunk.split(b"\x00", 1)
            comp = rest[0]
            rest = rest[2:]
            _lang, rest = rest.split(b"\x00", 1)
            _tk, txt = rest.split(b"\x00", 1)
            info["text"][k.decode("latin-1")] = (zlib.decompress(txt) if comp else txt).decode("utf-8")
    return info


def read_rgb(path):
    """Decode the PNG pixels with matplotlib's reader (RGBA floats)."""
    import matplotlib.image as mpimg

    return mpimg.imread(path)


def check_png(path, min_w=600, min_h=400):
    info = png_info(path)
    assert info["width"] >= min_w and info["height"] >= min_h
    # 150 dpi = 5905.5 pixels per metre (1 inch = 0.0254 m, exact by definition)
    ppm = info["ppm"]
    assert ppm[2] == 1 and abs(ppm[0] - 150 / 0.0254) < 1.0
    assert "SCREENING ESTIMATES ONLY" in info["text"]["Disclaimer"]
    return info


# --------------------------------------------------------------------------------------
# tests
# --------------------------------------------------------------------------------------


def test_ray_field_energy_and_paths(case, tmp_path):
    out = figures.plot_ray_field(
        case["depth"],
        case["energy"],
        paths=case["paths"],
        coast_lines=case["coast"],
        source_outline=case["fault"],
        out_path=tmp_path / "rays.png",
        title="Ray field",
    )
    assert out == tmp_path / "rays.png"
    check_png(out)
    assert not list(tmp_path.glob(".*.part"))  # atomic write leaves no temporary file


def test_ray_field_paths_only_with_dataset_paths(case, tmp_path):
    import xarray as xr

    # paths as a NaN-padded (ray, step) Dataset, the layout a ray engine would naturally return
    p = case["paths"]
    n = max(len(a) for a in p)
    xs = np.full((len(p), n + 5), np.nan)
    ys = np.full_like(xs, np.nan)
    for i, a in enumerate(p):
        xs[i, : len(a)] = a[:, 0]
        ys[i, : len(a)] = a[:, 1]
    ds = xr.Dataset({"x": (("ray", "step"), xs), "y": (("ray", "step"), ys)})
    out = figures.plot_ray_field(case["depth"], None, paths=ds, out_path=tmp_path / "rays_only.png")
    check_png(out)
    assert len(figures._normalize_paths(ds)) == len(p)


def test_ray_field_needs_something(case, tmp_path):
    with pytest.raises(InputError, match="energy grid or ray paths"):
        figures.plot_ray_field(case["depth"], None, out_path=tmp_path / "x.png")


def test_lensing_map(case, tmp_path):
    out = figures.plot_lensing_map(
        case["depth"],
        case["lensing"],
        case["travel"],
        case["segments"],
        top_k=5,
        out_path=tmp_path / "lensing.png",
        title="Lensing",
        source_outline=case["fault"],
    )
    check_png(out)


def test_lensing_colour_scale_is_centred_at_one():
    # A diverging colour map on a log scale symmetric about 1 puts 1 at the neutral middle
    # of the map and x and 1/x at mirror positions (common practice, no source).
    import matplotlib.colors as mcolors

    r = figures._symmetric_log_range([np.array([0.3, 0.8, 1.0, 2.5, 4.0])])
    assert r >= 4.0 and 1.0 / r <= 0.3
    norm = mcolors.LogNorm(vmin=1 / r, vmax=r)
    assert abs(float(norm(1.0)) - 0.5) < 1e-12
    assert abs(float(norm(2.0)) + float(norm(0.5)) - 1.0) < 1e-12


def test_ranking_chart_hatches_unreliable(case, tmp_path):
    seg = case["segments"].copy()
    seg["reliable"] = True
    top = seg.sort_values("lensing_factor", ascending=False).index[0]
    seg.loc[top, "reliable"] = False
    out = figures.plot_ranking(seg, top_k=8, out_path=tmp_path / "rank.png")
    check_png(out, min_w=800, min_h=300)
    img = read_rgb(out)
    # the bar of an unreliable segment is grey (c8c8c8 = 0.784) with black hatching, a
    # reliable bar is Okabe-Ito blue (0072B2); count both colours in the picture
    rgb = img[..., :3]
    blue = np.all(np.abs(rgb - np.array([0.0, 0x72 / 255, 0xB2 / 255])) < 0.03, axis=-1).sum()
    grey = np.all(np.abs(rgb - 0.784) < 0.03, axis=-1).sum()
    assert blue > 2000 and grey > 200


def test_ranking_axis_is_set_by_the_reliable_bars(case, tmp_path, monkeypatch):
    # reliable lensing factors of 1-2 and two unreliable ones of 59.6 and 30 (few rays): the axis must
    # show the reliable bars readably (common practice, no source: an axis is scaled to the data it is
    # meant to show); the unreliable ones are clipped at the edge and their values still printed
    seg = case["segments"].head(8).copy()
    seg["lensing_factor"] = [59.6, 30.0, 2.0, 1.8, 1.6, 1.4, 1.2, 1.0]
    seg["lensing_lo"] = seg["lensing_factor"] * 0.8
    seg["lensing_hi"] = seg["lensing_factor"] * 1.2
    seg.loc[seg.index[3], "lensing_hi"] = np.inf  # an unbounded interval must not set the axis either
    seg["reliable"] = [False, False] + [True] * 6
    seg["rank_lensing"] = pd.array([pd.NA, pd.NA, 1, 2, 3, 4, 5, 6], dtype="Int64")
    seen = {}
    orig = figures._finish

    def spy(fig, out_path, **kw):
        ax = kw["ax"]
        seen["xlim"] = ax.get_xlim()
        seen["texts"] = [t.get_text() for t in ax.texts]
        seen["labels"] = [t.get_text() for t in ax.get_yticklabels()]
        return orig(fig, out_path, **kw)

    monkeypatch.setattr(figures, "_finish", spy)
    check_png(figures.plot_ranking(seg, 8, out_path=tmp_path / "r.png"), min_w=800, min_h=300)
    assert seen["xlim"][1] < 3.0  # 2.0 * 1.2 (largest reliable whisker) plus a margin, not 59.6
    assert any(t.startswith("59.6") for t in seen["texts"]) and any(t.startswith("30") for t in seen["texts"])
    # values keep three significant digits, trailing zeros too, so a column of values reads alike
    # (2.00 and 1.80 beside 1.62, not 2 and 1.8; common practice, no source)
    assert {"2.00", "1.80", "1.60", "30.0"} <= {t.split()[0] for t in seen["texts"]}
    # ranks only for ranked (reliable) segments, unranked shown with "-"
    assert sum(lab.startswith("- ") for lab in seen["labels"]) == 2
    assert sorted(lab.split(".")[0] for lab in seen["labels"] if not lab.startswith("- ")) == list("123456")


def test_ranking_without_reliable_bars_draws_no_runaway_whiskers(case, tmp_path, monkeypatch):
    # every segment unreliable with unbounded intervals (no reference ray in most replicates): the
    # bars set the axis and no whisker runs to its edge (an arrow per bar would hide the values)
    seg = case["segments"].head(6).copy()
    seg["lensing_factor"] = [15.0, 4.0, 2.4, 2.0, 1.1, 0.9]
    seg["lensing_lo"] = 0.0
    seg["lensing_hi"] = [np.inf, np.inf, 23.9, np.inf, 6.0, np.inf]
    seg["reliable"] = False
    seg["rank_lensing"] = pd.array([pd.NA] * 6, dtype="Int64")
    seen = {}
    orig = figures._finish

    def spy(fig, out_path, **kw):
        ax = kw["ax"]
        seen["xlim"] = ax.get_xlim()
        seen["markers"] = [ln for ln in ax.lines if ln.get_marker() == ">"]
        seen["text_objs"] = list(ax.texts)
        return orig(fig, out_path, **kw)

    monkeypatch.setattr(figures, "_finish", spy)
    check_png(figures.plot_ranking(seg, 6, out_path=tmp_path / "u.png"), min_w=800, min_h=300)
    assert seen["xlim"][1] == pytest.approx(15.0 * 1.14)
    assert seen["markers"] == []  # no clipped whisker, no clipped bar
    assert sorted(t.get_text() for t in seen["text_objs"]) == sorted(["15.0", "4.00", "2.40", "2.00", "1.10", "0.900"])
    # each value beside its bar (or its drawn whisker), not at the edge of the chart
    x = {t.get_text(): t.get_position()[0] for t in seen["text_objs"]}
    assert x["2.40"] < 4.0 and x["1.10"] == pytest.approx(6.0 + 0.015 * 15.0 * 1.14)


def test_ranking_orders_by_rank_column(case):
    seg = case["segments"]
    ordered = figures._rank_order(seg, "lensing_factor", "rank_lensing")
    # rank 1 = largest lensing factor (definition of rank_lensing in the segments contract)
    assert ordered["lensing_factor"].iloc[0] == seg["lensing_factor"].max()
    assert list(ordered["_rank"].iloc[:3]) == [1, 2, 3]


def test_ranking_by_amplitude_and_errors(case, tmp_path):
    out = figures.plot_ranking(case["segments"], 6, out_path=tmp_path / "amp.png", by="amp_1m_m")
    check_png(out, min_w=800, min_h=300)
    with pytest.raises(InputError, match="lacks column"):
        figures.plot_ranking(case["segments"].drop(columns="lensing_factor"), 5, out_path=tmp_path / "a.png")
    with pytest.raises(InputError, match="top_k"):
        figures.plot_ranking(case["segments"], 0, out_path=tmp_path / "b.png")


def test_uplift_colour_centre_and_outline(case, tmp_path):
    out = figures.plot_uplift(
        case["eta"],
        out_path=tmp_path / "uplift.png",
        depth=case["depth"],
        source_outline=case["fault"],
        coast_lines=case["coast"],
    )
    check_png(out)


def test_agreement_scatter(tmp_path):
    rng = np.random.default_rng(1)
    a = np.exp(rng.normal(0, 0.5, 40))
    b = a * np.exp(rng.normal(0, 0.2, 40))
    out = figures.plot_agreement(
        a,
        b,
        out_path=tmp_path / "agree.png",
        xlabel="Ray lensing factor (-)",
        ylabel="Wave amplitude ratio (-)",
        labels=[f"S{i:04d}" for i in range(40)],
        highlight=a > np.quantile(a, 0.8),
        annotate="Spearman 0.9",
    )
    check_png(out)
    with pytest.raises(InputError, match="equal length"):
        figures.plot_agreement(a, b[:-1], out_path=tmp_path / "x.png", xlabel="a", ylabel="b")


def test_scatter_box_legend_and_labels_hide_no_point():
    # Readability (common practice, no source): the statistics box, the legend and the point
    # labels of a 1:1 scatter must not cover points, nor labels each other. Points along the
    # diagonal with the top ones in the upper right, where a box in the upper left used to hide
    # the largest segments' labels.
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    rng = np.random.default_rng(3)
    a = np.exp(np.linspace(-0.7, 1.3, 40) + rng.normal(0, 0.15, 40))
    b = a * np.exp(rng.normal(0, 0.25, 40))
    b[-3:] *= 1.8  # the wave's largest values high in the upper right
    fig, ax = plt.subplots(figsize=(6.4, 6.0))
    ax.scatter(a, b, s=18)
    ax.set_xscale("log")
    ax.set_yscale("log")
    lo, hi = float(min(a.min(), b.min())) / 1.2, float(max(a.max(), b.max())) * 1.2
    ax.set_xlim(lo, hi)
    ax.set_ylim(lo, hi)
    text = "n = 40 segments\nSpearman rho = 0.90\nKendall tau = 0.75\ntop-10 overlap = 8/10\nWave check: linear\nlong-wave equations"
    arts = figures._corner_boxes(fig, ax, a, b, text)
    assert len(arts) == 2
    fig.draw_without_rendering()
    pts = ax.transData.transform(np.column_stack([a, b]))
    for art in arts:
        bb = art.get_window_extent()
        inside = (pts[:, 0] >= bb.x0) & (pts[:, 0] <= bb.x1) & (pts[:, 1] >= bb.y0) & (pts[:, 1] <= bb.y1)
        assert not inside.any(), f"{type(art).__name__} hides {int(inside.sum())} points"
    top = np.argsort(b)[-6:]
    names = [f"S{i:04d}" for i in range(a.size)]
    figures._scatter_labels(fig, ax, a, b, names, top, ok=np.ones(a.size, bool), avoid=arts)
    fig.draw_without_rendering()
    boxes = [t.get_window_extent() for t in ax.texts if t.get_text() in names]
    assert len(boxes) == 6
    frame = ax.get_window_extent()
    for i, bi in enumerate(boxes):
        assert frame.x0 <= bi.x0 and bi.x1 <= frame.x1 and frame.y0 <= bi.y0 and bi.y1 <= frame.y1
        for art in arts:
            assert not bi.overlaps(art.get_window_extent()), "a label under the box or legend"
        for bj in boxes[i + 1:]:
            assert not bi.overlaps(bj), "two labels overlap"
    plt.close(fig)


def test_agreement_scatter_draws_far_low_values_on_the_axis(tmp_path):
    # Readability (common practice, no source): on the real-grid case 17 wave values were 1e-4 of the
    # rest and stretched the log axes over five decades; values below 1 % of the smaller median are
    # drawn at that floor (ringed), the others untouched.
    x = np.array([1.0, 2.0, 3.0, 0.5, 1.5])
    y = np.array([1.1, 1.8, 3.3, 1e-5, 1.4])
    ok = np.ones(5, bool)
    xc, yc, clipped = figures._floor_clip(x, y, ok)
    floor = figures.AGREEMENT_FLOOR * min(np.median(x), np.median(y))
    assert clipped.tolist() == [False, False, False, True, False]
    assert yc[3] == pytest.approx(floor) and xc[3] == 0.5
    np.testing.assert_array_equal(np.delete(yc, 3), np.delete(y, 3))
    check_png(figures.plot_agreement(x, y, out_path=tmp_path / "a.png", xlabel="a", ylabel="b",
                                     labels=[f"S{i}" for i in range(5)], annotate="n = 5",
                                     top_x=x > 1.2, top_y=y > 1.2))


def test_check_profile_along_the_coast(tmp_path):
    # Distance along the coast is the running sum of segment lengths (plain geometry, common
    # practice, no source): two straight coastlines of 100 km and 60 km cut into 20 km segments
    # put their mid-points at 10, 30, ..., 90 km and, after a gap, 10 km + offset ... on the second.
    from tsunamifocus.coast.segments import segment_coastline

    x = np.arange(0.0, 200e3 + 1, 2e3)
    y = np.arange(0.0, 200e3 + 1, 2e3)
    depth = make_grid(np.full((y.size, x.size), 1000.0), x, y, "EPSG:32633")
    lines = [LineString([(20e3, 50e3), (120e3, 50e3)]), LineString([(20e3, 150e3), (80e3, 150e3)])]
    seg = segment_coastline(lines, 20e3, depth)
    assert len(seg) == 8
    along, line = figures._along_coast_km(seg)
    assert np.array_equal(line, [0, 0, 0, 0, 0, 1, 1, 1])
    np.testing.assert_allclose(along[:5], [10, 30, 50, 70, 90], atol=1e-6)
    gap = 0.03 * 160.0
    np.testing.assert_allclose(along[5:], 100 + gap + np.array([10, 30, 50]), atol=1e-6)
    rng = np.random.default_rng(5)
    ray = np.exp(rng.normal(0, 0.4, 8))
    table = pd.DataFrame({"segment_id": seg["segment_id"], "ranked": [True] * 7 + [False],
                          "ray_value": ray, "wave_amp_stop_m": ray * np.exp(rng.normal(0, 0.3, 8)),
                          "ray_lensing": ray / ray.mean(), "wave_lensing": np.exp(rng.normal(0, 0.3, 8))})
    out = figures.plot_check_profile(table, seg, tmp_path / "profile.png", k=3)
    check_png(out)
    with pytest.raises(InputError, match="segments table needs"):
        figures.plot_check_profile(table, seg.drop(columns=["length_m"]), tmp_path / "p2.png")
    with pytest.raises(InputError, match="no ranked segment"):
        figures.plot_check_profile(table.assign(ranked=False), seg, tmp_path / "p3.png")


def test_bad_inputs_rejected(case, tmp_path):
    with pytest.raises(InputError, match="DataArray"):
        figures.plot_uplift(np.zeros((3, 3)), out_path=tmp_path / "x.png")
    with pytest.raises(InputError, match=r"\.png"):
        figures.plot_uplift(case["eta"], out_path=tmp_path / "x.jpg")
    geographic = "lat" in case["depth"].dims
    other = synthetic_case(not geographic)
    with pytest.raises(InputError, match="like the depth grid"):
        figures.plot_lensing_map(case["depth"], other["lensing"], None, None, out_path=tmp_path / "y.png")


def test_north_arrow_follows_grid_convergence():
    # UTM grid convergence: gamma ~ (lon - lon0) * sin(lat) (Snyder 1987, "Map Projections - A
    # Working Manual", USGS PP 1395, eq. 8-9 to first order). Zone 33 has lon0 = 15 E; a grid
    # centred near 18 E, 40 S gives gamma ~ 3 * sin(-40 deg) ~ -1.9 deg, i.e. true north is
    # rotated clockwise from grid up by ~1.9 deg (negative = clockwise in _north_angle_deg).
    from pyproj import Transformer

    from tsunamifocus.grid import GridInfo

    t = Transformer.from_crs("EPSG:4326", "EPSG:32733", always_xy=True)
    xc, yc = t.transform(18.0, -40.0)
    x = np.linspace(xc - 50e3, xc + 50e3, 11)
    y = np.linspace(yc - 50e3, yc + 50e3, 11)
    info = GridInfo.from_dataarray(make_grid(np.ones((11, 11)), x, y, "EPSG:32733"))
    ang = figures._north_angle_deg(info)
    expected = -3.0 * math.sin(math.radians(40.0))
    assert abs(ang - expected) < 0.15
    geo = GridInfo.from_dataarray(make_grid(np.ones((3, 3)), [0, 1, 2], [0, 1, 2], "EPSG:4326"))
    assert figures._north_angle_deg(geo) == 0.0


def test_labels_and_scale_helpers():
    assert figures._lon_label(200.0) == "160°W"
    assert figures._lon_label(-30.0) == "30°W"
    assert figures._lat_label(-12.5) == "12.5°S"
    assert figures._nice_length(73e3) == 50e3
    assert figures._nice_length(19.9) == 10.0
    assert figures._nice_time_step(300.0) == 30.0


def test_ranking_with_nullable_columns(case, tmp_path):
    seg = case["segments"].copy()
    seg["reliable"] = pd.array([None] + [True] * (len(seg) - 1), dtype="boolean")
    seg["rank_lensing"] = pd.array([pd.NA] + list(range(1, len(seg))), dtype="Int64")
    check_png(figures.plot_ranking(seg, 5, out_path=tmp_path / "r.png"), min_w=800, min_h=300)


def test_contour_field_fills_small_holes_only():
    # A normalised symmetric (Gaussian) smoothing reproduces a linear field away from the edges
    # (the kernel's first moment is zero; common practice, no source). A one-cell hole filled by
    # its nearest neighbour is off by at most |grad t| x 1 cell, and a weighted mean of values
    # each within that bound stays within it: so a travel-time ramp with small holes comes back
    # within |grad t| everywhere in the interior and much closer on average; a region far from
    # any data stays empty (no contour may be drawn where no ray went).
    y, x = np.mgrid[0:80, 0:120].astype(float)
    t = 2.0 * x + 0.5 * y
    holes = t.copy()
    holes[::3, ::3] = np.nan  # isolated one-cell holes between "rays"
    holes[:, 90:] = np.nan  # 30 columns without rays
    out = figures._contour_ready(holes)
    inner = (slice(10, 70), slice(10, 80))
    assert np.all(np.isfinite(out[inner]))
    grad = math.hypot(2.0, 0.5)
    err = np.abs(out[inner] - t[inner])
    assert err.max() <= grad and err.mean() < 0.25 * grad
    assert np.all(np.isnan(out[:, 100:]))


def test_degree_ticks_are_round():
    # graticule steps that divide 90 degrees (or are decimal fractions of a degree), multiples of
    # the step, at most 8 intervals over the span (common practice, no source)
    for lo, hi, step in ((0.0, 360.0, 45.0), (150.0, 153.0, 0.5), (-41.0, -38.0, 0.5), (10.0, 10.3, 0.05)):
        t = figures._degree_locator(hi - lo).tick_values(lo, hi)
        t = t[(t >= lo - 1e-9) & (t <= hi + 1e-9)]
        assert np.allclose(np.diff(t), step)
        assert np.allclose(np.round(t / step) * step, t)


def test_global_periodic_grid_with_seam_crossing_paths(tmp_path):
    # 2-degree global grid (0..358 E, no duplicated seam column, lon_periodic=1); a path that is
    # unwrapped beyond 360 E must be wrapped and split at the seam, not drawn across the map.
    lon = np.arange(0.0, 360.0, 2.0)
    lat = np.arange(-80.0, 81.0, 2.0)
    depth = make_grid(np.full((lat.size, lon.size), 4000.0), lon, lat, "EPSG:4326")
    depth[:5, :] = -100.0  # some land in the south
    assert depth.attrs["lon_periodic"] == 1
    px = np.linspace(300.0, 420.0, 61)  # unwrapped: crosses 360
    path = np.column_stack([px, np.linspace(-10, 10, 61)])
    energy = depth.copy(data=np.where(depth.values > 0, 1.0, 0.0))
    out = figures.plot_ray_field(depth, energy, paths=[path], out_path=tmp_path / "g.png")
    check_png(out)
    from tsunamifocus.grid import GridInfo

    info = GridInfo.from_dataarray(depth)
    wrapped = np.column_stack([info.wrap_lon(path[:, 0]), path[:, 1]])
    pieces = figures._split_wrap(wrapped, True)
    assert len(pieces) == 2 and all(np.ptp(p[:, 0]) <= 180 for p in pieces)


def test_scatter_labels_in_a_dense_cluster_do_not_overlap():
    # Ten labelled points within a few points of each other (the real-grid check's upper right):
    # the labels move farther out, with leader lines, rather than pile up (common practice, no
    # source: a label must be readable and point to its marker).
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    rng = np.random.default_rng(5)
    a = np.concatenate([np.exp(rng.uniform(-3, 0, 60)), 0.9 * np.exp(rng.normal(0, 0.06, 10))])
    b = np.concatenate([np.exp(rng.uniform(-3, 0, 60)), 0.3 * np.exp(rng.normal(0, 0.06, 10))])
    fig, ax = plt.subplots(figsize=(6.4, 6.0))
    ax.scatter(a, b, s=18)
    ax.set_xscale("log")
    ax.set_yscale("log")
    ax.set_xlim(0.03, 2.0)
    ax.set_ylim(0.03, 2.0)
    top = np.arange(60, 70)
    names = [f"S{i:04d}" for i in range(a.size)]
    figures._scatter_labels(fig, ax, a, b, names, top, ok=np.ones(a.size, bool))
    fig.draw_without_rendering()
    texts = [t for t in ax.texts if t.get_text() in names]
    assert len(texts) == 10
    from matplotlib.text import Text

    boxes = [Text.get_window_extent(t) for t in texts]  # the text itself, without its leader line
    overlaps = sum(bi.overlaps(bj) for i, bi in enumerate(boxes) for bj in boxes[i + 1:])
    assert overlaps == 0, f"{overlaps} pairs of labels overlap"
    # labels placed away from their point carry a leader line
    assert any(getattr(t, "arrow_patch", None) is not None for t in texts)
    plt.close(fig)


def test_rank_labels_do_not_overlap():
    # ten segment midpoints 5 points apart along a straight coast: the greedy placement must
    # keep every pair of label centres at least one label diameter (15 pt) apart
    placed = []
    for i in range(10):
        figures._label_offset((100.0 + 5.0 * i, 50.0), 180.0, placed)
    d = [math.hypot(a[0] - b[0], a[1] - b[1]) for i, a in enumerate(placed) for b in placed[i + 1 :]]
    assert len(placed) == 10 and min(d) >= 15.0 - 1e-9


def test_rank_labels_keep_out_of_the_north_arrow():
    # Readability (common practice, no source): a segment just below the north arrow's panel,
    # facing north, would put its label on the panel; the placement goes round it.
    box = (500.0, 400.0)
    x0, y0, x1, y1 = figures._north_arrow_box(box[1] / box[0])
    avoid = [(x0 * box[0] - 9.0, y0 * box[1] - 9.0, x1 * box[0] + 9.0, y1 * box[1] + 9.0)]
    anchor = (0.5 * (avoid[0][0] + avoid[0][2]), avoid[0][1] - 5.0)
    placed = []
    free = figures._label_offset(anchor, 0.0, [], box=box)
    c_free = (anchor[0] + free[0], anchor[1] + free[1])
    assert avoid[0][0] <= c_free[0] <= avoid[0][2] and avoid[0][1] <= c_free[1] <= avoid[0][3]  # would hit it
    off = figures._label_offset(anchor, 0.0, placed, box=box, avoid=avoid)
    c = (anchor[0] + off[0], anchor[1] + off[1])
    assert not (avoid[0][0] <= c[0] <= avoid[0][2] and avoid[0][1] <= c[1] <= avoid[0][3])
    assert placed == [c]


def test_ranking_with_topk_probability(case, tmp_path):
    seg = case["segments"].copy()
    seg["p_topk"] = np.linspace(1.0, 0.1, len(seg))
    check_png(
        figures.plot_ranking(seg, 8, out_path=tmp_path / "p.png", prob_col="p_topk"), min_w=800, min_h=300
    )
    with pytest.raises(InputError, match="prob_col"):
        figures.plot_ranking(seg, 8, out_path=tmp_path / "q.png", prob_col="nope")


def test_ranking_labels_without_names():
    # NaN/None names must not print as "nan"/"None"; unranked (unreliable) segments show "-"
    assert figures._bar_label("S0001", np.nan, 1) == "1. S0001"
    assert figures._bar_label("S0002", None, 2.0) == "2. S0002"
    assert figures._bar_label("S0003", "S0003", 3) == "3. S0003"
    assert figures._bar_label("S0004", "Harbour", pd.NA) == "- S0004  Harbour"
    assert len(figures._bar_label("S0005", "x" * 60, 5)) == 40
    # without a name: the midpoint's latitude and longitude (-180..180, hemisphere letters)
    assert figures._bar_label("S0006", "", 6, 41.75, 235.8) == "6. S0006  41.75°N 124.20°W"
    assert figures._bar_label("S0007", None, None, -33.5, 151.25) == "- S0007  33.50°S 151.25°E"


def test_plain_log_ticks():
    # 1-2-5 ticks labelled as plain numbers ("0.2", not "2x10^-1") on a 1.5-decade log axis
    from matplotlib.figure import Figure

    ax = Figure().add_subplot()
    ax.set_xscale("log")
    ax.set_xlim(0.15, 7.0)
    figures._plain_log_ticks(ax.xaxis, 0.15, 7.0)
    ticks = [t for t in ax.xaxis.get_major_locator().tick_values(0.15, 7.0) if 0.15 <= t <= 7.0]
    assert np.allclose(ticks, [0.2, 0.5, 1, 2, 5])
    assert [ax.xaxis.get_major_formatter()(t, 0) for t in ticks] == ["0.2", "0.5", "1", "2", "5"]


def test_all_nan_grids_give_clear_errors_or_plots(tmp_path):
    # an all-NaN energy grid draws nothing but must not crash or warn; an all-NaN eta is refused
    x = np.arange(0.0, 50e3, 5e3)
    depth = make_grid(np.full((10, 10), 100.0), x, x, "EPSG:32633")
    nan = depth.copy(data=np.full((10, 10), np.nan))
    check_png(figures.plot_ray_field(depth, nan, out_path=tmp_path / "e.png"), min_w=500, min_h=300)
    with pytest.raises(InputError, match="no finite values"):
        figures.plot_uplift(nan, out_path=tmp_path / "u.png")
    check_png(figures.plot_lensing_map(nan, nan, nan, None, 0, out_path=tmp_path / "l.png"), min_w=500, min_h=300)


def test_travel_time_map_with_isochrones(case, tmp_path):
    from tsunamifocus.propagation.traveltime import isochrone_levels

    d = case["depth"]
    tt = case["travel"] * 60.0  # seconds
    tt.attrs = dict(d.attrs)
    levels = isochrone_levels(tt, 10.0)
    assert levels and all(m > 0 for m, _ in levels)
    xd, yd = d.dims[1], d.dims[0]
    out = figures.plot_travel_time(tt, d, levels, out_path=tmp_path / "travel_time.png", source_outline=case["fault"],
                                   points=[("Harbour", float(d[xd][80]), float(d[yd][60]))])
    check_png(out)  # PNG specification: size, 150 dpi, the caution in the metadata
    with pytest.raises(InputError, match="no finite values"):
        figures.plot_travel_time(tt * np.nan, d, levels, out_path=tmp_path / "x.png")
    assert not (tmp_path / "x.png").exists()


def test_map_labels_keep_out_of_the_scale_bar_and_north_arrow():
    # Readability (common practice, no source): contour labels are placed only on grid nodes
    # outside the north arrow's panel (upper right) and, on projected grids, the scale bar's
    # panel (lower left); a label there was drawn half under the panel.
    from matplotlib.figure import Figure
    from tsunamifocus.grid import GridInfo

    x = np.arange(0.0, 1000e3, 10e3) + 5e3
    y = np.arange(0.0, 800e3, 10e3) + 5e3
    depth = make_grid(np.full((y.size, x.size), 4000.0), x, y, crs="EPSG:32610")
    info = GridInfo.from_dataarray(depth)
    ax = Figure().add_subplot()
    ax._tf_ratio = 0.8
    free = figures._label_free(ax, info, x, y)
    fx = (x - x[0] + 5e3) / 1000e3
    fy = (y - y[0] + 5e3) / 800e3
    nx0, ny0, nx1, ny1 = figures._north_arrow_box(0.8)
    i = np.flatnonzero((fx > nx0) & (fx < nx1))[0]
    j = np.flatnonzero((fy > ny0) & (fy < ny1))[0]
    assert not free[j, i]  # under the north arrow
    assert not free[np.flatnonzero(fy < 0.09)[0], np.flatnonzero(fx < 0.2)[-1]]  # under the scale bar
    assert free[y.size // 2, x.size // 2] and free[-1, 0] and free[0, -1]  # elsewhere free
    lonlat = make_grid(np.full((y.size, x.size), 4000.0), np.linspace(200, 240, x.size),
                       np.linspace(-20, 12, y.size), "EPSG:4326")
    ginfo = GridInfo.from_dataarray(lonlat)
    free_geo = figures._label_free(ax, ginfo, ginfo.x, ginfo.y)
    assert free_geo[0, 0]  # no scale bar on a lon/lat map

    # the panel the labels avoid holds the scale bar actually drawn
    from matplotlib.patches import Rectangle

    ax2 = Figure().add_subplot()
    ax2.set_xlim(0, 1000e3)
    ax2.set_ylim(0, 800e3)
    figures._add_scale_bar(ax2, info)
    bg = [p for p in ax2.patches if isinstance(p, Rectangle)][0]
    x0, y0 = bg.get_x() / 1000e3, bg.get_y() / 800e3
    x1, y1 = x0 + bg.get_width() / 1000e3, y0 + bg.get_height() / 800e3
    sx0, sy0, sx1, sy1 = figures._SCALE_BAR_PANEL
    assert sx0 - 1e-3 <= x0 and sy0 - 1e-3 <= y0 and x1 <= sx1 + 1e-3 and y1 <= sy1 + 1e-3


def test_amplitude_ranking_chart_hatches_by_its_own_flag(case, tmp_path):
    # the amplitude chart greys the segments the amplitude ranking does not take (amp_reliable), not
    # those the lensing ranking does not (reliable); flags read back from a CSV file are text
    def colours(seg, name):
        rgb = read_rgb(figures.plot_ranking(seg, top_k=8, out_path=tmp_path / name, by="amp_1m_m"))[..., :3]
        blue = np.all(np.abs(rgb - np.array([0.0, 0x72 / 255, 0xB2 / 255])) < 0.03, axis=-1).sum()
        return blue, np.all(np.abs(rgb - 0.784) < 0.03, axis=-1).sum()

    seg = case["segments"].copy()
    seg["reliable"] = False
    seg["amp_reliable"] = "True"
    blue_ok, grey_ok = colours(seg, "ok.png")
    seg["amp_reliable"] = "False"
    blue_not, grey_not = colours(seg, "not.png")
    assert blue_ok > 2000 and blue_not < 50
    assert grey_not > 10 * grey_ok
