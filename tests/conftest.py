"""Shared fixtures.

Real open data (see ../shared/data/README.md) is found through the environment variable
``TSUNAMIFOCUS_SHARED_DATA`` or, failing that, the folder ``shared/data`` beside the checkout
(``<repo>/../shared/data``). Tests marked ``realdata`` skip with a clear reason only when neither
exists; in CI the folder is always there.
"""

from __future__ import annotations

import os
import pathlib

import pytest

REPO = pathlib.Path(__file__).resolve().parents[1]


def shared_data_dir() -> pathlib.Path | None:
    """Return the folder holding the shared open data, or None."""
    env = os.environ.get("TSUNAMIFOCUS_SHARED_DATA")
    candidates = [pathlib.Path(env)] if env else []
    candidates.append(REPO.parent / "shared" / "data")
    for c in candidates:
        if (c / "etopo1_0p1deg.nc").is_file():
            return c
    return None


@pytest.fixture(scope="session")
def etopo_path() -> pathlib.Path:
    """Path of the 0.1-degree global relief grid (ETOPO1 resampled)."""
    d = shared_data_dir()
    if d is None:
        if os.environ.get("CI"):
            pytest.fail("CI=true but shared/data/etopo1_0p1deg.nc was not found (set TSUNAMIFOCUS_SHARED_DATA)")
        pytest.skip("shared open data not found: set TSUNAMIFOCUS_SHARED_DATA to the folder of etopo1_0p1deg.nc")
    return d / "etopo1_0p1deg.nc"
