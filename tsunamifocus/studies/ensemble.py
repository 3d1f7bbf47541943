"""Uncertainty ensembles on Dask: run members, reduce their grids in a stream, rank with intervals.

Screening tool only: not a tsunami warning, forecast or inundation map (see CAUTIONS.md).

:func:`run_ensemble` runs a *member function* once per parameter dict (see
:func:`tsunamifocus.perturb.draw_member_parameters`) and combines the results:

* **Execution** (the Dask engines, no home-made pool):

  - ``scheduler=None`` or ``"local"``: Dask's in-process threaded scheduler, one thread per core
    (no server to start);
  - ``"synchronous"``: Dask's single-threaded scheduler (debugging);
  - ``"serial"``: a plain loop without Dask (the reference the others are tested against);
  - an address string (``"tcp://10.0.0.5:8786"``): connect to a running dask.distributed
    scheduler with ``Client(address, set_as_default=False)``, closed again at the end;
  - a :class:`distributed.Client`: use it (left open).

* **Member contract**: ``member_fn(params)`` - or ``member_fn(params, **shared)`` when ``shared``
  is given - returns a :class:`MemberResult` (a small per-segment table and a few grids). On a
  distributed cluster the function is pickled (define it at module level in an importable module)
  and ``shared`` objects (the depth grid, the coastline...) are scattered to every worker once.

* **Streaming reduction**: member grids are folded into running per-cell count / mean / sum of
  squared deviations (Welford 1962) one member at a time, **always in member-index order** (results
  that arrive early wait in a small buffer), so the result is bit-for-bit the same whether the
  members ran serially, on threads or on several worker processes. Grids are never all held at
  once: at most ``max_buffered`` member results wait on the client (distributed) and the local
  threaded scheduler folds each result as soon as its predecessor is folded.

* **Failures**: a member that raises is retried ``retries`` times (default once) where it ran;
  if it still fails it is recorded in :attr:`EnsembleResult.failures` with its seed, parameters
  and error and the run completes with the others. If every member fails, :class:`EnsembleError`
  is raised.

* **Statistics** (:attr:`EnsembleResult.segments`): per segment the median and 5-95 % interval
  (``numpy.nanpercentile``, linear interpolation) of the lensing factor and the indicative
  amplitude, the probability of being among the top-k hotspots and a robustness label
  (:data:`ROBUSTNESS_LABELS`); per cell the ensemble mean and standard deviation (``ddof = 1``)
  of each grid.

Memory: the client holds three float64 arrays per reduced grid (count, mean, M2) plus at most
``max_buffered`` member results; each worker holds what one member needs (its own working set,
e.g. the depth grid and ray state) plus that member's result grids. :attr:`EnsembleResult.memory`
states the measured sizes.
"""

from __future__ import annotations

import os
import time
import traceback
import uuid
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr

from ..coast.segments import STATIC_SEGMENT_COLUMNS
from ..errors import EnsembleError, InputError
from ..focusing.agreement import topk_mask
from ..io.manifest import jsonable
from .progress import MemberProgress

__all__ = ['MemberResult', 'MemberFailure', 'EnsembleResult', 'run_ensemble', 'segment_statistics', 'robustness_label',
           'robustness_scale', 'ROBUSTNESS_LABELS']

#: Robustness labels from the probability of being among the top-k hotspots, checked in order, in
#: the calibrated likelihood language of hazard and climate assessments (Mastrandrea et al. 2010,
#: IPCC AR5 guidance note on the consistent treatment of uncertainties: very likely 90-100 %,
#: likely 66-100 %, about as likely as not 33-66 %, unlikely 0-33 %), so that a word means to a
#: reader what it means elsewhere: ``P >= 0.9`` very likely, ``0.66 <= P < 0.9`` likely,
#: ``0.33 <= P < 0.66`` about as likely as not, else unlikely.
ROBUSTNESS_LABELS: tuple[tuple[float, str], ...] = (
    (0.9, "very likely"),
    (0.66, "likely"),
    (0.33, "about as likely as not"),
    (0.0, "unlikely"),
)


def robustness_scale() -> str:
    """The labels and their thresholds in words, e.g. ``"very likely >= 0.9, likely >= 0.66, ..."``."""
    return ", ".join(f"{lab} >= {thr:g}" for thr, lab in ROBUSTNESS_LABELS if thr > 0) + ", else unlikely"

#: Per-segment member columns summarised by median and 5-95 % interval, with the output names
#: (median, 5 %, 95 %) following the segments-table contract.
_INTERVAL_COLUMNS: dict[str, tuple[str, str, str]] = {
    "lensing_factor": ("lensing_factor", "lensing_lo", "lensing_hi"),
    "amp_1m_m": ("amp_1m_m", "amp_lo", "amp_hi"),
    "energy_per_m": ("energy_per_m", "energy_per_m_lo", "energy_per_m_hi"),
    "first_arrival_s": ("first_arrival_s", "first_arrival_lo_s", "first_arrival_hi_s"),
}
#: Segment columns copied unchanged from the first successful member (geometry and labels).
_STATIC_COLUMNS = STATIC_SEGMENT_COLUMNS
_MEMBER_KEY = "tsunamifocus-member"


# EnsembleError lives in tsunamifocus.errors with the rest of the hierarchy (re-exported here)


# ---------------------------------------------------------------------------------------------
# Member results and failures
# ---------------------------------------------------------------------------------------------


@dataclass
class MemberResult:
    """What one member returns (keep it small: it travels over the network).

    Attributes
    ----------
    segments : pandas.DataFrame
        One row per coastline segment, index ``segment_id`` (or a ``segment_id`` column), with
        numeric columns among ``lensing_factor`` [1], ``amp_1m_m`` [m], ``energy_per_m``
        [J m-1], ``first_arrival_s`` [s] (at least ``lensing_factor``); the static columns
        ``name, length_m, x_mid, y_mid, lon_mid, lat_mid, normal_azimuth_deg, geometry`` may be
        present and are copied from the first successful member. Every member must report the
        same segment ids in the same order.
    grids : dict of str -> numpy.ndarray or xarray.DataArray
        2-D per-cell layers to reduce, e.g. ``energy`` [J m-1] and ``lensing_factor`` [1], all
        members on the same grid. NaN = no value in that cell for this member.
    info : dict
        Optional small JSON-safe extras (ray counts, health-check figures...) kept per member.
    """

    segments: pd.DataFrame
    grids: dict[str, np.ndarray | xr.DataArray] = field(default_factory=dict)
    info: dict[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class MemberFailure:
    """A member that failed after all its attempts.

    Attributes
    ----------
    member : int
        Index of the member in the list given to :func:`run_ensemble`.
    seed : int or None
        The member's ``params["seed"]``.
    params : dict
        The member's full parameter dict.
    error : str
        ``"ExceptionType: message"`` of the last attempt.
    traceback : str
        Formatted traceback of the last attempt.
    attempts : int
        Number of attempts made.
    """

    member: int
    seed: int | None
    params: dict[str, Any]
    error: str
    traceback: str
    attempts: int

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe summary (without the traceback)."""
        return {
            "member": self.member,
            "seed": self.seed,
            "params": jsonable(self.params),
            "error": self.error,
            "attempts": self.attempts,
        }


@dataclass
class _Outcome:
    index: int
    result: MemberResult | None
    failure: MemberFailure | None
    elapsed_s: float
    attempts: int
    params: dict[str, Any] | None = None


def _as_member_result(res: Any) -> MemberResult:
    if isinstance(res, MemberResult):
        out = res
    elif isinstance(res, tuple) and len(res) == 2:
        out = MemberResult(segments=res[0], grids=dict(res[1] or {}))
    else:
        raise InputError(
            f"member function returned {type(res).__name__}; expected a MemberResult(segments, grids)"
        )
    seg = out.segments
    if not isinstance(seg, pd.DataFrame):
        raise InputError(f"member result: segments is {type(seg).__name__}; expected a pandas DataFrame")
    if seg.index.name != "segment_id":
        if "segment_id" not in seg.columns:
            raise InputError("member result: segments table needs an index or a column 'segment_id'")
        seg = seg.set_index("segment_id")
    if "lensing_factor" not in seg.columns:
        raise InputError("member result: segments table has no column 'lensing_factor'")
    if not seg.index.is_unique:
        raise InputError("member result: duplicate segment_id values in the segments table")
    if not isinstance(out.grids, Mapping):
        raise InputError(f"member result: grids is {type(out.grids).__name__}; expected a dict of 2-D arrays")
    for name, g in out.grids.items():
        if np.ndim(g) != 2:
            raise InputError(f"member result: grid '{name}' has {np.ndim(g)} dims; expected a 2-D array")
    return MemberResult(segments=seg, grids=dict(out.grids), info=dict(out.info or {}))


def _run_member(
    member_fn: Callable[..., Any],
    params: dict[str, Any],
    index: int,
    retries: int,
    shared: Mapping[str, Any] | None,
) -> _Outcome:
    """Run one member with up to ``retries`` extra attempts; never raises for member errors."""
    t0 = time.perf_counter()
    attempts = 0
    last_err = ""
    last_tb = ""
    for _ in range(retries + 1):
        attempts += 1
        try:
            res = member_fn(params, **shared) if shared else member_fn(params)
            res = _as_member_result(res)
            return _Outcome(index, res, None, time.perf_counter() - t0, attempts)
        except Exception as exc:  # noqa: BLE001 - any member error is recorded, the run goes on
            last_err = f"{type(exc).__name__}: {exc}"
            last_tb = traceback.format_exc()
    fail = MemberFailure(index, _seed_of(params), dict(params), last_err, last_tb, attempts)
    return _Outcome(index, None, fail, time.perf_counter() - t0, attempts)


def _seed_of(params: Mapping[str, Any]) -> int | None:
    s = params.get("seed") if isinstance(params, Mapping) else None
    return int(s) if isinstance(s, (int, np.integer)) else None


# ---------------------------------------------------------------------------------------------
# Streaming, order-preserving accumulation
# ---------------------------------------------------------------------------------------------


class _Accumulator:
    """Fold member outcomes in member-index order: per-cell Welford moments, per-segment tables."""

    def __init__(self, n_members: int, reduce: Sequence[str] | None,
                 on_result: Callable[[int, MemberResult, dict[str, Any]], Any] | None = None) -> None:
        self.n_members = n_members
        self.on_result = on_result
        self.reduce = None if reduce is None else tuple(reduce)
        self.next_index = 0
        self.pending: dict[int, _Outcome] = {}
        self.max_pending = 0
        self.failures: list[MemberFailure] = []
        self.elapsed: dict[int, float] = {}
        self.attempts: dict[int, int] = {}
        self.tables: dict[int, pd.DataFrame] = {}
        self.infos: dict[int, dict[str, Any]] = {}
        self.ref_index: pd.Index | None = None
        self.static: pd.DataFrame | None = None
        self.templates: dict[str, xr.DataArray | None] = {}
        self.shapes: dict[str, tuple[int, int]] = {}
        self.count: dict[str, np.ndarray] = {}
        self.mean: dict[str, np.ndarray] = {}
        self.m2: dict[str, np.ndarray] = {}
        self.result_bytes = 0

    # -- ordering -------------------------------------------------------------------------
    def push(self, outcome: _Outcome) -> None:
        self.pending[outcome.index] = outcome
        self.max_pending = max(self.max_pending, len(self.pending))
        while self.next_index in self.pending:
            self._fold(self.pending.pop(self.next_index))
            self.next_index += 1

    @property
    def n_buffered(self) -> int:
        return len(self.pending)

    # -- folding ---------------------------------------------------------------------------
    def _fail(self, outcome: _Outcome, params: dict[str, Any], message: str) -> None:
        self.failures.append(
            MemberFailure(outcome.index, _seed_of(params), dict(params), message, "", outcome.attempts)
        )

    def _fold(self, outcome: _Outcome) -> None:
        i = outcome.index
        self.elapsed[i] = outcome.elapsed_s
        self.attempts[i] = outcome.attempts
        if outcome.failure is not None:
            self.failures.append(outcome.failure)
            return
        res = outcome.result
        assert res is not None
        params = outcome.params or {}
        seg = res.segments
        if self.ref_index is not None and not seg.index.equals(self.ref_index):
            self._fail(outcome, params, "InputError: segment ids differ from those of the first successful member")
            return
        grids = res.grids
        names = list(grids) if self.reduce is None else [n for n in self.reduce]
        missing = [n for n in names if n not in grids]
        if missing:
            self._fail(outcome, params, f"InputError: member returned no grid(s) {missing}")
            return
        if self.shapes:
            for n in names:
                if n in self.shapes and np.shape(grids[n]) != self.shapes[n]:
                    self._fail(
                        outcome,
                        params,
                        f"InputError: grid '{n}' has shape {np.shape(grids[n])}, expected {self.shapes[n]}",
                    )
                    return
            if set(names) != set(self.shapes):
                self._fail(outcome, params, f"InputError: grids {sorted(names)} differ from {sorted(self.shapes)}")
                return
        if self.ref_index is None:
            self.ref_index = seg.index
            static = [c for c in _STATIC_COLUMNS if c in seg.columns]
            self.static = seg[static].copy()
        numeric = [c for c in seg.columns if c not in _STATIC_COLUMNS and pd.api.types.is_numeric_dtype(seg[c])]
        self.tables[i] = seg[numeric].copy()
        self.infos[i] = dict(res.info)
        nbytes = 0
        for n in names:
            g = grids[n]
            arr = np.asarray(g.values if isinstance(g, xr.DataArray) else g, dtype=np.float64)
            nbytes += arr.nbytes
            if n not in self.shapes:
                self.shapes[n] = arr.shape
                self.templates[n] = g if isinstance(g, xr.DataArray) else None
                self.count[n] = np.zeros(arr.shape, dtype=np.float64)
                self.mean[n] = np.zeros(arr.shape, dtype=np.float64)
                self.m2[n] = np.zeros(arr.shape, dtype=np.float64)
            ok = np.isfinite(arr)
            cnt = self.count[n]
            mean = self.mean[n]
            m2 = self.m2[n]
            cnt += ok
            x = np.where(ok, arr, 0.0)
            delta = np.where(ok, x - mean, 0.0)
            with np.errstate(invalid="ignore", divide="ignore"):
                mean += np.where(ok, delta / np.where(ok, cnt, 1.0), 0.0)
            m2 += np.where(ok, delta * (x - mean), 0.0)
        self.result_bytes = max(self.result_bytes, nbytes)
        if self.on_result is not None:
            self.on_result(i, res, params)


def _fold_task(acc: _Accumulator, outcome: _Outcome, params: dict[str, Any]) -> _Accumulator:
    outcome.params = params
    acc.push(outcome)
    return acc


# ---------------------------------------------------------------------------------------------
# Progress
# ---------------------------------------------------------------------------------------------




# ---------------------------------------------------------------------------------------------
# Result
# ---------------------------------------------------------------------------------------------


@dataclass
class EnsembleResult:
    """Combined result of an ensemble.

    Attributes
    ----------
    segments : pandas.DataFrame
        Index ``segment_id``; static columns of the members' tables (name, geometry, ...), then
        ``n_valid`` (members with a finite lensing factor), ``lensing_factor`` (median),
        ``lensing_lo`` / ``lensing_hi`` (5 % / 95 %), ``amp_1m_m`` / ``amp_lo`` / ``amp_hi`` [m],
        the same for ``energy_per_m`` [J m-1] and ``first_arrival_s`` [s] when members report
        them, ``first_arrival_min_s`` (earliest over members), ``base_lensing_factor`` (member 0
        when it is the base case), ``p_topk``, ``robustness`` (top k by lensing factor),
        ``p_topk_amp``, ``robustness_amp`` (top k by indicative amplitude, when members report
        ``amp_1m_m``), ``rank_lensing`` (1 = highest median), ``rank_amplitude``.
    mean, std, count : dict of str -> xarray.DataArray or numpy.ndarray
        Per-cell ensemble mean, standard deviation (``ddof = 1``, NaN with fewer than 2 values)
        and number of finite values of each reduced grid; DataArrays (same coordinates and
        CRS) when the members returned DataArrays.
    member_segments : pandas.DataFrame
        Long table of every successful member's numeric segment columns, columns ``member``,
        ``segment_id`` and the values (small: members x segments rows).
    members : list of dict
        Parameters of every member, in order.
    n_members : int
        Number of members requested.
    failures : list of MemberFailure
        Members that failed after their retries, in member order.
    top_k : int
        k of the top-k probability.
    timings : dict
        ``total_s``, ``member_s_mean``, ``member_s_max``, ``members_per_minute``.
    scheduler : dict
        Kind (``serial``, ``synchronous``, ``local``, ``distributed``), workers, address.
    memory : dict
        Measured sizes [bytes]: largest member result grids, client accumulators, buffered results.
    """

    segments: pd.DataFrame
    mean: dict[str, Any]
    std: dict[str, Any]
    count: dict[str, Any]
    member_segments: pd.DataFrame
    members: list[dict[str, Any]]
    n_members: int
    failures: list[MemberFailure]
    top_k: int
    timings: dict[str, float]
    scheduler: dict[str, Any]
    memory: dict[str, Any]
    member_info: dict[int, dict[str, Any]] = field(default_factory=dict)

    @property
    def n_succeeded(self) -> int:
        """Number of members that returned a result."""
        return self.n_members - len(self.failures)

    @property
    def n_failed(self) -> int:
        """Number of members that failed after their retries."""
        return len(self.failures)

    def layers(self) -> dict[str, Any]:
        """Per-cell layers for export: ``<grid>_mean`` and ``<grid>_std`` for every reduced grid."""
        out: dict[str, Any] = {}
        for n in self.mean:
            out[f"{n}_mean"] = self.mean[n]
            out[f"{n}_std"] = self.std[n]
        return out

    def summary(self) -> str:
        """A few lines of plain text for logs and the report."""
        lines = [
            f"Ensemble: {self.n_succeeded} of {self.n_members} members succeeded"
            + (f", {self.n_failed} failed (see failures)" if self.n_failed else "")
            + f"; scheduler {self.scheduler.get('kind')}; {self.timings.get('total_s', float('nan')):.1f} s.",
        ]
        seg = self.segments
        if len(seg):
            counts = seg["robustness"].value_counts()
            lines.append(
                f"Top-{self.top_k} hotspots by lensing factor: "
                + ", ".join(f"{counts.get(lab, 0)} {lab}" for _, lab in ROBUSTNESS_LABELS)
                + f" (P(top-k): {robustness_scale()})."
            )
            if "robustness_amp" in seg:
                counts = seg["robustness_amp"].value_counts()
                lines.append(f"Top-{self.top_k} hotspots by indicative amplitude: "
                             + ", ".join(f"{counts.get(lab, 0)} {lab}" for _, lab in ROBUSTNESS_LABELS) + ".")
        return "\n".join(lines)

    def to_dict(self) -> dict[str, Any]:
        """JSON-safe record for the run manifest (no grids, no tables)."""
        return jsonable(
            {
                "n_members": self.n_members,
                "n_succeeded": self.n_succeeded,
                "n_failed": self.n_failed,
                "failures": [f.to_dict() for f in self.failures],
                "top_k": self.top_k,
                "robustness_thresholds": {lab: thr for thr, lab in ROBUSTNESS_LABELS},
                "interval": [5, 95],
                "grids_reduced": list(self.mean),
                "std_ddof": 1,
                "timings": self.timings,
                "scheduler": self.scheduler,
                "memory": self.memory,
                "members": self.members,
            }
        )


def robustness_label(p_topk: float) -> str:
    """Label a probability of being among the top-k hotspots (see :data:`ROBUSTNESS_LABELS`)."""
    if not np.isfinite(p_topk):
        return "unlikely"
    for thr, lab in ROBUSTNESS_LABELS:
        if p_topk >= thr:
            return lab
    return ROBUSTNESS_LABELS[-1][1]


def _topk_mask(values: np.ndarray, k: int) -> np.ndarray:
    """Boolean (members, segments): True for the k largest finite values of each row.

    Ties are broken by segment order (the earlier segment wins); NaN is never in the top k.
    """
    return np.array([topk_mask(row, k) for row in values], dtype=bool).reshape(values.shape)


def segment_statistics(
    tables: Mapping[int, pd.DataFrame] | Sequence[pd.DataFrame],
    *,
    top_k: int = 10,
    rank_by: str = "lensing_factor",
    static: pd.DataFrame | None = None,
    base_member: int | None = None,
) -> pd.DataFrame:
    """Per-segment ensemble statistics from the members' segment tables.

    Parameters
    ----------
    tables : mapping member -> DataFrame, or sequence of DataFrames
        Per-member tables with the same index (``segment_id``) and numeric columns
        (``lensing_factor`` [1] required; ``amp_1m_m`` [m], ``energy_per_m`` [J m-1],
        ``first_arrival_s`` [s] used when present).
    top_k : int
        k of the top-k hotspot probability (capped at the number of segments).
    rank_by : str
        Column ranking the hotspots of each member (default ``lensing_factor``).
    static : pandas.DataFrame, optional
        Columns copied in front of the statistics (name, geometry...), same index.
    base_member : int, optional
        Key of the unperturbed member, reported as ``base_lensing_factor``.

    Returns
    -------
    pandas.DataFrame
        See :attr:`EnsembleResult.segments`.

    Notes
    -----
    Percentiles use ``numpy.nanpercentile`` with its default linear interpolation (type 7 of
    Hyndman & Fan 1996). ``p_topk`` = number of members in which the segment is among the
    ``top_k`` largest values of ``rank_by`` / number of members; ties are broken by segment
    order and NaN never counts. ``p_topk_amp`` is the same for ``amp_1m_m`` (when every member
    reports it and ``rank_by`` is not already that column). Robustness labels follow
    :data:`ROBUSTNESS_LABELS`.
    """
    items = list(tables.items()) if isinstance(tables, Mapping) else list(enumerate(tables))
    if not items:
        raise InputError("segment_statistics: no member tables")
    if isinstance(top_k, bool) or not isinstance(top_k, (int, np.integer)) or top_k < 1:
        raise InputError(f"segment_statistics: top_k = {top_k!r}; expected an integer >= 1")
    ref = items[0][1].index
    for key, t in items:
        if not t.index.equals(ref):
            raise InputError(f"segment_statistics: member {key} has other segment ids than member {items[0][0]}")
        if rank_by not in t.columns:
            raise InputError(f"segment_statistics: member {key} has no column '{rank_by}'")
    out = static.reindex(ref).copy() if static is not None else pd.DataFrame(index=ref)
    out.index.name = "segment_id"

    def stack(col: str) -> np.ndarray | None:
        if not all(col in t.columns for _, t in items):
            return None
        return np.vstack([t[col].to_numpy(dtype=float) for _, t in items])

    lens = stack("lensing_factor")
    out["n_valid"] = np.isfinite(lens).sum(axis=0) if lens is not None else 0
    for col, (c_med, c_lo, c_hi) in _INTERVAL_COLUMNS.items():
        v = stack(col)
        if v is None:
            continue
        with np.errstate(all="ignore"):
            import warnings

            with warnings.catch_warnings():
                warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN segments give NaN
                lo, med, hi = np.nanpercentile(v, [5.0, 50.0, 95.0], axis=0)
        out[c_med] = med
        out[c_lo] = lo
        out[c_hi] = hi
    fa = stack("first_arrival_s")
    if fa is not None:
        with np.errstate(all="ignore"):
            fin = np.isfinite(fa).any(axis=0)
            out["first_arrival_min_s"] = np.where(fin, np.min(np.where(np.isfinite(fa), fa, np.inf), axis=0), np.nan)
    if base_member is not None and lens is not None:
        keys = [k for k, _ in items]
        if base_member in keys:
            out["base_lensing_factor"] = lens[keys.index(base_member)]
    rv = stack(rank_by)
    assert rv is not None
    mask = _topk_mask(rv, int(top_k))
    p = mask.sum(axis=0) / float(len(items))
    out["p_topk"] = p
    out["robustness"] = [robustness_label(x) for x in p]
    av = stack("amp_1m_m") if rank_by != "amp_1m_m" else None
    if av is not None:
        pa = _topk_mask(av, int(top_k)).sum(axis=0) / float(len(items))
        out["p_topk_amp"] = pa
        out["robustness_amp"] = [robustness_label(x) for x in pa]
    for col, rank_col in (("lensing_factor", "rank_lensing"), ("amp_1m_m", "rank_amplitude")):
        if col in out.columns:
            out[rank_col] = (
                out[col].rank(ascending=False, method="first", na_option="bottom").astype("int64")
            )
    return out


# ---------------------------------------------------------------------------------------------
# Scheduler resolution and execution paths
# ---------------------------------------------------------------------------------------------


def _resolve_scheduler(scheduler: Any, workers: int | None, connect_timeout_s: float = 30.0) -> tuple[str, Any, bool]:
    """Return (kind, client_or_None, we_own_client)."""
    if scheduler is None or (isinstance(scheduler, str) and scheduler.strip().lower() in ("local", "threads")):
        return "local", None, False
    if isinstance(scheduler, str):
        s = scheduler.strip()
        low = s.lower()
        if low in ("serial",):
            return "serial", None, False
        if low in ("synchronous", "sync", "single-threaded"):
            return "synchronous", None, False
        if "://" in s or (":" in s and s.rsplit(":", 1)[-1].isdigit()):
            try:
                from distributed import Client

                client = Client(s, set_as_default=False, timeout=f"{float(connect_timeout_s)}s")
            except Exception as exc:  # noqa: BLE001
                raise EnsembleError(
                    f"scheduler '{s}': cannot connect to a dask.distributed scheduler there ({type(exc).__name__}: {exc})"
                ) from None
            return "distributed", client, True
        raise InputError(
            f"scheduler = {scheduler!r}; expected 'local', 'serial', 'synchronous', a scheduler address "
            "like 'tcp://host:8786' or a distributed.Client"
        )
    try:
        from distributed import Client
    except ImportError:  # pragma: no cover - distributed is a dependency
        Client = None  # type: ignore[assignment]
    if Client is not None and isinstance(scheduler, Client):
        return "distributed", scheduler, False
    raise InputError(f"scheduler of type {type(scheduler).__name__}; expected a string or a distributed.Client")


def _run_serial(member_fn, members, retries, shared, acc, prog) -> None:
    for i, params in enumerate(members):
        out = _run_member(member_fn, params, i, retries, shared)
        out.params = params
        acc.push(out)
        prog.update(out.failure is not None)


def _run_member_gated(gate: Any, member_fn, params, index, retries, shared) -> _Outcome:
    """:func:`_run_member` that waits for ``gate`` (an earlier fold) - bounds results held."""
    return _run_member(member_fn, params, index, retries, shared)


def _run_dask_local(member_fn, members, retries, shared, acc, prog, kind, workers, window) -> None:
    """Dask local scheduler: member tasks plus an ordered chain of fold tasks.

    Member ``i`` depends on the fold of member ``i - window``, so at most ``window`` member
    results exist at any time even if one member is much slower than the others.
    """
    import dask
    from dask.callbacks import Callback

    token = uuid.uuid4().hex[:12]
    state = dask.delayed(acc, name=f"tsunamifocus-acc-{token}", traverse=False)
    folds = []
    for i, params in enumerate(members):
        key = f"{_MEMBER_KEY}-{token}-{i}"
        if i >= window:
            m = dask.delayed(_run_member_gated, pure=False, traverse=False)(
                folds[i - window], member_fn, params, i, retries, shared, dask_key_name=key
            )
        else:
            m = dask.delayed(_run_member, pure=False, traverse=False)(
                member_fn, params, i, retries, shared, dask_key_name=key
            )
        state = dask.delayed(_fold_task, pure=False, traverse=False)(
            state, m, params, dask_key_name=f"tsunamifocus-fold-{token}-{i}"
        )
        folds.append(state)

    def posttask(key, result, dsk, st, worker_id):  # noqa: ANN001 - dask callback signature
        if isinstance(key, str) and key.startswith(f"{_MEMBER_KEY}-{token}-"):
            prog.update(getattr(result, "failure", None) is not None)

    with Callback(posttask=posttask):
        if kind == "synchronous":
            dask.compute(state, scheduler="synchronous", optimize_graph=False)
        else:
            dask.compute(state, scheduler="threads", num_workers=workers, optimize_graph=False)


def _run_distributed(member_fn, members, retries, shared, acc, prog, client, max_buffered) -> None:
    """dask.distributed: windowed submission, as_completed, ordered client-side fold."""
    from distributed import as_completed

    token = uuid.uuid4().hex[:12]
    shared_f = None
    if shared:
        shared_f = {k: client.scatter(v, broadcast=True, hash=False) for k, v in shared.items()}
    n = len(members)
    nxt = 0
    futures: dict[Any, int] = {}

    def submit(i: int):
        f = client.submit(
            _run_member, member_fn, members[i], i, retries, shared_f, pure=False, key=f"{_MEMBER_KEY}-{token}-{i}"
        )
        futures[f] = i
        return f

    initial = []
    while nxt < n and len(initial) < max_buffered:
        initial.append(submit(nxt))
        nxt += 1
    ac = as_completed(initial, loop=client.loop)
    for fut in ac:
        i = futures.pop(fut)
        try:
            out = fut.result()
        except Exception as exc:  # noqa: BLE001 - lost worker, unpicklable function...
            params = members[i]
            out = _Outcome(
                i,
                None,
                MemberFailure(i, _seed_of(params), dict(params), f"{type(exc).__name__}: {exc}", "", retries + 1),
                float("nan"),
                retries + 1,
            )
        finally:
            fut.release()
        out.params = members[i]
        acc.push(out)
        prog.update(out.failure is not None)
        del out
        while nxt < n and len(futures) + acc.n_buffered < max_buffered:
            ac.add(submit(nxt))
            nxt += 1
    if shared_f:
        for f in shared_f.values():
            f.release()


def run_ensemble(
    member_fn: Callable[..., Any],
    members: Sequence[Mapping[str, Any]],
    *,
    scheduler: Any = None,
    retries: int = 1,
    progress: bool | Callable[[int, int, float, float | None], Any] | None = None,
    reduce: Iterable[str] | None = None,
    shared: Mapping[str, Any] | None = None,
    top_k: int = 10,
    rank_by: str = "lensing_factor",
    workers: int | None = None,
    max_buffered: int | None = None,
    connect_timeout_s: float = 30.0,
    on_result: Callable[[int, MemberResult, dict[str, Any]], Any] | None = None,
    progress_label: str = "ensemble members",
) -> EnsembleResult:
    """Run every member and combine the results (see the module docstring).

    Parameters
    ----------
    member_fn : callable
        ``member_fn(params) -> MemberResult`` (``member_fn(params, **shared)`` with ``shared``).
        Must be deterministic for given params (seeds) and, for a distributed cluster, picklable
        (a module-level function, or a :func:`functools.partial` of one).
    members : sequence of dict
        One parameter dict per member (e.g. from :func:`tsunamifocus.perturb.draw_member_parameters`);
        ``params["seed"]`` is reported with failures.
    scheduler : None, str or distributed.Client
        ``None``/``"local"`` (Dask threaded scheduler, ``workers`` threads, default one per
        core), ``"synchronous"``, ``"serial"``, a scheduler address, or a Client.
    retries : int
        Extra attempts for a member that raises (default 1).
    progress : bool or callable, optional
        True: a tqdm bar on stderr (members done / total, elapsed, estimated remaining time);
        a callable is called as ``progress(done, total, elapsed_s, eta_s)`` after each member.
    reduce : iterable of str, optional
        Names of the member grids to reduce per cell (default: every grid of the first member;
        all members must return the same set).
    shared : dict, optional
        Large read-only inputs passed to every member as keyword arguments; scattered once to
        every worker of a distributed cluster.
    top_k : int
        k for the top-k hotspot probability.
    rank_by : str
        Segment column ranking the hotspots of a member.
    workers : int, optional
        Threads of the local scheduler (default ``os.cpu_count()``).
    max_buffered : int, optional
        Most member results in flight or waiting to be folded (default twice the threads of
        the local scheduler or of the cluster, at least 4) - bounds the memory of the process
        that reduces. Ignored by ``"serial"``.
    connect_timeout_s : float
        How long to try reaching a scheduler given by address [s].
    on_result : callable, optional
        ``on_result(index, result, params)``, called in the reducing process for every successful
        member, in member-index order, as it is folded (e.g. to keep each member's result).
    progress_label : str
        Name of the progress bar (``progress=True``).

    Returns
    -------
    EnsembleResult

    Raises
    ------
    InputError
        Bad arguments (no members, unknown scheduler...).
    EnsembleError
        Every member failed (the first failure's seed and error are named), or the scheduler
        cannot be reached.
    """
    members = _check_arguments(member_fn, members, retries, shared)
    reduce_list = None if reduce is None else [str(r) for r in reduce]
    workers = int(workers) if workers else (os.cpu_count() or 1)
    kind, client, own = _resolve_scheduler(scheduler, workers, connect_timeout_s)
    acc = _Accumulator(len(members), reduce_list, on_result)
    prog = MemberProgress(len(members), progress, progress_label)
    t0 = time.perf_counter()
    try:
        sched_info = _execute(kind, client, member_fn, members, retries, shared, acc, prog, workers, max_buffered)
    finally:
        prog.close()
        if own and client is not None:
            client.close()
    total = time.perf_counter() - t0
    if acc.next_index != len(members):  # pragma: no cover - defensive
        raise EnsembleError(f"ensemble bookkeeping error: folded {acc.next_index} of {len(members)} members")
    return _ensemble_result(acc, members, sched_info, total, top_k=top_k, rank_by=rank_by)


def _check_arguments(member_fn, members, retries, shared) -> list[dict]:
    """Validate run_ensemble's arguments; the members as a list of dicts."""
    if not callable(member_fn):
        raise InputError(f"run_ensemble: member_fn {member_fn!r} is not callable")
    if not all(isinstance(m, Mapping) for m in members):
        raise InputError("run_ensemble: members must be a list of parameter dicts (draw_member_parameters)")
    members = [dict(m) for m in members]
    if not members:
        raise InputError("run_ensemble: no members to run (members list is empty)")
    if isinstance(retries, bool) or not isinstance(retries, int) or retries < 0:
        raise InputError(f"run_ensemble: retries = {retries!r}; expected an integer >= 0")
    if shared is not None and not isinstance(shared, Mapping):
        raise InputError(f"run_ensemble: shared must be a dict of keyword arguments, got {type(shared).__name__}")
    return members


def _execute(kind: str, client: Any, member_fn, members, retries, shared, acc: _Accumulator, prog: MemberProgress,
             workers: int, max_buffered: int | None) -> dict[str, Any]:
    """Run every member on the resolved scheduler, folding results into ``acc``; the scheduler's description."""
    sched_info: dict[str, Any] = {"kind": kind}
    if kind == "serial":
        sched_info["workers"] = 1
        _run_serial(member_fn, members, retries, shared, acc, prog)
    elif kind in ("local", "synchronous"):
        sched_info["workers"] = 1 if kind == "synchronous" else workers
        window = int(max_buffered) if max_buffered else max(4, 2 * workers)
        if window < 1:
            raise InputError(f"run_ensemble: max_buffered = {max_buffered!r}; expected >= 1")
        sched_info["max_buffered"] = window
        _run_dask_local(member_fn, members, retries, shared, acc, prog, kind, workers, window)
    else:
        info = client.scheduler_info()
        nthreads = sum(w.get("nthreads", 1) for w in info.get("workers", {}).values()) or 1
        sched_info.update(address=client.scheduler.address, workers=len(info.get("workers", {})), threads=nthreads)
        buf = int(max_buffered) if max_buffered else max(4, 2 * nthreads)
        if buf < 1:
            raise InputError(f"run_ensemble: max_buffered = {max_buffered!r}; expected >= 1")
        sched_info["max_buffered"] = buf
        _run_distributed(member_fn, members, retries, shared, acc, prog, client, buf)
    return sched_info


def _ensemble_result(acc: _Accumulator, members: list[dict], sched_info: dict, total: float, *, top_k: int,
                     rank_by: str) -> EnsembleResult:
    """Statistics, grids, member table, timings and memory bounds of a finished ensemble."""
    failures = sorted(acc.failures, key=lambda f: f.member)
    if not acc.tables:
        f0 = failures[0]
        raise EnsembleError(
            f"all {len(members)} ensemble members failed; first: member {f0.member} (seed {f0.seed}): {f0.error}"
        )
    base = 0 if members[0].get("base") and 0 in acc.tables else None
    seg = segment_statistics(acc.tables, top_k=top_k, rank_by=rank_by, static=acc.static, base_member=base)
    mean, std, count = _finish_grids(acc)
    long = pd.concat(
        [t.assign(member=i).reset_index() for i, t in acc.tables.items()], ignore_index=True
    )
    long = long[["member", "segment_id", *[c for c in long.columns if c not in ("member", "segment_id")]]]
    el = np.array([v for v in acc.elapsed.values() if np.isfinite(v)], dtype=float)
    timings = {
        "total_s": total,
        "member_s_mean": float(el.mean()) if el.size else float("nan"),
        "member_s_max": float(el.max()) if el.size else float("nan"),
        "members_per_minute": 60.0 * len(members) / total if total > 0 else float("nan"),
    }
    grid_cells = sum(int(np.prod(s)) for s in acc.shapes.values())
    bound = int(sched_info.get("max_buffered", 1))
    memory = {
        "member_result_grid_bytes": int(acc.result_bytes),
        "client_accumulator_bytes": int(3 * 8 * grid_cells),
        "max_buffered": bound,
        "max_results_waiting": int(acc.max_pending),
        "reducer_bound_bytes": int(3 * 8 * grid_cells + bound * acc.result_bytes),
        "note": (
            "reducing process: accumulators plus at most max_buffered member results; "
            "per worker: one member's own working set plus member_result_grid_bytes"
        ),
    }
    return EnsembleResult(
        segments=seg,
        mean=mean,
        std=std,
        count=count,
        member_segments=long,
        members=members,
        n_members=len(members),
        failures=failures,
        top_k=int(top_k),
        timings=timings,
        scheduler=sched_info,
        memory=memory,
        member_info=acc.infos,
    )


def _finish_grids(acc: _Accumulator) -> tuple[dict[str, Any], dict[str, Any], dict[str, Any]]:
    mean: dict[str, Any] = {}
    std: dict[str, Any] = {}
    count: dict[str, Any] = {}
    for n in acc.shapes:
        cnt = acc.count[n]
        with np.errstate(invalid="ignore", divide="ignore"):
            m = np.where(cnt > 0, acc.mean[n], np.nan)
            s = np.where(cnt > 1, np.sqrt(acc.m2[n] / np.maximum(cnt - 1, 1)), np.nan)
        tpl = acc.templates.get(n)
        if tpl is not None:
            base_attrs = {k: v for k, v in tpl.attrs.items() if k in ("grid_mapping", "units", "lon_periodic")}
            long_name = tpl.attrs.get("long_name", n)
            mean[n] = tpl.copy(data=m).rename(f"{n}_mean")
            mean[n].attrs = {**base_attrs, "long_name": f"ensemble mean of {long_name}"}
            std[n] = tpl.copy(data=s).rename(f"{n}_std")
            std[n].attrs = {**base_attrs, "long_name": f"ensemble standard deviation (ddof=1) of {long_name}"}
            count[n] = tpl.copy(data=cnt.astype(np.int32)).rename(f"{n}_count")
            count[n].attrs = {
                k: v for k, v in base_attrs.items() if k != "units"
            } | {"long_name": f"members with a value of {long_name}", "units": "1"}
        else:
            mean[n], std[n], count[n] = m, s, cnt.astype(np.int32)
    return mean, std, count
