"""Tests of the ranking helpers (tsunamifocus.focusing.ranking)."""

from __future__ import annotations


def test_ranked_mask_reads_the_reliable_flag_however_it_was_stored():
    # One reading of the "ranked" flag for every stage (common practice, no source): booleans as
    # they are, a missing flag as not ranked, text read back from a CSV file, every row when the
    # table has no flag.
    import pandas as pd

    from tsunamifocus.focusing.ranking import ranked_mask

    assert ranked_mask(pd.DataFrame({"reliable": [True, False, True]})).tolist() == [True, False, True]
    assert ranked_mask(pd.DataFrame({"reliable": pd.array([True, None, False], dtype="boolean")})).tolist() == \
        [True, False, False]
    assert ranked_mask(pd.DataFrame({"reliable": ["True", "False", ""]}, dtype=object)).tolist() == [True, False, False]
    assert ranked_mask(pd.DataFrame({"x": [1.0, 2.0]})).tolist() == [True, True]
