"""Agreement of two rankings of the same segments (Spearman, Kendall, top-k overlap)."""

from __future__ import annotations

import math

from typing import Any

import numpy as np
from scipy import stats

from ..errors import InputError

__all__ = ['compare_rankings', 'rank_correlations', 'topk_mask']


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


def topk_mask(values: Any, k: int) -> np.ndarray:
    """True for the ``k`` largest finite values; ties go to the earlier position, NaN is never in.

    Parameters
    ----------
    values : array-like
        One value per item (e.g. per segment).
    k : int
        Size of the top set (at most the number of items).

    Returns
    -------
    numpy.ndarray of bool
        Same length as ``values``.
    """
    v = np.asarray(values, dtype=float).ravel()
    finite = np.isfinite(v)
    order = np.lexsort((np.arange(v.size), np.where(finite, -v, np.inf)))  # -value first, then position
    top = order[: min(int(k), v.size)]
    mask = np.zeros(v.size, dtype=bool)
    mask[top[finite[top]]] = True
    return mask


def rank_correlations(a: np.ndarray, b: np.ndarray) -> tuple[float, float, float, float]:
    """Spearman's rho and Kendall's tau-b of two paired samples with their p-values.

    Returns
    -------
    (rho, rho_p, tau, tau_p) : floats
        From :func:`scipy.stats.spearmanr` and :func:`scipy.stats.kendalltau`; NaN when either
        sample is constant (a ranking of ties has no correlation).
    """
    if np.size(a) < 2 or np.ptp(np.asarray(a, float)) == 0 or np.ptp(np.asarray(b, float)) == 0:
        return (math.nan,) * 4
    sp = stats.spearmanr(a, b)
    kt = stats.kendalltau(a, b)
    return float(sp.statistic), float(sp.pvalue), float(kt.statistic), float(kt.pvalue)


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
    if int(k) < 1:
        raise InputError(f"k={k!r}: expected a positive number of top segments")
    a, b, _ = _paired(ray_values, wave_values)
    n = int(a.size)
    if n < 3:
        raise InputError(f"need at least 3 segments with finite ray and wave values to compare rankings, got {n}")
    rho, rho_p, tau, tau_p = rank_correlations(a, b)
    kk = min(int(k), n)
    common = int((topk_mask(a, kk) & topk_mask(b, kk)).sum())
    return {
        "spearman": rho,
        "spearman_p": rho_p,
        "kendall": tau,
        "kendall_p": tau_p,
        "topk_overlap": common / kk,
        "topk_common": common,
        "k": kk,
        "n": n,
    }
