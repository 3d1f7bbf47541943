"""Tests of tsunamifocus.compare: rankings, rank correlations, envelopes, refusals, run folders."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
import shapely
from scipy import stats

from tsunamifocus.io.runs import LAYERS_FILE, MANIFEST_FILE, SEGMENTS_FILE, read_run
from tsunamifocus.studies.compare import compare_runs
from tsunamifocus.products.comparison import compare_to_folder
from tsunamifocus.errors import InputError
from tsunamifocus.grid import get_crs, make_grid

CRS = "EPSG:32633"
NSEG = 5


def _segments(lensing, ids=None, shift=0.0, arrival=None):
    ids = ids or [f"S{k + 1:04d}" for k in range(len(lensing))]
    geoms = [shapely.LineString([(1000.0 * k + shift, 0.0), (1000.0 * k + 900.0, 500.0)]) for k in range(len(ids))]
    df = pd.DataFrame(
        {
            "segment_id": ids,
            "name": [f"segment {k}" for k in range(len(ids))],
            "lensing_factor": np.asarray(lensing, dtype=float),
            "amp_1m_m": 0.1 * np.asarray(lensing, dtype=float),
            "geometry": geoms,
        }
    )
    if arrival is not None:
        df["first_arrival_s"] = np.asarray(arrival, dtype=float)
    return df


def _layers(seed, nx=6, ny=4, dx=1000.0):
    rng = np.random.default_rng(seed)
    x = dx * np.arange(nx)
    y = dx * np.arange(ny)
    lf = rng.uniform(0.2, 3.0, (ny, nx))
    lf[0, 0] = np.nan
    tt = rng.uniform(10.0, 60.0, (ny, nx))
    return {
        "lensing_factor": make_grid(lf, x, y, CRS, name="lensing_factor", attrs={"units": "1"}),
        "travel_time_min": make_grid(tt, x, y, CRS, name="travel_time_min", attrs={"units": "min"}),
        "energy": make_grid(rng.uniform(0, 5, (ny, nx)), x, y, CRS, name="energy", attrs={"units": "J m-1"}),
    }


def test_rank_correlations_on_constructed_rankings():
    base = [5.0, 4.0, 3.0, 2.0, 1.0]
    swapped = [5.0, 4.0, 2.0, 3.0, 1.0]  # one adjacent swap
    reverse = base[::-1]
    runs = [("A", _segments(base), _layers(1)), ("B", _segments(swapped), _layers(2)),
            ("C", _segments(reverse), _layers(3))]
    c = compare_runs(runs, top_k=2)
    corr = c.correlations[c.correlations["ranking"] == "lensing"].set_index(["run_a", "run_b"])
    # Spearman (1904): rho = 1 - 6 sum d^2 / (n (n^2 - 1)); one swap: d^2 sum = 2 -> 1 - 12/120 = 0.9
    assert corr.loc[("A", "B"), "spearman_rho"] == pytest.approx(0.9, abs=1e-12)
    # Kendall (1938): tau = (concordant - discordant) / (n (n - 1) / 2) = (9 - 1) / 10 = 0.8
    assert corr.loc[("A", "B"), "kendall_tau"] == pytest.approx(0.8, abs=1e-12)
    assert corr.loc[("A", "C"), "spearman_rho"] == pytest.approx(-1.0, abs=1e-12)
    assert corr.loc[("A", "C"), "kendall_tau"] == pytest.approx(-1.0, abs=1e-12)
    # and agree with scipy.stats (reference library) on the B-C pair
    assert corr.loc[("B", "C"), "spearman_rho"] == pytest.approx(stats.spearmanr(swapped, reverse).statistic)
    assert corr.loc[("B", "C"), "kendall_tau"] == pytest.approx(stats.kendalltau(swapped, reverse).statistic)
    assert len(c.correlations) == 6 and (c.correlations["n"] == 5).all()
    # the amplitudes here are a tenth of the lensing factors: the same order, so the same rank
    # statistics (rank correlations are invariant under an increasing map; Spearman 1904, Kendall 1938)
    amp = c.correlations[c.correlations["ranking"] == "amplitude"].set_index(["run_a", "run_b"])
    pd.testing.assert_frame_equal(amp.drop(columns="ranking"), corr.drop(columns="ranking"))


def test_amplitude_ranking_side_by_side():
    """Hotspots by amplitude are counted, correlated and enveloped like those by lensing factor."""
    a = _segments([5.0, 4.0, 3.0, 2.0, 1.0])
    a["amp_1m_m"] = [1.0, 2.0, 3.0, 4.0, 5.0]
    b = _segments([5.0, 4.0, 3.0, 2.0, 1.0])
    b["amp_1m_m"] = [1.0, 2.0, 3.0, 5.0, 4.0]  # one adjacent swap against run A
    c = compare_runs([("A", a, _layers(1)), ("B", b, _layers(2))], top_k=2)
    r = c.ranking
    np.testing.assert_array_equal(r["amp_rank_A"], [5, 4, 3, 2, 1])
    np.testing.assert_array_equal(r["amp_rank_B"], [5, 4, 3, 1, 2])
    np.testing.assert_array_equal(r["amp_1m_m_max"], [1.0, 2.0, 3.0, 5.0, 5.0])
    assert list(r["amp_max_run"]) == ["A", "A", "A", "B", "A"]  # a tie goes to the first run
    np.testing.assert_array_equal(r["amp_n_topk"], [0, 0, 0, 2, 2])
    np.testing.assert_array_equal(r["n_topk"], [2, 2, 0, 0, 0])  # the lensing counts are their own
    row = c.correlations[c.correlations["ranking"] == "amplitude"].iloc[0]
    assert row["spearman_rho"] == pytest.approx(0.9, abs=1e-12)  # one swap of five (Spearman 1904)
    assert c.correlations[c.correlations["ranking"] == "lensing"].iloc[0]["spearman_rho"] == pytest.approx(1.0)
    assert "top 2 by indicative amplitude in every scenario: S0004, S0005" in c.summary
    assert "Largest envelope indicative amplitudes at 1 m depth: S0004 5.00 m (B)" in c.summary


def test_ranking_table_side_by_side_and_topk_counts():
    a = [5.0, 4.0, 3.0, 2.0, 1.0]
    b = [1.0, 6.0, 3.0, np.nan, 2.0]
    runs = [("run one", _segments(a, arrival=[100, 200, 300, 400, 500]), _layers(1)),
            ("run two", _segments(b, arrival=[150, 120, np.nan, 50, 600]), _layers(2))]
    c = compare_runs(runs, top_k=2)
    r = c.ranking
    assert list(r.index) == [f"S{k + 1:04d}" for k in range(NSEG)]
    np.testing.assert_array_equal(r["lensing_factor_run_one"], a)
    np.testing.assert_array_equal(r["rank_run_one"], [1, 2, 3, 4, 5])
    np.testing.assert_array_equal(r["rank_run_two"], [4, 1, 2, 5, 3])  # NaN ranked last
    np.testing.assert_array_equal(r["lensing_factor_max"], [5.0, 6.0, 3.0, 2.0, 2.0])
    assert list(r["max_run"]) == ["run one", "run two", "run one", "run one", "run two"]
    np.testing.assert_array_equal(r["first_arrival_min_s"], [100, 120, 300, 50, 500])
    np.testing.assert_array_equal(r["n_topk"], [1, 2, 1, 0, 0])
    assert "S0002" in c.summary and "Spearman" in c.summary and "not a tsunami warning" in c.summary


def test_segments_a_run_does_not_rank_are_no_hotspots_of_it(tmp_path):
    # A run ranks only its reliable segments (a ray shadow, a segment of one or two rays is not
    # ranked): the comparison must not make them its top hotspot, count them in its top k, give
    # them the envelope's maximum or correlate them (common practice, no source: a comparison
    # of rankings compares what each run ranks). Run A's S0001 has the largest value of all but
    # is not reliable.
    a = _segments([9.0, 4.0, 3.0, 2.0, 1.0])
    a["reliable"] = [False, True, True, True, True]
    b = _segments([1.0, 2.0, 3.0, 5.0, 4.0])
    b["reliable"] = True
    c = compare_runs([("A", a, _layers(1)), ("B", b, _layers(2))], top_k=2)
    r = c.ranking
    np.testing.assert_array_equal(r["lensing_factor_A"], [9.0, 4.0, 3.0, 2.0, 1.0])  # the value is kept
    assert list(r["ranked_A"]) == [False, True, True, True, True]
    np.testing.assert_array_equal(r["rank_A"], [5, 1, 2, 3, 4])  # unranked last
    np.testing.assert_array_equal(r["n_topk"], [0, 1, 1, 1, 1])
    np.testing.assert_array_equal(r["lensing_factor_max"], [1.0, 4.0, 3.0, 5.0, 4.0])
    assert c.correlations.loc[0, "n"] == 4
    # Spearman over the four both rank: A 4,3,2,1 against B 2,3,5,4 (scipy.stats, reference library)
    assert c.correlations.loc[0, "spearman_rho"] == pytest.approx(stats.spearmanr([4, 3, 2, 1], [2, 3, 5, 4]).statistic)
    assert "4 segments ranked in both" in c.summary and "S0001 9" not in c.summary
    # the same when the flags come back from a CSV file as text
    a_csv = a.assign(reliable=["False", "True", "True", "True", "True"]).astype({"reliable": object})
    c2 = compare_runs([("A", a_csv, _layers(1)), ("B", b, _layers(2))], top_k=2)
    np.testing.assert_array_equal(c2.ranking["rank_A"], r["rank_A"])


@pytest.mark.filterwarnings("ignore:All-NaN slice:RuntimeWarning")
def test_envelope_is_elementwise_max_and_min_and_differences():
    runs = [(n, _segments([1, 2, 3, 4, 5]), _layers(s)) for n, s in (("A", 1), ("B", 2), ("C", 3))]
    c = compare_runs(runs)
    lf = np.stack([r[2]["lensing_factor"].values for r in runs])
    tt = np.stack([r[2]["travel_time_min"].values for r in runs])
    # definition of the envelope: numpy's NaN-ignoring elementwise max / min (reference library)
    np.testing.assert_array_equal(c.envelope["lensing_factor"].values, np.nanmax(lf, axis=0))
    np.testing.assert_array_equal(c.envelope["travel_time_min"].values, np.nanmin(tt, axis=0))
    assert np.isnan(c.envelope["lensing_factor"].values[0, 0])  # NaN in every run stays NaN
    assert get_crs(c.envelope["lensing_factor"]) == get_crs(runs[0][2]["lensing_factor"])
    assert set(c.differences) == {"B", "C"}
    np.testing.assert_array_equal(
        c.differences["C"]["energy"].values, runs[2][2]["energy"].values - runs[0][2]["energy"].values
    )


def test_refuses_mismatched_segmentation_and_grids():
    good = ("A", _segments([1, 2, 3, 4, 5]), _layers(1))
    other_ids = ("B", _segments([1, 2, 3, 4, 5], ids=["S0001", "S0002", "S0003", "S0004", "S0099"]), _layers(2))
    with pytest.raises(InputError, match=r"run 'B' has another coastline segmentation than run 'A'.*S0099"):
        compare_runs([good, other_ids])
    fewer = ("B", _segments([1, 2, 3, 4]), _layers(2))
    with pytest.raises(InputError, match="another coastline segmentation"):
        compare_runs([good, fewer])
    moved = ("B", _segments([1, 2, 3, 4, 5], shift=250.0), _layers(2))
    with pytest.raises(InputError, match=r"other segment geometries.*resampling onto a common segmentation is not"):
        compare_runs([good, moved])
    with pytest.raises(InputError, match="another grid"):
        compare_runs([good, ("B", _segments([1, 2, 3, 4, 5]), _layers(2, nx=7))])
    with pytest.raises(InputError, match="another grid"):
        compare_runs([good, ("B", _segments([1, 2, 3, 4, 5]), _layers(2, dx=500.0))])
    with pytest.raises(InputError, match="duplicate run names"):
        compare_runs([good, good])
    with pytest.raises(InputError, match="at least 2 runs"):
        compare_runs([good])


def _write_run(folder, name, lensing, seed):
    from tsunamifocus.io.gis import write_netcdf, write_segments

    folder.mkdir(parents=True)
    lay = _layers(seed)
    write_netcdf(lay, folder / LAYERS_FILE, title=f"run {name}")
    seg = _segments(lensing)
    seg["wkt"] = shapely.to_wkt(np.array(list(seg["geometry"]), dtype=object), rounding_precision=-1)
    seg.drop(columns=["geometry"]).to_csv(folder / SEGMENTS_FILE, index=False)
    # manifest layout of the pipeline: parameters.scenario.name
    (folder / MANIFEST_FILE).write_text(json.dumps({"parameters": {"scenario": {"name": name}}}))
    # also the exporter's own CSV (geometry_wkt column, '#' caution lines) is readable
    write_segments(_segments(lensing), folder / "exported", CRS, formats=("csv",), csv_wkt=True)
    return lay


def test_read_run_and_compare_to_folder(tmp_path):
    lay_a = _write_run(tmp_path / "a", "North source", [5, 4, 3, 2, 1], 1)
    _write_run(tmp_path / "b", "South source", [1, 2, 3, 4, 5], 2)
    name, seg, layers = read_run(tmp_path / "a", verify=False)
    assert name == "North source"
    assert seg.index.name == "segment_id" and list(seg.index) == [f"S{k + 1:04d}" for k in range(NSEG)]
    assert shapely.equals_exact(seg["geometry"].iloc[2], _segments([1] * 5)["geometry"].iloc[2], 0.0)
    # layers are stored as float32 in the run's NetCDF (docs/outputs.md): equal after that rounding
    np.testing.assert_array_equal(layers["lensing_factor"].values,
                                  lay_a["lensing_factor"].values.astype(np.float32))
    assert get_crs(layers["energy"]) == get_crs(lay_a["energy"])
    # the exporter's CSV (geometry_wkt) gives the same segmentation
    exp = pd.read_csv(tmp_path / "a" / "exported.csv", comment="#")
    assert "geometry_wkt" in exp.columns
    runs = [read_run(tmp_path / "a", verify=False), read_run(tmp_path / "b", verify=False)]
    written = compare_to_folder(runs, tmp_path / "cmp", top_k=2)
    for key in ("ranking_csv", "ranking_gpkg", "correlations_csv", "envelope_nc", "differences_nc", "summary_md",
                "comparison_json", "envelope_lensing_factor_tif"):
        assert written[key].is_file(), key
    md = written["summary_md"].read_text()
    assert "not a tsunami warning" in md and "Spearman rho = -1.000" in md
    corr = pd.read_csv(written["correlations_csv"], comment="#")
    assert corr.loc[0, "kendall_tau"] == pytest.approx(-1.0)
    assert written["correlations_csv"].read_text().startswith("# CAUTION:")
    import xarray as xr

    with xr.open_dataset(written["envelope_nc"]) as ds:
        np.testing.assert_array_equal(
            ds["lensing_factor"].values,
            np.fmax(runs[0][2]["lensing_factor"].values, runs[1][2]["lensing_factor"].values).astype(
                ds["lensing_factor"].dtype
            ),
        )
        assert "not a tsunami warning" in ds.attrs["caution"]
    from tsunamifocus.errors import OutputExistsError

    with pytest.raises(OutputExistsError):
        compare_to_folder(runs, tmp_path / "cmp")
    compare_to_folder(runs, tmp_path / "cmp", overwrite=True)


def test_read_run_missing_files(tmp_path):
    from tsunamifocus.errors import DataFileError

    with pytest.raises(DataFileError, match="run folder not found"):
        read_run(tmp_path / "nope")
    (tmp_path / "r").mkdir()
    with pytest.raises(DataFileError, match=SEGMENTS_FILE):
        read_run(tmp_path / "r", verify=False)
    # a run is read only with its manifest, checked against it
    with pytest.raises(DataFileError, match="manifest.json: not found; expected a finished run folder"):
        read_run(tmp_path / "r")


def test_comparison_summary_md_carries_no_raw_html(tmp_path):
    """Run names from scenario files are text in comparison_summary.md: CommonMark passes raw HTML
    through ("Raw HTML" section), so '<' and '&' must arrive as entities and Markdown marks escaped."""
    _write_run(tmp_path / "a", "<script>alert(1)</script>", [5, 4, 3, 2, 1], 1)
    _write_run(tmp_path / "b", "<img src=x onerror=alert(2)> *bold*", [1, 2, 3, 4, 5], 2)
    runs = [read_run(tmp_path / "a", verify=False), read_run(tmp_path / "b", verify=False)]
    md = compare_to_folder(runs, tmp_path / "cmp", top_k=2)["summary_md"].read_text(encoding="utf-8")
    assert "<script>" not in md and "<img" not in md
    assert "&lt;script&gt;alert\\(1\\)&lt;/script&gt;" in md and "\\*bold\\*" in md
    assert "not a tsunami warning" in md
