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
    # pandas' own string dtype (the default for text from pandas 3): "False" is not a true flag
    assert ranked_mask(pd.DataFrame({"reliable": pd.array(["True", "False", ""], dtype="string")})).tolist() == \
        [True, False, False]
    assert ranked_mask(pd.DataFrame({"reliable": pd.Series(["False", "True"])})).tolist() == [False, True]
    assert ranked_mask(pd.DataFrame({"x": [1.0, 2.0]})).tolist() == [True, True]


def test_ranked_mask_per_ranking():
    # The amplitude ranking reads its own flag (``amp_reliable``: the real run alone), the lensing
    # ranking ``reliable`` (both runs); tables written before the amplitude flag existed rank both
    # by ``reliable`` (definitions of the columns, docs/focusing.md).
    import pandas as pd
    import pytest

    from tsunamifocus.errors import InputError
    from tsunamifocus.focusing.ranking import ranked_mask

    t = pd.DataFrame({"reliable": [True, False, False], "amp_reliable": [True, True, False]})
    assert ranked_mask(t).tolist() == [True, False, False]
    assert ranked_mask(t, "lensing").tolist() == [True, False, False]
    assert ranked_mask(t, "amplitude").tolist() == [True, True, False]
    assert ranked_mask(t[["reliable"]], "amplitude").tolist() == [True, False, False]
    with pytest.raises(InputError, match="expected 'lensing' or 'amplitude'"):
        ranked_mask(t, "energy")


def test_ranked_values_take_each_quantity_from_its_own_ranking():
    # lensing columns are blanked where the lensing ranking does not rank a segment, the others
    # (amplitudes, energies) where the amplitude ranking does not (definitions, docs/focusing.md)
    import numpy as np
    import pandas as pd

    from tsunamifocus.focusing.ranking import ranked_values

    t = pd.DataFrame({"reliable": [True, False, False], "amp_reliable": [True, True, False],
                      "lensing_factor": [2.0, 3.0, 4.0], "lensing_short": [1.0, 1.5, 2.0], "amp_stop_m": [0.5, 0.6, 0.7]})
    np.testing.assert_array_equal(ranked_values(t, "lensing_factor"), [2.0, np.nan, np.nan])
    np.testing.assert_array_equal(ranked_values(t, "lensing_short"), [1.0, np.nan, np.nan])
    np.testing.assert_array_equal(ranked_values(t, "amp_stop_m"), [0.5, 0.6, np.nan])
