"""Source-set files: a family of sources screened against one grid and one coastline.

A set file is TOML::

    [set]
    name = "trench sweep"            # default: the file name
    scenario = "base.toml"           # grid, coast, rays, focusing and output settings
    top_k = 10                       # default: the scenario's [output] top_k

    [[source]]                       # a source written as in a scenario file, plus a weight
    name = "slip model"
    kind = "subfaults"
    path = "slip_model.csv"
    depth_at = "top"
    weight = 2.0

    [[from_scenario]]                # every source of another scenario file
    path = "other.toml"
    weight = 1.0

    [[sweep]]                        # ruptures placed along a trench
    name = "north"
    trace = [[lon, lat], [lon, lat], ...]   # the trench as a line (>= 2 points)
    spacing_km = 50.0
    magnitudes = [8.0, 8.5]
    magnitude_weights = [3.0, 1.0]   # optional, one per magnitude
    dip_deg = 12.0                   # or one dip per piece of the line
    top_depth_km = 5.0
    rake_deg = 90.0
    weight = 1.0

The base scenario's own ``[[source]]`` tables are not members. Weights are relative (any
positive numbers). Every error is one line naming the file, the line and the key.
"""

from __future__ import annotations

import difflib
import math
import os
import re
import tomllib
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from ..constants import DEFAULTS, SOURCE_SET_DEFAULTS
from ..errors import ScenarioError
from .scenario import (MAGNITUDE_RANGE, Scenario, SourceConfig, _build_source, _Ctx, _f, _Key,
                       _table, _Where, parse_scenario)
from .textfile import read_utf8_text

__all__ = ["SourceSet", "SweepConfig", "SetMember", "parse_source_set", "SET_KEYS", "SWEEP_KEYS"]

SET_KEYS: tuple[_Key, ...] = (
    _Key("name", "str", "name of the set", default_doc="file name without .toml"),
    _Key("scenario", "path", "scenario file giving the grid, coast, rays, focusing and output settings; relative "
         "to the set file", required=True),
    _Key("top_k", "int", "k of the top-k hotspot frequency", "segments", lo=1, hi=10000,
         default_doc="the scenario's [output] top_k"),
)
SWEEP_KEYS: tuple[_Key, ...] = (
    _Key("name", "str", "name of the sweep", required=True),
    _f("spacing_km", "distance between rupture centres along the line", "km", required=True, lo=1.0, hi=5000.0),
    _f("top_depth_km", "depth of the top edge of each rupture", "km", required=True, lo=0.0, hi=100.0),
    _f("rake_deg", "rake (90 = pure thrust)", "degrees", default=DEFAULTS["source.segment"]["rake_deg"],
       lo=-180.0, hi=180.0),
    _f("weight", "relative weight of each rupture of the sweep", "", default=SOURCE_SET_DEFAULTS["weight"], lo=0.0,
       lo_open=True, hi=1e12),
)
_WEIGHT = _f("weight", "relative weight", "", default=SOURCE_SET_DEFAULTS["weight"], lo=0.0, lo_open=True, hi=1e12)


@dataclass(frozen=True)
class SweepConfig:
    """``[[sweep]]``: ruptures placed every ``spacing_km`` along a trench line (see :mod:`..source.sweep`)."""

    name: str
    trace: tuple[tuple[float, float], ...]
    spacing_km: float
    magnitudes: tuple[float, ...]
    magnitude_weights: tuple[float, ...]
    dip_deg: tuple[float, ...]
    top_depth_km: float
    rake_deg: float = DEFAULTS["source.segment"]["rake_deg"]  # type: ignore[assignment]
    weight: float = SOURCE_SET_DEFAULTS["weight"]  # type: ignore[assignment]


@dataclass(frozen=True)
class SetMember:
    """One source of a set: its configuration, relative weight and where it came from."""

    source: SourceConfig
    weight: float
    origin: str


@dataclass(frozen=True)
class SourceSet:
    """A parsed source-set file: the base scenario, explicit members and sweeps."""

    name: str
    scenario: Scenario
    top_k: int
    members: tuple[SetMember, ...]
    sweeps: tuple[SweepConfig, ...]
    file: Path | None = field(default=None, compare=False)


def _numbers(ctx: _Ctx, sect: tuple, key: str, v: Any, what: str, lo: float, hi: float, lo_open: bool = False,
             min_len: int = 1) -> tuple[float, ...]:
    vals = v if isinstance(v, (list, tuple)) else None
    ok = vals is not None and len(vals) >= min_len and all(
        not isinstance(a, bool) and isinstance(a, (int, float)) and math.isfinite(a)
        and (a > lo if lo_open else a >= lo) and a <= hi for a in vals)
    if not ok:
        raise ctx.bad(sect, _Key(key, "float", what), v, what)
    return tuple(float(a) for a in vals)  # type: ignore[union-attr]


def _sweep(ctx: _Ctx, i: int, raw: Any) -> SweepConfig:
    sect = ("sweep", i)
    if not isinstance(raw, Mapping):
        raise ctx.fail(sect, None, "expected a table of keys")
    if isinstance(raw.get("name"), str):
        ctx.names[sect] = raw["name"]
    own = ("trace", "magnitudes", "magnitude_weights", "dip_deg")
    v = _table(ctx, sect, {k: x for k, x in raw.items() if k not in own}, SWEEP_KEYS, skip=own)
    tr = raw.get("trace")
    what = "a line of at least 2 points [[lon, lat], [lon, lat], ...] in degrees (lon -180..360, lat -90..90)"
    if not (isinstance(tr, (list, tuple)) and len(tr) >= 2
            and all(isinstance(q, (list, tuple)) and len(q) == 2 for q in tr)):
        if tr is None:
            raise ctx.fail(sect, None, f"missing key 'trace' ({what})")
        raise ctx.bad(sect, _Key("trace", "trace", what), tr, what)
    pts = list(tr)
    trace = []
    for p in pts:
        if any(isinstance(a, bool) or not isinstance(a, (int, float)) or not math.isfinite(a) for a in p):
            raise ctx.bad(sect, _Key("trace", "trace", what), tr, what)
        lon, lat = float(p[0]), float(p[1])
        if not (-180.0 <= lon <= 360.0 and -90.0 <= lat <= 90.0):
            raise ctx.fail(sect, "trace", f"point {list(p)}: expected {what}")
        trace.append((lon, lat))
    if any(a == b for a, b in zip(trace, trace[1:])):
        raise ctx.fail(sect, "trace", "has two equal consecutive points; expected a line with pieces of non-zero length")
    lo, hi = MAGNITUDE_RANGE
    mags = _numbers(ctx, sect, "magnitudes", raw.get("magnitudes"),
                    f"a list of moment magnitudes, each >= {lo} and <= {hi} Mw", lo, hi)
    if "magnitude_weights" in raw:
        mw = _numbers(ctx, sect, "magnitude_weights", raw["magnitude_weights"],
                      f"a list of {len(mags)} positive relative weights, one per magnitude", 0.0, 1e12, lo_open=True)
        if len(mw) != len(mags):
            raise ctx.fail(sect, "magnitude_weights", f"has {len(mw)} values; expected {len(mags)}, one per magnitude")
    else:
        mw = tuple(1.0 for _ in mags)
    d = raw.get("dip_deg", None)
    n_pieces = len(trace) - 1
    dwhat = ("a dip in degrees (> 0 and <= 90)" + (f", or a list of {n_pieces} dips, one per piece of the line"
                                                  if n_pieces > 1 else ""))
    if d is None:
        raise ctx.fail(sect, None, f"missing key 'dip_deg' ({dwhat})")
    dips = _numbers(ctx, sect, "dip_deg", d if isinstance(d, (list, tuple)) else [d], dwhat, 0.0, 90.0, lo_open=True)
    if len(dips) not in (1, n_pieces):
        raise ctx.fail(sect, "dip_deg", f"has {len(dips)} values; expected {dwhat}")
    return SweepConfig(name=v["name"], trace=tuple(trace), spacing_km=v["spacing_km"], magnitudes=mags,
                       magnitude_weights=mw, dip_deg=dips, top_depth_km=v["top_depth_km"], rake_deg=v["rake_deg"],
                       weight=v["weight"])


def parse_source_set(path: str | os.PathLike) -> SourceSet:
    """Read and validate a source-set file (see the module notes).

    Returns
    -------
    SourceSet
        With the base scenario parsed; sweeps are expanded into ruptures by
        :func:`tsunamifocus.source.sweep.sweep_sources`.

    Raises
    ------
    ScenarioError
        Any problem with the file, its base scenario or its sources, in one line.
    """
    p = Path(path)
    text = read_utf8_text(p, "source-set file", ScenarioError, "save the source-set file as UTF-8",
                          "a source-set .toml file")
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        msg = str(exc)
        m = re.search(r"\(at line (\d+), column (\d+)\)", msg)
        where = f"line {m.group(1)}, column {m.group(2)}: " if m else ""
        raise ScenarioError(f"{p}: {where}invalid TOML: {msg[: m.start()].strip() if m else msg}") from None
    ctx = _Ctx(_Where(str(p), text), p.resolve().parent, check_files=True)
    sections = ("set", "source", "from_scenario", "sweep")
    for key in data:
        if key not in sections:
            m = difflib.get_close_matches(key, sections, n=1, cutoff=0.6)
            hint = f"did you mean [[{m[0]}]]?" if m else "valid sections: " + ", ".join(f"[{s}]" for s in sections)
            raise ScenarioError(f"{p}: unknown section {key!r}; {hint}")
    if not isinstance(data.get("set"), Mapping):
        raise ScenarioError(f"{p}: missing section [set] (it needs at least scenario = \"base scenario file\")")
    sv = _table(ctx, ("set",), data["set"], SET_KEYS)
    base = sv["scenario"]
    try:
        scenario = parse_scenario(base)
    except ScenarioError as exc:
        raise ctx.fail(("set",), "scenario", str(exc)) from None
    members: list[SetMember] = []
    for kind in ("source", "from_scenario", "sweep"):
        if kind in data and (isinstance(data[kind], Mapping) or not isinstance(data[kind], list)):
            raise ScenarioError(f"{p}: [{kind}] must be an array of tables: write [[{kind}]]")
    for i, raw in enumerate(data.get("source", [])):
        if not isinstance(raw, Mapping):
            raise ctx.fail(("source", i), None, "expected a table of keys")
        w = _table(ctx, ("source", i), {"weight": raw["weight"]} if "weight" in raw else {}, (_WEIGHT,))["weight"]
        cfg = _build_source(ctx, i, {k: x for k, x in raw.items() if k != "weight"})
        members.append(SetMember(cfg, w, f"{p.name} [[source]] {i + 1}"))
    for i, raw in enumerate(data.get("from_scenario", [])):
        sect = ("from_scenario", i)
        v = _table(ctx, sect, raw, (_Key("path", "path", "scenario file", required=True), _WEIGHT))
        try:
            other = parse_scenario(v["path"])
        except ScenarioError as exc:
            raise ctx.fail(sect, "path", str(exc)) from None
        members += [SetMember(s, v["weight"], f"{Path(v['path']).name} [[source]] {j + 1}")
                    for j, s in enumerate(other.sources)]
    sweeps = tuple(_sweep(ctx, i, raw) for i, raw in enumerate(data.get("sweep", [])))
    if not members and not sweeps:
        raise ScenarioError(f"{p}: the set has no members; add [[source]], [[from_scenario]] or [[sweep]] tables")
    seen: dict[str, str] = {}
    for m in members:
        if m.source.name in seen:
            raise ScenarioError(f"{p}: source name {m.source.name!r} appears twice ({seen[m.source.name]} and "
                                f"{m.origin}); names must be unique in a set")
        seen[m.source.name] = m.origin
    names = [s.name for s in sweeps]
    if len(set(names)) < len(names):
        raise ScenarioError(f"{p}: two [[sweep]] tables share a name; names must be unique")
    return SourceSet(name=sv["name"] or p.stem, scenario=scenario, top_k=sv["top_k"] or scenario.output.top_k,
                     members=tuple(members), sweeps=sweeps, file=p.resolve())
