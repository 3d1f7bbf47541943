"""Planning-study appendix: one self-contained HTML file and a PDF with the same content.

:func:`build_appendix` turns a plain ``context`` dict (see :data:`CONTEXT_KEYS`) into a list of
document blocks (headings, paragraphs, equations, tables, figures, the cautions box) and renders
that one list twice:

* HTML: inline CSS (A4 print rules), figures embedded as ``data:image/png;base64`` URIs, no
  external resources;
* PDF: fpdf2 (pure Python, installs with pip alone) with the DejaVu Sans TrueType fonts shipped
  in matplotlib's ``mpl-data`` so that equations in Unicode (√, ∂, θ, ², ₀ ...) print as they
  read in the HTML. Title, date and tool version in the running header, page numbers and the
  short caution in the footer of every page, the full cautions box on page 1.

Both files are written to a temporary name and renamed, so a failure leaves nothing half-written.
"""

from __future__ import annotations

import base64
import datetime as _dt
import functools
import html
import math
import numbers
import os
import pathlib
import re
import struct
import warnings
from collections.abc import Iterable, Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd

from ..coast.tubes import TUBE_MIN_WIDTH
from ..cautions import CAUTION_SHORT, caution_text
from ..constants import __version__
from ..errors import DataFileError, InputError, TsunamiFocusWarning
from ..focusing.ranking import ranked_mask
from ..io.styles import three_digits

__all__ = ['build_appendix', 'CONTEXT_KEYS', 'SECTION_KEYS', 'DEFAULT_METHOD', 'DEFAULT_REFERENCES', 'DEFAULT_ASSUMPTIONS', 'FIGURE_CAPTIONS', 'document_blocks']


def _caution_parts(text: str) -> tuple[list[str], list[tuple[str, list[str]]]]:
    """Split the Markdown cautions into lead paragraphs and (heading, bullets) lists."""
    paras: list[str] = []
    lists: list[tuple[str, list[str]]] = []
    cur: list[str] = []
    for line in text.splitlines() + [""]:
        s = line.strip()
        if s.startswith("- "):
            if cur and not lists:
                head = " ".join(cur)
                cur = []
                lists.append((head, []))
            elif cur:
                paras.append(" ".join(cur))
                cur = []
            if not lists:
                lists.append(("", []))
            lists[-1][1].append(s[2:].strip())
        elif s == "":
            if cur:
                paras.append(" ".join(cur))
                cur = []
        elif lists and lists[-1][1] and line.startswith(("  ", "\t")):
            lists[-1][1][-1] += " " + s
        else:
            if lists and lists[-1][1]:
                # text after a list starts a new paragraph
                pass
            if s.endswith(":") and not cur:
                lists.append((s, []))
            else:
                cur.append(s)
    # a heading with no bullets is really a paragraph
    out_lists = []
    for h, b in lists:
        if b:
            out_lists.append((h, b))
        elif h:
            paras.append(h)
    return paras, out_lists


# --------------------------------------------------------------------------------------
# defaults: method, references, assumptions
# --------------------------------------------------------------------------------------

#: Method summary: list of sections with text paragraphs and Unicode equations.
DEFAULT_METHOD: list[dict[str, Any]] = [
    {
        "heading": "Long-wave speed",
        "text": [
            "Tsunamis are long compared with the ocean depth, so they travel at the speed of linear "
            "long (shallow-water) waves, set by the local depth h alone."
        ],
        "equations": ["c(x, y) = √(g h(x, y)),   g = 9.81 m s⁻²"],
    },
    {
        "heading": "Kinematic ray equations",
        "text": [
            "Rays are traced from the source with the ray azimuth θ measured clockwise from north. "
            "They bend towards slower (shallower) water; this refraction over ridges and shoals is what "
            "focuses energy into branches and caustics. On projected grids (plane, metres):"
        ],
        "equations": [
            "dx/dt = c sin θ,   dy/dt = c cos θ",
            "dθ/dt = −(∂c/∂x cos θ − ∂c/∂y sin θ)",
        ],
    },
    {
        "heading": "Rays on the sphere",
        "text": [
            "On longitude/latitude grids (λ, φ) the same equations are written on a sphere of radius "
            "R = 6 371 008.8 m; the first term of dθ/dt turns a ray along a great circle:"
        ],
        "equations": [
            "dφ/dt = c cos θ / R,   dλ/dt = c sin θ / (R cos φ)",
            "dθ/dt = (c/R) sin θ tan φ − [cos θ/(R cos φ) ∂c/∂λ − sin θ/R ∂c/∂φ]",
        ],
    },
    {
        "heading": "Dynamic ray tracing and caustics",
        "text": [
            "Along each ray the paraxial quantities q (geometrical spreading: ray-tube width per unit "
            "launch angle) and p are integrated (Červený 2001), with c_nn the second derivative of c "
            "across the ray. A caustic is where q passes through zero; the number of sign changes of q "
            "and the distance to the first caustic are recorded per ray. Over weak, smooth random depth "
            "variations (relative rms ε of the speed, correlation length ℓ) rays first cross at a "
            "typical distance that scales as ε^(−2/3) (Kaplan 2002), so branches of focused energy can "
            "form over hundreds of kilometres of ocean even for depth variations of a few percent "
            "(Degueldre et al. 2016)."
        ],
        "equations": ["dq/dt = c² p,   dp/dt = −(c_nn / c) q", "d_caustic ∝ ℓ ε^(−2/3)"],
    },
    {
        "heading": "Source and initial energy",
        "text": [
            "The sea-floor displacement of each rectangular fault segment with uniform slip in an "
            "elastic half-space is computed with the closed-form expressions of Okada (1985) and taken "
            "as the initial sea surface η₀ (optionally low-pass filtered for the water column, Kajiura "
            "1963, and with the horizontal-displacement term of Tanioka & Satake 1996). The seismic "
            "moment and magnitude follow Hanks & Kanamori (1979). The initial potential energy is "
            "shared among the rays in proportion to the energy the source radiates into each azimuth."
        ],
        "equations": [
            "M₀ = μ A D,   Mw = ⅔ (log₁₀ M₀ − 9.1)   (M₀ in N m)",
            "E₀ = ½ ρ g ∬ η₀² dA,   ρ = 1025 kg m⁻³",
        ],
    },
    {
        "heading": "Energy density and lensing factor",
        "text": [
            "Each ray i carries an energy weight wᵢ [J]. The energy map is the ray-density estimate "
            "W, the energy per unit wavefront width, with ℓᵢ the path length of ray i in a cell of "
            "area A. For the maps it is regularised by smoothing over a quarter of the local wavelength, "
            "σ = λ / 4 with λ = c T the long-wave wavelength at the dominant period, since ray-density "
            "detail finer than a wavelength is not physical; the coastline segments' energies come "
            "from ray tubes instead, with footprints capped at the first Fresnel zone, √(λ L) / 2, and "
            f"at caustics no narrower than {TUBE_MIN_WIDTH:g} local wavelengths (a focus is no narrower "
            "than the diffraction limit of waves converging at the modest angles of sea-floor lenses).",
            "The lensing factor compares the energy that reaches a cell or a coastline segment with the "
            "energy of the same ray fan traced over a reference bathymetry: the offshore sea depths "
            "(deeper than 1000 m) low-passed, the shelf (shallower than 200 m) kept, blended in between, "
            "and rescaled to the same mean depth, so both runs share the coast and the stop isobath. "
            "It isolates focusing by offshore bathymetric features shorter "
            "than the low-pass length from plain spreading, shoaling and large-scale refraction: "
            "L > 1 means focusing, L < 1 a shadow. Per segment, e is the energy per metre of "
            "coastline; the 5–95 % interval comes from a Poisson bootstrap over the rays.",
        ],
        "equations": [
            "W(cell) = Σᵢ wᵢ ℓᵢ(cell) / A(cell)   [J m⁻¹]",
            "L = e_real / e_reference   (e: energy per metre of coastline, J m⁻¹)",
        ],
    },
    {
        "heading": "Indicative amplitude (Green's law)",
        "text": [
            "Energy conservation in a slowly varying ray tube (energy flux E c b constant, with "
            "E = ½ ρ g A² per unit area) gives Green's law for the amplitude A across depth h and "
            "ray-tube width b. At the stop isobath the energy per unit crest width E_w is spread over one "
            "wavelength c T of the dominant period T, which gives an amplitude that Green's law carries "
            "to an indicative value at 1 m depth. Indicative only: no breaking, run-up, friction, "
            "resonance or nonlinearity."
        ],
        "equations": [
            "A₂ / A₁ = (h₁ / h₂)^¼ (b₁ / b₂)^½",
            "a_stop = √(2 E_w / (ρ g c_stop T)),   a_1m = a_stop (h_stop / 1 m)^¼",
        ],
    },
]

#: References of the method summary (author-year, title, journal).
DEFAULT_REFERENCES: list[str] = [
    "Berry, M. V. (2007). Focused tsunami waves. Proceedings of the Royal Society A 463, 3055–3071.",
    "Born, M., Wolf, E. (1999). Principles of Optics, 7th ed. Cambridge University Press (ch. 8, "
    "Fresnel zones).",
    "Červený, V. (2001). Seismic Ray Theory. Cambridge University Press.",
    "Degueldre, H., Metzger, J. J., Geisel, T., Fleischmann, R. (2016). Random focusing of tsunami "
    "waves. Nature Physics 12, 259–262.",
    "Green, G. (1838). On the motion of waves in a variable canal of small depth and width. "
    "Transactions of the Cambridge Philosophical Society 6, 457–462.",
    "Hanks, T. C., Kanamori, H. (1979). A moment magnitude scale. Journal of Geophysical Research "
    "84(B5), 2348–2350.",
    "Kajiura, K. (1963). The leading wave of a tsunami. Bulletin of the Earthquake Research "
    "Institute, University of Tokyo 41, 535–571.",
    "Kaplan, L. (2002). Statistics of branched flow in a weak correlated random potential. Physical "
    "Review Letters 89, 184103.",
    "Okada, Y. (1985). Surface deformation due to shear and tensile faults in a half-space. "
    "Bulletin of the Seismological Society of America 75(4), 1135–1154.",
    "Satake, K. (1988). Effects of bathymetry on tsunami propagation: application of ray tracing to "
    "tsunamis. Pure and Applied Geophysics 126, 27–36.",
    "Strasser, F. O., Arango, M. C., Bommer, J. J. (2010). Scaling of the source dimensions of "
    "interface and intraslab subduction-zone earthquakes with moment magnitude. Seismological "
    "Research Letters 81(6), 941–950.",
    "Tanioka, Y., Satake, K. (1996). Tsunami generation by horizontal displacement of ocean bottom. "
    "Geophysical Research Letters 23(8), 861–864.",
    "Watada, S., Kusumoto, S., Satake, K. (2014). Traveltime delay and initial phase reversal of "
    "distant tsunamis coupled with the self-gravitating elastic Earth. Journal of Geophysical "
    "Research: Solid Earth 119, 4287–4310.",
]

#: Assumptions and limits of ray theory, listed in the appendix.
DEFAULT_ASSUMPTIONS: list[str] = [
    "Linear, non-dispersive long waves: the wavelength is much longer than the depth; frequency "
    "dispersion of short-period components is ignored.",
    "Geometrical optics: the depth must vary slowly over a wavelength. Diffraction around and "
    "behind features smaller than a wavelength is not represented.",
    "At caustics ray theory predicts infinite amplitude; the gridded energy density is a "
    "regularised estimate that depends on the ray count and the cell size.",
    "No reflection from coasts, no trapped edge waves, no shelf or harbour resonance.",
    "No nonlinearity, wave breaking or bottom friction; rays stop at the coastal stop isobath, and "
    "no inundation or run-up is computed.",
    "Amplitudes extrapolated by Green's law to 1 m depth are indicative only.",
    "Travel times from c = √(g h) are slightly early for trans-ocean paths (about 1–2 %: elastic "
    "Earth, sea-water compressibility and dispersion; Watada et al. 2014).",
    "Results depend on the bathymetry's resolution and errors: depth errors of a few percent can "
    "move focusing hotspots (Degueldre et al. 2016). Read rankings with their intervals.",
    "Earthquake sources are simplified: uniform slip on rectangular faults in an elastic half-space.",
]

#: Default captions of the figures by context key.
FIGURE_CAPTIONS: dict[str, str] = {
    "uplift": "Initial sea-surface displacement of the source (Okada 1985 for faults), metres, positive up.",
    "ray_field": "Ray field over the bathymetry: accumulated ray energy per unit wavefront width "
    "(log scale) and a subset of ray paths; the branches are where refraction focuses energy.",
    "lensing_map": "Lensing factor (log scale, 1 = no focusing) with first-arrival travel-time "
    "contours in minutes (eikonal solver) and the coastline segments coloured by their lensing factor; the top-ranked "
    "segments are labelled by rank.",
    "travel_time": "First-arrival travel time (eikonal equation solved by fast marching) with the "
    "isochrones: hourly (bold) and at the finer interval of the scenario (thin).",
    "ranking": "Top coastline segments ranked by lensing factor with 5–95 % intervals; grey hatched "
    "bars are segments flagged unreliable.",
    "ranking_amplitude": "Top coastline segments ranked by indicative amplitude at 1 m depth (Green's law, "
    "indicative only) with 5–95 % intervals; grey hatched bars are segments with too few rays to rank.",
    "oceans": "The two oceans of the lensing factor as the dominant band's wave sees them: the real sea floor "
    "and the lensing reference (offshore relief smoothed over a deep-water wavelength, shelf and coast "
    "kept), both averaged over a fraction of the local wavelength.",
    "ray_vs_wave": "Amplitude at the stop isobath per ranked segment: ray screening against the linear "
    "long-wave check (log-log, 1:1 line); the top segments of each ranking are marked and labelled.",
    "ray_vs_wave_lensing": "Lensing factor per ranked segment: rays (energy over the real / over the reference "
    "ocean) against the wave check (its energy, the time integral of the squared elevation, over the two "
    "oceans).",
    "ray_vs_wave_profile": "Amplitude and lensing factor of the rays and of the wave check along the coast "
    "(ranked segments in coastline order; gaps separate coastline pieces), the top segments of each "
    "ranking marked: where the two disagree, and whether a hotspot has moved along the coast.",
    "wave_lensing_map": "Where the wave focuses: the wave check's lensing factor over the whole ocean (ratio of "
    "the linear long-wave energies over the real and over the reference sea floor, log scale; 1 = no "
    "focusing), the ranked segments coloured and numbered by the wave's own lensing ranking. Compare it "
    "with the rays' lensing map.",
}

#: Keys of ``context`` accepted by :func:`build_appendix`, with their meaning.
CONTEXT_KEYS: dict[str, str] = {
    "scenario": "REQUIRED dict: name (str), description (str), grid (dict), sources (list of dicts), "
    "settings (dict, optional)",
    "ranking": "REQUIRED pandas.DataFrame of coastline segments (shared segments contract)",
    "title": "str, document title",
    "subtitle": "str, line under the title",
    "date": "str (ISO date/time) or datetime; default: now (UTC). Fix it for reproducible PDFs",
    "tool_version": "str, default tsunamifocus.__version__",
    "run_id": "str, run identifier printed in the header",
    "top_k": "int, rows of the ranked table (default 10)",
    "ranking_columns": "list of (column, header) pairs added to the ranked table",
    "data_sources": "list of str or dicts (name, description, citation, path, sha256, licence)",
    "method": "list of sections {heading, text: [str], equations: [str]}; default DEFAULT_METHOD",
    "extra_method": "list of sections appended to the method",
    "references": "list of str; default DEFAULT_REFERENCES",
    "extra_references": "list of str appended to the references",
    "assumptions": "list of str; default DEFAULT_ASSUMPTIONS",
    "validation": "table (DataFrame, list of dicts or dict) summarising the validation tests",
    "validation_notes": "str or list of str under the validation table",
    "ranking_note": "str, a note under the ranking table (e.g. that no wave check was run)",
    "amplitude_ranking": "true: also list the top segments by indicative amplitude after the lensing table; "
    "'first': before it (the wave check held that ranking and not the lensing factor's)",
    "health": "dict of numerical health checks (values, or dicts with value/limit/ok), or a str saying where they are",
    "figures": "dict key -> path or {path, caption}; keys uplift, ray_field, lensing_map, ranking, ...",
    "points": "table of points of interest (DataFrame or list of dicts)",
    "run_info": "dict of run facts (timings, software versions, seeds, outputs)",
    "ensemble": "optional section: {text, metrics, table, table_caption, more_tables, figures}",
    "comparison": "optional section: {text, metrics, table, table_caption, more_tables, figures}",
    "wave_check": "optional section: {text, metrics, table, table_caption, more_tables, figures}",
    "travel_times": "optional section: {text, metrics, table, table_caption, more_tables, figures} "
                    "(first arrivals, isochrones)",
}

#: Keys of an optional section (ensemble, comparison, wave_check).
SECTION_KEYS = ("text", "metrics", "table", "table_caption", "more_tables", "figures", "title")

_OPTIONAL_TITLES = {
    "ensemble": "Uncertainty ensemble",
    "comparison": "Scenario comparison",
    "wave_check": "Independent wave-equation check",
    "travel_times": "First-arrival travel times and isochrones",
}

# --------------------------------------------------------------------------------------
# formatting helpers
# --------------------------------------------------------------------------------------

_SUP = str.maketrans("0123456789-+", "⁰¹²³⁴⁵⁶⁷⁸⁹⁻⁺")


def _num(v: Any) -> float:
    """Float of a table value; NaN for None, pd.NA or anything non-numeric."""
    try:
        if v is None or v is pd.NA or v is pd.NaT:
            return math.nan
        return float(v)
    except (TypeError, ValueError):
        return math.nan


def _fmt(v: Any) -> str:
    """Format a table value: 4 significant digits, ×10ⁿ for large/small, '–' for missing."""
    if v is None or v is pd.NA or v is pd.NaT:
        return "–"
    if isinstance(v, (bool, np.bool_)):
        return "yes" if v else "no"
    if isinstance(v, numbers.Integral):
        return f"{int(v):d}"
    if isinstance(v, numbers.Real):
        x = float(v)
        if not math.isfinite(x):
            return "–" if math.isnan(x) else ("∞" if x > 0 else "−∞")
        if x == 0:
            return "0"
        ax = abs(x)
        if ax >= 1e6 or ax < 1e-3:
            e = int(math.floor(math.log10(ax)))
            m = x / 10**e
            return f"{m:.3g}×10{str(e).translate(_SUP)}"
        if ax >= 1000:
            return f"{x:,.0f}".replace(",", " ")
        s = f"{x:.4g}"
        return s.replace("-", "−") if s.startswith("-") else s
    if isinstance(v, (pd.Timestamp, _dt.datetime, _dt.date)):
        return v.isoformat()
    if isinstance(v, (list, tuple)):
        return ", ".join(_fmt(a) for a in v)
    if isinstance(v, Mapping):
        return "; ".join(f"{k}: {_fmt(a)}" for k, a in v.items())
    return str(v)


_UNIT_SUFFIX = {
    "m": "m",
    "km": "km",
    "s": "s",
    "min": "min",
    "h": "h",
    "deg": "°",
    "j": "J",
    "nm": "N m",
    "pa": "Pa",
    "gpa": "GPa",
    "pct": "%",
    "mb": "MB",
    "gb": "GB",
    "mps": "m s⁻¹",
}
_WORDS = {
    "crs": "CRS",
    "sha256": "SHA-256",
    "mw": "Mw",
    "id": "ID",
    "nan": "NaN",
    "utc": "UTC",
    "m0": "M0",
    "lon": "lon",
    "lat": "lat",
    "poi": "POI",
    "cfl": "CFL",
    "rms": "rms",
}


def _fmt3(v: Any) -> str:
    """Three significant digits, trailing zeros kept (the ranked table: 5.40 (3.43–8.05), as the chart)."""
    try:
        x = float(v)
    except (TypeError, ValueError):
        return _fmt(v)
    if not math.isfinite(x):
        return "–"
    if x != 0 and (abs(x) >= 1e4 or abs(x) < 1e-2):
        return _fmt(x)
    if x == 0:
        return "0"
    return three_digits(x).replace("-", "−")


def _pretty_key(k: Any) -> str:
    """``"spacing_m"`` -> ``"Spacing (m)"``, ``"n_rays"`` -> ``"Number of rays"``."""
    raw = str(k).strip()
    if " " in raw or not raw:
        return raw[:1].upper() + raw[1:]
    toks = [t for t in raw.split("_") if t]
    unit = ""
    if len(toks) > 1 and toks[-1].lower() in _UNIT_SUFFIX:
        unit = _UNIT_SUFFIX[toks[-1].lower()]
        toks = toks[:-1]
    if len(toks) > 1 and toks[0] == "n":
        toks = ["number", "of"] + toks[1:]
    words = [_WORDS.get(t.lower(), t) for t in toks]
    text = " ".join(words)
    text = text[:1].upper() + text[1:]
    return f"{text} ({unit})" if unit else text


def _as_table(obj: Any, what: str) -> tuple[list[str], list[list[str]]]:
    """Turn a DataFrame, a list of dicts, a dict of scalars or a (columns, rows) pair into strings."""
    if obj is None:
        return [], []
    if isinstance(obj, pd.DataFrame):
        df = obj.drop(columns=[c for c in obj.columns if c == "geometry"])
        cols = [str(c) for c in df.columns]
        rows = [[_fmt(v) for v in r] for r in df.itertuples(index=False, name=None)]
        return cols, rows
    if isinstance(obj, Mapping):
        flat = _flatten(obj)
        return ["Item", "Value"], [[k, _fmt(v)] for k, v in flat]
    if isinstance(obj, tuple) and len(obj) == 2 and isinstance(obj[0], Sequence):
        cols = [str(c) for c in obj[0]]
        rows = [[_fmt(v) for v in r] for r in obj[1]]
        return cols, rows
    if isinstance(obj, Sequence) and not isinstance(obj, (str, bytes)):
        items = list(obj)
        if all(isinstance(r, Mapping) for r in items):
            cols: list[str] = []
            for r in items:
                for k in r:
                    if str(k) not in cols and k != "geometry":
                        cols.append(str(k))
            rows = [[_fmt(r.get(c)) for c in cols] for r in items]
            return cols, rows
    raise InputError(
        f"context['{what}']: expected a pandas DataFrame, a list of dicts or a dict, got {type(obj).__name__}"
    )


def _flatten(d: Mapping, prefix: str = "") -> list[tuple[str, Any]]:
    out: list[tuple[str, Any]] = []
    for k, v in d.items():
        name = f"{prefix}{_pretty_key(k)}" if not prefix else f"{prefix}{str(k).replace('_', ' ')}"
        if isinstance(v, Mapping) and not _is_check(v):
            out.extend(_flatten(v, prefix=f"{name}: "))
        else:
            out.append((name, v))
    return out


def _is_check(v: Mapping) -> bool:
    return "value" in v and bool({"limit", "tolerance", "ok", "passed", "status"} & set(v))


def _paragraphs(v: Any, what: str) -> list[str]:
    if v is None:
        return []
    if isinstance(v, str):
        return [p.strip() for p in re.split(r"\n\s*\n", v) if p.strip()]
    if isinstance(v, Sequence):
        return [str(p) for p in v]
    raise InputError(f"context['{what}']: expected a string or a list of strings, got {type(v).__name__}")


# --------------------------------------------------------------------------------------
# document model
# --------------------------------------------------------------------------------------


class _Block(dict):
    """One document element: ``kind`` plus fields (text, columns, rows, path, caption ...)."""


def _b(kind: str, **kw) -> _Block:
    blk = _Block(kw)
    blk["kind"] = kind
    return blk


def _figure_items(figs: Any, what: str) -> list[tuple[pathlib.Path, str]]:
    if figs is None:
        return []
    items: list[tuple[Any, Any]] = []
    if isinstance(figs, Mapping):
        order = list(FIGURE_CAPTIONS)  # source, ray field, lensing map, ranking; others after
        keys = sorted(figs, key=lambda k: (order.index(k) if k in order else len(order), list(figs).index(k)))
        for key in keys:
            val = figs[key]
            if isinstance(val, Mapping):
                items.append(
                    (val.get("path"), val.get("caption") or FIGURE_CAPTIONS.get(key, _pretty_key(key)))
                )
            else:
                items.append((val, FIGURE_CAPTIONS.get(key, _pretty_key(key))))
    elif isinstance(figs, Sequence) and not isinstance(figs, (str, bytes)):
        for val in figs:
            if isinstance(val, Mapping):
                items.append((val.get("path"), val.get("caption", "")))
            elif isinstance(val, (tuple, list)) and len(val) == 2:
                items.append((val[0], val[1]))
            else:
                items.append((val, ""))
    else:
        raise InputError(
            f"context['{what}']: expected a dict of figure paths or a list, got {type(figs).__name__}"
        )
    out = []
    for path, cap in items:
        if path is None:
            raise InputError(f"context['{what}']: a figure entry has no 'path'")
        p = pathlib.Path(path)
        if not p.is_file():
            raise DataFileError(f"figure file '{p}' (context['{what}']) does not exist")
        with open(p, "rb") as fh:
            if fh.read(8) != b"\x89PNG\r\n\x1a\n":
                raise DataFileError(f"figure file '{p}' (context['{what}']) is not a PNG image")
        out.append((p, str(cap or "")))
    return out


_RANK_COLUMNS: list[tuple[str, str]] = [
    ("segment_id", "Segment"),
    ("name", "Name"),
    ("lon_mid", "Lon (°)"),
    ("lat_mid", "Lat (°)"),
    ("length_m", "Length (km)"),
    ("lensing_factor", "Lensing factor (5–95 %)"),
    ("amp_1m_m", "Amplitude at 1 m, m (5–95 %)"),
    ("first_arrival_s", "First arrival (min)"),
    ("n_rays", "Rays"),
    ("reliable", "Reliable"),
]


#: The ranked quantity and its rank column, per ranking (its segments: :func:`ranked_mask`).
_RANKINGS: dict[str, tuple[str, str]] = {
    "lensing": ("lensing_factor", "rank_lensing"),
    "amplitude": ("amp_1m_m", "rank_amplitude"),
}


def _ranking_table(
    seg: pd.DataFrame, top_k: int, extra: Sequence[tuple[str, str]], by: str = "lensing"
) -> tuple[list[str], list[list[str]], int]:
    if not isinstance(seg, pd.DataFrame):
        raise InputError(
            f"context['ranking']: expected a pandas DataFrame of segments, got {type(seg).__name__}"
        )
    value, rank_col = _RANKINGS[by]
    for c in ("segment_id", value):
        if c not in seg.columns:
            raise InputError(f"context['ranking']: segments table lacks column '{c}'")
    df = seg.copy()
    if rank_col in df.columns and df[rank_col].notna().any():
        df = df.sort_values([rank_col, value], ascending=[True, False], na_position="last")
        ranks = df[rank_col].tolist()
    else:
        df = df.sort_values(value, ascending=False, na_position="last")
        # no rank column: rank by value, but never rank a segment its ranking does not take
        rel = ranked_mask(df, by)
        ranks = list(np.where(rel, np.cumsum(rel), np.nan))
    df = df.head(top_k)
    ranks = ranks[: len(df)]
    cols = ["Rank"]
    keys = []
    names_useful = "name" in df.columns and any(
        isinstance(a, str) and a.strip() and a != str(b)
        for a, b in zip(df["name"], df["segment_id"], strict=True)
    )
    columns = list(_RANK_COLUMNS)
    if by == "amplitude":  # the ranked value first; its rank says which segments it takes
        columns = [c for c in columns if c[0] not in ("amp_1m_m", "reliable")]
        columns.insert(columns.index(("lensing_factor", "Lensing factor (5–95 %)")),
                       ("amp_1m_m", "Amplitude at 1 m, m (5–95 %)"))
    for key, head in columns + list(extra):
        if key == "name" and not names_useful:
            continue
        if key in df.columns:
            cols.append(head)
            keys.append(key)
    rows = []
    for rk, (_, r) in zip(ranks, df.iterrows(), strict=True):
        rkf = _num(rk)
        row = [_fmt(int(rkf)) if math.isfinite(rkf) else "–"]
        for key in keys:
            v = r[key]
            if key == "lensing_factor":
                s = _fmt3(v)
                if "lensing_lo" in df.columns and "lensing_hi" in df.columns:
                    s += _interval(r["lensing_lo"], r["lensing_hi"])
            elif key == "amp_1m_m":
                s = _fmt3(v)
                if "amp_lo" in df.columns and "amp_hi" in df.columns:
                    s += _interval(r["amp_lo"], r["amp_hi"])
            elif key == "first_arrival_s":
                s = f"{_num(v) / 60.0:.1f}" if math.isfinite(_num(v)) else "–"
            elif key == "length_m":
                s = _fmt(_num(v) / 1000.0)
            elif key in ("lon_mid", "lat_mid"):
                s = f"{_num(v):.3f}".replace("-", "−") if math.isfinite(_num(v)) else "–"
            else:
                s = _fmt(v)
            row.append(s)
        rows.append(row)
    return cols, rows, len(df)


def _interval(lo: Any, hi: Any) -> str:
    """`` (0.8–2.1)``; `` (0.8 to ∞)`` for an unbounded side; nothing when a bound is unknown."""
    a, b = _num(lo), _num(hi)
    if math.isnan(a) or math.isnan(b):
        return ""
    if math.isinf(a) or math.isinf(b):
        return f" ({_fmt_bound(a)} to {_fmt_bound(b)})"
    return f" ({_fmt3(a)}–{_fmt3(b)})"


def _fmt_bound(x: float) -> str:
    return ("∞" if x > 0 else "−∞") if math.isinf(x) else _fmt3(x)


def _health_table(health: Any) -> tuple[list[str], list[list[str]]]:
    if isinstance(health, Mapping):
        rows = []
        any_check = False
        for name, v in _flatten(health):
            if isinstance(v, Mapping) and _is_check(v):
                any_check = True
                lim = v.get("limit", v.get("tolerance"))
                ok = v.get("ok", v.get("passed", v.get("status")))
                status = ("pass" if ok else "FAIL") if isinstance(ok, (bool, np.bool_)) else _fmt(ok)
                rows.append([name, _fmt(v["value"]), _fmt(lim), status])
            else:
                rows.append([name, _fmt(v), "", ""])
        if any_check:
            return ["Check", "Value", "Limit", "Status"], rows
        return ["Check", "Value"], [r[:2] for r in rows]
    return _as_table(health, "health")


def _optional_section(key: str, sec: Any, n: int) -> list[_Block]:
    if not isinstance(sec, Mapping):
        raise InputError(
            f"context['{key}']: expected a dict with keys {SECTION_KEYS}, got {type(sec).__name__}"
        )
    unknown = [k for k in sec if k not in SECTION_KEYS]
    if unknown:
        raise InputError(f"context['{key}']: unknown key(s) {unknown}; expected some of {SECTION_KEYS}")
    title = str(sec.get("title") or _OPTIONAL_TITLES[key])
    out = [_b("h2", text=f"{n}. {title}", anchor=key)]
    for p in _paragraphs(sec.get("text"), f"{key}.text"):
        out.append(_b("p", text=p))
    if sec.get("metrics") is not None:
        cols, rows = _as_table(sec["metrics"], f"{key}.metrics")
        out.append(_b("table", columns=cols, rows=rows, caption="", kv=True))
    if sec.get("table") is not None:
        cols, rows = _as_table(sec["table"], f"{key}.table")
        out.append(
            _b(
                "table",
                columns=[_pretty_key(c) for c in cols],
                rows=rows,
                caption=str(sec.get("table_caption") or ""),
                small=len(cols) > 6,
            )
        )
    more = sec.get("more_tables") or []
    if not isinstance(more, (list, tuple)) or not all(isinstance(m, Mapping) and "table" in m for m in more):
        raise InputError(f"context['{key}']['more_tables']: expected a list of dicts with keys 'table' and "
                         "'caption'")
    for i, m in enumerate(more):
        cols, rows = _as_table(m["table"], f"{key}.more_tables[{i}]")
        out.append(_b("table", columns=[_pretty_key(c) for c in cols], rows=rows,
                      caption=str(m.get("caption") or ""), small=len(cols) > 6))
    for path, cap in _figure_items(sec.get("figures"), f"{key}.figures"):
        out.append(_b("figure", path=path, caption=cap))
    return out


def document_blocks(context: Mapping[str, Any]) -> tuple[dict[str, str], list[_Block]]:
    """Validate ``context`` and build the document: (metadata, blocks).

    Parameters
    ----------
    context : mapping
        See :data:`CONTEXT_KEYS`.

    Returns
    -------
    (dict, list)
        Metadata (title, subtitle, date, version, run_id) and the ordered list of blocks.

    Raises
    ------
    InputError
        On unknown keys, a missing required key or a value of the wrong kind.
    """
    if not isinstance(context, Mapping):
        raise InputError(f"appendix context: expected a dict, got {type(context).__name__}")
    unknown = [k for k in context if k not in CONTEXT_KEYS]
    if unknown:
        import difflib

        hints = []
        for k in unknown:
            m = difflib.get_close_matches(str(k), CONTEXT_KEYS, n=1)
            hints.append(f"'{k}'" + (f" (did you mean '{m[0]}'?)" if m else ""))
        raise InputError(f"appendix context: unknown key(s) {', '.join(hints)}")
    for req in ("scenario", "ranking"):
        if req not in context or context[req] is None:
            raise InputError(f"appendix context: required key '{req}' is missing")
    sc = context["scenario"]
    if not isinstance(sc, Mapping) or not str(sc.get("name", "")).strip():
        raise InputError("appendix context['scenario']: expected a dict with a non-empty 'name'")

    meta = _document_meta(context, sc)
    top_k = int(context.get("top_k", 10))
    if top_k < 1:
        raise InputError(f"appendix context['top_k'] = {top_k}: expected an integer >= 1")

    blocks: list[_Block] = []
    paras, lists = _caution_parts(caution_text())
    blocks.append(_b("caution", paragraphs=paras, lists=lists))
    sections = [
        ("Scenario", "scenario", _scenario_blocks(sc)),
        ("Data sources", "data", _data_source_blocks(context.get("data_sources"))),
        ("Method summary", "method", _method_blocks(context)),
        ("Assumptions and limits of ray theory", "limits",
         [_b("bullets", items=[str(a) for a in (context.get("assumptions") or DEFAULT_ASSUMPTIONS)])]),
        ("Ranked coastline segments", "ranking", _ranking_blocks(context, top_k)),
    ]
    figs = _figure_items(context.get("figures"), "figures")
    if figs:
        sections.append(("Figures", "figures", [_b("figure", path=path, caption=f"Figure {i}. {cap}")
                                                for i, (path, cap) in enumerate(figs, start=1)]))
    if context.get("points") is not None:
        cols, rows = _as_table(context["points"], "points")
        sections.append(("Points of interest", "points", [
            _b("table", columns=[_pretty_key(c) for c in cols], rows=rows, caption="", small=True)]))
    sections.append(("Validation summary", "validation", _validation_blocks(context)))
    sections.append(("Numerical health checks", "health", _health_blocks(context.get("health"))))
    n = 0
    for title, anchor, body in sections:
        n += 1
        blocks.append(_b("h2", text=f"{n}. {title}", anchor=anchor))
        blocks.extend(body)
    for key in ("travel_times", "ensemble", "comparison", "wave_check"):
        if context.get(key) is not None:
            n += 1
            blocks.extend(_optional_section(key, context[key], n))
    if context.get("run_info") is not None:
        n += 1
        blocks.append(_b("h2", text=f"{n}. Run information", anchor="run"))
        cols, rows = _as_table(context["run_info"], "run_info")
        blocks.append(_b("table", columns=cols, rows=rows, caption="", kv=True))
    # the sections' figures continue the numbering of the Figures section
    i = 0
    for blk in blocks:
        if blk["kind"] == "figure":
            i += 1
            if not str(blk.get("caption", "")).startswith("Figure "):
                blk["caption"] = f"Figure {i}. {blk.get('caption', '')}".rstrip()
    return meta, blocks


def _document_meta(context: Mapping[str, Any], sc: Mapping[str, Any]) -> dict[str, str]:
    """Title, subtitle, date (UTC, to the minute), tool version and run id of the document."""
    date = context.get("date")
    if date is None:
        date = _dt.datetime.now(_dt.UTC)
    if isinstance(date, str):
        try:
            date = _dt.datetime.fromisoformat(date.replace("Z", "+00:00"))
        except ValueError as exc:
            raise InputError(f"appendix context['date'] = {date!r}: expected an ISO 8601 date/time") from exc
    if isinstance(date, _dt.datetime):
        if date.tzinfo is not None:
            date = date.astimezone(_dt.UTC)
        date_s = date.strftime("%Y-%m-%d %H:%M UTC")
    elif isinstance(date, _dt.date):
        date_s = date.isoformat()
    else:
        raise InputError(
            f"appendix context['date']: expected an ISO string or datetime, got {type(date).__name__}"
        )
    return {
        "title": str(
            context.get("title") or "Planning-study appendix: coastal tsunami-energy focusing screening"
        ),
        "subtitle": str(context.get("subtitle") or f"Scenario “{sc['name']}”"),
        "date": date_s,
        "version": str(context.get("tool_version") or __version__),
        "run_id": str(context.get("run_id") or ""),
    }


def _scenario_blocks(sc: Mapping[str, Any]) -> list[_Block]:
    """Section "Scenario": name, description, grid, sources and run settings."""
    blocks: list[_Block] = []
    blocks.append(_b("p", text=f"Name: {sc['name']}", strong=True))
    for p in _paragraphs(sc.get("description"), "scenario.description"):
        blocks.append(_b("p", text=p))
    unknown_sc = [k for k in sc if k not in ("name", "description", "grid", "sources", "settings")]
    if unknown_sc:
        raise InputError(
            f"appendix context['scenario']: unknown key(s) {unknown_sc}; expected name, description, grid, "
            "sources, settings"
        )
    if sc.get("grid"):
        cols, rows = _as_table(sc["grid"], "scenario.grid")
        blocks.append(_b("h3", text="Grid"))
        blocks.append(_b("table", columns=cols, rows=rows, caption="", kv=True))
    srcs = sc.get("sources")
    if srcs:
        blocks.append(_b("h3", text="Sources"))
        if isinstance(srcs, Mapping):
            srcs = [srcs]
        srcs = [s if isinstance(s, Mapping) else getattr(s, "__dict__", {"source": str(s)}) for s in srcs]
        cols, rows = _as_table(list(srcs), "scenario.sources")
        if len(srcs) <= 4 and len(cols) > 6:  # many fields, few sources: one column per source
            names = [str(s.get("name", f"Source {i + 1}")) for i, s in enumerate(srcs)]
            tcols = ["Field"] + names
            trows = [
                [_pretty_key(c)] + [rows[j][i] for j in range(len(srcs))]
                for i, c in enumerate(cols)
                if c != "name"
            ]
            blocks.append(_b("table", columns=tcols, rows=trows, caption="", kv=True))
        else:
            blocks.append(_b("table", columns=[_pretty_key(c) for c in cols], rows=rows, caption=""))
    if sc.get("settings"):
        cols, rows = _as_table(sc["settings"], "scenario.settings")
        blocks.append(_b("h3", text="Run settings"))
        blocks.append(_b("table", columns=cols, rows=rows, caption="", kv=True))
    return blocks


def _data_source_blocks(ds: Any) -> list[_Block]:
    """Section "Data sources": one bullet per source (name, description, citation, licence, path, hash)."""
    blocks: list[_Block] = []
    if ds:
        items = []
        for d in ds if isinstance(ds, Sequence) and not isinstance(ds, str) else [ds]:
            if isinstance(d, Mapping):
                parts = [str(d.get("name", ""))]
                for k in ("description", "citation", "licence", "license", "path", "sha256"):
                    if d.get(k):
                        parts.append(
                            f"{k}: {d[k]}" if k in ("path", "sha256", "licence", "license") else str(d[k])
                        )
                items.append(" — ".join(p for p in parts if p))
            else:
                items.append(str(d))
        blocks.append(_b("bullets", items=items))
    else:
        blocks.append(_b("note", text="No data sources were supplied for this run."))
    return blocks


def _method_blocks(context: Mapping[str, Any]) -> list[_Block]:
    """Section "Method summary": the method texts and equations, then the references."""
    blocks: list[_Block] = []
    method = context.get("method") or DEFAULT_METHOD
    method = list(method) + list(context.get("extra_method") or [])
    for sec in method:
        if not isinstance(sec, Mapping) or "heading" not in sec:
            raise InputError("appendix context['method']: each section must be a dict with a 'heading'")
        blocks.append(_b("h3", text=str(sec["heading"])))
        for p in _paragraphs(sec.get("text"), "method.text"):
            blocks.append(_b("p", text=p))
        for eq in sec.get("equations", []) or []:
            blocks.append(_b("eq", text=str(eq)))
    refs = list(context.get("references") or DEFAULT_REFERENCES) + list(context.get("extra_references") or [])
    blocks.append(_b("h3", text="References"))
    blocks.append(_b("refs", items=[str(r) for r in refs]))
    return blocks


def _ranking_blocks(context: Mapping[str, Any], top_k: int) -> list[_Block]:
    """Section "Ranked coastline segments": the explanation and the table."""
    blocks: list[_Block] = []
    by_amp = context.get("amplitude_ranking")
    if by_amp not in (None, False, True, "first"):
        raise InputError(f"appendix context['amplitude_ranking'] = {by_amp!r}: expected true, false or 'first'")
    amp = _amplitude_blocks(context, top_k) if by_amp else []
    if by_amp == "first":
        blocks.extend(amp)
    cols, rows, shown = _ranking_table(context["ranking"], top_k, context.get("ranking_columns") or [])
    nseg = len(context["ranking"])
    n_ranked = sum(1 for r in rows if r[0] != "–")
    n_unrel = shown - n_ranked
    if n_ranked == 0:
        lead = (f"No segment of the {nseg} coastline segments is reliable (each has too few contributing rays), "
                f"so there is no ranking. The table lists the {n_unrel} highest lensing factors, all unreliable: "
                "read them as a prompt for a run with more rays or longer segments, not as a result.")
    else:
        lead = (f"The {n_ranked} highest-ranked of {nseg} coastline segments by lensing factor, with 5–95 % "
                "intervals where available"
                + (f", followed by {n_unrel} segment{'s' if n_unrel != 1 else ''} flagged unreliable (too few "
                   "contributing rays) whose value would place them among the ranked ones; unreliable segments "
                   "carry no rank: read them as a prompt for a finer run, not as a result." if n_unrel else "."))
    blocks.append(_b("p", text=lead))
    blocks.append(_b("table", columns=cols, rows=rows, caption="Ranked coastline segments", small=True))
    if context.get("ranking_note"):
        blocks.append(_b("note", text=str(context["ranking_note"])))
    if by_amp is True:
        blocks.extend(amp)
    return blocks


def _amplitude_blocks(context: Mapping[str, Any], top_k: int) -> list[_Block]:
    """The top segments by indicative amplitude at 1 m depth: a lead and the table (none when the
    segments table has no amplitude)."""
    seg = context["ranking"]
    if not isinstance(seg, pd.DataFrame) or "amp_1m_m" not in seg.columns:
        return []
    cols, rows, shown = _ranking_table(seg, top_k, context.get("ranking_columns") or [], by="amplitude")
    n_ranked = sum(1 for r in rows if r[0] != "–")
    if n_ranked == 0:
        return [_b("p", text="No segment is ranked by indicative amplitude (too few contributing rays).")]
    lead = (f"The {n_ranked} highest-ranked segments by indicative amplitude at 1 m depth (Green's law from the "
            "energy at the stop isobath, indicative only), with 5–95 % intervals where available"
            + (f", followed by {shown - n_ranked} not ranked by it (too few contributing rays)." if shown > n_ranked
               else "."))
    if context.get("amplitude_ranking") == "first":
        lead = "The wave check held this ranking and not the lensing factor's: read it first. " + lead
    return [_b("p", text=lead),
            _b("table", columns=cols, rows=rows, caption="Coastline segments ranked by indicative amplitude",
               small=True)]


def _validation_blocks(context: Mapping[str, Any]) -> list[_Block]:
    """Section "Validation summary": the outside-reference checks and their notes."""
    blocks: list[_Block] = []
    if context.get("validation") is not None:
        cols, rows = _as_table(context["validation"], "validation")
        blocks.append(_b("table", columns=[_pretty_key(c) for c in cols], rows=rows, caption=""))
    elif not context.get("validation_notes"):
        blocks.append(_b("note", text="No validation summary was supplied for this run."))
    for p in _paragraphs(context.get("validation_notes"), "validation_notes"):
        blocks.append(_b("p", text=p))
    return blocks


def _health_blocks(health: Any) -> list[_Block]:
    """Section "Numerical health checks"."""
    if health is None:
        return [_b("note", text="No numerical health checks were supplied for this run.")]
    if isinstance(health, str):  # a pointer instead of a table (e.g. a comparison: each run's own)
        return [_b("p", text=health)]
    cols, rows = _health_table(health)
    return [_b("table", columns=cols, rows=rows, caption="", kv=len(cols) == 2)]


# --------------------------------------------------------------------------------------
# HTML
# --------------------------------------------------------------------------------------

_CSS = """
@page { size: A4; margin: 16mm 15mm 18mm 15mm; }
html { background: #fff; }
body { font-family: "DejaVu Sans", "Helvetica Neue", Arial, sans-serif; font-size: 10.5pt;
       line-height: 1.42; color: #1a1a1a; max-width: 185mm; margin: 0 auto; padding: 8mm 4mm; }
header.doc { border-bottom: 2px solid #1f3b57; margin-bottom: 10px; padding-bottom: 6px; }
header.doc h1 { font-size: 17pt; margin: 0 0 4px 0; color: #1f3b57; }
header.doc .sub { font-size: 12pt; margin: 0 0 4px 0; }
header.doc .meta { font-size: 9pt; color: #555; }
.caution { border: 2px solid #a0522d; background: #fff3e0; padding: 8px 12px; margin: 10px 0 14px 0;
           page-break-inside: avoid; break-inside: avoid; }
.caution h2 { margin: 0 0 4px 0; font-size: 12pt; color: #7a3300; border: none; }
.caution p { margin: 4px 0; text-align: left; }
.caution ul { margin: 2px 0 2px 18px; padding: 0; }
nav.toc { font-size: 9.5pt; margin: 6px 0 10px 0; }
nav.toc ol { margin: 2px 0 0 18px; padding: 0; columns: 2; }
h2 { font-size: 13pt; color: #1f3b57; border-bottom: 1px solid #c9d3dd; margin: 18px 0 6px 0;
     page-break-after: avoid; break-after: avoid; }
h3 { font-size: 11pt; margin: 12px 0 4px 0; page-break-after: avoid; break-after: avoid; }
p { margin: 4px 0 6px 0; text-align: justify; }
p.note { color: #666; font-style: italic; }
div.eq { font-family: "DejaVu Sans", "Cambria Math", serif; background: #f3f6f9;
         border-left: 3px solid #9fb3c8; padding: 3px 10px; margin: 4px 0 4px 18px; white-space: pre-wrap; }
table { border-collapse: collapse; width: 100%; margin: 4px 0 10px 0; font-size: 9pt; }
table.small { font-size: 8pt; }
table.small td { white-space: nowrap; }
table.small th, table.small td { padding: 2px 4px; }
table.kv { width: auto; min-width: 60%; page-break-inside: avoid; break-inside: avoid; }
th, td { border: 1px solid #c4ccd4; padding: 2px 6px; text-align: left; vertical-align: top; }
th { background: #e6edf4; }
tr:nth-child(even) td { background: #fafbfc; }
tr { page-break-inside: avoid; break-inside: avoid; }
caption { caption-side: top; text-align: left; font-weight: bold; font-size: 9pt; padding: 2px 0; }
figure { margin: 10px 0 14px 0; page-break-inside: avoid; break-inside: avoid; text-align: center; }
figure img { max-width: 100%; height: auto; border: 1px solid #e0e0e0; }
figcaption { font-size: 9pt; text-align: left; margin-top: 3px; color: #333; }
ol.refs li { margin-bottom: 3px; font-size: 9.5pt; }
footer.doc { border-top: 1px solid #c9d3dd; margin-top: 18px; padding-top: 4px; font-size: 8.5pt;
             color: #555; }
@media print { body { max-width: none; padding: 0; } nav.toc { display: none; } }
"""


def _e(s: str) -> str:
    return html.escape(str(s), quote=True)


def _png_data_uri(path: pathlib.Path) -> str:
    return "data:image/png;base64," + base64.b64encode(path.read_bytes()).decode("ascii")


def _render_html(meta: Mapping[str, str], blocks: list[_Block]) -> str:
    out: list[str] = []
    w = out.append
    cshort = html.escape(" ".join(caution_text().split("\n\n", 1)[0].split()))
    w("<!DOCTYPE html>")
    w('<html lang="en"><head><meta charset="utf-8">')
    w('<meta name="viewport" content="width=device-width, initial-scale=1">')
    w(f"<title>{_e(meta['title'])} — {_e(meta['subtitle'])}</title>")
    w(f'<meta name="generator" content="tsunamifocus {_e(meta["version"])}">')
    w(f'<meta name="description" content="{cshort}">')
    w(f"<style>{_CSS}</style></head><body>")
    w('<header class="doc">')
    w(f"<h1>{_e(meta['title'])}</h1>")
    w(f'<p class="sub">{_e(meta["subtitle"])}</p>')
    run = f" · run {_e(meta['run_id'])}" if meta.get("run_id") else ""
    w(f'<p class="meta">Generated {_e(meta["date"])} · tsunamifocus {_e(meta["version"])}{run}</p>')
    w("</header>")
    toc = [(b["anchor"], b["text"]) for b in blocks if b["kind"] == "h2"]
    for b in blocks:
        k = b["kind"]
        if k == "caution":
            w('<section class="caution" id="cautions"><h2>Cautions</h2>')
            for p in b["paragraphs"]:
                w(f"<p><strong>{_e(p)}</strong></p>" if p is b["paragraphs"][0] else f"<p>{_e(p)}</p>")
            for head, items in b["lists"]:
                if head:
                    w(f"<p>{_e(head)}</p>")
                w("<ul>" + "".join(f"<li>{_e(i)}</li>" for i in items) + "</ul>")
            w("</section>")
            w('<nav class="toc"><strong>Contents</strong><ol>')
            for anchor, text in toc:
                label = re.sub(r"^\d+\.\s*", "", text)
                w(f'<li><a href="#{_e(anchor)}">{_e(label)}</a></li>')
            w("</ol></nav>")
        elif k == "h2":
            w(f'<h2 id="{_e(b["anchor"])}">{_e(b["text"])}</h2>')
        elif k == "h3":
            w(f"<h3>{_e(b['text'])}</h3>")
        elif k == "p":
            t = _e(b["text"])
            w(f"<p><strong>{t}</strong></p>" if b.get("strong") else f"<p>{t}</p>")
        elif k == "note":
            w(f'<p class="note">{_e(b["text"])}</p>')
        elif k == "eq":
            w(f'<div class="eq">{_e(b["text"])}</div>')
        elif k == "bullets":
            w("<ul>" + "".join(f"<li>{_e(i)}</li>" for i in b["items"]) + "</ul>")
        elif k == "refs":
            w('<ol class="refs">' + "".join(f"<li>{_e(i)}</li>" for i in b["items"]) + "</ol>")
        elif k == "table":
            cls = " ".join(c for c in ("small" if b.get("small") else "", "kv" if b.get("kv") else "") if c)
            w(f'<table class="{cls}">' if cls else "<table>")
            if b.get("caption"):
                w(f"<caption>{_e(b['caption'])}</caption>")
            w("<thead><tr>" + "".join(f"<th>{_e(c)}</th>" for c in b["columns"]) + "</tr></thead><tbody>")
            for r in b["rows"]:
                w("<tr>" + "".join(f"<td>{_e(c)}</td>" for c in r) + "</tr>")
            w("</tbody></table>")
        elif k == "figure":
            alt = _e(b["caption"] or b["path"].name)
            src = _png_data_uri(b["path"])
            w(f'<figure><img src="{src}" alt="{alt}"><figcaption>{_e(b["caption"])}</figcaption></figure>')
        else:  # pragma: no cover - internal
            raise AssertionError(k)
    w(
        f'<footer class="doc">{_e(CAUTION_SHORT)}. Generated by tsunamifocus {_e(meta["version"])} on '
        f"{_e(meta['date'])}.</footer>"
    )
    w("</body></html>")
    return "\n".join(out)


# --------------------------------------------------------------------------------------
# PDF (fpdf2)
# --------------------------------------------------------------------------------------


def _font_paths() -> dict[str, pathlib.Path] | None:
    try:
        import matplotlib

        base = pathlib.Path(matplotlib.get_data_path()) / "fonts" / "ttf"
    except Exception:  # noqa: BLE001
        return None
    files = {
        "": base / "DejaVuSans.ttf",
        "B": base / "DejaVuSans-Bold.ttf",
        "I": base / "DejaVuSans-Oblique.ttf",
        "BI": base / "DejaVuSans-BoldOblique.ttf",
    }
    return files if all(p.is_file() for p in files.values()) else None


def _latin1(s: str) -> str:
    """Fallback for core fonts: map the few non-latin-1 characters used, drop the rest."""
    import unicodedata

    table = {
        "√": "sqrt",
        "∂": "d",
        "θ": "theta",
        "φ": "phi",
        "λ": "lambda",
        "ρ": "rho",
        "η": "eta",
        "μ": "mu",
        "Σ": "Sum",
        "∬": "int int",
        "ℓ": "l",
        "−": "-",
        "–": "-",
        "—": "-",
        "×": "x",
        "“": '"',
        "”": '"',
        "’": "'",
        "…": "...",
        "≈": "~",
        "≤": "<=",
        "≥": ">=",
        "⅔": "2/3",
        "∞": "inf",
        "·": ".",
        "Č": "C",
        "č": "c",
        "ᵢ": "_i",
    }
    out = []
    for ch in s:
        if ch in table:
            out.append(table[ch])
            continue
        try:
            ch.encode("latin-1")
            out.append(ch)
        except UnicodeEncodeError:
            n = unicodedata.normalize("NFKD", ch)
            out.append("".join(c for c in n if ord(c) < 256) or "?")
    return "".join(out)


def _png_size(path: pathlib.Path) -> tuple[int, int]:
    with open(path, "rb") as fh:
        head = fh.read(24)
    w, h = struct.unpack(">II", head[16:24])
    return int(w), int(h)


def _render_pdf(
    meta: Mapping[str, str], blocks: list[_Block], out_pdf: pathlib.Path, *, compress: bool = True,
    block_pages: list[int] | None = None,
) -> int:
    from fpdf.fonts import FontFace  # fpdf2 is needed only for the PDF: imported when one is written

    fonts = _font_paths()
    fam = "DejaVu" if fonts else "Helvetica"
    missing: set[str] = set()
    T = _drawable(fonts, missing) if fonts else _latin1
    pdf = _pdf_document(meta, fonts, fam, T, compress)
    _pdf_title_block(pdf, fam, T, meta)
    starts = block_pages if block_pages is not None else []
    for bi, b in enumerate(blocks):
        k = b["kind"]
        start = pdf.page
        if k == "caution":
            _pdf_caution_box(pdf, fam, T, b)
        elif k == "table":
            start = _pdf_table(pdf, fam, T, b, FontFace)
        elif k == "figure":
            _pdf_figure(pdf, fam, T, b)
            start = pdf.page  # a figure never spans pages: it starts where it ends
        else:
            _pdf_text_block(pdf, fam, T, b, functools.partial(_pdf_next_height, pdf, fam, T, blocks, bi))
            if k in ("h2", "h3"):  # one line, drawn after any page break it asked for
                start = pdf.page
        starts.append(start)
    tmp = out_pdf.with_name(f".{out_pdf.name}.part")
    try:
        pdf.output(str(tmp))
        os.replace(tmp, out_pdf)
    finally:
        if tmp.exists():
            tmp.unlink()
    if missing:
        shown = ", ".join(f"U+{ord(c):04X}" for c in sorted(missing)[:8]) + (" ..." if len(missing) > 8 else "")
        warnings.warn(f"{out_pdf.name}: {len(missing)} character(s) the PDF font (DejaVu Sans) cannot draw were "
                      f"replaced by '?' ({shown}); the HTML appendix shows them", TsunamiFocusWarning, stacklevel=3)
    return pdf.pages_count


def _drawable(fonts: Mapping[str, pathlib.Path], missing: set[str]):
    """Text filter for the PDF: characters the font has no glyph for become ``?`` and are collected.

    fpdf2 leaves such characters out without a word, so a name in CJK script or with an emoji would
    silently lose letters; the caller warns about what was replaced.
    """
    from fontTools.ttLib import TTFont  # a dependency of fpdf2, imported when a PDF is written

    cmap = set(TTFont(str(fonts[""]), lazy=True).getBestCmap())
    keep = {ord(c) for c in "\n\r\t"}

    def T(s: Any) -> str:
        s = str(s)
        if all(ord(c) in cmap or ord(c) in keep for c in s):
            return s
        out = []
        for c in s:
            if ord(c) in cmap or ord(c) in keep:
                out.append(c)
            else:
                missing.add(c)
                out.append("?")
        return "".join(out)

    return T


def _pdf_document(meta: Mapping[str, str], fonts: dict, fam: str, T, compress: bool):
    """An A4 document with the running header and footer, the fonts and the metadata, on its first page."""
    from fpdf import FPDF  # fpdf2 is needed only for the PDF: imported when one is written

    class _PDF(FPDF):
        def header(self) -> None:  # noqa: D401 - fpdf2 hook
            if self.page_no() == 1:
                return
            self.set_font(fam, "", 7.5)
            self.set_text_color(90, 90, 90)
            right = T(f"tsunamifocus {meta['version']} · {meta['date']}")
            room = self.epw - self.get_string_width(right) - 6
            left = T(meta["title"])
            while left and self.get_string_width(left) > room:
                left = left[:-2] + "…"
            self.set_y(8)
            self.cell(room, 4, left, align="L")
            self.set_y(8)
            self.cell(0, 4, right, align="R")
            self.set_draw_color(180, 190, 200)
            self.line(self.l_margin, 13, self.w - self.r_margin, 13)
            self.set_y(17)
            self.set_text_color(0, 0, 0)

        def footer(self) -> None:  # noqa: D401 - fpdf2 hook
            self.set_y(-12)
            self.set_draw_color(180, 190, 200)
            self.line(self.l_margin, self.get_y() - 1, self.w - self.r_margin, self.get_y() - 1)
            self.set_font(fam, "I", 7.5)
            self.set_text_color(90, 90, 90)
            self.cell(0, 5, T(CAUTION_SHORT), align="L")
            self.set_x(self.l_margin)
            self.set_font(fam, "", 7.5)
            self.cell(0, 5, T(f"Page {self.page_no()} of {{nb}}"), align="R")
            self.set_text_color(0, 0, 0)

    pdf = _PDF(orientation="P", unit="mm", format="A4")
    pdf.set_compression(compress)
    pdf.set_margins(16, 17, 16)
    pdf.set_auto_page_break(True, margin=16)
    if fonts:
        for style, p in fonts.items():
            pdf.add_font("DejaVu", style, str(p))
    ctext = " ".join(caution_text().split())
    pdf.set_title(T(f"{meta['title']} — {meta['subtitle']}"))
    pdf.set_author(T(f"tsunamifocus {meta['version']}"))
    pdf.set_creator(T(f"tsunamifocus {meta['version']} (fpdf2)"))
    pdf.set_subject(T(ctext))
    pdf.set_keywords(T("tsunami; screening; ray tracing; lensing; not a warning or inundation map"))
    try:
        d = _dt.datetime.strptime(str(meta["date"]), "%Y-%m-%d %H:%M UTC").replace(tzinfo=_dt.UTC)
    except ValueError:
        d = _dt.datetime.strptime(str(meta["date"]), "%Y-%m-%d").replace(tzinfo=_dt.UTC)
    pdf.set_creation_date(d)
    pdf.add_page()
    return pdf


def _pdf_title_block(pdf, fam: str, T, meta: Mapping[str, str]) -> None:
    epw = pdf.epw
    pdf.set_font(fam, "B", 16)
    pdf.set_text_color(31, 59, 87)
    pdf.multi_cell(epw, 7.5, T(meta["title"]), align="L", new_x="LMARGIN", new_y="NEXT")
    pdf.set_text_color(0, 0, 0)
    pdf.set_font(fam, "", 12)
    pdf.multi_cell(epw, 6, T(meta["subtitle"]), align="L", new_x="LMARGIN", new_y="NEXT")
    pdf.set_font(fam, "", 8.5)
    pdf.set_text_color(85, 85, 85)
    run = f" · run {meta['run_id']}" if meta.get("run_id") else ""
    pdf.multi_cell(
        epw,
        4.5,
        T(f"Generated {meta['date']} · tsunamifocus {meta['version']}{run}"),
        new_x="LMARGIN",
        new_y="NEXT",
    )
    pdf.set_text_color(0, 0, 0)
    pdf.set_draw_color(31, 59, 87)
    pdf.set_line_width(0.6)
    pdf.line(pdf.l_margin, pdf.get_y() + 1.5, pdf.w - pdf.r_margin, pdf.get_y() + 1.5)
    pdf.set_line_width(0.2)
    pdf.ln(5)


def _pdf_ensure(pdf, h: float) -> None:
    """Start a new page unless ``h`` mm still fit on this one."""
    if pdf.get_y() + h > pdf.page_break_trigger:
        pdf.add_page()


def _pdf_fig_size(pdf, b: Mapping[str, Any]) -> tuple[float, float]:
    """Width and height [mm] of a figure block on the page."""
    epw = pdf.epw
    wpx, hpx = _png_size(b["path"])
    w_mm = min(epw, 0.9 * epw * (wpx / 1200.0) if wpx < 1200 else 0.9 * epw)
    h_mm = w_mm * hpx / wpx
    max_h = pdf.page_break_trigger - pdf.t_margin - 24
    if h_mm > max_h:
        h_mm = max_h
        w_mm = h_mm * wpx / hpx
    return w_mm, h_mm


def _pdf_next_height(pdf, fam: str, T, blocks: list[_Block], i: int) -> float:
    """Height the block after a heading demands on this page before it starts (keep-with-next)."""
    if i + 1 >= len(blocks):
        return 0.0
    nb = blocks[i + 1]
    if nb["kind"] == "figure":  # _pdf_figure stays on the page when 85 % of it and its caption fit
        pdf.set_font(fam, "", 8.5)
        cap_lines = (len(pdf.multi_cell(pdf.epw, 4.2, T(nb["caption"]), dry_run=True, output="LINES"))
                     if nb["caption"] else 0)
        return 0.85 * _pdf_fig_size(pdf, nb)[1] + cap_lines * 4.2 + 4 + 1.0
    if nb["kind"] == "table":
        return _table_need(pdf, fam, T, nb) + 1.0
    if nb["kind"] in ("h3",):
        return 8.0 + _pdf_next_height(pdf, fam, T, blocks, i + 1)
    return 12.0


def _pdf_caution_box(pdf, fam: str, T, b: Mapping[str, Any]) -> None:
    """The cautions: a framed box, its height measured first (dry run)."""
    epw = pdf.epw
    x0, y0 = pdf.get_x(), pdf.get_y()
    lines: list[tuple[str, str]] = []
    for i, p in enumerate(b["paragraphs"]):
        lines.append(("B" if i == 0 else "", p))
    for head, items in b["lists"]:
        if head:
            lines.append(("", head))
        for it in items:
            lines.append(("bullet", it))
    # measure the box height first (dry run), then draw the box and the text
    pad = 3.0
    inner = epw - 2 * pad
    total = 7.0
    for style, text in lines:
        pdf.set_font(fam, "B" if style == "B" else "", 9)
        w_ = inner - (4 if style == "bullet" else 0)
        n = len(pdf.multi_cell(w_, 4.4, T(text), dry_run=True, output="LINES"))
        total += n * 4.4 + 1.2
    pdf.set_fill_color(255, 243, 224)
    pdf.set_draw_color(160, 82, 45)
    pdf.set_line_width(0.6)
    pdf.rect(x0, y0, epw, total + pad, style="DF")
    pdf.set_line_width(0.2)
    pdf.set_xy(x0 + pad, y0 + pad)
    pdf.set_font(fam, "B", 11)
    pdf.set_text_color(122, 51, 0)
    pdf.cell(inner, 6, T("Cautions"), new_x="LMARGIN", new_y="NEXT")
    pdf.set_text_color(0, 0, 0)
    pdf.set_y(pdf.get_y() + 1)
    for style, text in lines:
        if style == "bullet":
            pdf.set_font(fam, "", 9)
            pdf.set_x(x0 + pad)
            pdf.cell(4, 4.4, T("•"))
            pdf.multi_cell(inner - 4, 4.4, T(text), align="L", new_x="LMARGIN", new_y="NEXT")
        else:
            pdf.set_font(fam, "B" if style == "B" else "", 9)
            pdf.set_x(x0 + pad)
            pdf.multi_cell(inner, 4.4, T(text), align="L", new_x="LMARGIN", new_y="NEXT")
        pdf.set_y(pdf.get_y() + 1.2)
    pdf.set_y(y0 + total + pad + 4)


def _pdf_text_block(pdf, fam: str, T, b: Mapping[str, Any], next_height) -> None:
    """Headings, paragraphs, notes, equations, bullet and reference lists (``next_height()``: the height
    of what follows, to keep a heading with it)."""
    epw = pdf.epw
    ensure = functools.partial(_pdf_ensure, pdf)
    k = b["kind"]
    if k == "h2":
        ensure(10 + next_height())
        pdf.ln(2)
        pdf.set_font(fam, "B", 12.5)
        pdf.set_text_color(31, 59, 87)
        pdf.multi_cell(epw, 6.5, T(b["text"]), new_x="LMARGIN", new_y="NEXT")
        pdf.set_draw_color(200, 211, 221)
        pdf.line(pdf.l_margin, pdf.get_y(), pdf.w - pdf.r_margin, pdf.get_y())
        pdf.set_text_color(0, 0, 0)
        pdf.ln(2)
    elif k == "h3":
        ensure(7 + next_height())
        pdf.ln(1)
        pdf.set_font(fam, "B", 10.5)
        pdf.multi_cell(epw, 5.5, T(b["text"]), new_x="LMARGIN", new_y="NEXT")
    elif k in ("p", "note"):
        pdf.set_font(fam, "I" if k == "note" else ("B" if b.get("strong") else ""), 9.5)
        if k == "note":
            pdf.set_text_color(100, 100, 100)
        pdf.multi_cell(
            epw, 4.8, T(b["text"]), align="J" if k == "p" else "L", new_x="LMARGIN", new_y="NEXT"
        )
        pdf.set_text_color(0, 0, 0)
        pdf.ln(1.2)
    elif k == "eq":
        pdf.set_font(fam, "", 10)
        ensure(8)
        pdf.set_fill_color(243, 246, 249)
        pdf.set_x(pdf.l_margin + 6)
        pdf.multi_cell(epw - 6, 6, T("  " + b["text"]), fill=True, new_x="LMARGIN", new_y="NEXT")
        pdf.ln(1)
    elif k in ("bullets", "refs"):
        pdf.set_font(fam, "", 9.5 if k == "bullets" else 8.8)
        for i, it in enumerate(b["items"], start=1):
            mark = "•" if k == "bullets" else f"{i}."
            ensure(6)
            pdf.set_x(pdf.l_margin + 2)
            pdf.cell(6, 4.8, T(mark))
            pdf.multi_cell(epw - 8, 4.8, T(it), new_x="LMARGIN", new_y="NEXT")
            pdf.ln(0.8)


def _pdf_figure(pdf, fam: str, T, b: Mapping[str, Any]) -> None:
    """A figure scaled to the page, kept with its caption."""
    epw = pdf.epw
    ensure = functools.partial(_pdf_ensure, pdf)
    w_mm, h_mm = _pdf_fig_size(pdf, b)
    pdf.set_font(fam, "", 8.5)
    cap_lines = (
        len(pdf.multi_cell(epw, 4.2, T(b["caption"]), dry_run=True, output="LINES"))
        if b["caption"]
        else 0
    )
    cap_h = cap_lines * 4.2 + 4
    room = pdf.page_break_trigger - pdf.get_y() - cap_h
    if h_mm > room and room >= 0.85 * h_mm:  # shrink a little rather than leave a gap
        w_mm, h_mm = w_mm * room / h_mm, room
    ensure(h_mm + cap_h)
    x = pdf.l_margin + (epw - w_mm) / 2
    pdf.image(str(b["path"]), x=x, y=pdf.get_y(), w=w_mm, h=h_mm)
    pdf.set_y(pdf.get_y() + h_mm + 1.5)
    if b["caption"]:
        pdf.multi_cell(epw, 4.2, T(b["caption"]), new_x="LMARGIN", new_y="NEXT")
    pdf.ln(3)


def _table_layout(pdf, fam: str, T, b: Mapping[str, Any]):
    """Column widths and the estimated height of a table block (None for a table without columns)."""
    cols = [T(c) for c in b["columns"]]
    rows = [[T(c) for c in r] for r in b["rows"]]
    if not cols:
        return None
    size = 7.2 if b.get("small") else 8.2
    pdf.set_font(fam, "", size)
    # column widths: never narrower than the longest word, as wide as the content if it fits
    pad = 2 * 1.4 + 1.2
    full, body, minimum = [], [], []
    for j, c in enumerate(cols):
        texts = [r[j] for r in rows if j < len(r)]
        pdf.set_font(fam, "B", size)
        head_w = pdf.get_string_width(c)
        head_word = max((pdf.get_string_width(w_) for w_ in c.split()), default=0.0)
        pdf.set_font(fam, "", size)
        body_w = max((pdf.get_string_width(t) for t in texts), default=0.0)
        body_word = max((pdf.get_string_width(w_) for t in texts for w_ in t.split()), default=0.0)
        full.append(min(max(head_w, body_w) + pad, 80.0))
        body.append(min(max(head_word, body_w) + pad, 80.0))
        minimum.append(max(head_word, body_word) + pad)
    epw = pdf.epw
    kv = bool(b.get("kv"))
    if sum(full) <= epw:
        widths = full
    elif sum(body) <= epw:  # headers may wrap; cells do not
        spare = epw - sum(body)
        extra = [f - d for f, d in zip(full, body, strict=True)]
        tot = sum(extra) or 1.0
        widths = [d + spare * e / tot for d, e in zip(body, extra, strict=True)]
    else:  # satisfy the cheapest columns first, the rest share what is left
        widths = list(minimum)
        spare = epw - sum(minimum)
        for j in sorted(range(len(cols)), key=lambda j: body[j] - minimum[j]):
            need = body[j] - minimum[j]
            if need <= spare:
                widths[j] = body[j]
                spare -= need
        if spare > 0:
            widths = [w_ + spare / len(widths) for w_ in widths]
    total = sum(widths)
    width = min(epw, total) if (kv or total < epw) else epw
    # keep short tables (and their caption) on one page: estimated height from wrapped lines
    scale = width / total if total > 0 else 1.0

    def _row_h(cells: Sequence[str]) -> float:
        n = 1
        for j, c in enumerate(cells[: len(widths)]):
            room = max(widths[j] * scale - pad, 1.0)
            n = max(n, math.ceil(pdf.get_string_width(c) / room))
        return n * size * 0.5 + 1.8

    est = _row_h(cols) + sum(_row_h(r) for r in rows) + 4 + (5 if b.get("caption") else 0)
    return cols, rows, size, widths, width, epw, est


def _table_need(pdf, fam: str, T, b: Mapping[str, Any]) -> float:
    """Height [mm] a table block needs on the current page before it starts (see :func:`_pdf_table`)."""
    lay = _table_layout(pdf, fam, T, b)
    if lay is None:
        return 0.0
    est = lay[-1]
    return est if est < 110 else 18.0


def _pdf_table(pdf, fam: str, T, b: Mapping[str, Any], FontFace) -> int:
    """Draw a table block; returns the page it starts on."""
    lay = _table_layout(pdf, fam, T, b)
    if lay is None:
        return pdf.page
    cols, rows, size, widths, width, epw, est = lay
    if est < 110 and pdf.get_y() + est > pdf.page_break_trigger:
        pdf.add_page()
    elif pdf.get_y() + 18 > pdf.page_break_trigger:
        pdf.add_page()
    start = pdf.page
    if b.get("caption"):
        pdf.set_font(fam, "B", 8.5)
        pdf.cell(epw, 5, T(b["caption"]), new_x="LMARGIN", new_y="NEXT")
    pdf.set_font(fam, "", size)
    pdf.set_fill_color(244, 247, 250)
    with pdf.table(
        width=width,
        col_widths=tuple(widths),
        align="LEFT",
        text_align="LEFT",
        line_height=size * 0.5,
        padding=(0.9, 1.4, 0.9, 1.4),
        headings_style=FontFace(emphasis="BOLD", fill_color=(230, 237, 244)),
        borders_layout="ALL",
        repeat_headings=1,
        cell_fill_color=(250, 251, 252),
        cell_fill_mode="ROWS",
    ) as table:
        head = table.row()
        for c in cols:
            head.cell(c)
        for r in rows:
            row = table.row()
            for j in range(len(cols)):
                row.cell(r[j] if j < len(r) else "")
    pdf.ln(3)
    return start


# --------------------------------------------------------------------------------------
# public entry point
# --------------------------------------------------------------------------------------


def build_appendix(
    context: Mapping[str, Any],
    out_html: str | os.PathLike,
    out_pdf: str | os.PathLike | None = None,
    *,
    _compress_pdf: bool = True,
) -> dict[str, Any]:
    """Write the planning-study appendix as self-contained HTML and (optionally) PDF.

    Parameters
    ----------
    context : mapping
        Content of the appendix; keys and meanings in :data:`CONTEXT_KEYS`. ``scenario`` and
        ``ranking`` are required; ``ensemble``, ``comparison`` and ``wave_check`` sections appear
        only when given.
    out_html : str or os.PathLike
        HTML file to write (figures embedded as base64 data URIs, inline CSS).
    out_pdf : str or os.PathLike, optional
        PDF file to write (fpdf2, A4). Not written when None.

    Returns
    -------
    dict
        ``{"html": Path, "pdf": Path | None, "pdf_pages": int | None, "sections": [str]}``, and with
        a PDF ``"pdf_block_pages"``: ``(kind, text, page)`` of every document block.

    Raises
    ------
    InputError
        If the context has unknown keys, misses ``scenario``/``ranking`` or holds values of the
        wrong kind.
    DataFileError
        If a figure file is missing or not a PNG, or the cautions text cannot be found.
    """
    meta, blocks = document_blocks(context)
    out_html = pathlib.Path(out_html)
    out_html.parent.mkdir(parents=True, exist_ok=True)
    doc = _render_html(meta, blocks)
    tmp = out_html.with_name(f".{out_html.name}.part")
    try:
        tmp.write_text(doc, encoding="utf-8")
        os.replace(tmp, out_html)
    finally:
        if tmp.exists():
            tmp.unlink()
    pages = None
    pdf_path = None
    if out_pdf is not None:
        pdf_path = pathlib.Path(out_pdf)
        pdf_path.parent.mkdir(parents=True, exist_ok=True)
        starts: list[int] = []
        pages = _render_pdf(meta, blocks, pdf_path, compress=_compress_pdf, block_pages=starts)
    sections = [b["text"] for b in blocks if b["kind"] == "h2"]
    out = {"html": out_html, "pdf": pdf_path, "pdf_pages": pages, "sections": sections}
    if pdf_path is not None:
        # the page each block starts on (headings must start on the page of the block after them)
        out["pdf_block_pages"] = [(b["kind"], str(b.get("text", "")), pg) for b, pg in zip(blocks, starts)]
    return out


def _iter_texts(blocks: Iterable[_Block]) -> Iterable[str]:
    """All visible strings of a document (used by tests for glyph coverage)."""
    for b in blocks:
        for key in ("text", "caption"):
            if isinstance(b.get(key), str):
                yield b[key]
        for key in ("items", "paragraphs", "columns"):
            for s in b.get(key, []) or []:
                yield str(s)
        for r in b.get("rows", []) or []:
            for s in r:
                yield str(s)
        for head, items in b.get("lists", []) or []:
            yield head
            yield from items
