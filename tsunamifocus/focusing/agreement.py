"""Agreement of two rankings of the same segments (Spearman, Kendall, top-k overlap)."""

from __future__ import annotations

from typing import Any

import numpy as np

from ..errors import InputError

__all__ = ['compare_rankings']


def _paired(ray_values: Any, wave_values: Any) -> tuple[np.ndarray, np.ndarray, np.ndarray | None]:
    import pandas as pd

    if isinstance(ray_values, pd.Series) and isinstance(wave_values, pd.Series):
        a, b = ray_values.align(wave_values, join="inner")
        labels = np.asarray(a.index)
        a, b = a.to_numpy(dtype=float), b.to_numpy(dtype=float)
    else:
        a = np.asarray(ray_values, dtype=float).ravel()
        b = np.asarray(wave_values, dtype=float).ravel()
        labels = None
        if a.shape != b.shape:
            raise InputError(f"ray values ({a.size}) and wave values ({b.size}) must have the same length")
    keep = np.isfinite(a) & np.isfinite(b)
    return a[keep], b[keep], (labels[keep] if labels is not None else None)


def _topk(v: np.ndarray, k: int) -> np.ndarray:
    return np.argsort(-v, kind="stable")[:k]


def compare_rankings(ray_values: Any, wave_values: Any, k: int = 10) -> dict[str, Any]:
    """Agreement of two per-segment rankings (higher value = higher rank).

    Pairs with a NaN in either input are dropped; two pandas Series are aligned on their index.

    Parameters
    ----------
    ray_values, wave_values : array-like or pandas.Series
        Per-segment values (e.g. ray amplitude at the stop isobath and wave-solver maximum amplitude).
    k : int
        Size of the top set for the overlap.

    Returns
    -------
    dict
        ``spearman`` and ``spearman_p`` (:func:`scipy.stats.spearmanr`), ``kendall`` and ``kendall_p``
        (:func:`scipy.stats.kendalltau`, tau-b), ``topk_overlap`` (fraction of the top ``k`` of one
        ranking also in the top ``k`` of the other, ties broken by order), ``topk_common`` (count),
        ``k`` (used, at most ``n``) and ``n`` (pairs compared).

    Raises
    ------
    InputError
        Fewer than 3 finite pairs, or ``k < 1``.
    """
    from scipy import stats

    if int(k) < 1:
        raise InputError(f"k={k!r}: expected a positive number of top segments")
    a, b, _ = _paired(ray_values, wave_values)
    n = int(a.size)
    if n < 3:
        raise InputError(f"need at least 3 segments with finite ray and wave values to compare rankings, got {n}")
    sp = stats.spearmanr(a, b)
    kt = stats.kendalltau(a, b)
    kk = min(int(k), n)
    common = len(set(_topk(a, kk).tolist()) & set(_topk(b, kk).tolist()))
    return {
        "spearman": float(sp.statistic),
        "spearman_p": float(sp.pvalue),
        "kendall": float(kt.statistic),
        "kendall_p": float(kt.pvalue),
        "topk_overlap": common / kk,
        "topk_common": common,
        "k": kk,
        "n": n,
    }
