"""The colour scales of the layers: one definition for the figures and for the GIS style files.

The figures (:mod:`tsunamifocus.products.figures`) draw the lensing factor, the ray energy and
the travel time with the scales built here, and the GIS writers (:mod:`tsunamifocus.io.gis`)
put the same scales into style files a GIS loads by itself: a QGIS ``.qml`` beside each GeoTIFF
and a default style (QML and SLD) for the segments layer of the GeoPackage (table
``layer_styles``). So a GIS shows the same colours, classes and legend as the figures.

A :class:`ColourScale` is a matplotlib colour map (by name) with a normalisation (logarithmic
between ``vmin`` and ``vmax``, or classes), the legend values (``ticks``) and their labels.
Colours are looked up in matplotlib's colour map itself, so the figures and the style files
cannot drift apart.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from xml.sax.saxutils import escape, quoteattr

import numpy as np
from matplotlib import colormaps

from ..cautions import caution_text

__all__ = [
    "ColourScale", "lensing_scale", "energy_scale", "travel_time_scale", "scale_for_layer",
    "symmetric_log_range", "log_ticks", "tick_label", "three_digits", "nice_time_step",
    "raster_qml", "segments_qml", "segments_sld", "NO_VALUE_COLOUR", "SEGMENT_WIDTH_PT", "SEGMENT_CASING_PT",
]

#: Colour of a segment without a value (no rays, or a non-positive lensing factor): matplotlib grey "0.6".
NO_VALUE_COLOUR = (0.6, 0.6, 0.6, 1.0)
#: Line width of a coloured coast segment and of its black casing [pt] (the lensing map's lines).
SEGMENT_WIDTH_PT = 4.0
SEGMENT_CASING_PT = 6.0
#: Lensing-factor half-ranges r of the symmetric log scale [1/r, r] and their legend values.
_LOG_STEPS = (1.5, 2.0, 3.0, 5.0, 10.0, 20.0, 50.0, 100.0)
_LOG_TICK_BASE = (1.0, 1.5, 2.0, 3.0, 5.0, 10.0, 20.0, 50.0, 100.0)
_TIME_STEPS_MIN = (1, 2, 5, 10, 15, 20, 30, 60, 120, 180, 240, 360, 720)


def _finite_pos(a: np.ndarray) -> np.ndarray:
    a = np.asarray(a, dtype=float)
    return a[np.isfinite(a) & (a > 0)]


def symmetric_log_range(values: Sequence[np.ndarray]) -> float:
    """Half-range r (> 1) of a log colour scale [1/r, r] covering the 2-98 % of the data."""
    allv = np.concatenate([_finite_pos(v).ravel() for v in values]) if values else np.array([])
    if allv.size == 0:
        return 2.0
    lg = np.abs(np.log10(allv))
    m = float(np.percentile(lg, 98.0))
    for r in _LOG_STEPS:
        if math.log10(r) >= m:
            return r
    return 100.0


def log_ticks(r: float) -> list[float]:
    """Legend values of the symmetric log scale [1/r, r]: 1/r ... 1 ... r."""
    up = [b for b in _LOG_TICK_BASE if b <= r * 1.0001]
    if len(up) > 5:
        up = [b for b in up if b in (1.0, 2.0, 5.0, 10.0, 20.0, 50.0, 100.0) or b == up[-1]]
    down = sorted({1.0 / b for b in up if b > 1.0})
    return down + up


def tick_label(v: float) -> str:
    """Legend label of a value: ``5``, ``1.5``, ``0.67``, ``0.2``."""
    if v >= 1:
        return f"{v:g}"
    return f"{v:.2f}".rstrip("0").rstrip(".")


def three_digits(v: float) -> str:
    """Three significant digits, trailing zeros kept, whole numbers from 100: ``5.40``, ``13.0``, ``123``.

    One rule for the values of a ranking (the ranking chart, the appendix's ranked table), so a
    column of values reads alike (5.40 beside 5.47, not 5.4).
    """
    return f"{v:.0f}" if abs(v) >= 100 else f"{v:#.3g}"


def nice_time_step(tmax_min: float) -> float:
    """Travel-time contour / class interval [min]: at most 12 steps over ``tmax_min``."""
    for s in _TIME_STEPS_MIN:
        if tmax_min / s <= 12:
            return float(s)
    return 1440.0


@dataclass(frozen=True)
class ColourScale:
    """A colour scale as the figures draw it.

    Attributes
    ----------
    layer : str
        Layer the scale is for (``lensing_factor``, ``energy``, ``travel_time_min``).
    title : str
        Legend title (with units).
    cmap : str
        matplotlib colour map name.
    kind : {"log", "classes"}
        ``log``: colour = cmap(log-normalised value between ``vmin`` and ``vmax``), values
        beyond the ends take the end colours (the figures' colour bars extend both ways);
        ``classes``: one colour per class between consecutive ``ticks`` (class centre).
    vmin, vmax : float
        Ends of the scale.
    ticks : tuple of float
        Legend values (colour-bar ticks; class bounds for ``classes``).
    labels : tuple of str
        Legend labels of ``ticks``.
    alpha : tuple (a0, a1, gamma) or None
        Opacity a0 + a1 t**gamma at normalised value t (the ray-energy overlay), else opaque.
    """

    layer: str
    title: str
    cmap: str
    kind: str
    vmin: float
    vmax: float
    ticks: tuple[float, ...]
    labels: tuple[str, ...]
    alpha: tuple[float, float, float] | None = field(default=None)

    def normalise(self, values: np.ndarray | float) -> np.ndarray:
        """Position t of values on the scale, clipped to [0, 1] (NaN stays NaN)."""
        v = np.asarray(values, dtype=float)
        if self.kind == "log":
            with np.errstate(invalid="ignore", divide="ignore"):
                t = (np.log10(v) - math.log10(self.vmin)) / (math.log10(self.vmax) - math.log10(self.vmin))
        else:
            t = (v - self.vmin) / (self.vmax - self.vmin)
        return np.clip(t, 0.0, 1.0)

    def rgba(self, values: np.ndarray | float) -> np.ndarray:
        """RGBA (0..1) of values, as the figures colour them; NaN or non-positive (log) -> NaN."""
        v = np.asarray(values, dtype=float)
        if self.kind == "classes":
            edges = np.asarray(self.ticks, dtype=float)
            idx = np.clip(np.searchsorted(edges, v, side="left") - 1, 0, len(edges) - 2)
            t = (idx + 0.5) / (len(edges) - 1)
        else:
            t = self.normalise(v)
        out = np.array(colormaps[self.cmap](np.nan_to_num(t, nan=0.0)), dtype=float)
        if self.alpha is not None:
            a0, a1, g = self.alpha
            out[..., 3] = a0 + a1 * np.nan_to_num(t, nan=0.0) ** g
        bad = ~np.isfinite(v) | ~np.isfinite(t) | ((v <= 0) if self.kind == "log" else False)
        out[bad] = np.nan
        return out

    def classes(self) -> list[tuple[float, float, str, tuple[float, float, float, float]]]:
        """Legend classes ``(lower, upper, label, rgba)`` covering all values (open ends at 0 and inf).

        ``log``: below the first tick, between consecutive ticks (coloured at their geometric
        mean), above the last tick. ``classes``: between consecutive ticks.
        """
        t = list(self.ticks)
        out = []
        if self.kind == "classes":
            for i, (a, b) in enumerate(zip(t[:-1], t[1:], strict=True)):
                rgba = tuple(float(c) for c in colormaps[self.cmap]((i + 0.5) / (len(t) - 1)))
                out.append((a, b, f"{tick_label(a)} - {tick_label(b)}", rgba))
            return out
        out.append((0.0, t[0], f"< {tick_label(t[0])}", tuple(float(c) for c in self.rgba(t[0]))))
        for a, b in zip(t[:-1], t[1:], strict=True):
            mid = math.sqrt(a * b)
            out.append((a, b, f"{tick_label(a)} - {tick_label(b)}", tuple(float(c) for c in self.rgba(mid))))
        out.append((t[-1], math.inf, f"> {tick_label(t[-1])}", tuple(float(c) for c in self.rgba(t[-1]))))
        return out


def lensing_scale(raster: np.ndarray | None, segment_values: np.ndarray | None = None,
                  layer: str = "lensing_factor") -> ColourScale:
    """Build the lensing map's scale: diverging ``PuOr_r``, log, symmetric about 1, [1/r, r].

    r covers the raster's 2-98 % and three quarters of the segment values (the few strongest
    segments may saturate at the ends; the colour bar's arrows show it).
    """
    r = symmetric_log_range([raster]) if raster is not None else 2.0
    pos = _finite_pos(segment_values) if segment_values is not None else np.array([])
    if pos.size:
        m = float(np.percentile(np.abs(np.log10(pos)), 75.0))
        r = max(r, symmetric_log_range([np.array([10.0**m])]))
    ticks = log_ticks(r)
    name = "Lensing factor" if layer.startswith("lensing") else "Focusing factor"
    return ColourScale(layer=layer, title=f"{name} (-), log scale; 1 = no focusing", cmap="PuOr_r",
                       kind="log", vmin=1.0 / r, vmax=r, ticks=tuple(ticks),
                       labels=tuple(tick_label(v) for v in ticks))


def energy_scale(energy: np.ndarray) -> ColourScale | None:
    """Build the ray-field map's energy scale; None if there is no positive value.

    ``magma_r``, log from the 5 % (at least max/1e4) to the 99.5 % of the positive values,
    opacity 0.15 + 0.85 t**0.8 over the bathymetry.
    """
    pos = _finite_pos(energy)
    if not pos.size:
        return None
    vmax = float(np.percentile(pos, 99.5))
    vmin = max(float(np.percentile(pos, 5.0)), vmax * 1e-4)
    if not vmax > vmin:
        vmin = vmax / 10.0
    decades = [10.0**k for k in range(math.ceil(math.log10(vmin)), math.floor(math.log10(vmax)) + 1)]
    ticks = sorted({vmin, *decades, vmax})
    return ColourScale(layer="energy", title="Ray energy per unit wavefront width (J m-1), log scale",
                       cmap="magma_r", kind="log", vmin=vmin, vmax=vmax, ticks=tuple(ticks),
                       labels=tuple(f"{v:.3g}" for v in ticks), alpha=(0.15, 0.85, 0.8))


def travel_time_scale(travel_time_min: np.ndarray) -> ColourScale | None:
    """Build travel-time classes [min]; None if there is no value.

    Classes at the lensing map's contour interval (:func:`nice_time_step`), coloured ``viridis``
    from early to late.
    """
    t = np.asarray(travel_time_min, dtype=float)
    t = t[np.isfinite(t)]
    if not t.size:
        return None
    tmin, tmax = float(t.min()), float(t.max())
    step = nice_time_step(tmax - max(tmin, 0.0))
    lo = math.floor(max(tmin, 0.0) / step) * step
    n = max(1, math.ceil((tmax - lo) / step - 1e-9))
    ticks = [lo + i * step for i in range(n + 1)]
    return ColourScale(layer="travel_time_min", title=f"First-arrival travel time (min), every {step:g} min",
                       cmap="viridis", kind="classes", vmin=ticks[0], vmax=ticks[-1], ticks=tuple(ticks),
                       labels=tuple(f"{v:g}" for v in ticks))


def scale_for_layer(name: str, values: np.ndarray) -> ColourScale | None:
    """Return the figures' scale for a standard layer (or a statistic of one) from its values, else None."""
    base = name
    for prefix in ("lensing_factor", "focusing_factor", "energy", "travel_time_min"):
        if name == prefix or name.startswith(prefix + "_"):
            base = prefix
            break
    if base in ("lensing_factor", "focusing_factor"):
        if name.endswith(("_std", "_spread", "_diff")):
            return None  # spreads and differences are not factors around 1
        return lensing_scale(values, layer=base)
    if base == "energy" and not name.endswith(("_std", "_spread", "_diff")):
        return energy_scale(values)
    if base == "travel_time_min" and not name.endswith(("_std", "_spread", "_diff")):
        return travel_time_scale(values)
    return None


# ---------------------------------------------------------------------------------------------
# QGIS (QML) and OGC (SLD) style documents
# ---------------------------------------------------------------------------------------------

_QML_HEAD = "<!DOCTYPE qgis PUBLIC 'http://mrcc.com/qgis.dtd' 'SYSTEM'>\n"


def _caution_comment() -> str:
    """Return the caution as an XML comment (``--`` is not allowed inside one)."""
    return "<!--\nCAUTION:\n" + caution_text().replace("--", "- -") + "\n-->\n"


def _hex(rgba: Sequence[float]) -> str:
    return "#{:02x}{:02x}{:02x}".format(*(int(round(255 * float(c))) for c in rgba[:3]))


def _alpha255(rgba: Sequence[float]) -> int:
    return int(round(255 * float(rgba[3])))


def _num(v: float) -> str:
    return repr(float(v)) if math.isfinite(v) else ("1e308" if v > 0 else "-1e308")


def raster_qml(scale: ColourScale) -> str:
    """Build the QGIS style of a single-band raster: a pseudocolour ramp with the figure's legend.

    ``log`` scales: one stop per legend value, interpolated (exact colours at the stops; QGIS
    interpolates linearly in value between them, the figures in log value), ends extended.
    ``classes``: a discrete ramp, one colour per class (a value belongs to the first class whose
    upper bound it does not exceed).
    """
    items = []
    if scale.kind == "classes":
        shader_type = "DISCRETE"
        for _, hi, label, rgba in scale.classes():
            items.append((hi, label, rgba))
        items[-1] = (math.inf, items[-1][1], items[-1][2])
    else:
        shader_type = "INTERPOLATED"
        for v, label in zip(scale.ticks, scale.labels, strict=True):
            items.append((v, label, tuple(scale.rgba(v))))
    lo_hi = f"{quoteattr(_num(scale.vmin))} {{}}={quoteattr(_num(scale.vmax))}"
    lines = [
        '<qgis version="3.28.0" styleCategories="Symbology">',
        "  <pipe>",
        '    <rasterrenderer type="singlebandpseudocolor" band="1" opacity="1" alphaBand="-1" '
        "classificationMin=" + lo_hi.format("classificationMax") + ' nodataColor="">',
        "      <rasterTransparency/>",
        "      <minMaxOrigin><limits>None</limits><extent>WholeRaster</extent>"
        "<statAccuracy>Estimated</statAccuracy>"
        "<cumulativeCutLower>0.02</cumulativeCutLower><cumulativeCutUpper>0.98</cumulativeCutUpper>"
        "<stdDevFactor>2</stdDevFactor></minMaxOrigin>",
        "      <rastershader>",
        f'        <colorrampshader colorRampType="{shader_type}" classificationMode="1" clip="0" '
        "minimumValue=" + lo_hi.format("maximumValue") + ' labelPrecision="3">',
    ]
    for v, label, rgba in items:
        lines.append(f'          <item value={quoteattr(_num(v) if math.isfinite(v) else "inf")} '
                     f'label={quoteattr(label)} color="{_hex(rgba)}" alpha="{_alpha255(rgba)}"/>')
    lines += [
        "        </colorrampshader>",
        "      </rastershader>",
        "    </rasterrenderer>",
        '    <brightnesscontrast brightness="0" contrast="0" gamma="1"/>',
        '    <huesaturation saturation="0" grayscaleMode="0" colorizeOn="0" colorizeRed="255" '
        'colorizeGreen="128" colorizeBlue="128" colorizeStrength="100"/>',
        '    <rasterresampler maxOversampling="2"/>',
        "  </pipe>",
        "  <blendMode>0</blendMode>",
        "</qgis>",
    ]
    return _QML_HEAD + _caution_comment() + "\n".join(lines) + "\n"


def _qml_line_layer(rgba: Sequence[float], width_pt: float) -> str:
    colour = "{},{},{},{}".format(*(int(round(255 * float(c))) for c in rgba[:3]), _alpha255(rgba))
    props = {"line_color": colour, "line_width": f"{width_pt:g}", "line_width_unit": "Point",
             "line_style": "solid", "capstyle": "flat", "joinstyle": "round"}
    opts = "".join(f'<Option name="{k}" value="{v}" type="QString"/>' for k, v in props.items())
    legacy = "".join(f'<prop k="{k}" v="{v}"/>' for k, v in props.items())
    return (f'<layer class="SimpleLine" enabled="1" locked="0" pass="0"><Option type="Map">{opts}</Option>'
            f"{legacy}</layer>")


def _field_expr(name: str) -> str:
    return '"' + name.replace('"', '""') + '"'


def _segment_rules(scale: ColourScale, column: str) -> list[tuple[str | None, str, tuple, float, float]]:
    """(QGIS filter or None for 'else', label, rgba, lower, upper) per legend class of the segments."""
    f = _field_expr(column)
    rules = []
    for lo, hi, label, rgba in scale.classes():
        cond = [f"{f} > {_num(lo)}"]
        if math.isfinite(hi):
            cond.append(f"{f} <= {_num(hi)}")
        rules.append((" AND ".join(cond), label, rgba, lo, hi))
    rules.append((None, "no value (no rays or not positive)", NO_VALUE_COLOUR, math.nan, math.nan))
    return rules


def segments_qml(scale: ColourScale, column: str = "lensing_factor") -> str:
    """Build the QGIS style of the segments layer.

    One rule per legend class of ``scale`` on ``column``, lines of :data:`SEGMENT_WIDTH_PT` with a
    black casing, grey where there is no value.
    """
    rules = _segment_rules(scale, column)
    rule_xml, sym_xml = [], []
    for i, (flt, label, rgba, _, _) in enumerate(rules):
        expr = "ELSE" if flt is None else flt
        rule_xml.append(
            f'      <rule key="{{r{i}}}" symbol="{i}" label={quoteattr(label)} filter={quoteattr(expr)}/>')
        sym_xml.append(
            f'      <symbol type="line" name="{i}" alpha="1" clip_to_extent="1" force_rhr="0">'
            + _qml_line_layer((0.0, 0.0, 0.0, 1.0), SEGMENT_CASING_PT)
            + _qml_line_layer(rgba, SEGMENT_WIDTH_PT)
            + "</symbol>"
        )
    return _QML_HEAD + _caution_comment() + "\n".join([
        '<qgis version="3.28.0" styleCategories="Symbology|Legend">',
        '  <renderer-v2 type="RuleRenderer" symbollevels="0" enableorderby="0" forceraster="0">',
        '    <rules key="{root}">',
        *rule_xml,
        "    </rules>",
        "    <symbols>",
        *sym_xml,
        "    </symbols>",
        "  </renderer-v2>",
        "  <layerGeometryType>1</layerGeometryType>",
        "</qgis>",
    ]) + "\n"


def segments_sld(scale: ColourScale, layer: str = "segments", column: str = "lensing_factor") -> str:
    """Build the OGC SLD 1.0 style of the segments layer, the same classes as :func:`segments_qml`."""
    prop = f"<ogc:PropertyName>{escape(column)}</ogc:PropertyName>"
    rules = []
    for flt, label, rgba, lo, hi in _segment_rules(scale, column):
        if flt is None:
            filt = "<sld:ElseFilter/>"
        else:
            parts = [f"<ogc:PropertyIsGreaterThan>{prop}<ogc:Literal>{_num(lo)}</ogc:Literal>"
                     "</ogc:PropertyIsGreaterThan>"]
            if math.isfinite(hi):
                parts.append(f"<ogc:PropertyIsLessThanOrEqualTo>{prop}<ogc:Literal>{_num(hi)}</ogc:Literal>"
                             "</ogc:PropertyIsLessThanOrEqualTo>")
            filt = ("<ogc:Filter>" + (f"<ogc:And>{''.join(parts)}</ogc:And>" if len(parts) > 1 else parts[0])
                    + "</ogc:Filter>")
        sym = "".join(
            f'<sld:LineSymbolizer><sld:Stroke><sld:CssParameter name="stroke">{c}</sld:CssParameter>'
            f'<sld:CssParameter name="stroke-width">{w:g}</sld:CssParameter>'
            '<sld:CssParameter name="stroke-linecap">butt</sld:CssParameter></sld:Stroke>'
            "</sld:LineSymbolizer>"
            for c, w in (("#000000", SEGMENT_CASING_PT), (_hex(rgba), SEGMENT_WIDTH_PT))
        )
        rules.append(f"<sld:Rule><sld:Name>{escape(label)}</sld:Name><sld:Title>{escape(label)}</sld:Title>"
                     f"{filt}{sym}</sld:Rule>")
    return (
        '<?xml version="1.0" encoding="UTF-8"?>\n' + _caution_comment() +
        '<sld:StyledLayerDescriptor version="1.0.0" xmlns:sld="http://www.opengis.net/sld" '
        'xmlns:ogc="http://www.opengis.net/ogc" xmlns:gml="http://www.opengis.net/gml">'
        f"<sld:NamedLayer><sld:Name>{escape(layer)}</sld:Name><sld:UserStyle>"
        f"<sld:Name>{escape(scale.layer)}</sld:Name><sld:Title>{escape(scale.title)}</sld:Title>"
        f"<sld:FeatureTypeStyle>{''.join(rules)}</sld:FeatureTypeStyle>"
        "</sld:UserStyle></sld:NamedLayer></sld:StyledLayerDescriptor>\n"
    )
