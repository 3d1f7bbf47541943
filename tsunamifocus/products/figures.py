"""Figures of a tsunamifocus run (matplotlib, PNG, 150 dpi).

Every function takes plain data (grid :class:`xarray.DataArray` objects following the
tsunamifocus grid convention, a segments :class:`pandas.DataFrame` following the shared
segments contract, shapely geometries) and writes one PNG. The figures are built on
:class:`matplotlib.figure.Figure` directly (Agg canvas, no pyplot), so calling them never
changes the user's interactive backend.

Common furniture of every map (see :func:`_new_map` / :func:`_finish`):

* projected grids: axes in km, a scale bar and a north arrow pointing to true north
  (grid convergence computed with pyproj);
* geographic grids: a graticule with degree labels (E/W, N/S), aspect corrected by
  ``1 / cos(mid latitude)``, and a north arrow;
* colour bars with units, colour-blind-safe colour maps (cividis, viridis, magma, and
  the diverging ``PuOr_r`` / ``RdBu_r`` centred on a neutral value);
* a footer line with the short caution (:data:`CAUTION_FOOTER`), and the full cautions
  text of CAUTIONS.md in the PNG text chunk ``Disclaimer``.

Adding a figure: build it with ``fig, ax, geo = _new_map(grid, title)`` (maps) or
``fig, ax = _new_chart(size, title)`` (charts), draw, then ``return _finish(fig, out_path,
ax=ax, geo=geo)``.
"""

from __future__ import annotations

import math
import textwrap
import os
import pathlib
from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
import xarray as xr
from matplotlib import colors as mcolors
from matplotlib.cm import ScalarMappable
from matplotlib import patheffects
from matplotlib.collections import LineCollection
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch, Rectangle
from matplotlib.ticker import FixedLocator, FuncFormatter, MaxNLocator, NullFormatter
from scipy import ndimage

from ..cautions import CAUTION_FOOTER, caution_text
from ..constants import __version__
from ..errors import InputError
from ..focusing.agreement import _paired, compare_rankings, topk_mask
from ..focusing.ranking import ranked_mask
from ..grid import GridInfo
from ..io.styles import NO_VALUE_COLOUR, SEGMENT_CASING_PT, SEGMENT_WIDTH_PT, energy_scale, lensing_scale
from ..io.styles import log_ticks as _log_ticks
from ..io.styles import nice_time_step as _nice_time_step
from ..io.styles import symmetric_log_range as _symmetric_log_range  # noqa: F401 (old name, used by tests)
from ..io.styles import three_digits
from ..io.styles import tick_label as _tick_label
from ..propagation.wave import WAVE_LIMITS
from ..studies.check import FAINT_WAVE_FRACTION

__all__ = ['plot_ray_vs_wave', 'plot_travel_time', 'CAUTION_FOOTER', 'DPI', 'plot_ray_field', 'plot_lensing_map', 'plot_ranking',
           'plot_uplift', 'plot_agreement', 'plot_ranked_pair', 'plot_oceans', 'plot_check_profile', 'RANK_FIELDS']


# Okabe & Ito (2008) colour-blind-safe palette


def plot_ray_vs_wave(
    ray_values: Any,
    wave_values: Any,
    path: str | Path,
    *,
    k: int = 10,
    ray_label: str = "Ray-theory amplitude at stop isobath [m]",
    wave_label: str = "Wave-solver maximum amplitude at stop isobath [m]",
    title: str | None = "Ray screening vs linear long-wave check, per coastline segment",
    log: bool = True,
    annotate_top: bool = True,
    dpi: int = 150,
) -> Path:
    """Save a scatter figure (PNG) of ray vs wave per-segment values with the ranking agreement.

    Drawn by :func:`plot_agreement`: top-``k`` segments of both rankings, of the ray ranking only and
    of the wave ranking only in distinct colours *and* marker shapes (Okabe-Ito palette); the Spearman
    and Kendall correlations, the top-``k`` overlap (:func:`compare_rankings`) and the limits of the
    wave check are printed in the panel.

    Parameters
    ----------
    ray_values, wave_values : array-like or pandas.Series
        Per-segment values [m] (Series are aligned on index; index labels annotate the top segments).
    path : str or pathlib.Path
        Output PNG path (parent folder must exist).
    k : int
        Size of the top sets.
    ray_label, wave_label : str
        Axis labels (with units).
    title : str or None
        Figure title.
    log : bool
        Logarithmic axes when all values are positive.
    annotate_top : bool
        Write the labels of the top-``k`` segments of either ranking beside their points.
    dpi : int
        Unused (figures share one resolution); kept for callers.

    Returns
    -------
    pathlib.Path
        The written file.
    """
    return plot_ranked_pair(ray_values, wave_values, path, k=k, xlabel=ray_label, ylabel=wave_label,
                            title=title, names=("rays", "wave"), note=WAVE_LIMITS, log=log, annotate_top=annotate_top)


def plot_ranked_pair(
    x_values: Any,
    y_values: Any,
    path: str | Path,
    *,
    k: int = 10,
    xlabel: str,
    ylabel: str,
    title: str | None = None,
    names: tuple[str, str] = ("x", "y"),
    note: str | None = None,
    log: bool = True,
    annotate_top: bool = True,
) -> Path:
    """Scatter (PNG) of two per-segment rankings' values with their agreement in a statistics box.

    Series are aligned on their index (:func:`~tsunamifocus.focusing.agreement._paired`); the box
    holds n, Spearman, Kendall and the top-``k`` overlap (:func:`compare_rankings`), then ``note``;
    the two top-``k`` sets are drawn by :func:`plot_agreement` with ``names`` in the legend.
    """
    path = Path(path)
    if not path.parent.is_dir():
        raise InputError(f"figure folder {str(path.parent)!r} does not exist")
    a, b, labels = _paired(x_values, y_values)
    agree = compare_rankings(a, b, k=k)
    kk = agree["k"]
    txt = (
        f"n = {agree['n']} segments\nSpearman rho = {agree['spearman']:.2f}\n"
        f"Kendall tau = {agree['kendall']:.2f}\ntop-{kk} overlap = {agree['topk_common']}/{kk}"
        + (f"\n{textwrap.fill(note, 44)}" if note else "")
    )
    shown = [str(x) for x in labels] if (annotate_top and labels is not None) else None
    return plot_agreement(a, b, out_path=path, xlabel=xlabel, ylabel=ylabel, title=title or "",
                          labels=shown, log=log and bool(np.all(a > 0) and np.all(b > 0)), annotate=txt,
                          top_x=topk_mask(a, kk), top_y=topk_mask(b, kk), top_names=names)

#: Short caution printed at the foot of every figure.

#: Resolution of the PNG files [dots per inch].
DPI = 150

_LAND = "#d8cfb4"  # land fill (tan)
_NODATA = "#ffffff"
_OKABE_BLUE = "#0072B2"  # Okabe-Ito palette (colour-blind safe)
_OKABE_SKY = "#56B4E9"
_OKABE_VERMILLION = "#D55E00"
_OKABE_GREEN = "#009E73"
_HALO = [patheffects.withStroke(linewidth=2.5, foreground="white")]

plt_rc = {
    "font.size": 9.5,
    "axes.titlesize": 11.5,
    "axes.labelsize": 9.5,
    "xtick.labelsize": 8.5,
    "ytick.labelsize": 8.5,
    "legend.fontsize": 8.5,
}


# --------------------------------------------------------------------------------------
# helpers shared by all figures
# --------------------------------------------------------------------------------------


def _cautions_full() -> str:
    """Full cautions text for the PNG metadata."""
    return caution_text()


def _check_grid(da: Any, what: str) -> GridInfo:
    if not isinstance(da, xr.DataArray):
        raise InputError(f"{what}: expected a 2-D xarray.DataArray grid, got {type(da).__name__}")
    return GridInfo.from_dataarray(da)


def _extent(info: GridInfo) -> tuple[float, float, float, float]:
    xmin, ymin, xmax, ymax = info.bounds
    return (xmin, xmax, ymin, ymax)


def _values(da: xr.DataArray) -> np.ndarray:
    return np.asarray(da.values, dtype=float)


def _same_kind(ref: GridInfo, other: GridInfo, what: str) -> None:
    if ref.geographic != other.geographic:
        kind = "geographic (lon/lat)" if ref.geographic else "projected (x/y)"
        raise InputError(f"{what}: grid must be {kind} like the depth grid")


def _lon_label(v: float) -> str:
    v = ((v + 180.0) % 360.0) - 180.0
    if abs(v) < 1e-9 or abs(abs(v) - 180.0) < 1e-9:
        return f"{abs(v):g}°"
    return f"{abs(v):g}°{'E' if v > 0 else 'W'}"


def _lat_label(v: float) -> str:
    if abs(v) < 1e-9:
        return "0°"
    return f"{abs(v):g}°{'N' if v > 0 else 'S'}"


def _new_chart(size: tuple[float, float], title: str | None) -> tuple[Figure, Any]:
    fig = Figure(figsize=size, dpi=DPI, layout="constrained")
    ax = fig.add_subplot(1, 1, 1)
    if title:
        ax.set_title(title, fontsize=plt_rc["axes.titlesize"], loc="left")
    return fig, ax


def _styled(func):
    """Run a figure function with the package's font sizes (matplotlib rc_context)."""
    import functools

    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        import matplotlib as mpl

        with mpl.rc_context(plt_rc):
            return func(*args, **kwargs)

    return wrapper


def _new_map(info: GridInfo, title: str | None):
    """Create a figure with one map axes set up for the grid's CRS kind.

    The figure size is fixed later by :func:`_finish` from the map's aspect ratio, the
    colour bars and the legend, so maps of any shape come out without large margins.
    """
    xmin, xmax, ymin, ymax = _extent(info)
    if info.geographic:
        lat_mid = 0.5 * (ymin + ymax)
        aspect = 1.0 / max(math.cos(math.radians(lat_mid)), 0.05)
    else:
        aspect = 1.0
    ratio = (ymax - ymin) * aspect / max(xmax - xmin, 1e-12)
    fig = Figure(figsize=(8.0, 6.0), dpi=DPI, layout="constrained")
    ax = fig.add_subplot(1, 1, 1)
    ax._tf_ratio = ratio  # height / width of the map box
    ax._tf_aspect = aspect  # re-applied in _finish (imshow resets the aspect)
    ax.set_anchor("S")  # any spare height ends up above the map (trimmed in _finish)
    ax.set_xlim(xmin, xmax)
    ax.set_ylim(ymin, ymax)
    ax.set_aspect(aspect)
    if title:
        ax.set_title(title, fontsize=plt_rc["axes.titlesize"], loc="left")
    if info.geographic:
        ax.xaxis.set_major_locator(_degree_locator(xmax - xmin))
        ax.yaxis.set_major_locator(_degree_locator(ymax - ymin))
        ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _: _lon_label(v)))
        ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _: _lat_label(v)))
        ax.grid(True, color="0.35", linewidth=0.4, alpha=0.6, linestyle=":")
        ax.set_xlabel("Longitude")
        ax.set_ylabel("Latitude")
    else:
        km = FuncFormatter(lambda v, _: f"{v / 1000.0:g}")
        ax.xaxis.set_major_formatter(km)
        ax.yaxis.set_major_formatter(km)
        ax.xaxis.set_major_locator(MaxNLocator(nbins=7))
        ax.yaxis.set_major_locator(MaxNLocator(nbins=7))
        ax.set_xlabel("Easting (km)")
        ax.set_ylabel("Northing (km)")
    ax.tick_params(direction="out", length=3)
    return fig, ax, info


def _degree_locator(span_deg: float, max_ticks: int = 8):
    """Tick locator at 'round' degree steps (..., 1, 2, 5, 10, 15, 30, 45, 60, 90) for a span."""
    from matplotlib.ticker import MultipleLocator

    steps = (0.01, 0.02, 0.05, 0.1, 0.2, 0.25, 0.5, 1, 2, 2.5, 5, 10, 15, 20, 30, 45, 60, 90)
    for st in steps:
        if span_deg / st <= max_ticks:
            return MultipleLocator(st)
    return MultipleLocator(90)


def _nan_gaussian(v: np.ndarray, ok: np.ndarray, sigma: float) -> tuple[np.ndarray, np.ndarray]:
    """Numerator and weight of a normalised Gaussian over the ``ok`` cells (edges: nearest)."""
    num = ndimage.gaussian_filter(np.where(ok, v, 0.0), sigma, mode="nearest")
    den = ndimage.gaussian_filter(ok.astype(float), sigma, mode="nearest")
    return num, den


def smooth_for_contours(tt: xr.DataArray, sigma_cells: float = 1.5) -> xr.DataArray:
    """Travel time lightly smoothed (NaN-aware Gaussian, ~1.5 cells) for contour lines only.

    The per-cell first-arrival grid of a finite ray fan is ragged at the cell scale (a cell
    records the earliest ray that happened to cross it); contouring that raw field draws
    saw-tooth lines. The exported layer stays unsmoothed.
    """
    v = tt.values.astype(float)
    ok = np.isfinite(v)
    num, den = _nan_gaussian(v, ok, sigma_cells)
    with np.errstate(invalid="ignore", divide="ignore"):
        sm = np.where(ok & (den > 0.2), num / den, np.nan)
    return tt.copy(data=sm)


def _contour_ready(t: np.ndarray, max_sigma: float = 6.0) -> np.ndarray:
    """Copy of a gridded field fit for contouring: NaN holes between rays filled, smoothed.

    First-arrival grids from rays have empty cells where rays are sparse; contouring them
    directly draws rings around every hole. The typical hole radius ``r`` (90th percentile of the
    distance of empty cells to the nearest filled one, counting only holes of at most 12 cells)
    sets the treatment: holes up to ``1.5 r + 1`` cells get the nearest valid value, then a normalised
    Gaussian of ``r`` cells (1 to ``max_sigma``) smooths the result. Cells farther from data stay
    NaN (no contour there). For display only; the exported layers are untouched.
    """
    good = np.isfinite(t)
    if good.all() or not good.any():
        return t
    dist, (iy, ix) = ndimage.distance_transform_edt(~good, return_indices=True)
    holes = dist[(dist > 0) & (dist <= 12)]
    sigma = float(np.clip(np.percentile(holes, 90), 1.0, max_sigma)) if holes.size else 1.0
    filled = t[iy, ix]
    filled[dist > 1.5 * sigma + 1.0] = np.nan
    ok = np.isfinite(filled)
    num, den = _nan_gaussian(filled, ok, sigma)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(ok, num / np.maximum(den, 1e-12), np.nan)


def _nice_length(target: float) -> float:
    """Largest 1/2/5 x 10^n not above ``target`` (> 0)."""
    if not target > 0:
        return 1.0
    e = math.floor(math.log10(target))
    for m in (5.0, 2.0, 1.0):
        if m * 10**e <= target:
            return m * 10**e
    return 10**e


#: The largest panel :func:`_add_scale_bar` draws, ``(x0, y0, x1, y1)`` in axes fraction (what map
#: labels must avoid): the bar is at most 0.22 of the width, from 0.04 of it, with its margins.
_SCALE_BAR_PANEL = (0.025, 0.0236, 0.275, 0.0956)


def _add_scale_bar(ax, info: GridInfo) -> None:
    """Two-tone scale bar in the lower left corner (projected grids, metres)."""
    xmin, xmax, ymin, ymax = _extent(info)
    width = xmax - xmin
    length = _nice_length(0.22 * width)
    x0 = xmin + 0.04 * width
    y0 = ymin + 0.05 * (ymax - ymin)
    h = 0.012 * (ymax - ymin)
    bg = Rectangle(
        (x0 - 0.015 * width, y0 - 2.2 * h),
        length + 0.03 * width,
        6.0 * h,
        facecolor="white",
        edgecolor="none",
        alpha=0.75,
        zorder=20,
    )
    ax.add_patch(bg)
    half = length / 2.0
    ax.add_patch(Rectangle((x0, y0), half, h, facecolor="black", edgecolor="black", lw=0.6, zorder=21))
    ax.add_patch(Rectangle((x0 + half, y0), half, h, facecolor="white", edgecolor="black", lw=0.6, zorder=21))
    label = f"{length / 1000.0:g} km" if length >= 1000.0 else f"{length:g} m"
    ax.text(x0 + length / 2.0, y0 + 1.6 * h, label, ha="center", va="bottom", fontsize=8, zorder=22)
    ax.text(x0, y0 - 0.4 * h, "0", ha="center", va="top", fontsize=7, zorder=22)


def _north_angle_deg(info: GridInfo) -> float:
    """Angle of true north from grid up, counter-clockwise positive [degrees]."""
    if info.geographic:
        return 0.0
    try:
        from pyproj import Transformer

        crs = info.crs
        geo = crs.geodetic_crs
        if geo is None:
            return 0.0
        fwd = Transformer.from_crs(crs, geo, always_xy=True)
        inv = Transformer.from_crs(geo, crs, always_xy=True)
        xmin, xmax, ymin, ymax = _extent(info)
        xc, yc = 0.5 * (xmin + xmax), 0.5 * (ymin + ymax)
        lon, lat = fwd.transform(xc, yc)
        x2, y2 = inv.transform(lon, min(lat + 0.05, 89.9))
        ang = math.degrees(math.atan2(-(x2 - xc), y2 - yc))
        return ang if np.isfinite(ang) else 0.0
    except Exception:  # noqa: BLE001 - an arrow pointing up is the safe fallback
        return 0.0


_NORTH_LENGTH = 0.06  # north arrow length, in units of the axes width


def _north_arrow_frame(ratio: float) -> tuple[float, float, float, float]:
    """Centre ``(cx, cy)`` of the north arrow and the lower left ``(x0, y0)`` of its panel (axes fraction)."""
    cx, cy = 0.935, 1.0 - 0.06 / max(ratio, 0.2) - 0.5 * _NORTH_LENGTH / max(ratio, 0.2)
    return cx, cy, cx - 0.035, cy - 0.5 * _NORTH_LENGTH / ratio - 0.012 / ratio


def _north_arrow_box(ratio: float) -> tuple[float, float, float, float]:
    """The north arrow's panel ``(x0, y0, x1, y1)`` in axes fraction (what map labels must avoid)."""
    _, _, x0, y0 = _north_arrow_frame(ratio)
    return x0, y0, x0 + 0.07, y0 + (_NORTH_LENGTH + 0.065) / ratio


def _label_free(ax, info: GridInfo, xs: np.ndarray, ys: np.ndarray) -> np.ndarray:
    """bool ``(len(ys), len(xs))``: grid nodes where a map label may go - not under the north arrow's
    panel (upper right) nor, on projected grids, the scale bar (lower left)."""
    xmin, xmax, ymin, ymax = _extent(info)
    fx = (np.asarray(xs, float) - xmin) / max(xmax - xmin, 1e-300)
    fy = (np.asarray(ys, float) - ymin) / max(ymax - ymin, 1e-300)
    FX, FY = np.meshgrid(fx, fy)
    pad = 0.02
    panels = [_north_arrow_box(getattr(ax, "_tf_ratio", 1.0))] + ([] if info.geographic else [_SCALE_BAR_PANEL])
    free = np.ones(FX.shape, dtype=bool)
    for x0, y0, x1, y1 in panels:
        free &= ~((FX >= x0 - pad) & (FX <= x1 + pad) & (FY >= y0 - pad) & (FY <= y1 + pad))
    return free


def _add_north_arrow(ax, info: GridInfo) -> None:
    """North arrow (pointing to true north) in the upper right corner of the map."""
    ang = math.radians(_north_angle_deg(info))
    ratio = getattr(ax, "_tf_ratio", 1.0)
    length = _NORTH_LENGTH
    cx, cy, x0, y0 = _north_arrow_frame(ratio)
    dx = -math.sin(ang) * length
    dy = math.cos(ang) * length / max(ratio, 1e-6)
    tail = (cx - dx / 2, cy - dy / 2)
    tip = (cx + dx / 2, cy + dy / 2)
    ax.add_patch(
        Rectangle(
            (x0, y0),
            0.07,
            (length + 0.065) / ratio,
            transform=ax.transAxes,
            facecolor="white",
            alpha=0.6,
            edgecolor="none",
            zorder=29,
        )
    )
    ax.annotate(
        "",
        xy=tip,
        xytext=tail,
        xycoords="axes fraction",
        textcoords="axes fraction",
        arrowprops=dict(
            arrowstyle="simple,head_width=0.9,head_length=0.9,tail_width=0.35",
            facecolor="black",
            edgecolor="black",
        ),
        zorder=30,
    )
    ax.text(
        tip[0] - math.sin(ang) * 0.02,
        tip[1] + math.cos(ang) * 0.02 / ratio,
        "N",
        transform=ax.transAxes,
        ha="center",
        va="bottom",
        fontsize=10,
        fontweight="bold",
        zorder=31,
    )


def _right_colorbar(fig: Figure, ax, mappable, index: int = 0, **kw):
    """Colour bar beside a map axes with exactly the map's height (inset axes)."""
    x0 = 1.03 + index * 0.2
    cax = ax.inset_axes([x0, 0.0, 0.035, 1.0])
    return fig.colorbar(mappable, cax=cax, **kw)


def _finish(
    fig: Figure,
    out_path: str | os.PathLike,
    *,
    ax=None,
    geo: GridInfo | None = None,
    handles: list | None = None,
    right_cbars: int = 0,
    bottom_cbars: int = 0,
) -> pathlib.Path:
    """Add map furniture, legend and caution footer, size the figure and write the PNG.

    The PNG is written to a hidden temporary name and renamed (atomic on POSIX).
    """
    ncol = 3
    if handles:
        ncol = min(len(handles), 3)
        leg = fig.legend(
            handles=handles,
            loc="outside lower center",
            ncol=ncol,
            frameon=False,
            fontsize=8.5,
            borderaxespad=1.8,
        )
        leg.set_zorder(40)
    if ax is not None and geo is not None:
        ax.set_aspect(getattr(ax, "_tf_aspect", 1.0))
        ax.set_anchor("S")
        xmin, xmax, ymin, ymax = _extent(geo)
        ax.set_xlim(xmin, xmax)
        ax.set_ylim(ymin, ymax)
        ratio = getattr(ax, "_tf_ratio", 0.75)
        w = 8.0
        axw = w - 0.9 - 0.95 * right_cbars
        rows = math.ceil(len(handles) / ncol) if handles else 0
        h = axw * ratio + 1.45 + 0.85 * bottom_cbars + (0.2 * rows + 0.15 if rows else 0.0)
        h = float(np.clip(h, 3.6, 11.0))
        fig.set_size_inches(w, h)
        if not geo.geographic:
            _add_scale_bar(ax, geo)
        _add_north_arrow(ax, geo)
    fig.text(
        0.5,
        0.004,
        CAUTION_FOOTER,
        ha="center",
        va="bottom",
        fontsize=7.5,
        color="0.25",
        style="italic",
    )
    engine = fig.get_layout_engine()
    if engine is not None:
        try:
            fig_h = fig.get_size_inches()[1]
            foot = 0.22 / fig_h
            engine.set(rect=(0.0, foot, 1.0, 1.0 - foot))  # (left, bottom, width, height)
        except Exception:  # noqa: BLE001 - layout tweak only
            pass
    if ax is not None and geo is not None and engine is not None:
        _trim_vertical_slack(fig, ax)
    return _save_png(fig, out_path, str(ax.get_title(loc="left")) if ax is not None else None)


def _save_png(fig: Figure, out_path: str | os.PathLike, title: str | None) -> pathlib.Path:
    """Write the PNG (title, software and cautions in its metadata) under a hidden name, then rename."""
    out = pathlib.Path(out_path)
    if out.suffix.lower() != ".png":
        raise InputError(f"figure path '{out}': expected a .png file name")
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = out.with_name(f".{out.name}.part")
    meta = {"Title": title or out.stem, "Software": _software(), "Disclaimer": _cautions_full()}
    try:
        fig.savefig(tmp, format="png", dpi=DPI, metadata=meta)
        os.replace(tmp, out)
    finally:
        if tmp.exists():
            tmp.unlink()
    return out


def _trim_vertical_slack(fig: Figure, ax) -> None:
    """Shrink the figure height by the empty band a fixed-aspect map leaves above/below it."""
    try:
        fig.draw_without_rendering()
        orig = ax.get_position(original=True)
        act = ax.get_position(original=False)
        w, h = fig.get_size_inches()
        slack = (orig.height - act.height) * h
        if slack > 0.08:
            new_h = max(h - slack + 0.42, 3.0)  # the title sits in the slack band before trimming
            fig.set_size_inches(w, new_h)
            foot = 0.22 / new_h
            fig.get_layout_engine().set(rect=(0.0, foot, 1.0, 1.0 - foot))
    except Exception:  # noqa: BLE001 - cosmetic only
        pass


def _software() -> str:
    return f"tsunamifocus {__version__}"


def _iter_lines(obj: Any) -> Iterable[np.ndarray]:
    """Yield (N, 2) coordinate arrays from shapely geometries, arrays or sequences of them."""
    if obj is None:
        return
    if isinstance(obj, pd.DataFrame):
        if "geometry" not in obj.columns:
            raise InputError("line table: expected a 'geometry' column of shapely geometries")
        for g in obj["geometry"]:
            yield from _iter_lines(g)
        return
    if hasattr(obj, "geom_type"):
        gt = obj.geom_type
        if obj.is_empty:
            return
        if gt in ("LineString", "LinearRing"):
            yield np.asarray(obj.coords, dtype=float)[:, :2]
        elif gt == "Polygon":
            yield np.asarray(obj.exterior.coords, dtype=float)[:, :2]
            for ring in obj.interiors:
                yield np.asarray(ring.coords, dtype=float)[:, :2]
        elif gt.startswith("Multi") or gt == "GeometryCollection":
            for g in obj.geoms:
                yield from _iter_lines(g)
        elif gt == "Point":
            return
        else:
            raise InputError(f"line geometry: unsupported geometry type '{gt}'")
        return
    if isinstance(obj, np.ndarray) and obj.ndim == 2 and obj.shape[1] >= 2 and obj.dtype != object:
        yield np.asarray(obj, dtype=float)[:, :2]
        return
    if isinstance(obj, np.ndarray) and obj.ndim == 3 and obj.shape[2] >= 2:
        for a in obj:
            yield np.asarray(a, dtype=float)[:, :2]
        return
    if isinstance(obj, (list, tuple)):
        for item in obj:
            yield from _iter_lines(item)
        return
    raise InputError(f"line geometry: expected shapely geometries or (N, 2) arrays, got {type(obj).__name__}")


def _normalize_paths(paths: Any) -> list[np.ndarray]:
    """Turn ray paths into a list of (N, 2) arrays (NaN-separated pieces are split).

    Accepted: an :class:`xarray.Dataset` with variables ``x``, ``y`` on dims ``(ray, step)``
    (NaN padded), a dict with ``x``/``y`` 2-D arrays, a 3-D array ``(ray, step, 2)``, a
    sequence of ``(N, 2)`` arrays, of ``(xs, ys)`` pairs, or of shapely LineStrings.
    """
    if paths is None:
        return []
    out: list[np.ndarray] = []
    if isinstance(paths, (xr.Dataset, dict)) and "x" in paths and "y" in paths:
        xs = np.atleast_2d(np.asarray(paths["x"], dtype=float))
        ys = np.atleast_2d(np.asarray(paths["y"], dtype=float))
        if xs.shape != ys.shape:
            raise InputError(f"ray paths: x and y shapes differ ({xs.shape} vs {ys.shape})")
        arrays = [np.column_stack([a, b]) for a, b in zip(xs, ys, strict=True)]
    elif (
        isinstance(paths, (list, tuple))
        and paths
        and isinstance(paths[0], (list, tuple))
        and len(paths[0]) == 2
        and np.ndim(paths[0][0]) == 1
        and np.size(paths[0][0]) != 2
    ):
        arrays = [np.column_stack([np.asarray(a, float), np.asarray(b, float)]) for a, b in paths]
    else:
        arrays = list(_iter_lines(paths))
    for a in arrays:
        good = np.all(np.isfinite(a), axis=1)
        if good.all():
            if len(a) >= 2:
                out.append(a)
            continue
        # split at NaN gaps
        idx = np.flatnonzero(np.diff(np.concatenate([[0], good.astype(int), [0]])))
        for s, e in zip(idx[0::2], idx[1::2], strict=True):
            if e - s >= 2:
                out.append(a[s:e])
    return out


def _split_wrap(line: np.ndarray, geographic: bool) -> list[np.ndarray]:
    """Split a lon/lat line where it jumps across the seam (> 180 degrees)."""
    if not geographic or len(line) < 2:
        return [line]
    jumps = np.flatnonzero(np.abs(np.diff(line[:, 0])) > 180.0)
    if jumps.size == 0:
        return [line]
    return [p for p in np.split(line, jumps + 1) if len(p) >= 2]


def _draw_lines(ax, obj, geographic: bool, **kw) -> int:
    segs = []
    for a in _iter_lines(obj):
        segs.extend(_split_wrap(a, geographic))
    if segs:
        ax.add_collection(LineCollection(segs, **kw))
    return len(segs)


def _land_and_nodata(ax, depth: xr.DataArray, info: GridInfo, zorder: float = 2) -> tuple[bool, bool]:
    """Paint land (depth <= 0) and no-data cells; returns (has_land, has_nodata)."""
    d = _values(depth)
    land = np.isfinite(d) & (d <= 0)
    nod = ~np.isfinite(d)
    rgba = np.zeros(d.shape + (4,))
    if land.any():
        rgba[land] = mcolors.to_rgba(_LAND)
    if nod.any():
        rgba[nod] = mcolors.to_rgba(_NODATA)
    if land.any() or nod.any():
        ax.imshow(rgba, origin="lower", extent=_extent(info), interpolation="nearest", zorder=zorder)
    return bool(land.any()), bool(nod.any())


def _coast_contour(ax, depth: xr.DataArray, info: GridInfo, zorder: float = 6) -> None:
    """Draw the 0 m depth contour (the grid's own shoreline) when the grid has land and sea."""
    d = _values(depth)
    fin = d[np.isfinite(d)]
    if fin.size and fin.min() <= 0 < fin.max():
        xd = depth.dims[1]
        yd = depth.dims[0]
        ax.contour(
            depth[xd].values, depth[yd].values, d, levels=[0.0], colors="0.15", linewidths=0.7, zorder=zorder
        )


def _land_legend_handles(has_land: bool, has_nodata: bool) -> list:
    h = []
    if has_land:
        h.append(Patch(facecolor=_LAND, edgecolor="0.3", linewidth=0.5, label="Land"))
    if has_nodata:
        h.append(Patch(facecolor=_NODATA, edgecolor="0.3", linewidth=0.5, label="No data"))
    return h


# --------------------------------------------------------------------------------------
# ray field
# --------------------------------------------------------------------------------------


@_styled
def plot_ray_field(
    depth: xr.DataArray,
    energy: xr.DataArray | None,
    paths: Any = None,
    coast_lines: Any = None,
    source_outline: Any = None,
    *,
    out_path: str | os.PathLike,
    title: str = "Ray field over the bathymetry",
    max_paths: int = 600,
    coast_label: str = "Coastline",
) -> pathlib.Path:
    """Map of the ray field (branches) over the bathymetry.

    Parameters
    ----------
    depth : xarray.DataArray
        Depth grid [m], positive down, NaN = no data, land where depth <= 0.
    energy : xarray.DataArray or None
        Accumulated ray energy on a grid of the same CRS kind [J m-1] (energy per unit
        wavefront width); drawn on a log scale, transparent where small. None = no overlay.
    paths : optional
        Decimated ray paths in the grid CRS (see :func:`_normalize_paths` for the accepted
        layouts); drawn as thin lines with alpha. At most ``max_paths`` are drawn.
    coast_lines : optional
        Coastline geometries (shapely lines/polygons, (N, 2) arrays or a DataFrame with a
        ``geometry`` column) in the grid CRS.
    source_outline : optional
        Fault outlines (shapely polygons or rings) in the grid CRS.
    out_path : str or os.PathLike
        PNG file to write.
    title : str
        Figure title.
    max_paths : int
        Upper bound on drawn paths (evenly decimated).
    coast_label : str
        Legend entry of ``coast_lines`` (e.g. "Coast segments (stop isobath)").

    Returns
    -------
    pathlib.Path
        The written PNG.
    """
    info = _check_grid(depth, "plot_ray_field depth")
    if energy is None and paths is None:
        raise InputError("plot_ray_field: give an energy grid or ray paths (both are None)")
    fig, ax, geo = _new_map(info, title)
    im = _depth_backdrop(ax, depth, info)
    handles = _land_and_coast(ax, depth, info)
    n_right = 0
    if energy is not None and _energy_overlay(fig, ax, energy, info):
        n_right += 1
    handles += _ray_paths(ax, paths, info, max_paths, faint=energy is not None)
    if coast_lines is not None and _draw_lines(
        ax, coast_lines, info.geographic, colors="black", linewidths=0.9, zorder=7
    ):
        handles.append(Line2D([], [], color="black", lw=1.0, label=coast_label))
    if source_outline is not None and _draw_lines(
        ax,
        source_outline,
        info.geographic,
        colors=_OKABE_GREEN,
        linewidths=1.8,
        zorder=8,
        path_effects=_HALO,
    ):
        handles.append(Line2D([], [], color=_OKABE_GREEN, lw=1.8, label="Fault outline"))
    cbd = fig.colorbar(im, ax=ax, shrink=0.55, pad=0.01, location="bottom", aspect=35)
    cbd.set_label("Water depth (m)")
    return _finish(fig, out_path, ax=ax, geo=geo, handles=handles, right_cbars=n_right, bottom_cbars=1)

def _depth_backdrop(ax, depth: xr.DataArray, info: GridInfo):
    """Sea depths in light greys (the image, for the depth colour bar)."""
    d = _values(depth)
    sea = np.where(np.isfinite(d) & (d > 0), d, np.nan)
    dmax = float(np.nanmax(sea)) if np.isfinite(sea).any() else 1.0
    bathy_cmap = mcolors.LinearSegmentedColormap.from_list("bathy_greys", ["#f2f2f2", "#8a8a8a"])
    return ax.imshow(
        sea,
        origin="lower",
        extent=_extent(info),
        cmap=bathy_cmap,
        vmin=0.0,
        vmax=dmax,
        interpolation="nearest",
        zorder=1,
    )


def _land_and_coast(ax, depth: xr.DataArray, info: GridInfo) -> list:
    """Land and no-data cells, the coast contour; their legend entries."""
    has_land, has_nodata = _land_and_nodata(ax, depth, info)
    _coast_contour(ax, depth, info)
    return _land_legend_handles(has_land, has_nodata)


def _energy_overlay(fig, ax, energy: xr.DataArray, info: GridInfo) -> bool:
    """Ray energy on a log scale, opacity rising with the value, and its colour bar; False if empty."""
    einfo = _check_grid(energy, "plot_ray_field energy")
    _same_kind(info, einfo, "plot_ray_field energy")
    e = _values(energy)
    escale = energy_scale(e)  # the one definition shared with the GIS style files (io.styles)
    if escale is not None:
        vmin, vmax = escale.vmin, escale.vmax
        norm = mcolors.LogNorm(vmin=vmin, vmax=vmax, clip=True)
        cmap = _cmap(escale.cmap)
        with np.errstate(invalid="ignore", divide="ignore"):
            t = np.where(np.isfinite(e) & (e > 0), norm(np.where(e > 0, e, vmin)), 0.0)
        t = np.clip(np.ma.filled(t, 0.0), 0.0, 1.0)
        rgba = cmap(t)
        a0, a1, gamma = escale.alpha
        rgba[..., 3] = np.where(np.isfinite(e) & (e > 0), a0 + a1 * t**gamma, 0.0)
        ax.imshow(rgba, origin="lower", extent=_extent(einfo), interpolation="nearest", zorder=3)
        sm = ScalarMappable(norm=norm, cmap=cmap)
        cb = _right_colorbar(fig, ax, sm, extend="both")
        cb.set_label("Ray energy per unit wavefront width\n(J m$^{-1}$, log scale)")
        return True
    return False


def _ray_paths(ax, paths: Any, info: GridInfo, max_paths: int, *, faint: bool) -> list:
    """At most ``max_paths`` ray paths (evenly chosen), fainter over an energy map; their legend entry."""
    handles: list = []
    lines = _normalize_paths(paths)
    if lines:
        if len(lines) > max_paths:
            keep = np.linspace(0, len(lines) - 1, max_paths).round().astype(int)
            lines = [lines[i] for i in keep]
        segs = []
        for a in lines:
            if info.geographic:  # paths carry longitudes unwrapped along the ray
                a = np.column_stack([info.wrap_lon(a[:, 0]), a[:, 1]])
            segs.extend(_split_wrap(a, info.geographic))
        color = _OKABE_BLUE if faint else "#1b3a5c"
        # fainter lines when there are many, so the energy branches stay visible
        alpha = float(np.clip(6.0 / math.sqrt(len(lines)), 0.12, 0.5)) * (0.8 if faint else 1.0)
        lw = 0.45 if len(lines) <= 300 else 0.35
        ax.add_collection(LineCollection(segs, colors=color, linewidths=lw, alpha=alpha, zorder=4))
        handles.append(
            Line2D([], [], color=color, lw=1.0, alpha=0.8, label=f"Ray paths ({len(lines)} shown)")
        )
    return handles


def _cmap(name: str):
    import matplotlib

    return matplotlib.colormaps[name]


# --------------------------------------------------------------------------------------
# lensing map
# --------------------------------------------------------------------------------------


def _rank_order(segments: pd.DataFrame, by: str, rank_col: str | None) -> pd.DataFrame:
    df = segments.copy()
    if rank_col and rank_col in df.columns and df[rank_col].notna().any():
        df = df.assign(_r=pd.to_numeric(df[rank_col], errors="coerce"))
        df = df.sort_values(["_r", by], ascending=[True, False], na_position="last")
        df["_rank"] = df["_r"]
        df = df.drop(columns="_r")
    else:
        df = df.sort_values(by, ascending=False, na_position="last")
        df["_rank"] = np.arange(1, len(df) + 1, dtype=float)
    return df


def _check_segments(segments: Any, needed: Sequence[str], what: str) -> pd.DataFrame:
    if not isinstance(segments, pd.DataFrame):
        raise InputError(f"{what}: expected a pandas DataFrame of segments, got {type(segments).__name__}")
    missing = [c for c in needed if c not in segments.columns]
    if missing:
        raise InputError(f"{what}: segments table lacks column(s) {missing}; has {list(segments.columns)}")
    return segments


@_styled
def plot_lensing_map(
    depth: xr.DataArray,
    lensing_factor: xr.DataArray,
    travel_time_min: xr.DataArray | None,
    segments: pd.DataFrame | None,
    top_k: int = 10,
    *,
    out_path: str | os.PathLike,
    title: str = "Lensing factor, travel time and ranked coast segments",
    source_outline: Any = None,
    contour_step_min: float | None = None,
    no_value_label: str = "No rays",
    segment_label: str = "Coast segment (colour = lensing factor)",
) -> pathlib.Path:
    """Lensing-factor map with travel-time contours and the ranked coastline segments.

    Parameters
    ----------
    depth : xarray.DataArray
        Depth grid [m], positive down (land painted where depth <= 0).
    lensing_factor : xarray.DataArray
        Lensing factor [-] (1 = no focusing); drawn on a log scale with a diverging colour
        map centred at 1.
    travel_time_min : xarray.DataArray or None
        First-arrival travel time [min]; labelled contours.
    segments : pandas.DataFrame or None
        Segments table (columns ``geometry``, ``lensing_factor``, ``x_mid``, ``y_mid``,
        optional ``rank_lensing``, ``normal_azimuth_deg``, ``segment_id``).
    top_k : int
        Number of top-ranked segments labelled by rank.
    out_path : str or os.PathLike
        PNG file to write.
    title : str
        Figure title.
    source_outline : optional
        Fault outlines in the grid CRS.
    contour_step_min : float, optional
        Contour interval [min]; chosen automatically (about 6-12 contours) when None.
    no_value_label : str
        Legend entry of the sea cells without a value (the rays' map: "No rays").
    segment_label : str
        Legend entry of the coloured coast segments.

    Returns
    -------
    pathlib.Path
    """
    info = _check_grid(depth, "plot_lensing_map depth")
    linfo = _check_grid(lensing_factor, "plot_lensing_map lensing_factor")
    _same_kind(info, linfo, "plot_lensing_map lensing_factor")
    if top_k < 0:
        raise InputError(f"plot_lensing_map: top_k must be >= 0, got {top_k}")
    fig, ax, geo = _new_map(info, title)
    lf = _values(lensing_factor)
    seg_vals = None
    if segments is not None:
        _check_segments(segments, ["geometry", "lensing_factor"], "plot_lensing_map")
        seg_vals = pd.to_numeric(segments["lensing_factor"], errors="coerce").to_numpy(float)
    scale = lensing_scale(lf, seg_vals)  # the one definition shared with the GIS style files (io.styles)
    r = scale.vmax
    norm = mcolors.LogNorm(vmin=scale.vmin, vmax=scale.vmax, clip=False)
    cmap = _cmap(scale.cmap).with_extremes(bad=(0.0, 0.0, 0.0, 0.0))
    handles = _lensing_raster(fig, ax, lf, linfo, depth, info, cmap, norm, r, no_value_label)
    if travel_time_min is not None:
        handles += _travel_time_contours(ax, travel_time_min, info, contour_step_min, depth)
    if source_outline is not None and _draw_lines(
        ax, source_outline, info.geographic, colors=_OKABE_GREEN, linewidths=1.8, zorder=8, path_effects=_HALO
    ):
        handles.append(Line2D([], [], color=_OKABE_GREEN, lw=1.8, label="Fault outline"))
    if segments is not None and len(segments):
        handles += _coloured_segments(ax, segments, seg_vals, info, cmap, norm, r, segment_label)
        if top_k > 0:
            handles += _rank_labels(ax, segments, top_k, info)
    return _finish(fig, out_path, ax=ax, geo=geo, handles=handles, right_cbars=1)


def _lensing_raster(fig, ax, lf, linfo, depth, info, cmap, norm, r, no_value_label: str = "No rays") -> list:
    """The lensing-factor raster over a 'no rays' background, land, coast and the log colour bar."""
    lf_plot = np.where(np.isfinite(lf) & (lf > 0), lf, np.nan)
    ax.add_patch(Rectangle((0, 0), 1, 1, transform=ax.transAxes, facecolor="0.93", zorder=0))
    im = ax.imshow(
        np.ma.masked_invalid(lf_plot),
        origin="lower",
        extent=_extent(linfo),
        cmap=cmap,
        norm=norm,
        interpolation="nearest",
        zorder=1,
    )
    handles = _land_and_coast(ax, depth, info)
    handles.append(Patch(facecolor="0.93", edgecolor="0.3", linewidth=0.5, label=no_value_label))
    cb = _right_colorbar(fig, ax, im, extend="both")
    ticks = _log_ticks(r)
    cb.ax.yaxis.set_major_locator(FixedLocator(ticks))
    cb.ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _: _tick_label(v)))
    cb.ax.yaxis.set_minor_formatter(NullFormatter())
    cb.set_label("Lensing factor (-), log scale\n1 = no focusing")
    return handles


#: Travel-time labels on the lensing map go where the sea is deeper than this [m] (off the
#: continental slope, where contours bunch; common practice, no source).
LABEL_DEPTH_M = 1000.0


def _travel_time_contours(ax, travel_time_min: xr.DataArray, info: GridInfo, contour_step_min: float | None,
                          depth: xr.DataArray | None = None) -> list:
    """Labelled first-arrival contours [min] (about 6-12 unless a step is given); their legend entry."""
    handles: list = []
    tinfo = _check_grid(travel_time_min, "plot_lensing_map travel_time_min")
    _same_kind(info, tinfo, "plot_lensing_map travel_time_min")
    t = _contour_ready(_values(travel_time_min))
    if np.isfinite(t).sum() > 3:
        tmax = float(np.nanmax(t))
        tmin = float(np.nanmin(t))
        step = contour_step_min or _nice_time_step(tmax - max(tmin, 0.0))
        levels = np.arange(math.ceil(max(tmin, 0.0) / step) * step, tmax + 1e-9, step)
        levels = levels[levels > 0]
        if levels.size:
            xd, yd = travel_time_min.dims[1], travel_time_min.dims[0]
            xs, ys = travel_time_min[xd].values, travel_time_min[yd].values
            ax.contour(xs, ys, t, levels=levels, colors="0.1", linewidths=0.7, zorder=5)
            # labels kept out of the north arrow's and the scale bar's panels, and in water deeper
            # than LABEL_DEPTH_M: near the coast the contours bunch up among the rank labels
            t_free = np.where(_label_free(ax, info, xs, ys), t, np.nan)
            lab_t = t_free
            if depth is not None and _values(depth).shape == t.shape:
                lab_t = np.where(_values(depth) > LABEL_DEPTH_M, t_free, np.nan)
            lo, hi = np.nanmin(lab_t, initial=np.inf), np.nanmax(lab_t, initial=-np.inf)
            on_deep = [lv for lv in levels if lo < lv < hi]
            # levels that never leave the slope stay unlabelled (the legend gives the step) unless none reach deep water
            rest = [] if on_deep else list(levels)
            for field, lvs in ((lab_t, on_deep), (t_free, rest)):
                if not lvs or not np.isfinite(field).any():
                    continue
                cs = ax.contour(xs, ys, field, levels=lvs, colors="none", linewidths=0.0, zorder=5)
                for lab in ax.clabel(cs, fmt=lambda v: f"{v:g} min", fontsize=7.5, inline=False, colors="0.1"):
                    lab.set_path_effects(_HALO)
            handles.append(Line2D([], [], color="0.1", lw=0.8, label=f"Travel time (every {step:g} min)"))
    return handles


def _coloured_segments(ax, segments: pd.DataFrame, seg_vals: np.ndarray, info: GridInfo, cmap, norm, r,
                       label: str = "Coast segment (colour = lensing factor)") -> list:
    """Coast segments drawn in the colour of their lensing factor (grey without one); their legend entry."""
    handles: list = []
    segs, cols = [], []
    for geom, val in zip(segments["geometry"], seg_vals, strict=True):
        for a in _iter_lines(geom):
            for piece in _split_wrap(a, info.geographic):
                segs.append(piece)
                cols.append(val)
    if segs:
        cols_arr = np.asarray(cols, dtype=float)
        rgba = cmap(norm(np.where(np.isfinite(cols_arr) & (cols_arr > 0), cols_arr, 1.0)))
        rgba[~(np.isfinite(cols_arr) & (cols_arr > 0))] = NO_VALUE_COLOUR
        lc = LineCollection(
            segs,
            colors=rgba,
            linewidths=SEGMENT_WIDTH_PT,
            zorder=9,
            path_effects=[patheffects.withStroke(linewidth=SEGMENT_CASING_PT, foreground="black")],
            capstyle="butt",
        )
        ax.add_collection(lc)
        handles.append(
            Line2D(
                [],
                [],
                color=cmap(norm(min(r, 2.0))),
                lw=4,
                path_effects=[patheffects.withStroke(linewidth=6.0, foreground="black")],
                label=label,
            )
        )
    return handles


def _rank_labels(ax, segments: pd.DataFrame, top_k: int, info: GridInfo) -> list:
    """Numbered circles beside the top-k segments, placed to avoid each other; their legend entry."""
    handles: list = []
    ranked = _rank_order(segments, "lensing_factor", "rank_lensing")
    ranked = ranked[ranked["_rank"].notna() & (ranked["_rank"] <= top_k)].head(top_k)
    placed: list[tuple[float, float]] = []  # label centres, in points from the axes origin
    xmin_, xmax_, ymin_, ymax_ = _extent(info)
    pts_per_unit = 72.0 * (8.0 - 0.9 - 0.95) / max(xmax_ - xmin_, 1e-12)  # see _finish sizing
    yscale = pts_per_unit * getattr(ax, "_tf_aspect", 1.0)
    box = (xmax_ - xmin_) * pts_per_unit, (ymax_ - ymin_) * yscale
    # the north arrow's panel (top right) is no place for a label
    nx0, ny0, nx1, ny1 = _north_arrow_box(getattr(ax, "_tf_ratio", 1.0))
    avoid = [(nx0 * box[0] - 9.0, ny0 * box[1] - 9.0, nx1 * box[0] + 9.0, ny1 * box[1] + 9.0)]
    for _, row in ranked.iterrows():
        xm, ym = _segment_mid(row)
        if xm is None:
            continue
        az = row.get("normal_azimuth_deg", np.nan)
        az = float(az) if az is not None and np.isfinite(az) else 0.0
        off = _label_offset(((xm - xmin_) * pts_per_unit, (ym - ymin_) * yscale), az, placed, box=box,
                            avoid=avoid)
        ax.annotate(
            f"{int(row['_rank'])}",
            xy=(xm, ym),
            xytext=off,
            textcoords="offset points",
            ha="center",
            va="center",
            fontsize=8,
            fontweight="bold",
            bbox=dict(boxstyle="circle,pad=0.25", facecolor="white", edgecolor="black", lw=0.7),
            arrowprops=dict(arrowstyle="-", color="black", lw=0.7, shrinkA=0, shrinkB=0),
            zorder=12,
            annotation_clip=True,
        )
    if len(ranked):
        handles.append(
            Line2D(
                [],
                [],
                marker="o",
                linestyle="none",
                markerfacecolor="white",
                markeredgecolor="black",
                markersize=9,
                label=f"Rank (top {min(top_k, len(ranked))})",
            )
        )
    return handles


def _label_offset(
    anchor_pt: tuple[float, float],
    azimuth_deg: float,
    placed: list[tuple[float, float]],
    min_sep: float = 15.0,
    box: tuple[float, float] | None = None,
    avoid: Sequence[tuple[float, float, float, float]] = (),
) -> tuple[float, float]:
    """Offset [points] of a rank label, clear of the labels already placed.

    Seaward along the normal first, then pushed out or turned to avoid labels already placed
    (greedy, rank order), to stay inside ``box`` (width, height in points, origin at the
    lower left) and out of the rectangles ``avoid`` ``(x0, y0, x1, y1)`` (points, same origin);
    the chosen centre is appended to ``placed``.
    """
    best = None
    for dist in (16.0, 30.0, 44.0, 58.0, 72.0):
        for turn in (0.0, -35.0, 35.0, -70.0, 70.0, -110.0, 110.0):
            a = math.radians(azimuth_deg + turn)
            off = (dist * math.sin(a), dist * math.cos(a))
            c = (anchor_pt[0] + off[0], anchor_pt[1] + off[1])
            if box is not None and not (8.0 <= c[0] <= box[0] - 8.0 and 8.0 <= c[1] <= box[1] - 8.0):
                continue
            if any(r[0] <= c[0] <= r[2] and r[1] <= c[1] <= r[3] for r in avoid):
                continue
            gap = min((math.hypot(c[0] - p[0], c[1] - p[1]) for p in placed), default=1e9)
            if gap >= min_sep:
                placed.append(c)
                return off
            if best is None or gap > best[0]:
                best = (gap, off, c)
    if best is None:  # nowhere inside the box: plain seaward offset
        a = math.radians(azimuth_deg)
        best = (0.0, (16.0 * math.sin(a), 16.0 * math.cos(a)), (anchor_pt[0], anchor_pt[1]))
    placed.append(best[2])
    return best[1]


def _segment_mid(row: pd.Series) -> tuple[float | None, float | None]:
    xm, ym = row.get("x_mid", np.nan), row.get("y_mid", np.nan)
    if xm is not None and ym is not None and np.isfinite(xm) and np.isfinite(ym):
        return float(xm), float(ym)
    geom = row.get("geometry")
    if geom is not None and hasattr(geom, "interpolate") and not geom.is_empty:
        p = geom.interpolate(0.5, normalized=True)
        return float(p.x), float(p.y)
    return None, None


# --------------------------------------------------------------------------------------
# ranking chart
# --------------------------------------------------------------------------------------

#: Known ranking quantities: column -> (lower column, upper column, rank column, axis label, reference)
RANK_FIELDS: dict[str, tuple[str, str, str, str, float | None]] = {
    "lensing_factor": ("lensing_lo", "lensing_hi", "rank_lensing", "Lensing factor (-)", 1.0),
    "amp_1m_m": ("amp_lo", "amp_hi", "rank_amplitude", "Indicative amplitude at 1 m depth (m)", None),
    "amp_stop_m": (
        "amp_lo",
        "amp_hi",
        "rank_amplitude",
        "Indicative amplitude at the stop isobath (m)",
        None,
    ),
}


@_styled
def plot_ranking(
    segments: pd.DataFrame,
    top_k: int = 10,
    *,
    out_path: str | os.PathLike,
    by: str = "lensing_factor",
    lo_col: str | None = None,
    hi_col: str | None = None,
    title: str | None = None,
    xlabel: str | None = None,
    prob_col: str | None = None,
) -> pathlib.Path:
    """Horizontal bar chart of the top-k segments with 5-95 % uncertainty bars.

    Parameters
    ----------
    segments : pandas.DataFrame
        Segments table with columns ``segment_id``, ``by`` and, where available, ``name``,
        the interval columns and ``reliable`` (bool). Unreliable segments are drawn grey and
        hatched.
    top_k : int
        Number of segments shown (rank 1 at the top).
    out_path : str or os.PathLike
        PNG file to write.
    by : str
        Ranked quantity: ``"lensing_factor"`` [-], ``"amp_1m_m"`` or ``"amp_stop_m"`` [m], or
        any numeric column (then give ``lo_col``/``hi_col`` for intervals).
    lo_col, hi_col : str, optional
        Interval columns; default from :data:`RANK_FIELDS`.
    title, xlabel : str, optional
        Figure title and x-axis label (defaults from ``by``).
    prob_col : str, optional
        Column holding the ensemble probability [0-1] of being among the top k; printed beside
        each value as ``P(top k) = ...``.

    Returns
    -------
    pathlib.Path
    """
    if top_k < 1:
        raise InputError(f"plot_ranking: top_k must be >= 1, got {top_k}")
    _check_segments(segments, ["segment_id", by], "plot_ranking")
    lo_d, hi_d, rank_col, label_d, ref = RANK_FIELDS.get(by, (None, None, None, by, None))
    lo_col = lo_col or lo_d
    hi_col = hi_col or hi_d
    df = _rank_order(segments, by, rank_col)
    df = df[pd.to_numeric(df[by], errors="coerce").notna()].head(top_k)
    if df.empty:
        raise InputError(f"plot_ranking: column '{by}' has no finite values")
    n = len(df)
    fig, ax = _new_chart(
        (7.6, 1.7 + 0.36 * n), title or f"Top {n} coastline segments by {label_d.split(' (')[0].lower()}"
    )
    if prob_col is not None and prob_col not in df.columns:
        raise InputError(f"plot_ranking: prob_col '{prob_col}' is not a column of the segments table")
    vals = pd.to_numeric(df[by], errors="coerce").to_numpy(float)
    ypos = np.arange(n)[::-1]
    rel = ranked_mask(df, "amplitude" if by.startswith("amp") else "lensing")
    has_int = bool(lo_col and hi_col and lo_col in df.columns and hi_col in df.columns)
    lo = pd.to_numeric(df[lo_col], errors="coerce").to_numpy(float) if has_int else np.full(n, np.nan)
    hi = pd.to_numeric(df[hi_col], errors="coerce").to_numpy(float) if has_int else np.full(n, np.nan)
    xlim, clip_at = _ranking_axis(vals, hi, rel, prob_col is not None)
    clipped = vals > clip_at
    shown = np.minimum(vals, clip_at)
    _ranking_bars(ax, shown, ypos, rel, clipped, clip_at)
    no_whisker = clipped.copy()
    if not rel.any():  # nothing reliable: whiskers running off the chart are noise, leave them out
        no_whisker |= ~(np.isfinite(hi) & (hi <= clip_at))
    wclip = _ranking_intervals(ax, vals, lo, hi, ypos, no_whisker, clip_at) if has_int else np.zeros(n, bool)
    probs = pd.to_numeric(df[prob_col], errors="coerce").to_numpy(float) if prob_col else np.full(n, np.nan)
    hi_drawn = np.where(no_whisker | ~np.isfinite(lo), np.nan, hi)  # values sit beside the drawn whiskers
    _ranking_values(ax, vals, shown, hi_drawn, ypos, probs, clipped, wclip, clip_at, xlim, top_k)
    labels = [_bar_label(row["segment_id"], row.get("name", ""), row["_rank"] if ok else None,
                         row.get("lat_mid"), row.get("lon_mid"))
              for ok, (_, row) in zip(rel, df.iterrows(), strict=True)]
    ax.set_yticks(ypos)
    ax.set_yticklabels(labels)
    ax.set_ylim(-0.7, n - 0.3)
    ax.set_xlim(0, xlim)
    ax.set_xlabel(xlabel or label_d)
    ax.grid(True, axis="x", color="0.85", linewidth=0.6, zorder=0)
    ax.set_axisbelow(True)
    _ranking_legend(ax, rel, has_int, ref, bool(clipped.any() or wclip.any()))
    return _finish(fig, out_path, ax=ax)


def _ranking_axis(vals: np.ndarray, hi: np.ndarray, rel: np.ndarray, with_prob: bool) -> tuple[float, float]:
    """Upper x limit and the clip value of the ranking chart.

    The axis is set by the reliable bars and their finite interval ends; unreliable values (few
    rays, often huge) and unbounded intervals would squash the reliable ones, so they are clipped
    at the axis edge and marked. With no reliable bar, the bars alone set it.
    """
    if rel.any():
        xmax = float(np.nanmax(vals[rel]))
        hb = hi[rel & np.isfinite(hi)]
        if hb.size:
            xmax = max(xmax, float(np.nanmax(hb)))
    else:
        xmax = float(np.nanmax(vals))
    if not xmax > 0:
        return 1.0, 1.0
    return xmax * (1.45 if with_prob else 1.14), xmax * 1.04


def _ranking_bars(ax, shown: np.ndarray, ypos: np.ndarray, rel: np.ndarray, clipped: np.ndarray,
                  clip_at: float) -> None:
    """Horizontal bars, hatched grey for unreliable segments; an arrow head where a bar is clipped."""
    colors = np.where(rel, _OKABE_BLUE, "#c8c8c8")
    bars = ax.barh(ypos, shown, height=0.62, color=colors, edgecolor="0.25", linewidth=0.6, zorder=2)
    for b, ok in zip(bars, rel, strict=True):
        if not ok:
            b.set_hatch("///")
    for yv in ypos[clipped]:
        ax.plot([clip_at], [yv], marker=">", color="0.15", markersize=7, zorder=4, clip_on=False)


def _ranking_intervals(ax, vals: np.ndarray, lo: np.ndarray, hi: np.ndarray, ypos: np.ndarray,
                       clipped: np.ndarray, clip_at: float) -> np.ndarray:
    """5-95 % whiskers (none where ``clipped``); whiskers running off the axis end in an arrow head.

    Returns where a whisker was clipped.
    """
    ok = np.isfinite(lo) & np.isfinite(vals) & ~clipped
    hi_d = np.where(np.isfinite(hi), hi, np.inf)
    wclip = ok & (hi_d > clip_at)
    err = np.vstack([np.clip(vals - lo, 0, None), np.clip(np.minimum(hi_d, clip_at) - vals, 0, None)])
    full = ok & ~wclip
    if full.any():
        ax.errorbar(vals[full], ypos[full], xerr=err[:, full], fmt="none", ecolor="black", elinewidth=1.1,
                    capsize=3.5, zorder=3)
    if wclip.any():
        ax.errorbar(vals[wclip], ypos[wclip], xerr=err[:, wclip], fmt="none", ecolor="black", elinewidth=1.1,
                    capsize=0, zorder=3)
        for yv in ypos[wclip]:
            ax.plot([clip_at], [yv], marker=">", color="black", markersize=5, zorder=4, clip_on=False)
    return wclip


def _ranking_values(ax, vals: np.ndarray, shown: np.ndarray, hi: np.ndarray, ypos: np.ndarray, probs: np.ndarray,
                    clipped: np.ndarray, wclip: np.ndarray, clip_at: float, span: float, top_k: int) -> None:
    """The value of each bar: beside its end, inside the bar when it is off scale."""
    ends = np.where(np.isfinite(hi) & ~clipped, np.maximum(shown, np.minimum(hi, clip_at)), shown)
    for yv, v, e_, pr, cl, wc in zip(ypos, vals, ends, probs, clipped, wclip, strict=True):
        txt = three_digits(v) + (f"   P(top {top_k}) = {pr:.2f}" if np.isfinite(pr) else "")
        if cl:
            ax.text(clip_at - 0.03 * span, yv, txt + " (off scale)", va="center", ha="right", fontsize=8,
                    color="0.1", zorder=5, bbox={"facecolor": "white", "edgecolor": "none", "alpha": 0.85, "pad": 1.0})
        elif wc:  # only the whisker runs off scale: the value just above the bar's end
            ax.text(v + 0.015 * span, yv + 0.34, txt, va="bottom", ha="left", fontsize=8, color="0.15", zorder=4)
        else:
            ax.text(e_ + 0.015 * span, yv, txt, va="center", ha="left", fontsize=8, color="0.15", zorder=4)


def _ranking_legend(ax, rel: np.ndarray, has_int: bool, ref: float | None, off_scale: bool = False) -> None:
    """Legend of the ranking chart (and the no-focusing reference line), below the bars."""
    handles = []
    if rel.any():
        handles.append(Patch(facecolor=_OKABE_BLUE, edgecolor="0.25", label="Reliable (ranked)"))
    if (~rel).any():
        handles.append(
            Patch(facecolor="#c8c8c8", edgecolor="0.25", hatch="///", label="Unreliable, not ranked (see table)")
        )
    if has_int:
        handles.append(
            Line2D([], [], color="black", lw=1.1, marker="|", markersize=8, label="5-95 % interval")
        )
    if off_scale:
        handles.append(Line2D([], [], color="0.15", lw=0, marker=">", markersize=6, label="Off scale (value printed)"))
    if ref is not None:
        ax.axvline(ref, color=_OKABE_VERMILLION, linestyle="--", linewidth=1.2, zorder=3)
        handles.append(
            Line2D([], [], color=_OKABE_VERMILLION, linestyle="--", lw=1.2, label=f"{ref:g} = no focusing")
        )
    # below the bars, so it never hides a bar or a printed value
    leg = ax.legend(handles=handles, loc="upper center", bbox_to_anchor=(0.5, -0.16), ncol=min(3, len(handles)),
                    framealpha=0.9, fontsize=8)
    leg.set_zorder(10)


def _bar_label(segment_id: Any, name: Any, rank: Any, lat: Any = None, lon: Any = None) -> str:
    """``"1. S0001  Harbour"`` or ``"1. S0001  41.75°N 124.20°W"``; ``"-"`` instead of a rank when unranked.

    The name is used when there is one (and it differs from the id), else the latitude and
    longitude of the segment's midpoint when given.
    """
    sid = str(segment_id)
    nm = name.strip() if isinstance(name, str) else ""
    try:
        rk = float(rank)
    except (TypeError, ValueError):
        rk = math.nan
    rk_s = f"{int(rk)}." if np.isfinite(rk) else "-"
    where = ""
    if not (nm and nm != sid):
        try:
            la, lo = float(lat), float(lon)
        except (TypeError, ValueError):
            la = lo = math.nan
        if np.isfinite(la) and np.isfinite(lo):
            lo = ((lo + 180.0) % 360.0) - 180.0
            where = f"{abs(la):.2f}°{'N' if la >= 0 else 'S'} {abs(lo):.2f}°{'E' if lo >= 0 else 'W'}"
    lab = f"{rk_s} {sid}" + (f"  {nm}" if nm and nm != sid else (f"  {where}" if where else ""))
    return lab if len(lab) <= 40 else lab[:39] + "…"


# --------------------------------------------------------------------------------------
# source uplift
# --------------------------------------------------------------------------------------


@_styled
def plot_uplift(
    eta: xr.DataArray,
    *,
    out_path: str | os.PathLike,
    title: str = "Initial sea-surface displacement (Okada 1985)",
    depth: xr.DataArray | None = None,
    source_outline: Any = None,
    coast_lines: Any = None,
    crop: bool = True,
) -> pathlib.Path:
    """Map of the initial sea-surface displacement of the source.

    Parameters
    ----------
    eta : xarray.DataArray
        Vertical displacement [m], positive up, on a grid following the convention.
    out_path : str or os.PathLike
        PNG file to write.
    title : str
        Figure title.
    depth : xarray.DataArray, optional
        Depth grid [m] of the same CRS kind; land is painted and the 0 m contour drawn.
    source_outline, coast_lines : optional
        Fault outlines / coastlines in the grid CRS.
    crop : bool
        Zoom on the deformed area (|eta| >= 1 % of its maximum, padded by half its size).

    Returns
    -------
    pathlib.Path
    """
    _check_grid(eta, "plot_uplift eta")
    e = _values(eta)
    if not np.isfinite(e).any():
        raise InputError("plot_uplift: eta has no finite values")
    if crop:
        eta, depth = _crop_uplift(eta, e, depth)
        e = _values(eta)
    info = _check_grid(eta, "plot_uplift eta")
    fig, ax, geo = _new_map(info, title)
    m = float(np.nanmax(np.abs(e)))
    m = m if m > 0 else 1.0
    norm = mcolors.TwoSlopeNorm(vcenter=0.0, vmin=-m, vmax=m)
    im = ax.imshow(
        e,
        origin="lower",
        extent=_extent(info),
        cmap=_cmap("RdBu_r"),
        norm=norm,
        interpolation="nearest",
        zorder=1,
    )
    handles: list = []
    if depth is not None:
        handles += _shaded_land(ax, depth, info)
    xd, yd = eta.dims[1], eta.dims[0]
    lev = _nice_length(m / 3.0)
    levels = np.concatenate([-np.arange(lev, m + 1e-12, lev)[::-1], np.arange(lev, m + 1e-12, lev)])
    if levels.size:
        ax.contour(eta[xd].values, eta[yd].values, e, levels=levels, colors="0.2", linewidths=0.5, zorder=4)
        handles.append(Line2D([], [], color="0.2", lw=0.6, label=f"Contours every {lev:g} m"))
    if coast_lines is not None and _draw_lines(
        ax, coast_lines, info.geographic, colors="black", linewidths=0.9, zorder=6
    ):
        handles.append(Line2D([], [], color="black", lw=1.0, label="Coastline"))
    if source_outline is not None and _draw_lines(
        ax, source_outline, info.geographic, colors=_OKABE_GREEN, linewidths=1.8, zorder=7, path_effects=_HALO
    ):
        handles.append(Line2D([], [], color=_OKABE_GREEN, lw=1.8, label="Fault outline (surface projection)"))
    handles += _extremes(ax, eta, e)
    cb = _right_colorbar(fig, ax, im)
    cb.set_label("Sea-surface displacement (m), positive up")
    return _finish(fig, out_path, ax=ax, geo=geo, handles=handles, right_cbars=1)


def _crop_uplift(eta: xr.DataArray, e: np.ndarray, depth: xr.DataArray | None):
    """eta (and depth) cut to the deformed area: |eta| >= 1 % of its maximum, padded by half its size."""
    eta = _crop_to_signal(eta, np.abs(np.nan_to_num(e)) >= 0.01 * np.nanmax(np.abs(e)))
    if depth is not None:
        yd0, xd0 = eta.dims
        depth = depth.sel(
            {
                xd0: slice(float(eta[xd0][0]), float(eta[xd0][-1])),
                yd0: slice(float(eta[yd0][0]), float(eta[yd0][-1])),
            }
        )
        if depth.shape[0] < 2 or depth.shape[1] < 2:
            depth = None
    return eta, depth


def _shaded_land(ax, depth: xr.DataArray, info: GridInfo) -> list:
    """Land shaded over the displacement and the coast contour; the land legend entry."""
    handles: list = []
    dinfo = _check_grid(depth, "plot_uplift depth")
    _same_kind(info, dinfo, "plot_uplift depth")
    d = _values(depth)
    land = np.isfinite(d) & (d <= 0)
    if land.any():
        rgba = np.zeros(d.shape + (4,))
        rgba[land] = mcolors.to_rgba(_LAND, alpha=0.55)
        ax.imshow(rgba, origin="lower", extent=_extent(dinfo), interpolation="nearest", zorder=2)
        handles.append(Patch(facecolor=_LAND, alpha=0.55, edgecolor="0.3", label="Land (shaded)"))
    _coast_contour(ax, depth, dinfo)
    return handles


def _extremes(ax, eta: xr.DataArray, e: np.ndarray) -> list:
    """Markers at the largest uplift and subsidence; their legend entries."""
    xd, yd = eta.dims[1], eta.dims[0]
    handles: list = []
    jmax = np.unravel_index(np.nanargmax(e), e.shape)
    jmin = np.unravel_index(np.nanargmin(e), e.shape)
    xs, ys = eta[xd].values, eta[yd].values
    ax.plot(xs[jmax[1]], ys[jmax[0]], marker="^", color="black", markersize=7, zorder=9, linestyle="none")
    ax.plot(xs[jmin[1]], ys[jmin[0]], marker="v", color="black", markersize=7, zorder=9, linestyle="none")
    handles.append(
        Line2D([], [], marker="^", color="black", linestyle="none", label=f"Max uplift {np.nanmax(e):+.2f} m")
    )
    handles.append(
        Line2D(
            [], [], marker="v", color="black", linestyle="none", label=f"Max subsidence {np.nanmin(e):+.2f} m"
        )
    )
    return handles


def _overlap(a: tuple[float, float, float, float], b: tuple[float, float, float, float]) -> float:
    """Overlap area of two boxes ``(x0, y0, x1, y1)``."""
    return max(0.0, min(a[2], b[2]) - max(a[0], b[0])) * max(0.0, min(a[3], b[3]) - max(a[1], b[1]))


def _scatter_labels(fig: Figure, ax, xa: np.ndarray, ya: np.ndarray, labels: Sequence[str], idx,
                    ok: np.ndarray | None = None, avoid: Sequence[Any] = ()) -> None:
    """Point labels placed greedily so that they overlap nothing they would hide.

    Each label tries 12 offsets around its point and takes the first whose box stays inside the
    axes and overlaps no earlier label, no plotted point (``ok``) and none of the artists in
    ``avoid`` (the text box, the legend); then, in a dense cluster, 16 offsets farther out (18 and
    32 points in 8 directions) joined to the point by a thin leader line; when none is free, the
    offset with the least overlap.
    """
    fig.draw_without_rendering()
    to_pt = 72.0 / fig.dpi
    pts = ax.transData.transform(np.column_stack([xa[idx], ya[idx]])) * to_pt
    frame = ax.get_window_extent()
    fx0, fy0, fx1, fy1 = (frame.x0 * to_pt, frame.y0 * to_pt, frame.x1 * to_pt, frame.y1 * to_pt)
    obstacles: list[tuple[float, float, float, float]] = []
    for art in avoid:
        bb = art.get_window_extent()  # a text's rounded box pads it by about 4 points
        obstacles.append((bb.x0 * to_pt - 4.0, bb.y0 * to_pt - 4.0, bb.x1 * to_pt + 4.0, bb.y1 * to_pt + 4.0))
    if ok is not None and ok.any():
        mk = ax.transData.transform(np.column_stack([xa[ok], ya[ok]])) * to_pt
        obstacles += [(x - 3.0, y - 3.0, x + 3.0, y + 3.0) for x, y in mk]
    fs = 7.0
    labelled: list[tuple[float, float, float, float]] = []
    cands = [(4, 3), (4, -10), (-4, 3), (-4, -10), (5, -3.5), (-5, -3.5), (0, 6), (0, -13), (4, 11), (-4, 11),
             (4, -18), (-4, -18)]
    near = len(cands)
    for r in (18.0, 32.0):  # farther out, with a leader line: for labels in a dense cluster
        cands += [(round(r * math.cos(a), 1), round(r * math.sin(a) - 0.5 * 1.15 * 7.0, 1))
                  for a in np.radians([30, -30, 150, -150, 90, -90, 0, 180])]
    for (px, py), i in zip(pts, idx, strict=True):
        text = str(labels[i])
        w, h = 0.62 * fs * len(text), 1.15 * fs

        def box(dx: float, dy: float) -> tuple[float, float, float, float]:
            x0 = px + dx if dx > 0 else (px + dx - w if dx < 0 else px - 0.5 * w)
            return (x0, py + dy, x0 + w, py + dy + h)

        best, cost_best, far = cands[0], math.inf, False
        for j, (dx, dy) in enumerate(cands):
            b = box(dx, dy)
            outside = (b[0] < fx0) or (b[2] > fx1) or (b[1] < fy0) or (b[3] > fy1)
            cost = sum(_overlap(b, o) for o in labelled) * 4.0 + sum(_overlap(b, o) for o in obstacles) \
                + (1e6 if outside else 0.0)
            if cost < cost_best:
                best, cost_best, far = (dx, dy), cost, j >= near
            if cost == 0.0:
                break
        dx, dy = best
        labelled.append(box(dx, dy))
        ax.annotate(
            text,
            (xa[i], ya[i]),
            xytext=(dx, dy),
            textcoords="offset points",
            fontsize=fs,
            ha="left" if dx > 0 else ("right" if dx < 0 else "center"),
            va="bottom",
            zorder=7,
            arrowprops={"arrowstyle": "-", "lw": 0.5, "color": "0.35", "shrinkA": 0.0, "shrinkB": 2.5}
            if far else None,
        )


def _plain_log_ticks(axis, lo: float, hi: float) -> None:
    """Log-axis ticks at 1, 2, 5 x 10^n (fewer for wide ranges) labelled as plain numbers."""
    from matplotlib.ticker import LogLocator

    decades = math.log10(max(hi, 1e-300) / max(lo, 1e-300))
    subs = (1.0, 2.0, 5.0) if decades <= 3 else ((1.0, 3.0) if decades <= 5 else (1.0,))
    axis.set_major_locator(LogLocator(base=10.0, subs=subs))
    axis.set_minor_locator(LogLocator(base=10.0, subs=tuple(range(2, 10)) if decades <= 5 else ()))
    axis.set_major_formatter(FuncFormatter(lambda v, _: f"{v:g}"))
    axis.set_minor_formatter(NullFormatter())


def _crop_to_signal(da: xr.DataArray, mask: np.ndarray) -> xr.DataArray:
    """Sub-grid around the True cells of ``mask``, padded by half the box size each side."""
    if not mask.any():
        return da
    rows = np.flatnonzero(mask.any(axis=1))
    cols = np.flatnonzero(mask.any(axis=0))
    r0, r1 = rows[0], rows[-1]
    c0, c1 = cols[0], cols[-1]
    pr = max(int(0.5 * (r1 - r0 + 1)), 3)
    pc = max(int(0.5 * (c1 - c0 + 1)), 3)
    ny, nx = mask.shape
    r0, r1 = max(r0 - pr, 0), min(r1 + pr, ny - 1)
    c0, c1 = max(c0 - pc, 0), min(c1 + pc, nx - 1)
    out = da.isel({da.dims[0]: slice(r0, r1 + 1), da.dims[1]: slice(c0, c1 + 1)})
    if out.shape[0] < 2 or out.shape[1] < 2:
        return da
    if "lon_periodic" in out.attrs and out.shape[1] < da.shape[1]:
        out.attrs["lon_periodic"] = 0
    return out


# --------------------------------------------------------------------------------------
# agreement scatter (ray ranking vs. another estimate, or scenario vs. scenario)
# --------------------------------------------------------------------------------------


#: On log agreement scatters, values below this fraction of the smaller median are drawn on the
#: axis edge (ringed) instead of stretching the axes: the wave check's faint-wave fraction.
AGREEMENT_FLOOR: float = FAINT_WAVE_FRACTION


def _floor_clip(xa: np.ndarray, ya: np.ndarray, ok: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Values below ``AGREEMENT_FLOOR`` times the smaller median raised to that floor; the raised points."""
    floor = AGREEMENT_FLOOR * float(min(np.median(xa[ok]), np.median(ya[ok])))
    clipped = ok & ((xa < floor) | (ya < floor))
    if clipped.any():
        xa = np.where(ok, np.maximum(xa, floor), xa)
        ya = np.where(ok, np.maximum(ya, floor), ya)
    return xa, ya, clipped


@_styled
def plot_agreement(
    x: Sequence[float] | np.ndarray,
    y: Sequence[float] | np.ndarray,
    *,
    out_path: str | os.PathLike,
    xlabel: str,
    ylabel: str,
    title: str = "Agreement between two estimates per coastline segment",
    labels: Sequence[str] | None = None,
    highlight: Sequence[bool] | None = None,
    log: bool = True,
    annotate: str | None = None,
    top_x: Sequence[bool] | None = None,
    top_y: Sequence[bool] | None = None,
    top_names: tuple[str, str] = ("x", "y"),
) -> pathlib.Path:
    """Scatter of two per-segment quantities with a 1:1 line (e.g. ray vs. wave solution).

    Parameters
    ----------
    x, y : array-like
        The two quantities, one value per segment (same units if a 1:1 line is meaningful).
    out_path : str or os.PathLike
        PNG file to write.
    xlabel, ylabel : str
        Axis labels with units.
    title : str
        Figure title.
    labels : sequence of str, optional
        Point labels; only highlighted points are labelled.
    highlight : sequence of bool, optional
        Points drawn prominently (e.g. top-k of either ranking).
    log : bool
        Log-log axes (positive values only).
    annotate : str, optional
        Text box in the upper left (e.g. "Spearman 0.82, top-10 overlap 7/10").
    top_x, top_y : sequence of bool, optional
        Top sets of the two rankings: points in both, in one only and in neither are drawn in
        distinct colours and marker shapes (Okabe-Ito), their labels beside the top points;
        ``highlight`` is then ignored.
    top_names : (str, str)
        Names of the two rankings in the legend.

    Returns
    -------
    pathlib.Path
    """
    xa = np.asarray(x, dtype=float)
    ya = np.asarray(y, dtype=float)
    if xa.shape != ya.shape or xa.ndim != 1:
        raise InputError(
            f"plot_agreement: x and y must be 1-D of equal length, got {xa.shape} and {ya.shape}"
        )
    ok = np.isfinite(xa) & np.isfinite(ya)
    if log:
        ok &= (xa > 0) & (ya > 0)
    if not ok.any():
        raise InputError("plot_agreement: no finite (and, for log axes, positive) pairs to plot")
    fig, ax = _new_chart((6.4, 6.0), title)
    # on log axes, values far below the rest (a segment the wave barely reached) would squeeze
    # every other point into a corner: they are drawn on the axis edge, ringed
    clipped = np.zeros_like(ok)
    if log:
        xa, ya, clipped = _floor_clip(xa, ya, ok)
    if top_x is not None and top_y is not None:
        hl = _scatter_top_sets(ax, xa, ya, ok, top_x, top_y, top_names)
    else:
        hl = _scatter_highlighted(ax, xa, ya, ok, highlight)
    if clipped.any():
        ax.scatter(xa[clipped], ya[clipped], s=70, facecolors="none", edgecolors="black", lw=0.9, zorder=6,
                   label=f"below {100 * AGREEMENT_FLOOR:g} % of the median, drawn on the axis ({int(clipped.sum())})")
    lo, hi = _one_to_one_limits(ax, xa[ok], ya[ok], log)
    ax.plot([lo, hi], [lo, hi], color="black", linestyle="--", lw=1.0, label="1:1", zorder=1)
    ax.set_xlim(lo, hi)
    ax.set_ylim(lo, hi)
    ax.set_xlabel(xlabel)
    ax.set_ylabel(ylabel)
    ax.grid(True, color="0.9", linewidth=0.6)
    avoid = _corner_boxes(fig, ax, xa[ok], ya[ok], annotate)
    if labels is not None and (ok & hl).any():
        # labels placed last, around the text box and the legend (which must not hide them)
        _scatter_labels(fig, ax, xa, ya, labels, np.flatnonzero(ok & hl), ok=ok, avoid=avoid)
    return _finish(fig, out_path, ax=ax)


def _along_coast_km(segments: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """Mid-segment distance along the coastline [km] in table order, and the coastline line of each.

    Lines follow one another with a gap of 3 % of the total length between them, so a profile
    drawn against this distance breaks where one coastline piece ends and the next begins.
    """
    from ..coast.tubes import _Arcs

    arcs = _Arcs.build(segments)
    gap = 0.03 * float(np.sum(arcs.perimeter))
    offset = np.concatenate([[0.0], np.cumsum(arcs.perimeter + gap)[:-1]])
    return (offset[arcs.line] + 0.5 * (arcs.a + arcs.b)) / 1e3, arcs.line


@_styled
def plot_check_profile(
    table: pd.DataFrame,
    segments: pd.DataFrame,
    out_path: str | os.PathLike,
    *,
    k: int = 10,
    title: str = "Along the coast: ray screening vs linear long-wave check",
) -> pathlib.Path:
    """Amplitude and lensing factor of rays and wave along the coast, one panel each.

    A scatter shows whether the two rankings agree; this profile shows where they do not - a
    hotspot the wave puts one or two segments away, a stretch where the rays see too little
    contrast. Only the segments the check ranked are drawn; each ranking's top ``k`` is marked.

    Parameters
    ----------
    table : pandas.DataFrame
        The check's table (:class:`~tsunamifocus.studies.check.WaveCheck`): ``segment_id``,
        ``ranked``, ``ray_value``, ``wave_amp_stop_m`` and, when the run had a reference,
        ``ray_lensing``, ``wave_lensing`` (drawn where ``ranked_lensing``, when present).
    segments : pandas.DataFrame
        The run's segments table (``segment_id``, ``geometry``, ``length_m``), in coastline order.
    out_path : str or os.PathLike
        PNG file to write.
    k : int
        Size of the marked top sets.
    title : str
        Figure title.

    Returns
    -------
    pathlib.Path
    """
    need = {"segment_id", "geometry", "length_m"}
    if not need <= set(segments.columns):
        raise InputError(f"plot_check_profile: the segments table needs the columns {sorted(need)}")
    along, line = _along_coast_km(segments)
    pos = pd.DataFrame({"along": along, "line": line}, index=segments["segment_id"].astype(str).to_numpy())
    t = table.copy()
    t.index = t["segment_id"].astype(str).to_numpy()
    t = t[t["ranked"].fillna(False).astype(bool).to_numpy()] if "ranked" in t else t
    t = t.join(pos, how="inner").sort_values("along")
    if t.empty:
        raise InputError("plot_check_profile: no ranked segment of the check is in the segments table")
    panels = [("ray_value", "wave_amp_stop_m", "Amplitude at the stop isobath [m]")]
    if {"ray_lensing", "wave_lensing"} <= set(t.columns) and t["ray_lensing"].notna().any():
        panels.append(("ray_lensing", "wave_lensing", "Lensing factor (energy ratio) [-]"))
    fig = Figure(figsize=(9.0, 2.4 + 2.3 * len(panels)), dpi=DPI, layout="constrained")
    axes = fig.subplots(len(panels), 1, sharex=True, squeeze=False)[:, 0]
    axes[0].set_title(title, fontsize=plt_rc["axes.titlesize"], loc="left")
    # a break between coastline pieces: NaN rows between lines
    brk = np.flatnonzero(np.diff(t["line"].to_numpy()) != 0)
    for ax, (rc, wc, ylab) in zip(axes, panels, strict=True):
        x = t["along"].to_numpy(float)
        yr, yw = t[rc].to_numpy(float), t[wc].to_numpy(float)
        if rc == "ray_lensing" and "ranked_lensing" in t:  # the lensing ranking's own segments
            lens_ok = t["ranked_lensing"].fillna(False).astype(bool).to_numpy()
            yr, yw = np.where(lens_ok, yr, np.nan), np.where(lens_ok, yw, np.nan)
            if not lens_ok.all():  # say why a stretch of the panel is empty
                ax.text(0.99, 0.04, f"{int((~lens_ok).sum())} segments ranked by amplitude only (too few rays "
                        "over the reference ocean)", transform=ax.transAxes, ha="right", va="bottom", fontsize=7.5,
                        color="0.3")
        xs, rs, ws = (np.insert(v, brk + 1, np.nan) for v in (x, yr, yw))
        ax.plot(xs, rs, color=_OKABE_BLUE, lw=1.4, marker="o", ms=2.5, label="rays")
        ax.plot(xs, ws, color=_OKABE_VERMILLION, lw=1.2, ls="--", marker="s", ms=2.5, label="wave check")
        kk = min(int(k), int(np.isfinite(yr).sum()), int(np.isfinite(yw).sum()))
        if kk > 0:
            tr, tw = topk_mask(yr, kk), topk_mask(yw, kk)
            ax.scatter(x[tr], yr[tr], s=46, marker="^", color=_OKABE_BLUE, edgecolor="black", lw=0.5, zorder=5,
                       label=f"top {kk} by rays")
            ax.scatter(x[tw], yw[tw], s=40, marker="s", color=_OKABE_VERMILLION, edgecolor="black", lw=0.5,
                       zorder=5, label=f"top {kk} by wave")
        both = np.concatenate([yr, yw])
        both = both[np.isfinite(both)]
        if both.size and np.all(both > 0):
            ax.set_yscale("log")
            _plain_log_ticks(ax.yaxis, float(both.min()), float(both.max()))
        ax.set_ylabel(ylab)
        ax.grid(True, color="0.9", linewidth=0.6)
    axes[-1].set_xlabel("Distance along the coastline [km] (table order; gaps separate coastline pieces)")
    # segment names at a few places along the top panel
    step = max(1, len(t) // 8)
    sec = axes[0].secondary_xaxis("top")
    sec.set_xticks(t["along"].to_numpy(float)[::step], labels=[str(v) for v in t.index[::step]], fontsize=7)
    # one legend for both panels, below them, where it hides no curve
    handles, _ = axes[0].get_legend_handles_labels()
    return _finish(fig, out_path, handles=handles)


def _corner_boxes(fig: Figure, ax, x: np.ndarray, y: np.ndarray, annotate: str | None) -> list:
    """The statistics box and the legend, in the two corners that hide the fewest points.

    Points of a 1:1 scatter lie along the diagonal, so the upper-left / lower-right pair usually
    suits and is tried first; every other pair of distinct corners is tried when it hides points.
    Returns the two artists (for the labels to avoid).
    """
    pts = ax.transData.transform(np.column_stack([x, y]))
    where = {"upper left": (0.03, 0.97, "top", "left"), "lower right": (0.97, 0.03, "bottom", "right"),
             "upper right": (0.97, 0.97, "top", "right"), "lower left": (0.03, 0.03, "bottom", "left")}
    corners = list(where)
    pairs = [(b, lg) for b in corners for lg in corners if b != lg]

    def draw(box_at: str, legend_at: str) -> list:
        arts = []
        if annotate:
            tx, ty, va, ha = where[box_at]
            arts.append(ax.text(tx, ty, annotate, transform=ax.transAxes, va=va, ha=ha, fontsize=8.5, zorder=8,
                                bbox=dict(facecolor="white", edgecolor="0.6", boxstyle="round,pad=0.4")))
        arts.append(ax.legend(loc=legend_at, fontsize=8))
        return arts

    best: tuple[int, tuple[str, str]] | None = None
    for pair in pairs:
        arts = draw(*pair)
        fig.draw_without_rendering()
        hidden = 0
        for a in arts:
            bb = a.get_window_extent().padded(6.0)
            hidden += int(np.sum((pts[:, 0] >= bb.x0) & (pts[:, 0] <= bb.x1) & (pts[:, 1] >= bb.y0)
                                 & (pts[:, 1] <= bb.y1)))
        for a in arts:
            a.remove()
        if best is None or hidden < best[0]:
            best = (hidden, pair)
        if hidden == 0:
            break
    return draw(*best[1])


def _scatter_top_sets(ax, xa, ya, ok, top_x, top_y, top_names) -> np.ndarray:
    """Points in both top sets, in one only and in neither, in distinct colours and shapes; the union."""
    tx, ty = np.asarray(top_x, dtype=bool), np.asarray(top_y, dtype=bool)
    hl = tx | ty
    nx_, ny_ = top_names
    k = int(max(tx.sum(), ty.sum()))
    for sel, lab, col, mk, sz, z in (
        (~hl, "other segments", "0.55", "o", 18, 2),
        (tx & ~ty, f"top {k} by {nx_} only", _OKABE_VERMILLION, "^", 40, 3),
        (ty & ~tx, f"top {k} by {ny_} only", _OKABE_SKY, "s", 36, 4),
        (tx & ty, f"top {k} in both", _OKABE_BLUE, "D", 40, 5),
    ):
        if (ok & sel).any():
            ax.scatter(xa[ok & sel], ya[ok & sel], s=sz, color=col, marker=mk, edgecolor="black", lw=0.4,
                       label=f"{lab} ({int((ok & sel).sum())})", zorder=z)
    return hl


def _scatter_highlighted(ax, xa, ya, ok, highlight) -> np.ndarray:
    """Grey points, the highlighted ones in vermillion; the highlight mask."""
    hl = np.zeros_like(ok) if highlight is None else np.asarray(highlight, dtype=bool)
    ax.scatter(xa[ok & ~hl], ya[ok & ~hl], s=18, color="0.55", edgecolor="none", label="Segments", zorder=2)
    if (ok & hl).any():
        ax.scatter(
            xa[ok & hl],
            ya[ok & hl],
            s=36,
            color=_OKABE_VERMILLION,
            edgecolor="black",
            lw=0.5,
            label="Highlighted",
            zorder=3,
        )
    return hl


def _one_to_one_limits(ax, xv: np.ndarray, yv: np.ndarray, log: bool) -> tuple[float, float]:
    """Shared axis limits around both samples (log axes with plain tick labels, or 5 % padding)."""
    lo = min(xv.min(), yv.min())
    hi = max(xv.max(), yv.max())
    if log:
        ax.set_xscale("log")
        ax.set_yscale("log")
        lo, hi = lo / 1.3, hi * 1.3
        _plain_log_ticks(ax.xaxis, lo, hi)
        _plain_log_ticks(ax.yaxis, lo, hi)
    else:
        pad = 0.05 * (hi - lo if hi > lo else 1.0)
        lo, hi = lo - pad, hi + pad
    return lo, hi


@_styled
def plot_oceans(
    ray_depth: xr.DataArray,
    reference_depth: xr.DataArray,
    *,
    out_path: str | os.PathLike,
    period_s: float,
    reference_smooth_km: float,
    title: str = "The two oceans of the lensing factor",
) -> pathlib.Path:
    """Side by side: the sea floor as the dominant-period wave sees it, and the lensing reference.

    Parameters
    ----------
    ray_depth : xarray.DataArray
        Depth [m] the rays of the dominant band were traced on (wavelength-smoothed real ocean).
    reference_depth : xarray.DataArray
        The lensing reference [m] (offshore relief smoothed over ``reference_smooth_km``, a deep-water
        wavelength by default; shelf and coast kept), as the same wave sees it (what the reference
        rays were traced on).
    out_path : path-like
        PNG file to write.
    period_s : float
        Dominant period [s] (for the panel title).
    reference_smooth_km : float
        Low-pass scale of the reference [km] (for the panel title).
    title : str
        Figure title.

    Returns
    -------
    pathlib.Path
    """
    info = _check_grid(ray_depth, "plot_oceans ray_depth")
    _same_kind(info, _check_grid(reference_depth, "plot_oceans reference_depth"), "plot_oceans reference_depth")
    xmin, xmax, ymin, ymax = _extent(info)
    aspect = 1.0 / max(math.cos(math.radians(0.5 * (ymin + ymax))), 0.05) if info.geographic else 1.0
    ratio = (ymax - ymin) * aspect / max(xmax - xmin, 1e-12)
    w = 11.0
    fig = Figure(figsize=(w, float(np.clip((w - 1.6) / 2 * ratio + 1.6, 3.5, 10.0))), dpi=DPI, layout="constrained")
    axes = fig.subplots(1, 2, sharey=True)
    vmax = float(np.nanpercentile(_values(ray_depth)[_values(ray_depth) > 0], 99.5)) / 1000.0
    panels = ((ray_depth, f"Sea floor as a {period_s / 60:.0f}-min wave sees it (rays traced here)"),
              (reference_depth, f"Lensing reference as this wave sees it: relief smoothed over {reference_smooth_km:.0f} km"))
    for ax, (d, label) in zip(axes, panels):
        v = _values(d)
        im = ax.imshow(np.where(v > 0, v / 1000.0, np.nan), origin="lower", extent=_extent(info),
                       cmap=_cmap("viridis_r"), vmin=0.0, vmax=vmax, interpolation="nearest", zorder=1)
        land = np.isfinite(v) & (v <= 0)
        rgba = np.zeros(v.shape + (4,))
        rgba[land] = mcolors.to_rgba(_LAND)
        ax.imshow(rgba, origin="lower", extent=_extent(info), interpolation="nearest", zorder=2)
        ax.contour(d[d.dims[1]].values, d[d.dims[0]].values, v, levels=[200.0, 1000.0, 3000.0], colors="0.15",
                   linewidths=[0.5, 0.5, 0.5], linestyles=[":", "--", "-"], zorder=3)
        ax.set_title(label, fontsize=9.5, loc="left")
        ax.set_aspect(aspect)
        if not info.geographic:
            km = FuncFormatter(lambda t, _: f"{t / 1000.0:g}")
            ax.xaxis.set_major_formatter(km)
            ax.yaxis.set_major_formatter(km)
            ax.set_xlabel("Easting (km)")
        else:
            ax.set_xlabel("Longitude (deg)")
    axes[0].set_ylabel("Northing (km)" if not info.geographic else "Latitude (deg)")
    cb = fig.colorbar(im, ax=list(axes), shrink=0.85, pad=0.01)
    cb.set_label("Depth (km)")
    fig.suptitle(f"{title}\nisobaths: 200 m dotted, 1000 m dashed, 3000 m solid", fontsize=plt_rc["axes.titlesize"],
                 x=0.01, ha="left")
    fig.text(0.5, 0.004, CAUTION_FOOTER, ha="center", va="bottom", fontsize=7.5, color="0.25", style="italic")
    engine = fig.get_layout_engine()
    if engine is not None:
        foot = 0.22 / fig.get_size_inches()[1]
        engine.set(rect=(0.0, foot, 1.0, 1.0 - foot))
    return _save_png(fig, out_path, title)


def _isochrone_label(minutes: float) -> str:
    h, m = divmod(int(round(minutes)), 60)
    return f"{h} h" if m == 0 else (f"{m} min" if h == 0 else f"{h} h {m:02d}")


@_styled
def plot_travel_time(
    travel_time_s: xr.DataArray,
    depth: xr.DataArray,
    levels_min: Sequence[tuple[float, bool]],
    *,
    out_path: str | os.PathLike,
    title: str = "First-arrival travel time and isochrones",
    source_outline: Any = None,
    points: Sequence[tuple[str, float, float]] | None = None,
) -> pathlib.Path:
    """Map of the first-arrival travel time with labelled isochrones.

    Parameters
    ----------
    travel_time_s : xarray.DataArray
        First-arrival time [s] (eikonal solver); NaN on barriers.
    depth : xarray.DataArray
        Depth [m] of the same grid (land and water shallower than the stop isobath painted).
    levels_min : sequence of (float, bool)
        Isochrone times [min] and whether each is an hourly line
        (:func:`tsunamifocus.propagation.traveltime.isochrone_levels`): hourly lines bold and
        labelled, the finer ones thin (labelled when there are few lines).
    out_path : str or os.PathLike
        PNG file to write.
    title : str
        Figure title.
    source_outline : optional
        Fault outlines in the grid CRS.
    points : sequence of (name, x, y), optional
        Points of interest in the grid CRS, marked and named.

    Returns
    -------
    pathlib.Path
    """
    info = _check_grid(travel_time_s, "plot_travel_time travel_time_s")
    _same_kind(info, _check_grid(depth, "plot_travel_time depth"), "plot_travel_time depth")
    t_h = _values(travel_time_s) / 3600.0
    if not np.isfinite(t_h).any():
        raise InputError("plot_travel_time: travel_time_s has no finite values")
    fig, ax, geo = _new_map(info, title)
    tmax = float(np.nanmax(t_h))
    # the colour bar in minutes for short crossings, in hours beyond 3 h
    unit, k = ("min", 60.0) if tmax < 3.0 else ("h", 1.0)
    cmap = _cmap("viridis").with_extremes(bad=(0.0, 0.0, 0.0, 0.0))
    im = ax.imshow(np.ma.masked_invalid(t_h * k), origin="lower", extent=_extent(info), cmap=cmap, vmin=0.0,
                   vmax=max(tmax * k, 1e-6), interpolation="nearest", zorder=1, alpha=0.85)
    handles = _land_and_coast(ax, depth, info)
    xd, yd = travel_time_s.dims[1], travel_time_s.dims[0]
    xs, ys = travel_time_s[xd].values, travel_time_s[yd].values
    tm = t_h * 60.0
    hourly = [m for m, h in levels_min if h]
    finer = [m for m, h in levels_min if not h]
    label_finer = len(levels_min) <= 12
    # no labels under the north arrow (top right) or the scale bar (bottom left)
    inner = _label_free(ax, info, xs, ys)
    if finer:
        ax.contour(xs, ys, tm, levels=finer, colors="white", linewidths=0.6, zorder=5)
        if label_finer:
            cs = ax.contour(xs, ys, np.where(inner, tm, np.nan), levels=finer, colors="none", linewidths=0.0)
            for lab in ax.clabel(cs, fmt=_isochrone_label, fontsize=7.0, inline=False, colors="white"):
                lab.set_path_effects([patheffects.withStroke(linewidth=2.0, foreground="0.15")])
                lab.set_color("white")
        step = min(np.diff(sorted([0.0, *finer, *hourly]))) if len(finer) else 0.0
        handles.append(Line2D([], [], color="white", lw=0.9, label=f"Isochrone every {step:g} min",
                              path_effects=[patheffects.withStroke(linewidth=2.4, foreground="0.35")]))
    if hourly:
        ax.contour(xs, ys, tm, levels=hourly, colors="black", linewidths=1.3, zorder=6)
        # labels in deep water only: on shelves the isochrones bunch up and their labels would pile
        dv = _values(depth)
        deep = np.isfinite(dv) & (dv > 200.0) & inner  # beyond the shelf break (common practice, no source)
        t_in = np.where(inner, tm, np.nan)
        lab_t = np.where(deep, tm, np.nan)
        on_deep = [lv for lv in hourly if np.nanmin(lab_t, initial=np.inf) < lv < np.nanmax(lab_t, initial=-np.inf)]
        for field, lvs in ((lab_t, on_deep), (t_in, [lv for lv in hourly if lv not in on_deep])):
            if not lvs or not np.isfinite(field).any():
                continue
            cl = ax.contour(xs, ys, field, levels=lvs, colors="none", linewidths=0.0, zorder=6)
            for lab in ax.clabel(cl, fmt=_isochrone_label, fontsize=8.0, inline=False, colors="black"):
                lab.set_path_effects(_HALO)
        handles.append(Line2D([], [], color="black", lw=1.3, label="Isochrone every hour"))
    if source_outline is not None and _draw_lines(
        ax, source_outline, info.geographic, colors=_OKABE_GREEN, linewidths=1.8, zorder=8, path_effects=_HALO
    ):
        handles.append(Line2D([], [], color=_OKABE_GREEN, lw=1.8, label="Fault outline"))
    if points:
        x0, x1 = _extent(info)[:2]
        for name, px, py in points:
            ax.plot([px], [py], marker="o", ms=5, mfc="white", mec="black", zorder=9)
            right = (px - x0) > 0.6 * (x1 - x0)  # names of points near the right edge go to their left
            ax.annotate(str(name), (px, py), xytext=(-6 if right else 6, 4), textcoords="offset points",
                        ha="right" if right else "left", fontsize=7.5, zorder=9, path_effects=_HALO)
        handles.append(Line2D([], [], ls="none", marker="o", ms=5, mfc="white", mec="black",
                              label="Point of interest"))
    cb = _right_colorbar(fig, ax, im)
    cb.set_label(f"First-arrival travel time ({unit})\n(eikonal, fast marching)")
    return _finish(fig, out_path, ax=ax, geo=geo, handles=handles, right_cbars=1)
