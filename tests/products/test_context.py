"""Tests of the appendix context's wording (tsunamifocus.products.context)."""

from __future__ import annotations

import dataclasses

from tsunamifocus.io.scenario import EnsembleConfig
from tsunamifocus.products.context import _ensemble_perturbations


def test_ensemble_text_names_only_what_the_members_perturb():
    # A perturbation of zero width is not a perturbation: the appendix lists only those set, so a
    # reader does not take "strike +/- 0 deg" for an uncertainty that was studied (common
    # practice, no source).
    e = dataclasses.replace(EnsembleConfig(), members=8, bathy_rms=0.03, bathy_corr_km=50.0, along_km=50.0,
                            magnitude=0.1)
    text = _ensemble_perturbations(e)
    assert "3 % rms (correlation length 50 km)" in text
    assert "along-strike +/- 50 km, magnitude +/- 0.1" in text
    assert "strike +/- 0" not in text and "dip" not in text and "across" not in text and "ray fan" not in text
    only_fan = _ensemble_perturbations(dataclasses.replace(EnsembleConfig(), members=4, launch_jitter_deg=2.0))
    assert only_fan == "rotate the ray fan by up to +/- 2 deg"
    assert "no perturbation" in _ensemble_perturbations(dataclasses.replace(EnsembleConfig(), members=4))
