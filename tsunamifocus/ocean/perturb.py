"""Seeded perturbations for uncertainty ensembles: bathymetry errors and member parameters.

Screening tool only: not a tsunami warning, forecast or inundation map (see CAUTIONS.md).

Two pure functions:

* :func:`perturb_bathymetry` multiplies the sea cells of a depth grid by ``1 + f`` where ``f``
  is a smooth Gaussian-correlated random field (the package's one generator,
  :func:`tsunamifocus.randomfield.gaussian_random_field`) of relative rms ``rel_rms`` and
  correlation length ``corr_length_km`` (covariance ``rms**2 exp(-r**2 / (2 l**2))``). Land
  (depth <= 0) and no-data (NaN) cells are returned unchanged.
* :func:`draw_member_parameters` turns the ``[ensemble]`` settings of a scenario into one
  parameter dict per member, each with its own integer seeds derived from
  :class:`numpy.random.SeedSequence` so that member ``i`` is the same whatever the number of
  members, the execution order or the machine it runs on.

Member 0 is, by default, the unperturbed base case (the nominal scenario: all deltas zero, no
bathymetry perturbation, no launch rotation), like the control member of a weather ensemble; pass
``include_base=False`` to make every member a perturbed draw.
"""

from __future__ import annotations

import dataclasses
import difflib
import math
from collections.abc import Mapping
from typing import Any

import numpy as np
import xarray as xr

from ..constants import DEFAULTS
from ..errors import InputError
from ..grid import GridInfo
from .randomfield import gaussian_random_field

__all__ = ['perturb_bathymetry', 'draw_member_parameters', 'PERTURBATION_KEYS', 'MIN_DEPTH_FACTOR']

#: Smallest allowed multiplicative factor ``1 + f`` on a sea cell: a perturbation never turns sea
#: into land (the coastline and the segmentation stay those of the base grid). With the largest
#: accepted ``rel_rms = 0.5`` about 3.6 % of the cells would otherwise fall below it (f < -0.9 is
#: -1.8 standard deviations of a normal variable); with the usual few percent it never binds.
MIN_DEPTH_FACTOR: float = 0.1

#: Keys of the ``[ensemble]`` settings used to draw members, with their meaning and unit.
PERTURBATION_KEYS: dict[str, str] = {
    "bathy_rms": "relative rms of the smooth random depth error [fraction of depth]",
    "bathy_corr_km": "correlation length of the depth error [km]",
    "strike_deg": "half-range of the strike perturbation [degrees]",
    "dip_deg": "half-range of the dip perturbation [degrees]",
    "along_km": "half-range of the source shift along strike [km]",
    "across_km": "half-range of the source shift across strike [km]",
    "magnitude": "half-range of the magnitude perturbation [Mw units]",
    "launch_jitter_deg": "half-range of the ray-fan rotation [degrees]",
}
#: Keys of the ``[ensemble]`` section that are accepted but not used for drawing.
_IGNORED_KEYS = ("members", "seed", "scheduler")
_DEFAULTS = {k: float(DEFAULTS["ensemble"][k]) for k in PERTURBATION_KEYS}  # type: ignore[arg-type]
#: Order in which the uniform source deltas are drawn (part of the reproducibility contract).
_DRAW_ORDER = (
    ("strike_delta_deg", "strike_deg"),
    ("dip_delta_deg", "dip_deg"),
    ("along_shift_km", "along_km"),
    ("across_shift_km", "across_km"),
    ("magnitude_delta", "magnitude"),
    ("launch_jitter_deg", "launch_jitter_deg"),
)
_SEED_MAX = 2**63 - 1


def _spacing_m(depth: xr.DataArray | np.ndarray, spacing_m: float | tuple[float, float] | None) -> tuple[float, float]:
    if isinstance(depth, xr.DataArray):
        if spacing_m is not None:
            raise InputError("perturb_bathymetry: give spacing_m only for a plain numpy array, not a DataArray")
        return GridInfo.from_dataarray(depth).spacing_m()
    if spacing_m is None:
        raise InputError("perturb_bathymetry: a numpy depth array needs spacing_m=(dx_m, dy_m)")
    if np.isscalar(spacing_m):
        return float(spacing_m), float(spacing_m)  # type: ignore[arg-type]
    dx, dy = spacing_m  # type: ignore[misc]
    return float(dx), float(dy)


def perturb_bathymetry(
    depth: xr.DataArray | np.ndarray,
    rel_rms: float,
    corr_length_km: float,
    seed: int | np.random.SeedSequence | None,
    *,
    spacing_m: float | tuple[float, float] | None = None,
) -> xr.DataArray | np.ndarray:
    """Return ``depth * (1 + f)`` on sea cells, ``f`` a smooth Gaussian-correlated random field.

    Parameters
    ----------
    depth : xarray.DataArray or numpy.ndarray
        Depth grid [m], positive down, land <= 0, NaN = no data (tsunamifocus grid convention).
    rel_rms : float
        Relative rms of the depth error (fraction, 0.03 = 3 %), 0 <= rel_rms <= 0.5.
    corr_length_km : float
        Correlation length ``l`` [km] of ``C(r) = rel_rms**2 exp(-r**2 / (2 l**2))``.
    seed : int, numpy.random.SeedSequence or None
        Seed of the random field; the same seed gives the same perturbation.
    spacing_m : float or (float, float), optional
        Cell size ``(dx, dy)`` [m]; only (and then required) for a plain numpy array.

    Returns
    -------
    xarray.DataArray or numpy.ndarray
        Same type, shape and coordinates as ``depth``. Land and NaN cells are unchanged. A
        DataArray gets attributes ``perturbation_rel_rms``, ``perturbation_corr_length_km``,
        ``perturbation_seed`` and ``perturbation_spacing_m``.

    Notes
    -----
    * The field is generated on the whole grid with the grid's metric cell size and its sample
      rms over the whole grid is exactly ``rel_rms`` (the generator rescales); the rms over the
      sea cells alone is ``rel_rms`` up to sampling error.
    * On lon/lat grids the generator needs one metric spacing: the east-west spacing at the
      grid's mid latitude is used (:meth:`GridInfo.spacing_m`), so the correlation length is
      exact at mid latitude and shrinks (in metres, east-west only) towards the poleward edge by
      ``cos(lat) / cos(lat_mid)``. Use a projected grid for large latitude spans.
    * The factor ``1 + f`` is bounded below by :data:`MIN_DEPTH_FACTOR` so that no sea cell
      becomes land.
    """
    if not (isinstance(rel_rms, (int, float)) and math.isfinite(rel_rms) and 0.0 <= rel_rms <= 0.5):
        raise InputError(f"perturb_bathymetry: rel_rms = {rel_rms!r}; expected a fraction 0 <= rel_rms <= 0.5")
    if not (isinstance(corr_length_km, (int, float)) and math.isfinite(corr_length_km) and corr_length_km > 0):
        raise InputError(f"perturb_bathymetry: corr_length_km = {corr_length_km!r}; expected a length > 0 km")
    dx, dy = _spacing_m(depth, spacing_m)
    values = np.asarray(depth.values if isinstance(depth, xr.DataArray) else depth, dtype=float)
    if values.ndim != 2:
        raise InputError(f"perturb_bathymetry: depth must be 2-D, got shape {values.shape}")
    sea = np.isfinite(values) & (values > 0)
    if rel_rms == 0.0:
        out = values.copy()
    else:
        field = gaussian_random_field(values.shape, (dx, dy), corr_length_km * 1000.0, rel_rms, seed=seed)
        factor = np.maximum(1.0 + field, MIN_DEPTH_FACTOR)
        out = np.where(sea, values * factor, values)
    if not isinstance(depth, xr.DataArray):
        return out
    res = depth.copy(data=out)
    res.attrs.update(
        perturbation_rel_rms=float(rel_rms),
        perturbation_corr_length_km=float(corr_length_km),
        perturbation_seed=str(seed),
        perturbation_spacing_m=[float(dx), float(dy)],
    )
    return res


def _settings_dict(ensemble_settings: Any) -> dict[str, float]:
    if dataclasses.is_dataclass(ensemble_settings) and not isinstance(ensemble_settings, type):
        raw: Mapping[str, Any] = dataclasses.asdict(ensemble_settings)
    elif isinstance(ensemble_settings, Mapping):
        raw = ensemble_settings
    else:
        raise InputError(
            f"draw_member_parameters: ensemble settings of type {type(ensemble_settings).__name__}; "
            "expected a dict or an EnsembleConfig"
        )
    out = dict(_DEFAULTS)
    for key, value in raw.items():
        if key in _IGNORED_KEYS:
            continue
        if key not in PERTURBATION_KEYS:
            close = difflib.get_close_matches(str(key), list(PERTURBATION_KEYS), n=1)
            hint = f" (did you mean '{close[0]}'?)" if close else ""
            raise InputError(f"ensemble settings: unknown key '{key}'{hint}; expected one of {list(PERTURBATION_KEYS)}")
        if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
            raise InputError(f"ensemble settings: '{key}' = {value!r}; expected a finite number")
        if value < 0:
            raise InputError(f"ensemble settings: '{key}' = {value!r}; expected a half-range >= 0")
        out[key] = float(value)
    if out["bathy_rms"] > 0.5:
        raise InputError(f"ensemble settings: 'bathy_rms' = {out['bathy_rms']}; expected a fraction <= 0.5")
    if out["bathy_corr_km"] <= 0:
        raise InputError(f"ensemble settings: 'bathy_corr_km' = {out['bathy_corr_km']}; expected > 0 km")
    return out


def _int_seed(ss: np.random.SeedSequence) -> int:
    """A 63-bit integer seed from a SeedSequence (JSON-safe, reproducible)."""
    return int(ss.generate_state(1, dtype=np.uint64)[0] >> np.uint64(1))


def draw_member_parameters(
    ensemble_settings: Mapping[str, Any] | Any,
    n_members: int,
    seed: int,
    *,
    include_base: bool = True,
) -> list[dict[str, Any]]:
    """Draw the parameters of every ensemble member.

    Parameters
    ----------
    ensemble_settings : dict or tsunamifocus.scenario.EnsembleConfig
        Half-ranges and bathymetry-error settings (keys of :data:`PERTURBATION_KEYS`; the keys
        ``members``, ``seed`` and ``scheduler`` of the ``[ensemble]`` section are ignored here).
    n_members : int
        Number of members (>= 1).
    seed : int
        Root seed (0 <= seed < 2**63).
    include_base : bool
        Make member 0 the unperturbed base case (default True).

    Returns
    -------
    list of dict
        One dict per member with keys ``member`` (index), ``base`` (bool), ``seed`` (the member's
        integer seed), ``strike_delta_deg``, ``dip_delta_deg`` [degrees], ``along_shift_km``,
        ``across_shift_km`` [km], ``magnitude_delta`` [Mw units], ``launch_jitter_deg``
        [degrees, clockwise rotation of the ray fan], ``bathy_rms`` [fraction],
        ``bathy_corr_km`` [km], ``bathy_seed`` (integer seed of the depth error, None when there
        is no depth perturbation) and ``ray_seed`` (integer seed for any random choice in the ray
        launch). Plain Python types only (JSON-safe).

    Notes
    -----
    Member ``i`` derives from ``SeedSequence(seed, spawn_key=(i,))`` - the ``i``-th child of
    ``SeedSequence(seed).spawn(n)`` - whose own three children seed, in this order, the source
    deltas, the depth error and the ray launch. A member therefore does not depend on the number
    of members or on the order in which members run. Each delta is drawn uniformly in
    ``[-h, +h]`` for its half-range ``h``, always in the fixed order ``strike, dip, along,
    across, magnitude, launch jitter`` (a zero half-range gives 0 but still consumes its draw, so
    switching one range on does not change the others).
    """
    settings = _settings_dict(ensemble_settings)
    if isinstance(n_members, bool) or not isinstance(n_members, (int, np.integer)) or n_members < 1:
        raise InputError(f"draw_member_parameters: n_members = {n_members!r}; expected an integer >= 1")
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or not 0 <= seed <= _SEED_MAX:
        raise InputError(f"draw_member_parameters: seed = {seed!r}; expected an integer 0 <= seed < 2**63")
    members: list[dict[str, Any]] = []
    for i in range(int(n_members)):
        child = np.random.SeedSequence(int(seed), spawn_key=(i,))
        s_src, s_bathy, s_ray = child.spawn(3)
        rng = np.random.default_rng(s_src)
        base = include_base and i == 0
        draws = {}
        for out_key, range_key in _DRAW_ORDER:
            h = settings[range_key]
            u = float(rng.uniform(-1.0, 1.0))
            draws[out_key] = 0.0 if base else float(h * u) + 0.0  # + 0.0: no "-0.0" in manifests
        perturb_depth = settings["bathy_rms"] > 0 and not base
        members.append(
            {
                "member": i,
                "base": bool(base),
                "seed": _int_seed(child),
                **draws,
                "bathy_rms": 0.0 if base else settings["bathy_rms"],
                "bathy_corr_km": settings["bathy_corr_km"],
                "bathy_seed": _int_seed(s_bathy) if perturb_depth else None,
                "ray_seed": _int_seed(s_ray),
            }
        )
    return members
