"""Scenario comparison: side-by-side rankings, rank correlations, envelopes and difference maps.

Screening tool only: not a tsunami warning, forecast or inundation map (see CAUTIONS.md).

:func:`compare_runs` compares finished runs (one per candidate source or scenario) segment by
segment and cell by cell. **Runs made on different grids, coastlines or segmentations are
refused** (:class:`tsunamifocus.errors.InputError` naming the runs and what differs): comparing
hotspots only makes sense when "segment S0042" is the same stretch of coast in every run, and
resampling one segmentation onto another would blend neighbouring hotspots. Re-run the
scenarios on a common grid and coastline instead.

What is compared
----------------
* ranking table: per segment and run the lensing factor, whether the run ranks the segment
  (``ranked_<run>``: its ``reliable`` flag), its rank (1 = highest), the indicative amplitude and
  first arrival when present; the envelope over runs (maximum lensing factor, earliest arrival)
  and the number of runs in which the segment is a top-k hotspot. Ranks, top-k counts and the
  envelope's maximum use only the segments each run ranks (a ray shadow or a segment of too few
  rays is not a hotspot of that run);
* rank correlation of the per-segment lensing factor between every pair of runs: Spearman's rho
  and Kendall's tau-b (:func:`scipy.stats.spearmanr`, :func:`scipy.stats.kendalltau`) over the
  segments both rank;
* envelope layers: the cell-wise maximum lensing factor (and focusing factor, energy) and the
  earliest travel time over runs, NaN-aware (a cell is NaN only where every run is NaN);
* difference maps of each run minus the first run.

:func:`read_run` reads a finished run folder; :func:`compare_to_folder` writes everything with
the writers of :mod:`tsunamifocus.export` (cautions included).
"""

from __future__ import annotations

import itertools
import math
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from ..cautions import caution_summary
from ..coast.segments import STATIC_SEGMENT_COLUMNS
from ..errors import InputError
from ..focusing.agreement import rank_correlations, topk_mask
from ..focusing.ranking import ranked_values
from ..grid import GridInfo, get_crs
from ..io.runs import RunTuple

__all__ = ['Comparison', 'compare_runs']

#: Layers reduced into the envelope: name -> "max" (largest over runs) or "min" (smallest).
ENVELOPE_RULES: dict[str, str] = {
    "lensing_factor": "max",
    "focusing_factor": "max",
    "energy": "max",
    "travel_time_min": "min",
}
#: Layers differenced against the first run.
DIFFERENCE_LAYERS = ("lensing_factor", "focusing_factor", "energy", "travel_time_min")
_STATIC = STATIC_SEGMENT_COLUMNS
_PER_RUN = ("lensing_factor", "amp_1m_m", "first_arrival_s")



@dataclass
class Comparison:
    """Result of :func:`compare_runs`.

    Attributes
    ----------
    names : list of str
        Run names, in the order given (the first is the reference of the differences).
    ranking : pandas.DataFrame
        Index ``segment_id``; static columns of the first run (name, geometry...), then per run
        ``lensing_factor_<run>``, ``rank_<run>``, ``amp_1m_m_<run>`` [m] and
        ``first_arrival_s_<run>`` [s] (when present), then ``lensing_factor_max``,
        ``max_run`` (run giving the maximum), ``first_arrival_min_s``, ``n_topk`` (runs in
        which the segment is among the top k) and ``rank_envelope`` (1 = highest maximum).
        When every run has ``amp_1m_m``, the same by indicative amplitude: ``amp_ranked_<run>``,
        ``amp_rank_<run>``, ``amp_1m_m_max``, ``amp_max_run``, ``amp_n_topk``,
        ``amp_rank_envelope`` (the amplitude ranking is the one the wave checks hold more
        closely). ``<run>`` is the run name with non-word characters replaced by ``_``.
    correlations : pandas.DataFrame
        One row per ranking and pair of runs: ``ranking`` (``"lensing"``, then ``"amplitude"``
        when every run has ``amp_1m_m``), ``run_a``, ``run_b``, ``n`` (segments ranked in both),
        ``spearman_rho``, ``spearman_p``, ``kendall_tau``, ``kendall_p``.
    envelope : dict of str -> xarray.DataArray
        Cell-wise envelope of the layers present in every run (see :data:`ENVELOPE_RULES`):
        ``lensing_factor`` = maximum, ``travel_time_min`` = earliest arrival, ...
    differences : dict of str -> dict of str -> xarray.DataArray
        ``differences[run][layer]`` = run minus the first run, for every run after the first.
    top_k : int
        k used for ``n_topk``.
    summary : str
        Plain-text summary (ends with the short caution).
    """

    names: list[str]
    ranking: pd.DataFrame
    correlations: pd.DataFrame
    envelope: dict[str, xr.DataArray]
    differences: dict[str, dict[str, xr.DataArray]]
    top_k: int
    summary: str
    column_names: dict[str, str] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe record for a manifest (no grids)."""

        def clean(v: Any) -> Any:
            if isinstance(v, (float, np.floating)):
                return float(v) if math.isfinite(v) else None
            if isinstance(v, (np.integer,)):
                return int(v)
            return v

        return {
            "runs": list(self.names),
            "n_segments": int(len(self.ranking)),
            "top_k": int(self.top_k),
            "correlations": [{k: clean(v) for k, v in row.items()} for row in self.correlations.to_dict("records")],
            "envelope_layers": {k: ENVELOPE_RULES.get(k, "") for k in self.envelope},
            "difference_layers": {k: list(v) for k, v in self.differences.items()},
            "segmentation_policy": "runs must share grid, coastline and segmentation (no resampling)",
        }


def _column_suffix(name: str) -> str:
    return re.sub(r"\W+", "_", name).strip("_") or "run"


def _segments_indexed(seg: Any, run: str) -> pd.DataFrame:
    if not isinstance(seg, pd.DataFrame):
        raise InputError(f"compare: run '{run}': segments is {type(seg).__name__}; expected a pandas DataFrame")
    if seg.index.name != "segment_id":
        if "segment_id" not in seg.columns:
            raise InputError(f"compare: run '{run}': segments table has no 'segment_id' column or index")
        seg = seg.set_index("segment_id")
    seg = seg.copy()
    seg.index = seg.index.astype(str)
    if not seg.index.is_unique:
        raise InputError(f"compare: run '{run}': duplicate segment ids in the segments table")
    if "lensing_factor" not in seg.columns:
        raise InputError(f"compare: run '{run}': segments table has no 'lensing_factor' column")
    return seg


def _coord_tol(values: np.ndarray) -> float:
    finite = values[np.isfinite(values)]
    scale = float(np.max(np.abs(finite))) if finite.size else 1.0
    return 1e-9 * max(1.0, scale)


_REFUSE = (
    "comparison needs runs made on the same grid, coastline and segmentation "
    "(resampling onto a common segmentation is not supported)"
)


def _check_segmentation(ref_name: str, ref: pd.DataFrame, name: str, seg: pd.DataFrame) -> pd.DataFrame:
    a, b = set(ref.index), set(seg.index)
    if a != b:
        only_b = sorted(b - a)
        only_a = sorted(a - b)
        ex = (only_b or only_a)[:3]
        raise InputError(
            f"compare: run '{name}' has another coastline segmentation than run '{ref_name}' "
            f"({len(only_a)} segment ids only in '{ref_name}', {len(only_b)} only in '{name}', e.g. {ex}); "
            + _REFUSE
        )
    seg = seg.reindex(ref.index)
    if "geometry" in ref.columns and "geometry" in seg.columns:
        import shapely

        g1 = np.array(list(ref["geometry"]), dtype=object)
        g2 = np.array(list(seg["geometry"]), dtype=object)
        coords = shapely.get_coordinates(g1[[g is not None for g in g1]])
        tol = _coord_tol(coords.ravel()) if coords.size else 1e-9
        same = np.array(
            [
                (x is None and y is None) or (x is not None and y is not None and bool(shapely.equals_exact(x, y, tol)))
                for x, y in zip(g1, g2)
            ]
        )
        if not same.all():
            bad = list(ref.index[~same][:3])
            raise InputError(
                f"compare: run '{name}' has other segment geometries than run '{ref_name}' "
                f"({int((~same).sum())} segments differ, e.g. {bad}); " + _REFUSE
            )
    else:
        for col in ("x_mid", "y_mid", "length_m"):
            if col in ref.columns and col in seg.columns:
                v1 = ref[col].to_numpy(dtype=float)
                v2 = seg[col].to_numpy(dtype=float)
                if not np.allclose(v1, v2, rtol=1e-9, atol=_coord_tol(v1), equal_nan=True):
                    raise InputError(
                        f"compare: run '{name}': segment column '{col}' differs from run '{ref_name}'; " + _REFUSE
                    )
    return seg


def _check_grid(ref_name: str, ref: xr.DataArray, name: str, layer: str, da: xr.DataArray) -> None:
    try:
        i1 = GridInfo.from_dataarray(ref)
        i2 = GridInfo.from_dataarray(da)
    except Exception as exc:  # noqa: BLE001 - name the run and layer
        raise InputError(f"compare: layer '{layer}' of run '{name}' or '{ref_name}' is not a valid grid ({exc})") from None
    if get_crs(ref) != get_crs(da):
        raise InputError(f"compare: layer '{layer}' of run '{name}' is on another CRS than run '{ref_name}'; " + _REFUSE)
    if (i1.nx, i1.ny) != (i2.nx, i2.ny) or not (
        np.allclose(i1.x, i2.x, rtol=0, atol=1e-9 * max(1.0, abs(i1.dx)))
        and np.allclose(i1.y, i2.y, rtol=0, atol=1e-9 * max(1.0, abs(i1.dy)))
    ):
        raise InputError(
            f"compare: layer '{layer}' of run '{name}' is on another grid ({i2.ny} x {i2.nx}) than run "
            f"'{ref_name}' ({i1.ny} x {i1.nx}); " + _REFUSE
        )


def _rank_desc(v: pd.Series) -> pd.Series:
    return v.rank(ascending=False, method="first", na_option="bottom").astype("int64")


def compare_runs(runs: Sequence[RunTuple], *, top_k: int = 10) -> Comparison:
    """Compare two or more finished runs on the same grid and coastline segmentation.

    Parameters
    ----------
    runs : sequence of (name, segments, layers)
        ``name`` (unique str), ``segments`` (segments table: index or column ``segment_id``,
        column ``lensing_factor`` [1]; ``amp_1m_m`` [m], ``first_arrival_s`` [s], ``geometry``
        used when present), ``layers`` (dict of grid DataArrays, e.g. ``lensing_factor``,
        ``travel_time_min`` [min], ``energy``, ``focusing_factor``, ``depth``).
    top_k : int
        Number of top hotspots per run counted in ``n_topk``.

    Returns
    -------
    Comparison

    Raises
    ------
    InputError
        Fewer than two runs, duplicate names, or runs on different grids / coastlines /
        segmentations (refused, see the module docstring).
    """
    runs = list(runs)
    names = _check_runs(runs, top_k)
    safe = [_column_suffix(n) for n in names]
    if len(set(safe)) != len(safe):
        safe = [f"{s}_{k + 1}" for k, s in enumerate(safe)]
    ref_name = names[0]
    ref_seg = _segments_indexed(runs[0][1], ref_name)
    segs = [ref_seg]
    for name, seg, _ in runs[1:]:
        segs.append(_check_segmentation(ref_name, ref_seg, str(name), _segments_indexed(seg, str(name))))
    layers, common = _common_layers(runs, ref_name)
    ranking, colmap, k = _ranking_table(names, safe, segs, ref_seg, top_k)
    corr = _rank_correlation_table(names, np.vstack([ranked_values(s, "lensing_factor") for s in segs]), "lensing")
    if all("amp_1m_m" in s.columns for s in segs):
        corr = pd.concat([corr, _rank_correlation_table(
            names, np.vstack([ranked_values(s, "amp_1m_m") for s in segs]), "amplitude")], ignore_index=True)
    envelope = _envelopes(names, layers, common)
    differences = _differences(names, layers, common)
    summary = _summary(names, ranking, corr, k, colmap)
    return Comparison(names, ranking, corr, envelope, differences, k, summary, colmap)


def _check_runs(runs: list, top_k: int) -> list[str]:
    """Refuse too few runs, a bad top_k, malformed run tuples and empty or repeated names; the names."""
    if len(runs) < 2:
        raise InputError(f"compare: need at least 2 runs, got {len(runs)}")
    if isinstance(top_k, bool) or not isinstance(top_k, (int, np.integer)) or top_k < 1:
        raise InputError(f"compare: top_k = {top_k!r}; expected an integer >= 1")
    names: list[str] = []
    for r in runs:
        if not (isinstance(r, (tuple, list)) and len(r) == 3):
            raise InputError("compare: each run must be a (name, segments, layers) tuple")
        names.append(str(r[0]))
    if any(not n.strip() for n in names):
        raise InputError("compare: run names must not be empty")
    dup = sorted({n for n in names if names.count(n) > 1})
    if dup:
        raise InputError(f"compare: duplicate run names {dup}; give each run a unique name")
    return names


def _common_layers(runs: list, ref_name: str) -> tuple[list[dict[str, xr.DataArray]], list[str]]:
    """The runs' layer dicts and the names of the layers all runs have (all on one grid)."""
    layers: list[dict[str, xr.DataArray]] = []
    for name, _, lay in runs:
        if not isinstance(lay, Mapping):
            raise InputError(f"compare: run '{name}': layers must be a dict of DataArrays")
        layers.append(dict(lay))
    common = [k for k in layers[0] if all(k in lay for lay in layers[1:])]
    for k in common:
        for (name, _, _), lay in zip(runs[1:], layers[1:]):
            _check_grid(ref_name, layers[0][k], str(name), k, lay[k])
    # grids of different layers of the first run must agree too (one grid per run)
    for k in common[1:]:
        _check_grid(ref_name, layers[0][common[0]], ref_name, k, layers[0][k])
    return layers, common


def _ranking_table(names: list[str], safe: list[str], segs: list[pd.DataFrame], ref_seg: pd.DataFrame,
                   top_k: int) -> tuple[pd.DataFrame, dict[str, str], int]:
    """Side-by-side ranking: per-run values and ranks, the envelope maximum, earliest arrival, top-k counts."""
    static = [c for c in _STATIC if c in ref_seg.columns]
    ranking = ref_seg[static].copy()
    colmap: dict[str, str] = {}
    # ranks, top-k counts and the envelope use what each run ranks (its reliable segments): a
    # shadow or a segment of one or two rays is not a hotspot of that run
    lens = np.vstack([ranked_values(s, "lensing_factor") for s in segs])
    for n, sn, s, ls in zip(names, safe, segs, lens):
        colmap[n] = sn
        ranking[f"lensing_factor_{sn}"] = s["lensing_factor"].to_numpy(dtype=float)
        ranking[f"ranked_{sn}"] = np.isfinite(ls)
        ranking[f"rank_{sn}"] = _rank_desc(pd.Series(ls, index=s.index)).to_numpy()
        for col in _PER_RUN[1:]:
            if col in s.columns:
                ranking[f"{col}_{sn}"] = s[col].to_numpy(dtype=float)
    finite_any = np.isfinite(lens).any(axis=0)
    with np.errstate(invalid="ignore"):
        lmax = np.where(finite_any, np.nanmax(np.where(np.isfinite(lens), lens, -np.inf), axis=0), np.nan)
        arg = np.argmax(np.where(np.isfinite(lens), lens, -np.inf), axis=0)
    ranking["lensing_factor_max"] = lmax
    ranking["max_run"] = [names[a] if f else "" for a, f in zip(arg, finite_any)]
    if all("first_arrival_s" in s.columns for s in segs):
        fa = np.vstack([s["first_arrival_s"].to_numpy(dtype=float) for s in segs])
        fin = np.isfinite(fa).any(axis=0)
        ranking["first_arrival_min_s"] = np.where(fin, np.min(np.where(np.isfinite(fa), fa, np.inf), axis=0), np.nan)
    k = min(int(top_k), len(ref_seg))
    n_top = np.zeros(len(ref_seg), dtype=np.int64)
    for ls in lens:
        n_top += topk_mask(ls, k)
    ranking["n_topk"] = n_top
    ranking["rank_envelope"] = _rank_desc(ranking["lensing_factor_max"]).to_numpy()
    if all("amp_1m_m" in s.columns for s in segs):
        amp = np.vstack([ranked_values(s, "amp_1m_m") for s in segs])
        for sn, s, av in zip(safe, segs, amp):
            ranking[f"amp_ranked_{sn}"] = np.isfinite(av)
            ranking[f"amp_rank_{sn}"] = _rank_desc(pd.Series(av, index=s.index)).to_numpy()
        fin = np.isfinite(amp).any(axis=0)
        masked = np.where(np.isfinite(amp), amp, -np.inf)
        ranking["amp_1m_m_max"] = np.where(fin, masked.max(axis=0), np.nan)
        ranking["amp_max_run"] = [names[a] if f else "" for a, f in zip(masked.argmax(axis=0), fin)]
        ranking["amp_n_topk"] = np.sum([topk_mask(av, k) for av in amp], axis=0).astype(np.int64)
        ranking["amp_rank_envelope"] = _rank_desc(ranking["amp_1m_m_max"]).to_numpy()
    return ranking, colmap, k


def _rank_correlation_table(names: list[str], lens: np.ndarray, ranking: str) -> pd.DataFrame:
    """Spearman's rho and Kendall's tau of every pair of runs over the segments finite in both
    (``lens``: one row of ranked values per run; ``ranking`` names the ranking in the table)."""
    rows = []
    for i, j in itertools.combinations(range(len(names)), 2):
        a, b = lens[i], lens[j]
        ok = np.isfinite(a) & np.isfinite(b)
        n_ok = int(ok.sum())
        if n_ok >= 3 and np.ptp(a[ok]) > 0 and np.ptp(b[ok]) > 0:
            rho, rp, tau, tp = rank_correlations(a[ok], b[ok])
        else:
            rho = rp = tau = tp = float("nan")
        rows.append(
            {"ranking": ranking, "run_a": names[i], "run_b": names[j], "n": n_ok, "spearman_rho": rho,
             "spearman_p": rp, "kendall_tau": tau, "kendall_p": tp}
        )
    return pd.DataFrame(rows, columns=["ranking", "run_a", "run_b", "n", "spearman_rho", "spearman_p", "kendall_tau",
                                       "kendall_p"])


def _envelopes(names: list[str], layers: list[dict[str, xr.DataArray]], common: list[str]) -> dict[str, xr.DataArray]:
    """Per-cell maximum (or earliest) over the runs of the layers in ENVELOPE_RULES."""
    envelope: dict[str, xr.DataArray] = {}
    for lay in [k for k in common if k in ENVELOPE_RULES]:
        stack = np.stack([np.asarray(L[lay].values, dtype=float) for L in layers])
        with np.errstate(invalid="ignore"):
            red = np.fmax.reduce(stack, axis=0) if ENVELOPE_RULES[lay] == "max" else np.fmin.reduce(stack, axis=0)
        tpl = layers[0][lay]
        da = tpl.copy(data=red).rename(lay)
        what = "maximum" if ENVELOPE_RULES[lay] == "max" else "minimum (earliest)"
        da.attrs = {k: v for k, v in tpl.attrs.items() if k in ("units", "grid_mapping", "lon_periodic")}
        da.attrs["long_name"] = f"envelope over {len(names)} scenarios: {what} of {tpl.attrs.get('long_name', lay)}"
        da.attrs["envelope_of"] = ", ".join(names)
        envelope[lay] = da
    return envelope


def _differences(names: list[str], layers: list[dict[str, xr.DataArray]],
                 common: list[str]) -> dict[str, dict[str, xr.DataArray]]:
    """Each later run minus the first, for the layers in DIFFERENCE_LAYERS."""
    ref_name = names[0]
    differences: dict[str, dict[str, xr.DataArray]] = {}
    for n, L in zip(names[1:], layers[1:]):
        d: dict[str, xr.DataArray] = {}
        for lay in [k for k in common if k in DIFFERENCE_LAYERS]:
            tpl = layers[0][lay]
            diff = np.asarray(L[lay].values, dtype=float) - np.asarray(tpl.values, dtype=float)
            da = tpl.copy(data=diff).rename(lay)
            da.attrs = {k: v for k, v in tpl.attrs.items() if k in ("units", "grid_mapping", "lon_periodic")}
            da.attrs["long_name"] = f"{tpl.attrs.get('long_name', lay)}: '{n}' minus '{ref_name}'"
            d[lay] = da
        differences[n] = d
    return differences


def _summary(names: list[str], ranking: pd.DataFrame, corr: pd.DataFrame, k: int, colmap: dict[str, str]) -> str:

    lines = [
        f"Comparison of {len(names)} scenarios ({', '.join(repr(n) for n in names)}) on one grid and one "
        f"coastline segmentation of {len(ranking)} segments.",
    ]
    what = {"lensing": "the lensing factor", "amplitude": "the indicative amplitude"}
    for row in corr.itertuples():
        lines.append(
            f"Rank correlation of {what[row.ranking]}, '{row.run_a}' vs '{row.run_b}' "
            f"({row.n} segments ranked in both): Spearman rho = {row.spearman_rho:.3f}, "
            f"Kendall tau = {row.kendall_tau:.3f}."
        )
    for pre, by in (("", "lensing factor"), ("amp_", "indicative amplitude")):
        if f"{pre}n_topk" not in ranking:
            continue
        every = list(ranking.index[ranking[f"{pre}n_topk"] == len(names)])
        lines.append(f"Segments among the top {k} by {by} in every scenario: "
                     + (", ".join(every) if every else "none") + ".")
    top = ranking.sort_values("rank_envelope").head(min(k, 5))
    if len(top):
        lines.append(
            "Highest envelope lensing factors: "
            + "; ".join(f"{sid} {v:.2f} ({r})" for sid, v, r in zip(top.index, top["lensing_factor_max"], top["max_run"]))
            + "."
        )
    if "amp_rank_envelope" in ranking:
        top = ranking.sort_values("amp_rank_envelope").head(min(k, 5))
        top = top[np.isfinite(top["amp_1m_m_max"].to_numpy(float))]
        if len(top):
            lines.append(
                "Largest envelope indicative amplitudes at 1 m depth: "
                + "; ".join(f"{sid} {v:.2f} m ({r})" for sid, v, r in zip(top.index, top["amp_1m_m_max"],
                                                                          top["amp_max_run"]))
                + ".")
    lines.append(caution_summary())
    return "\n".join(lines)
