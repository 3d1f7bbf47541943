"""Tests of tsunamifocus.studies.sourceset: set statistics by hand and the shared preparation."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from tsunamifocus.errors import InputError
from tsunamifocus.studies.sourceset import set_statistics

IDS = pd.Index(["S1", "S2", "S3", "S4"], name="segment_id")


def tables():
    lens = {0: [3.0, 2.0, 1.0, np.nan], 1: [1.0, 3.0, 2.0, 0.5], 2: [2.0, 1.0, 3.0, 4.0]}
    amp = {0: [1.0, 2.0, 3.0, np.nan], 1: [2.0, 2.0, 2.0, 2.0], 2: [3.0, 1.0, 1.0, 5.0]}
    return {k: pd.DataFrame({"lensing_factor": lens[k], "amp_1m_m": amp[k]}, index=IDS) for k in lens}


def test_frequencies_by_hand():
    stats, pairs = set_statistics(tables(), {0: "a", 1: "b", 2: "c"}, {0: 1.0, 1: 1.0, 2: 2.0}, top_k=2)
    # top 2 by lensing: a -> S1, S2; b -> S2, S3; c -> S4, S3 (NaN never counts; counted by hand)
    np.testing.assert_allclose(stats["topk_frequency"], [1 / 3, 2 / 3, 2 / 3, 1 / 3])
    # weighted: (sum of the weights of the members with the segment in their top 2) / (sum of weights)
    np.testing.assert_allclose(stats["topk_frequency_weighted"], [1 / 4, 2 / 4, 3 / 4, 2 / 4])
    assert stats.loc["S3", "hotspot_sources"] == "b; c"
    assert stats.loc["S3", "rank_frequency"] == 1
    lp = pairs[pairs["ranking"] == "lensing"]
    assert sorted(zip(lp["source"], lp["segment_id"])) == [
        ("a", "S1"), ("a", "S2"), ("b", "S2"), ("b", "S3"), ("c", "S3"), ("c", "S4")]
    # median / 90th percentile / maximum as numpy's reference percentiles over the finite values
    v = np.array([np.nan, 0.5, 4.0])
    assert stats.loc["S4", "lensing_median"] == pytest.approx(np.percentile([0.5, 4.0], 50))
    assert stats.loc["S4", "lensing_p90"] == pytest.approx(np.percentile([0.5, 4.0], 90))
    assert stats.loc["S4", "lensing_max"] == np.nanmax(v)
    assert stats.loc["S1", "amp_p90_m"] == pytest.approx(np.percentile([1.0, 2.0, 3.0], 90))
    assert list(stats["n_valid"]) == [3, 3, 3, 2]


def test_amplitude_frequencies_by_hand():
    stats, pairs = set_statistics(tables(), {0: "a", 1: "b", 2: "c"}, {0: 1.0, 1: 1.0, 2: 2.0}, top_k=2)
    # top 2 by amplitude (counted by hand): a -> S3, S2; b (all equal: the earlier segments) -> S1, S2;
    # c -> S4, S1
    np.testing.assert_allclose(stats["amp_topk_frequency"], [2 / 3, 2 / 3, 1 / 3, 1 / 3])
    np.testing.assert_allclose(stats["amp_topk_frequency_weighted"], [3 / 4, 2 / 4, 1 / 4, 2 / 4])
    assert stats.loc["S1", "amp_hotspot_sources"] == "b; c"
    # S2 and S4 tie at 2/4 weighted: the larger median amplitude first (S4: median of 2 and 5 = 3.5; S2: 2)
    assert list(stats.loc[["S1", "S4", "S2", "S3"], "amp_rank_frequency"]) == [1, 2, 3, 4]
    ap = pairs[pairs["ranking"] == "amplitude"]
    assert sorted(zip(ap["source"], ap["segment_id"])) == [
        ("a", "S2"), ("a", "S3"), ("b", "S1"), ("b", "S2"), ("c", "S1"), ("c", "S4")]
    assert set(pairs["ranking"]) == {"lensing", "amplitude"} and len(pairs) == 12


def test_equal_weights_give_the_unweighted_frequency():
    stats, _ = set_statistics(tables(), {0: "a", 1: "b", 2: "c"}, {0: 5.0, 1: 5.0, 2: 5.0}, top_k=1)
    np.testing.assert_allclose(stats["topk_frequency_weighted"], stats["topk_frequency"])


def test_bad_inputs():
    t = tables()
    with pytest.raises(InputError, match="weights must be positive"):
        set_statistics(t, {0: "a", 1: "b", 2: "c"}, {0: 1.0, 1: 0.0, 2: 1.0}, top_k=2)
    t[1] = t[1].iloc[::-1]
    with pytest.raises(InputError, match="other segment ids"):
        set_statistics(t, {0: "a", 1: "b", 2: "c"}, {0: 1.0, 1: 1.0, 2: 1.0}, top_k=2)
    with pytest.raises(InputError, match="no successful member"):
        set_statistics({}, {}, {}, top_k=2)
