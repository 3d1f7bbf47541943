"""Tests of tsunamifocus.ensemble: Dask execution, streaming reduction, failures, statistics."""

from __future__ import annotations

import functools
import json
import pickle
import warnings

import numpy as np
import pandas as pd
import pytest

from tsunamifocus.ocean.demo import DemoRegion, make_demo_bathymetry
from tsunamifocus.errors import EnsembleError
from tsunamifocus.studies.ensemble import MemberResult, robustness_label, run_ensemble, segment_statistics
from tsunamifocus.studies.toymember import example_member
from tsunamifocus.errors import InputError
from tsunamifocus.grid import get_crs
from tsunamifocus.ocean.perturb import draw_member_parameters

SETTINGS = dict(bathy_rms=0.03, bathy_corr_km=30.0, magnitude=0.2, launch_jitter_deg=2.0)


@pytest.fixture(scope="module")
def depth():
    # the invented demo region at 8 km cells (80 x 95): a cheap but real bathymetry
    return make_demo_bathymetry(DemoRegion(spacing_km=8.0))


@pytest.fixture(scope="module")
def members():
    return draw_member_parameters(SETTINGS, 8, 20261201)


@pytest.fixture(scope="module")
def serial(depth, members):
    return run_ensemble(example_member, members, scheduler="serial", shared={"depth": depth})


def _same(a, b):
    """Bit-for-bit equality of two ensemble results (tables and grids)."""
    pd.testing.assert_frame_equal(a.segments, b.segments, check_exact=True)
    pd.testing.assert_frame_equal(a.member_segments, b.member_segments, check_exact=True)
    assert set(a.mean) == set(b.mean)
    for k in a.mean:
        for d1, d2 in ((a.mean, b.mean), (a.std, b.std), (a.count, b.count)):
            assert np.array_equal(np.asarray(d1[k]), np.asarray(d2[k]), equal_nan=True), k


def test_local_and_synchronous_identical_to_serial(depth, members, serial):
    local = run_ensemble(example_member, members, shared={"depth": depth})
    assert local.scheduler["kind"] == "local"
    _same(local, serial)
    sync = run_ensemble(example_member, members, scheduler="synchronous", shared={"depth": depth})
    _same(sync, serial)
    # closure instead of shared= gives the same numbers
    part = run_ensemble(functools.partial(example_member, depth=depth), members, workers=2)
    _same(part, serial)


def test_distributed_localcluster_identical_to_serial(depth, members, serial):
    """A 2-process LocalCluster started here gives bit-identical results (issue 7 CI requirement)."""
    from distributed import Client, LocalCluster

    with LocalCluster(
        n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None, silence_logs=40
    ) as cluster:
        by_address = run_ensemble(example_member, members, scheduler=cluster.scheduler_address,
                                  shared={"depth": depth})
        with Client(cluster, set_as_default=False) as client:
            by_client = run_ensemble(example_member, members, scheduler=client, shared={"depth": depth},
                                     max_buffered=2)
            assert client.status == "running"  # a given client is left open
            # both worker processes took part (members ran in separate processes)
            assert len(client.scheduler_info()["workers"]) == 2
    assert by_address.scheduler["kind"] == "distributed" and by_address.scheduler["workers"] == 2
    _same(by_address, serial)
    _same(by_client, serial)
    # bounded memory on the client: never more than max_buffered results waiting
    assert by_client.memory["max_results_waiting"] <= 2 and by_client.memory["max_buffered"] == 2


def test_member_function_pickles():
    # what distributed sends to worker processes (cloudpickle falls back to pickle by reference)
    import cloudpickle

    f = pickle.loads(pickle.dumps(example_member))
    assert f is example_member
    g = cloudpickle.loads(cloudpickle.dumps(functools.partial(example_member, segments=None)))
    assert g.func is example_member


def test_grid_statistics_match_numpy(depth, members, serial):
    """Streaming (Welford) mean/std equal numpy's nanmean / nanstd(ddof=1) over all members."""
    stack = {k: [] for k in ("energy", "lensing_factor")}
    for p in members:
        r = example_member(p, depth)
        for k in stack:
            stack[k].append(r.grids[k].values)
    for k, v in stack.items():
        v = np.stack(v)
        with np.errstate(all="ignore"), warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN land cells
            ref_mean = np.nanmean(v, axis=0)
            ref_std = np.nanstd(v, axis=0, ddof=1)
        # reference library: numpy (Welford 1962 is exact up to round-off)
        np.testing.assert_allclose(serial.mean[k].values, ref_mean, rtol=1e-12, atol=1e-12 * np.nanmax(abs(v)))
        np.testing.assert_allclose(serial.std[k].values, ref_std, rtol=1e-9, atol=1e-9 * np.nanmax(abs(v)))
        assert np.array_equal(serial.count[k].values, np.isfinite(v).sum(axis=0))
    # outputs keep the grid and its CRS
    assert get_crs(serial.mean["energy"]) == get_crs(depth)
    assert serial.mean["energy"].dims == depth.dims


def test_segment_percentiles_match_numpy(depth, members, serial):
    tables = [example_member(p, depth).segments for p in members]
    v = np.vstack([t["lensing_factor"].to_numpy() for t in tables])
    a = np.vstack([t["amp_1m_m"].to_numpy() for t in tables])
    seg = serial.segments
    # reference library: numpy.percentile, default linear interpolation (Hyndman & Fan type 7)
    np.testing.assert_array_equal(seg["lensing_factor"].to_numpy(), np.percentile(v, 50, axis=0))
    np.testing.assert_array_equal(seg["lensing_lo"].to_numpy(), np.percentile(v, 5, axis=0))
    np.testing.assert_array_equal(seg["lensing_hi"].to_numpy(), np.percentile(v, 95, axis=0))
    np.testing.assert_array_equal(seg["amp_lo"].to_numpy(), np.percentile(a, 5, axis=0))
    np.testing.assert_array_equal(seg["amp_hi"].to_numpy(), np.percentile(a, 95, axis=0))
    assert (seg["lensing_lo"] <= seg["lensing_factor"]).all() and (seg["lensing_factor"] <= seg["lensing_hi"]).all()
    # member 0 is the base case and is reported
    np.testing.assert_array_equal(seg["base_lensing_factor"].to_numpy(), v[0])
    json.dumps(serial.to_dict(), allow_nan=False)


def test_topk_probability_exact_on_constructed_case():
    ids = ["A", "B", "C", "D"]
    # top-2 per member by construction: A,B | A,B | A,B | A,C | A,C  -> P = 1, 0.6, 0.4, 0
    rows = [
        [9, 8, 1, 0],
        [9, 8, 2, 0],
        [5, 4, 3, 0],
        [9, 1, 8, 0],
        [9, 2, 8, np.nan],
    ]
    tables = [pd.DataFrame({"lensing_factor": r}, index=pd.Index(ids, name="segment_id")) for r in rows]
    st = segment_statistics(tables, top_k=2)
    np.testing.assert_array_equal(st["p_topk"].to_numpy(), [1.0, 0.6, 0.4, 0.0])
    assert list(st["robustness"]) == ["very likely", "about as likely as not", "about as likely as not", "unlikely"]
    # every member contributes exactly k hotspots
    assert st["p_topk"].sum() * len(rows) == pytest.approx(2 * len(rows))
    assert "p_topk_amp" not in st  # no amplitude column, no amplitude probability
    # the same members ranked by amplitude as well (counted by hand): top 2 D,C | D,C | B,A | B,A | D,C
    amp = [[0, 1, 2, 3], [0, 1, 2, 3], [4, 5, 1, 0], [4, 5, 1, 0], [1, 1, 2, 3]]
    both = [t.assign(amp_1m_m=a) for t, a in zip(tables, amp)]
    st = segment_statistics(both, top_k=2)
    np.testing.assert_array_equal(st["p_topk"].to_numpy(), [1.0, 0.6, 0.4, 0.0])  # unchanged
    np.testing.assert_array_equal(st["p_topk_amp"].to_numpy(), [0.4, 0.4, 0.6, 0.6])
    assert list(st["robustness_amp"]) == ["about as likely as not"] * 4
    # ties: equal values are broken by segment order (documented)
    tie = [pd.DataFrame({"lensing_factor": [1.0, 1.0, 1.0]}, index=pd.Index(["X", "Y", "Z"], name="segment_id"))]
    np.testing.assert_array_equal(segment_statistics(tie, top_k=2)["p_topk"].to_numpy(), [1.0, 1.0, 0.0])
    # the calibrated likelihood scale (Mastrandrea et al. 2010, IPCC AR5 guidance note on the
    # consistent treatment of uncertainties: very likely 90-100 %, likely 66-100 %, about as
    # likely as not 33-66 %, unlikely 0-33 %)
    assert robustness_label(0.9) == "very likely" and robustness_label(0.89) == "likely"
    assert robustness_label(0.66) == "likely" and robustness_label(0.65) == "about as likely as not"
    assert robustness_label(0.33) == "about as likely as not" and robustness_label(0.32) == "unlikely"
    assert robustness_label(float("nan")) == "unlikely"


def _table(ids, values):
    return pd.DataFrame({"lensing_factor": values}, index=pd.Index(ids, name="segment_id"))


class _FlakyOnce:
    """Member 1 raises on its first call, then succeeds; the others always succeed."""

    def __init__(self):
        self.calls: dict[int, int] = {}

    def __call__(self, params):
        i = params["member"]
        self.calls[i] = self.calls.get(i, 0) + 1
        if i == 1 and self.calls[i] == 1:
            raise RuntimeError(f"transient failure of member {i}")
        return MemberResult(_table(["S1", "S2"], [float(i), 1.0]), {"g": np.full((3, 4), float(i))})


def _bad_member(params):
    if params["member"] == 2:
        raise ValueError("member 2 always fails")
    return MemberResult(_table(["S1", "S2"], [float(params["member"]), 1.0]), {"g": np.full((3, 4), 1.0)})


@pytest.mark.parametrize("scheduler", ["serial", "local"])
def test_failed_member_retried_once(scheduler):
    members = draw_member_parameters({}, 4, 1)
    fn = _FlakyOnce()
    res = run_ensemble(fn, members, scheduler=scheduler, retries=1)
    assert res.n_failed == 0 and res.n_succeeded == 4
    assert fn.calls == {0: 1, 1: 2, 2: 1, 3: 1}
    # without retries the transient failure is reported
    res0 = run_ensemble(_FlakyOnce(), members, scheduler=scheduler, retries=0)
    assert res0.n_failed == 1 and res0.failures[0].member == 1 and res0.failures[0].attempts == 1


@pytest.mark.parametrize("scheduler", ["serial", "local"])
def test_always_failing_member_reported_run_completes(scheduler):
    members = draw_member_parameters({"strike_deg": 3.0}, 5, 77)
    res = run_ensemble(_bad_member, members, scheduler=scheduler, retries=1)
    assert res.n_failed == 1 and res.n_succeeded == 4
    f = res.failures[0]
    assert f.member == 2 and f.seed == members[2]["seed"] and f.params == members[2]
    assert "member 2 always fails" in f.error and f.attempts == 2
    d = res.to_dict()
    assert d["n_failed"] == 1 and d["failures"][0]["seed"] == members[2]["seed"]
    assert "1 failed" in res.summary()
    # statistics over the 4 others only: grid mean of ones is one, count 4
    assert np.all(res.mean["g"] == 1.0) and np.all(res.count["g"] == 4)
    assert sorted(res.member_segments["member"].unique()) == [0, 1, 3, 4]


def test_all_failing_raises():
    members = draw_member_parameters({}, 3, 1)

    def boom(p):
        raise OSError("disk gone")

    with pytest.raises(EnsembleError, match=r"all 3 ensemble members failed.*seed .*disk gone"):
        run_ensemble(boom, members, scheduler="serial")


def test_inconsistent_member_results_are_failures():
    members = draw_member_parameters({}, 3, 1)

    def fn(p):
        ids = ["S1", "S2"] if p["member"] != 1 else ["S1", "S3"]
        shape = (3, 4) if p["member"] != 2 else (4, 4)
        return MemberResult(_table(ids, [1.0, 2.0]), {"g": np.ones(shape)})

    res = run_ensemble(fn, members, scheduler="serial")
    assert [f.member for f in res.failures] == [1, 2]
    assert "segment ids differ" in res.failures[0].error and "shape" in res.failures[1].error

    def wrong(p):
        return {"not": "a result"}

    with pytest.raises(EnsembleError, match="expected a MemberResult"):
        run_ensemble(wrong, members, scheduler="serial")


def test_progress_callback_and_bad_arguments():
    members = draw_member_parameters({}, 4, 1)
    seen = []
    run_ensemble(_bad_member, members, scheduler="local", progress=lambda *a: seen.append(a))
    assert [s[0] for s in seen] == [1, 2, 3, 4] and all(s[1] == 4 for s in seen)
    assert seen[-1][3] == 0.0 and all(s[2] >= 0 for s in seen)
    with pytest.raises(InputError, match="no members"):
        run_ensemble(_bad_member, [])
    with pytest.raises(InputError, match="scheduler"):
        run_ensemble(_bad_member, members, scheduler="nonsense")
    with pytest.raises(EnsembleError, match="cannot connect"):
        run_ensemble(_bad_member, members, scheduler="tcp://127.0.0.1:1", connect_timeout_s=1.0)


def test_local_scheduler_bounds_results_alive():
    """With one slow member, later members wait: at most max_buffered results exist at once."""
    import threading
    import time

    lock = threading.Lock()
    log: dict[int, tuple[float, float]] = {}

    def fn(p):
        t0 = time.perf_counter()
        if p["member"] == 0:
            time.sleep(0.5)
        with lock:
            log[p["member"]] = (t0, time.perf_counter())
        return MemberResult(_table(["S1"], [1.0]), {"g": np.ones((2, 2))})

    members = draw_member_parameters({}, 10, 3)
    res = run_ensemble(fn, members, scheduler="local", workers=2, max_buffered=3)
    assert res.n_succeeded == 10 and res.memory["max_buffered"] == 3
    end0 = log[0][1]
    # member i >= 3 depends on the fold of member i - 3, hence starts after member 0 ended
    assert all(log[i][0] >= end0 for i in range(3, 10))


def test_progress_bar_on_stderr(capsys):
    # tqdm prints "done/total" with elapsed and remaining time (tqdm documentation, default bar format)
    run_ensemble(_bad_member, draw_member_parameters({}, 4, 1), scheduler="serial", progress=True)
    err = capsys.readouterr().err
    assert "ensemble members" in err and "4/4" in err and "failed=1" in err


class _RandomGridMember:
    """Member whose grid has a member-specific random NaN pattern (module level: picklable)."""

    def __call__(self, params):
        rng = np.random.default_rng(params["seed"])
        g = rng.lognormal(0.0, 1.0, (7, 9)) * 1e3
        g[rng.random((7, 9)) < 0.3] = np.nan
        return MemberResult(_table(["S1", "S2"], rng.random(2)), {"g": g})


def test_streaming_moments_with_gaps_match_numpy():
    members = draw_member_parameters({}, 12, 99)
    fn = _RandomGridMember()
    res = run_ensemble(fn, members, scheduler="local", max_buffered=4)
    v = np.stack([fn(p).grids["g"] for p in members])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # cells with < 2 values
        ref_mean = np.nanmean(v, axis=0)
        ref_std = np.nanstd(v, axis=0, ddof=1)
    # reference library: numpy nanmean / nanstd(ddof=1); Welford's update is exact up to round-off
    np.testing.assert_allclose(res.mean["g"], ref_mean, rtol=1e-12)
    np.testing.assert_allclose(res.std["g"], ref_std, rtol=1e-10)
    np.testing.assert_array_equal(res.count["g"], np.isfinite(v).sum(axis=0))
