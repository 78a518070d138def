"""``report.html``: the printable survey report, with its figures inside the file.

One HTML file, no network references: the figures are PNG images drawn with
matplotlib's Agg renderer and embedded as base64 ``data:`` URIs. It prints on A4 and on
US Letter: no paper size is forced (the page follows the paper chosen in the print
dialogue) and the layout fits the smaller printable area of the two (182 x 247 mm with
the margins set here); headings stay with what follows them, figures, table rows and
the sign-off block are not split across pages, long tables repeat their header row.

Contents: key figures; site, survey and conditions with every warning of the checks;
method (band, emissivity, reflected temperature and how it was obtained,
transmittance, threshold, background scale); figures (thermal view with outlines and
core labels, delta-T histogram with the threshold and each core's delta-T, repair
plan); anomaly and quantity tables; cores and readings; any further results of the
run; limitations, safety cautions and space for the surveyor's name and signature.

Every figure in the key-figures, anomaly and section tables is the value written to
``summary.json`` (cells carry ``data-key`` naming the summary key they show).

Colours follow :mod:`wetmap.export.webmap`: ``cividis`` for temperatures, Okabe-Ito
colours plus line patterns for the statuses, fill versus ring for wet and dry cores.
"""

from __future__ import annotations

import base64
import dataclasses
import io
import logging
import math
from pathlib import Path
from typing import TYPE_CHECKING, Any, Sequence

import numpy as np
import shapely
from shapely.geometry.base import BaseGeometry

from .. import __version__
from ..conditions import dew_point_c, frost_point_c
from ..errors import ProcessingError
from ..photos import thumbnail_uri
from ..quantities import M_PER_FT
from ..style import CORE_COLOURS, LAYER_COLOURS, STATUS_STYLES, THERMAL_CMAP, display_range
from ..wording import Wording, wording_of
from .units import M2_PER_FT2_EXACT, M_PER_FT_EXACT, DisplayUnits, display_units, ticks_in
from .units import esc_html as _esc
from .units import format_value as _fmt
from .webmap import colourise, decimate, png_data_uri, remote_references

if TYPE_CHECKING:
    from ..results import SurveyResult

__all__ = [
    "FIGURE_DPI",
    "thermal_figure",
    "delta_histogram_figure",
    "repair_plan_figure",
    "build_report",
    "write_report",
    "write_pdf",
    "DisplayUnits",
    "display_units",
]

#: Resolution of the embedded figures, dots per inch (sizes below are in inches).
FIGURE_DPI = 150
_THERMAL_IN = (6.7, 4.9)
_HISTOGRAM_IN = (6.7, 3.3)
_PLAN_IN = (6.7, 4.9)
_MAX_FIGURE_PX = 1400  # the thermal image drawn in a figure is averaged down to this long side

#: summary.json keys this report shows in its own tables; any other key is listed under
#: "Further results" so that nothing a run computes is left out of the report.
_SHOWN_KEYS = frozenset({
    "title", "kind", "crs", "side", "roof_area_m2", "anomaly_count", "wet_area_m2", "confirmed_wet_area_m2",
    "unverified_area_m2", "confirmed_dry_area_m2", "wet_fraction", "repair_area_m2", "boards", "board_area_m2",
    "tearoff_area_m2", "warnings", "sections", "coverage", "confirmations", "method", "wetmap_version",
    "wet_area_range_m2", "wet_area_range", "threshold_check", "suggested_cores",
    "imagery", "reflection_suspect",  # shown under "Imagery checks" in the method section
    "boards_range",  # shown with the repair quantities
    "background",  # a line per section in the method table
    "large_wet_share",  # beside the replace-or-repair note in the quantities
    "threshold_check_by_section",  # in the threshold check
})


# --------------------------------------------------------------------------------------
# Small helpers
# --------------------------------------------------------------------------------------


def _cell(value: Any, key: str | None = None, fmt: str = ",.2f", suffix: str = "") -> str:
    attr = f' data-key="{_esc(key)}"' if key else ""
    return f'<td class="num"{attr}>{_fmt(value, fmt)}{suffix}</td>'


def _axis_labels(result: "SurveyResult") -> tuple[str, str]:
    s = result.survey.survey
    u = display_units(result)
    lu = u.length_unit
    if s.kind == "hull":
        return f"station along the hull ({lu})", f"girth from the keel ({lu})"
    if s.is_local:
        return f"plan x ({lu})", f"plan y ({lu})"
    x0, y0 = _corner(result)
    if u.imperial:  # the corner's projected coordinates stay those of the CRS
        return (f"ft east of the lower-left corner (easting {x0:,.1f} m, {s.crs})",
                f"ft north of the corner (northing {y0:,.1f} m)")
    return (f"m east of the lower-left corner (easting {x0:,.1f}, {s.crs})",
            f"m north of the corner (northing {y0:,.1f})")


def _corner(result: "SurveyResult") -> tuple[float, float]:
    """The origin of a georeferenced plan figure's axes: the outline's lower-left corner, whole metres."""
    x0, y0, _, _ = result.outline.bounds
    return float(math.floor(x0)), float(math.floor(y0))


def grid_convergence_deg(result: "SurveyResult") -> float | None:
    """Angle from grid north to true north at the outline's centre, degrees (``None`` off a map CRS).

    pyproj's ``Proj.get_factors(...).meridian_convergence``: positive where true north lies
    west of grid north (east of a UTM zone's central meridian).
    """
    s = result.survey.survey
    if s.is_local or s.kind == "hull":
        return None
    try:
        from pyproj import CRS, Proj, Transformer

        pt = result.outline.centroid
        lon, lat = Transformer.from_crs(s.crs, "EPSG:4326", always_xy=True).transform(pt.x, pt.y)
        return float(Proj(CRS.from_user_input(s.crs)).get_factors(lon, lat).meridian_convergence)
    except Exception:  # noqa: BLE001 - a figure nicety; the CRS was validated when the survey loaded
        return None


def _north_handle(result: "SurveyResult"):
    """The north arrow, as a legend entry beside the plan (never over it): an arrow turned from
    grid north (up the figure) to true north, or ``None`` when the plan has no north."""
    conv = grid_convergence_deg(result)
    if conv is None:
        return None
    from matplotlib.lines import Line2D
    from matplotlib.markers import MarkerStyle
    from matplotlib.transforms import Affine2D

    side = "W" if conv >= 0 else "E"
    arrow = MarkerStyle("$\\Uparrow$", transform=Affine2D().rotate_deg(conv))  # true north, anticlockwise
    return Line2D([], [], linestyle="none", marker=arrow, markersize=11, color="black",
                  label=f"north ({abs(conv):.2f}° {side} of grid north)")


def _kind_words(result: "SurveyResult") -> str:
    return wording_of(result.survey).kind_words


def _words(result: "SurveyResult") -> Wording:
    return wording_of(result.survey)


# --------------------------------------------------------------------------------------
# Figures (matplotlib Agg, no global state)
# --------------------------------------------------------------------------------------


def _figure(size_in: tuple[float, float], dpi: int):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=size_in, dpi=dpi, layout="constrained")
    FigureCanvasAgg(fig)
    return fig


def _png(fig) -> bytes:
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=fig.dpi)  # no tight bbox: the PNG keeps the stated size
    return buf.getvalue()


def _path(geom):
    """One matplotlib Path of a (multi)polygon or of a sequence of them, holes included."""
    from matplotlib.path import Path as MplPath

    parts = shapely.get_parts(np.asarray(geom if isinstance(geom, (list, tuple, np.ndarray)) else [geom],
                                         dtype=object))
    parts = parts[(shapely.get_type_id(parts) == 3) & ~shapely.is_empty(parts)]  # polygons
    if not len(parts):
        return None
    rings = shapely.get_rings(parts)  # exteriors and holes
    verts, index = shapely.get_coordinates(rings, return_index=True)
    codes = np.full(len(verts), MplPath.LINETO, dtype=np.uint8)
    starts = np.flatnonzero(np.r_[True, index[1:] != index[:-1]])
    codes[starts] = MplPath.MOVETO
    codes[np.r_[starts[1:], len(verts)] - 1] = MplPath.CLOSEPOLY
    return MplPath(verts, codes)


def draw_geometry(ax, geom, **style) -> None:
    """Draw a geometry, or many with one style, as one patch.

    The patch is added without autoscaling (``add_artist``): working out the limits walks
    every vertex in Python, and every plan figure sets its limits from the outline.
    """
    from matplotlib.patches import PathPatch

    if geom is None or (isinstance(geom, BaseGeometry) and geom.is_empty):
        return
    path = _path(geom)
    if path is not None:
        ax.add_artist(PathPatch(path, **style))


def _halo(width: float = 3.0):
    from matplotlib import patheffects

    return [patheffects.withStroke(linewidth=width, foreground="white")]


def _plan_axes(ax, result: "SurveyResult") -> None:
    x0, y0, x1, y1 = result.outline.bounds
    pad = 0.03 * max(x1 - x0, y1 - y0, 1e-9)
    ax.set_xlim(x0 - pad, x1 + pad)
    ax.set_ylim(y0 - pad, y1 + pad)
    ax.set_aspect("equal")
    ax.ticklabel_format(useOffset=False, style="plain")
    s = result.survey.survey
    georef = not s.is_local and s.kind != "hull"
    if display_units(result).imperial:  # feet (from the corner on a map), at round values of feet

        cx, cy = _corner(result) if georef else (0.0, 0.0)
        ticks_in(ax.xaxis, x0 - pad, x1 + pad, scale=1 / M_PER_FT, origin=cx)
        ticks_in(ax.yaxis, y0 - pad, y1 + pad, scale=1 / M_PER_FT, origin=cy)
    elif georef:  # metres from the corner, not full projected coordinates
        from matplotlib.ticker import FuncFormatter

        cx, cy = _corner(result)
        ax.xaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v - cx:g}"))
        ax.yaxis.set_major_formatter(FuncFormatter(lambda v, _: f"{v - cy:g}"))
    xl, yl = _axis_labels(result)
    ax.set_xlabel(xl, fontsize=8)
    ax.set_ylabel(yl, fontsize=8)
    ax.tick_params(labelsize=7)


#: Above this many anomalies a plan figure leaves out their ids (unreadable; the tables list them).
MAX_FIGURE_LABELS = 150


def _draw_anomalies(ax, result: "SurveyResult", *, filled: bool, labels: bool) -> None:
    for status, st in STATUS_STYLES.items():  # one patch per status and style: fast with thousands
        geoms = [a.geometry for a in result.anomalies if a.status == status]
        if not geoms:
            continue
        draw_geometry(ax, geoms, fill=False, edgecolor=st.colour, linewidth=2.0, linestyle=st.linestyle,
              path_effects=_halo(3.4), zorder=4)
        if filled:  # a translucent fill under the crisp line
            draw_geometry(ax, geoms, facecolor=st.colour, edgecolor="none", alpha=0.3, zorder=3)
    if labels and len(result.anomalies) <= MAX_FIGURE_LABELS:
        for a in result.anomalies:  # above the outline, clear of the cores inside it
            if a.status not in STATUS_STYLES:
                continue
            x0, _, x1, y1 = a.geometry.bounds
            ax.annotate(f"#{a.id}", ((x0 + x1) / 2, y1), xytext=(0, 2.5), textcoords="offset points", fontsize=7,
                        ha="center", va="bottom", zorder=6, fontweight="bold", path_effects=_halo(2.5))


def _draw_cores(ax, result: "SurveyResult", *, labels: bool) -> None:
    c = result.confirmations
    if not len(c):
        return
    wet = np.asarray(c.wet, dtype=bool)
    ax.scatter(c.xs[wet], c.ys[wet], s=30, marker="o", facecolor=CORE_COLOURS["wet"], edgecolor="black",
               linewidth=0.8, zorder=7)
    ax.scatter(c.xs[~wet], c.ys[~wet], s=30, marker="o", facecolor="white", edgecolor=CORE_COLOURS["dry"],
               linewidth=1.8, zorder=7)
    if labels and len(c) <= MAX_FIGURE_LABELS:
        for cid, x, y in zip(c.ids, c.xs, c.ys):
            ax.annotate(cid, (x, y), xytext=(4, 3), textcoords="offset points", fontsize=6.5, zorder=8,
                        path_effects=_halo(2.2))


def _legend_handles(result: "SurveyResult", *, plan: bool) -> list:
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    w = _words(result)
    handles: list = [Line2D([], [], color=st.colour, linestyle=st.linestyle, linewidth=1.8, label=status)
                     for status, st in STATUS_STYLES.items()]
    if len(result.confirmations):
        handles.append(Line2D([], [], linestyle="none", marker="o", markerfacecolor=CORE_COLOURS["wet"],
                              markeredgecolor="black", label=f"{w.confirmation} judged wet"))
        handles.append(Line2D([], [], linestyle="none", marker="o", markerfacecolor="white",
                              markeredgecolor=CORE_COLOURS["dry"], markeredgewidth=1.8,
                              label=f"{w.confirmation} judged dry"))
    if not result.exclusions.is_empty:
        handles.append(Patch(facecolor=LAYER_COLOURS["exclusions"], edgecolor="#666666", label="exclusion"))
    north = _north_handle(result)
    if north is not None:
        handles.insert(0, north)
    if plan:
        handles.append(Patch(facecolor="none", edgecolor=LAYER_COLOURS["repair"], linestyle="--", hatch="///",
                             label="repair outline"))
        if result.takeoff.count and w.whole_boards:
            handles.append(Patch(facecolor="none", edgecolor=LAYER_COLOURS["boards"], label="whole boards"))
    return handles


def thermal_figure(result: "SurveyResult", *, dpi: int = FIGURE_DPI) -> bytes:
    """Figure 1: corrected surface temperature with anomaly outlines, ids and labelled cores.

    Ids and core labels are left out above :data:`MAX_FIGURE_LABELS` of either (the tables
    list them).

    Returns
    -------
    bytes
        A PNG of ``_THERMAL_IN`` inches at ``dpi`` (6.7 x 4.9 in: 1005 x 735 px at 150 dpi).
    """
    from matplotlib.cm import ScalarMappable
    from matplotlib.colors import Normalize

    fig = _figure(_THERMAL_IN, dpi)
    ax = fig.add_subplot()
    rows, cols = result.grid.shape
    factor = max(1, math.ceil(max(rows, cols) / _MAX_FIGURE_PX))
    image = decimate(result.surface_c, factor)
    usable = np.isfinite(decimate(result.detection.delta_c, factor))  # the roof pixels with data
    lo, hi = display_range(image[usable] if usable.any() else image)
    imagery = getattr(result, "imagery", None)
    if imagery is not None:  # from the roof alone, centred on the dry background (wetmap.image_checks)
        lo, hi = imagery.surface_range.low_c, imagery.surface_range.high_c
    gx0, gy0, gx1, gy1 = result.grid.bounds
    # coloured here as 4 bytes a pixel: matplotlib would resample float64 copies of the image
    ax.imshow(colourise(image, vmin=lo, vmax=hi, cmap=THERMAL_CMAP),
              extent=(gx0, gx0 + factor * image.shape[1] * result.grid.pixel_m,
                      gy1 - factor * image.shape[0] * result.grid.pixel_m, gy1),
              interpolation="nearest", origin="upper", zorder=1)
    draw_geometry(ax, result.exclusions, facecolor=LAYER_COLOURS["exclusions"], edgecolor="#666666", linewidth=0.6, zorder=2)
    draw_geometry(ax, result.outline, facecolor="none", edgecolor="black", linewidth=1.0, zorder=2)
    _draw_anomalies(ax, result, filled=False, labels=True)
    _draw_cores(ax, result, labels=True)
    _plan_axes(ax, result)
    bar = fig.colorbar(ScalarMappable(Normalize(lo, hi), THERMAL_CMAP), ax=ax, shrink=0.85, pad=0.01)
    u = display_units(result)
    bar.set_label(f"surface temperature ({u.temp_unit})", fontsize=8)
    if u.imperial:
        ticks_in(bar.ax.yaxis, lo, hi, scale=1.8, offset=32.0)
    bar.ax.tick_params(labelsize=7)
    fig.legend(handles=_legend_handles(result, plan=False), loc="outside lower center", ncols=4, fontsize=7,
               frameon=False)
    return _png(fig)


def _histogram(values: np.ndarray, edges: np.ndarray) -> np.ndarray:
    """Counts of the finite ``values`` in the bins ``edges``; values beyond go to the end bins.

    Works on strips of rows so that memory stays small on very large grids.
    """
    counts = np.zeros(len(edges) - 1, dtype=np.int64)
    rows_per = max(1, 8_000_000 // max(values.shape[-1], 1))
    for r0 in range(0, values.shape[0], rows_per):
        strip = values[r0:r0 + rows_per]
        strip = strip[np.isfinite(strip)]
        counts += np.histogram(np.clip(strip, edges[0], edges[-1]), bins=edges)[0]
    return counts


def delta_histogram_figure(result: "SurveyResult", *, dpi: int = FIGURE_DPI) -> bytes:
    """Figure 2: area of roof per delta-T bin, the threshold, and each core's delta-T.

    The y axis is the roof area in each 0.05-0.2 degC bin (m2, log scale), so a reader
    sees how much of the roof lies just below and just above the threshold.

    Returns
    -------
    bytes
        A PNG of ``_HISTOGRAM_IN`` inches at ``dpi`` (1005 x 495 px at 150 dpi).
    """
    w = _words(result)
    fig = _figure(_HISTOGRAM_IN, dpi)
    ax = fig.add_subplot()
    delta = result.detection.delta_c
    thr = float(result.detection.threshold_c)
    core_d = np.asarray(result.confirmation_delta_c, dtype=float)
    finite_cores = core_d[np.isfinite(core_d)]
    step = max(1, delta.size // 4_000_000)  # a regular subsample sets the axis range
    sample = delta.ravel()[::step]
    sample = sample[np.isfinite(sample)]
    lo, hi = (float(v) for v in np.percentile(sample, [0.05, 99.95])) if sample.size else (-thr, 2 * thr)
    lo = min([lo, -thr, *finite_cores.tolist()]) - 0.1
    hi = max([hi, 2 * thr, *finite_cores.tolist()]) + 0.1
    edges = np.linspace(lo, hi, 121)
    counts = _histogram(delta, edges)
    u = display_units(result)
    if counts.sum():
        ax.stairs(u.area(float(result.grid.pixel_area_m2)) * counts, edges, fill=True, color="#777777", label=f"{w.area_short} area per bin")
        ax.set_yscale("log")
    else:
        ax.text(0.5, 0.5, f"no thermal data on the {w.area_short}", transform=ax.transAxes, ha="center")
    ax.axvline(thr, color="black", linestyle="--", linewidth=1.4,
               label=f"threshold {u.delta(thr):+.2f} °F" if u.imperial else f"threshold {thr:+g} °C")
    c = result.confirmations
    last_d, level = -np.inf, 0
    for i in np.argsort(core_d):  # NaN sort last
        d = core_d[i]
        if not np.isfinite(d):
            continue
        wet = bool(c.wet[i])
        colour = CORE_COLOURS["wet" if wet else "dry"]
        ax.axvline(d, color=colour, linestyle="-" if wet else ":", linewidth=1.3)
        level = level + 1 if d - last_d < 0.04 * (hi - lo) else 0  # stagger the labels of close cores
        last_d = d
        ax.annotate(c.ids[i], (d, 1.0), xycoords=("data", "axes fraction"), xytext=(2, -2 - 11 * (level % 6)),
                    textcoords="offset points", va="top", fontsize=6.5, color=colour, path_effects=_halo(2.0))
    from matplotlib.lines import Line2D

    handles, _ = ax.get_legend_handles_labels()
    if len(finite_cores):
        handles += [Line2D([], [], color=CORE_COLOURS["wet"], linestyle="-", label=f"ΔT at a {w.confirmation} judged wet"),
                    Line2D([], [], color=CORE_COLOURS["dry"], linestyle=":", label=f"ΔT at a {w.confirmation} judged dry")]
    fig.legend(handles=handles, loc="outside lower center", ncols=4, fontsize=7, frameon=False)
    ax.set_xlim(lo, hi)
    if u.imperial:
        ticks_in(ax.xaxis, lo, hi, scale=1.8)
    ax.set_xlabel(f"ΔT: surface temperature above the dry background ({u.temp_unit})", fontsize=8)
    ax.set_ylabel(f"{w.area_short} area per bin ({u.area_unit})", fontsize=8)
    ax.tick_params(labelsize=7)
    return _png(fig)


def repair_plan_figure(result: "SurveyResult", *, dpi: int = FIGURE_DPI) -> bytes:
    """Figure 3: sections, exclusions, anomalies by status, repair outline and whole boards.

    Returns
    -------
    bytes
        A PNG of ``_PLAN_IN`` inches at ``dpi`` (1005 x 735 px at 150 dpi).
    """
    fig = _figure(_PLAN_IN, dpi)
    ax = fig.add_subplot()
    draw_geometry(ax, result.outline, facecolor="#FAFAFA", edgecolor="black", linewidth=1.2, zorder=1)
    for sec in result.sections:
        draw_geometry(ax, sec.geometry, facecolor="none", edgecolor="black", linewidth=0.7, linestyle="-.", zorder=2)
        p = sec.geometry.representative_point()
        ax.annotate(sec.name, (p.x, p.y), fontsize=11, color="#555555", ha="center", va="center", zorder=2,
                    alpha=0.8)
    draw_geometry(ax, result.exclusions, facecolor=LAYER_COLOURS["exclusions"], edgecolor="#666666", linewidth=0.6, zorder=2)
    draw_geometry(ax, list(result.takeoff.boards), facecolor="none", edgecolor=LAYER_COLOURS["boards"], linewidth=0.5,
          zorder=3)
    _draw_anomalies(ax, result, filled=True, labels=True)
    draw_geometry(ax, result.repair, facecolor="none", edgecolor=LAYER_COLOURS["repair"], linewidth=1.2, linestyle="--",
          hatch="///", zorder=5)
    _draw_cores(ax, result, labels=False)
    _plan_axes(ax, result)
    fig.legend(handles=_legend_handles(result, plan=True), loc="outside lower center", ncols=5, fontsize=7,
               frameon=False)
    return _png(fig)


# --------------------------------------------------------------------------------------
# Generic rendering of results added by later stages (bill, passes, registration, ...)
# --------------------------------------------------------------------------------------


def _plain(value: Any) -> Any:
    """Dataclasses, arrays and geometries -> JSON-like data for display."""
    if hasattr(value, "as_dict") and callable(value.as_dict):
        return _plain(value.as_dict())
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        return {f.name: _plain(getattr(value, f.name)) for f in dataclasses.fields(value)
                if not isinstance(getattr(value, f.name), (np.ndarray, BaseGeometry))}
    if isinstance(value, dict):
        return {str(k): _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    if isinstance(value, np.ndarray):
        return f"array {value.shape}"
    if isinstance(value, BaseGeometry):
        return f"{value.geom_type}, {value.area:,.2f} m²" if value.area else value.geom_type
    if isinstance(value, np.generic):
        return value.item()
    return value


#: Unit suffixes of result keys (``area_m2``, ``edge_m``, ``delta_c``, ``wind_m_s``) -> metric unit.
_KEY_UNITS = (("_m2", "m²"), ("_m_s", "m/s"), ("_m", "m"), ("_c", "K"))


def _key_unit(key: str) -> str | None:
    return next((unit for suffix, unit in _KEY_UNITS if key.endswith(suffix)), None)


def _key_label(key: str, u: DisplayUnits | None) -> str:
    """A result key for a header: ``repair_perimeter_m`` -> ``repair perimeter (ft)`` in imperial units."""
    unit = _key_unit(key) if u is not None and u.imperial else None
    if unit is None:
        return key
    stem = key[: -len(next(s for s, v in _KEY_UNITS if key.endswith(s)))]
    return f"{stem} ({u.unit_of(unit)})"  # type: ignore[union-attr]


def _keyed_value(key: str, value: Any, u: DisplayUnits | None, depth: int) -> str:
    """A value under ``key``: converted when the key names a metric unit and the report is imperial.

    A ``_c`` key is taken as a temperature difference unless it names a temperature.
    """
    unit = _key_unit(key) if u is not None and u.imperial else None
    if unit is not None and isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value):
        if unit == "K" and any(w in key for w in ("air", "surface", "reflected", "dew", "frost", "temp")):
            unit = "°C"
        return u.span(float(value), unit, 2) + " " + u.unit_of(unit)  # type: ignore[union-attr]
    return _generic_html(value, depth, u)


def _flat(record: dict[str, Any], prefix: str = "") -> dict[str, Any]:
    """Nested dictionaries of a record as columns ``"outer: inner"`` (lists stay values)."""
    out: dict[str, Any] = {}
    for k, v in record.items():
        name = f"{prefix}{k}"
        if isinstance(v, dict) and v:
            out.update(_flat(v, f"{name}: "))
        else:
            out[name] = v
    return out


def _generic_html(value: Any, depth: int = 0, u: DisplayUnits | None = None) -> str:
    value = _plain(value)
    if isinstance(value, dict):
        if not value:
            return "–"
        rows = "".join(f"<tr><th>{_esc(_key_label(k, u))}</th><td>{_keyed_value(k, v, u, depth + 1)}</td></tr>"
                       for k, v in value.items())
        return f'<table class="kv">{rows}</table>'
    if isinstance(value, list):
        if not value:
            return "none"
        if all(isinstance(v, dict) for v in value):
            value = [_flat(v) for v in value]  # nested records become columns "a: b"
            cols: list[str] = []
            for v in value:
                cols += [k for k in v if k not in cols]
            more = f"<p class='small'>… {len(value) - 500} more rows in summary.json</p>" if len(value) > 500 else ""
            # wide records are split into tables of at most 7 columns, the first column repeated in each,
            # so that no table runs off the printed page
            key, rest = cols[0], cols[1:]
            groups = [rest[i:i + 6] for i in range(0, len(rest), 6)] or [[]]
            tables = []
            for group in groups:
                shown = [key, *group]
                head = "".join(f"<th>{_esc(_key_label(c, u))}</th>" for c in shown)
                body = "".join("<tr>" + "".join(f"<td>{_keyed_value(c, v.get(c), u, depth + 1)}</td>" for c in shown)
                               + "</tr>" for v in value[:500])
                tables.append(f"<table><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>")
            return "".join(tables) + more
        return ", ".join(_generic_html(v, depth + 1, u) for v in value)
    if isinstance(value, float):
        return _fmt(value, ",.2f" if abs(value) >= 1000 else ".4g")
    return _fmt(value)


# --------------------------------------------------------------------------------------
# Report sections
# --------------------------------------------------------------------------------------


def _key_figures(s: dict[str, Any], w: Wording, u: DisplayUnits = DisplayUnits()) -> str:
    c = w.confirmations

    def _c(value: Any, key: str | None = None, fmt: str = ",.2f", suffix: str = "") -> str:
        """An area or length cell in the report's units; any other figure as it is."""
        if suffix == " m²":
            return u.area_cell(value, key, fmt)
        if suffix == " m":
            return u.length_cell(value, key, fmt)
        return _cell(value, key, fmt, suffix)

    rows = [
        ("Roof area surveyed (outline less exclusions)" if w.kind != "hull" else f"{w.area_title} area",
         _c(s["roof_area_m2"], "roof_area_m2", suffix=" m²")),
        ("Anomalies found", _c(s["anomaly_count"], "anomaly_count")),
        (f"Wet, confirmed by {c}", _c(s["confirmed_wet_area_m2"], "confirmed_wet_area_m2", suffix=" m²")),
        (f"Unverified (no {w.confirmation} inside)", _c(s["unverified_area_m2"], "unverified_area_m2",
                                                          suffix=" m²")),
        ("Wet area (confirmed + unverified)", _c(s["wet_area_m2"], "wet_area_m2", suffix=" m²")),
        *([(f"Wet area, low end of the range the {c} allow",
             _c(s["wet_area_range"]["low_m2"], "wet_area_range.low_m2", suffix=" m²")),
            (f"Wet area, high end of the range the {c} allow",
             _c(s["wet_area_range"]["high_m2"], "wet_area_range.high_m2", suffix=" m²"))]
          if s.get("wet_area_range") else []),
        (f"Refuted: anomalies whose {c} are all dry", _c(s["confirmed_dry_area_m2"], "confirmed_dry_area_m2",
                                                            suffix=" m²")),
        ("Wet fraction of the surveyed area", _c(100 * s["wet_fraction"], "wet_fraction", suffix=" %")),
        ("Repair outline area", _c(s["repair_area_m2"], "repair_area_m2", suffix=" m²")),
    ]
    if w.whole_boards:
        rows += [
            ("Whole boards replaced", _c(s["boards"], "boards")),
            ("Tear-off area", _c(s.get("tearoff_area_m2"), "tearoff_area_m2", suffix=" m²")),
        ]
    else:
        rows.append((f"Repair outline perimeter ({w.edge})", _c(s.get("repair_perimeter_m"), "repair_perimeter_m",
                                                                  suffix=" m")))
    im = s.get("imagery") or {}
    if im.get("smallest_reliable_area_m2") is not None:
        n = im.get("min_pixels_across", 3)
        rows.append((f"Smallest area measured reliably ({n:g} x {n:g} pixels of the imagery)",
                     _c(im["smallest_reliable_area_m2"], "imagery.smallest_reliable_area_m2", ",.3f", " m²")))
    cov = s.get("coverage") or {}
    if cov:
        rows.append((f"{w.area_title} with no thermal data (not surveyed)",
                     _c(cov.get("uncovered_m2"), "coverage.uncovered_m2", suffix=" m²")))
        for key, what in (("edge_band_m2", "Band along the roof edge left out (not surveyed)"),
                          ("exclusion_band_m2", "Band around the exclusions left out (not surveyed)")):
            if key in cov:
                rows.append((what, _c(cov[key], f"coverage.{key}", suffix=" m²")))
    body = "".join(f"<tr><th>{k}</th>{v}</tr>" for k, v in rows)
    return f'<table class="keyfigures" id="key-figures"><tbody>{body}</tbody></table>'


def _conditions(result: "SurveyResult") -> str:
    sv, c, cam = result.survey.survey, result.survey.conditions, result.survey.camera
    u = display_units(result)
    rows: list[tuple[str, str]] = [
        ("Survey", _esc(sv.title)),
        ("Kind", _esc(_kind_words(result))),
        ("Site", _esc(sv.site or "not given")),
        ("Date", _esc(sv.date or "not given")),
        ("Surveyor", _esc(sv.surveyor or "not given")),
        ("Plan coordinates", _esc("local plan metres (no geo-reference)" if sv.is_local else sv.crs)),
    ]
    if not sv.is_local:
        try:
            from pyproj import Transformer

            pt = result.outline.centroid
            lon, lat = Transformer.from_crs(sv.crs, "EPSG:4326", always_xy=True).transform(pt.x, pt.y)
            rows.append(("Centre of the outline", f"{abs(lat):.5f}° {'N' if lat >= 0 else 'S'}, "
                                                  f"{abs(lon):.5f}° {'E' if lon >= 0 else 'W'} (WGS84)"))
        except Exception:  # noqa: BLE001 - a display nicety; the CRS was validated when the survey loaded
            pass
    rows.append(("Air temperature", f"{u.temp(c.air_c):.1f} {u.temp_unit}" if u.imperial else f"{c.air_c:g} °C"))
    rows.append(("Relative humidity", f"{c.humidity_pct:g} % (over water)"))
    try:
        rows.append(("Dew point (computed, Magnus formula)", f"{u.temp(dew_point_c(c.air_c, c.humidity_pct)):.1f} {u.temp_unit}"))
        frost = frost_point_c(c.air_c, c.humidity_pct)
        if frost < 0.0:
            rows.append(("Frost point (computed, Magnus over ice)", f"{u.temp(frost):.1f} {u.temp_unit}"))
    except Exception:  # noqa: BLE001 - the same: shown when it can be computed
        pass
    rows.append(("Wind", "not given" if c.wind_m_s is None else u.wind(c.wind_m_s)))
    rows.append(("Sky", _esc(c.sky or "not given")))
    rows.append(("Sunset / survey time", f"{c.sunset.strftime('%H:%M') if c.sunset else 'not given'} / "
                                         f"{c.time.strftime('%H:%M') if c.time else 'not given'}"
                 + (f" (sunset {_esc(c.sunset_source)})" if getattr(c, "sunset_source", None) else "")))
    rows.append(("Hours since rain", "not given" if c.hours_since_rain is None else f"{c.hours_since_rain:g} h"))
    rows.append(("Surface dry", "not given" if c.surface_dry is None else ("yes" if c.surface_dry else "no")))
    mosaics = ", ".join(f"{m.path.name}" + (f" ({m.time.strftime('%H:%M')})" if m.time else "")
                        for m in result.survey.mosaics)
    frames = len(getattr(result.survey, "frames", ()) or ())
    rows.append(("Imagery", _esc((mosaics or "no mosaics") + (f"; {frames} frames" if frames else ""))))
    rows.append(("Camera band, emissivity", f"{cam.band_um[0]:g}-{cam.band_um[1]:g} µm, ε = {cam.emissivity:g}"))
    body = "".join(f"<tr><th>{k}</th><td>{v}</td></tr>" for k, v in rows)
    return f'<table class="kv" id="conditions">{body}</table>'


def _warnings(summary: dict[str, Any]) -> str:
    items = summary.get("warnings") or []
    if not items:
        return '<p id="warnings">The checks raised no warnings.</p>'
    lis = "".join(f"<li>{_esc(w)}</li>" for w in items)
    return f'<ul class="warnings" id="warnings">{lis}</ul>'


def _method(result: "SurveyResult", summary: dict[str, Any]) -> str:
    r, d, s = result.radiometry, result.detection, result.survey
    w = _words(result)
    m = summary.get("method", {})
    estimated = not r.reflected_source.startswith("measured")
    rows = [
        ("Camera band", f"{r.band_um[0]:g}-{r.band_um[1]:g} µm (band-integrated Planck radiance)"),
        ("Emissivity", f"{r.emissivity:g}" + "".join(
            f"; section {_esc(sec.name)}: {sec.emissivity:g}" for sec in result.sections
            if getattr(sec, "emissivity", None) is not None)),
        ("Reflected apparent temperature", f"{r.reflected_c:.1f} °C: {_esc(r.reflected_source)}"),
        ("Atmospheric transmittance", f"{r.transmittance:.4f}: {_esc(r.transmittance_source)}; "
                                      f"atmosphere taken at {r.atmosphere_c:g} °C"),
        ("Plan grid", f"{result.grid.pixel_m:g} m pixels, {result.grid.rows:,d} x {result.grid.cols:,d}"
         if getattr(result, "full_rasters", None) is None else  # in windows: result.grid is the figures' preview
         f"{result.full_rasters.grid.pixel_m:g} m pixels, {result.full_rasters.grid.rows:,d} x "
         f"{result.full_rasters.grid.cols:,d}, processed in {result.full_rasters.windows} windows of "
         f"{result.full_rasters.tile_px} px; figures drawn from {result.full_rasters.preview_factor} x "
         f"{result.full_rasters.preview_factor} px block means"),
        ("Dry background scale", f"{d.background_m:g} m (the local method's footprint)"),
        *[(f"Dry background, {_esc(e['section'])}", f"{_esc(e['method'])}: {_esc(e['reason'])}")
          for e in summary.get("background") or []],
        ("Threshold", f"ΔT &gt; {d.threshold_c:g} °C above the dry background"
         + ("" if "delta_c_cores" not in m else
            f": the middle of the range the cores allow (largest ΔT at a dry core {m['delta_c_cores']['dry_max_c']:+.2f} °C, "
            f"smallest at a wet core {m['delta_c_cores']['wet_min_c']:+.2f} °C)")),
        ("Smallest anomaly kept", f"{s.detect.min_area_m2:g} m² (holes smaller than this are filled)"),
        ("Perimeter", _esc(m.get("perimeter", "length of the outline"))),
        ("Repair margin", f"{s.repair.margin_m:g} m beyond the anomaly outline"),
        *([("Board size", "not given (no board take-off)" if not s.repair.board_m
            else f"{s.repair.board_m[0]:g} x {s.repair.board_m[1]:g} m" if not display_units(result).imperial
            else " x ".join(display_units(result).span(v, "m", 2) for v in s.repair.board_m) + " ft")]
          if w.whole_boards else []),
        ("Counted as wet for the repair", "wet and unverified anomalies" if s.repair.include_unverified
         else "confirmed wet anomalies only"),
    ]
    body = "".join(f"<tr><th>{k}</th><td>{v}</td></tr>" for k, v in rows)
    text = (
        "<p>The camera's apparent temperatures were converted to surface temperatures by inverting the "
        "measurement equation over the camera band (emitted, reflected and atmospheric radiance; ASTM E1862 "
        "and ASTM E1933 describe how reflected temperature and emissivity are measured). Each pixel was "
        "compared with a robust estimate of the dry surface around it (block medians over the background "
        "scale); pixels warmer than the threshold form anomalies, outlined as polygons. Each anomaly's status "
        f"comes from the {w.confirmations_all} inside it: <b>wet</b> when one says wet, <b>dry</b> when all say "
        "dry, <b>unverified</b> when there is none"
        + w.status_note + ".</p>"
    )
    if estimated:
        text += ("<p class='caution'>The reflected temperature was <b>estimated</b>, not measured: from the "
                 "sky's emission in the camera's 8-14 µm window (Idso 1981) for the recorded air temperature, "
                 "humidity and cloud. The real sky varies; a measured reflected apparent temperature (ASTM E1862) "
                 "is preferable.</p>")
    return text + f'<table class="kv" id="method">{body}</table>' + _imagery(result, summary)


def _range_words(result: "SurveyResult") -> str:
    """The thermal figure's colour range and how it was chosen (:mod:`wetmap.image_checks`)."""
    imagery = getattr(result, "imagery", None)
    if imagery is None:
        return ""
    r = imagery.surface_range
    return (f" Colour range {r.low_c:.1f} to {r.high_c:.1f} °C: the {r.percentile_words} of "
            f"the {_words(result).area_short} alone (exclusions and the ground outside left out), centred on the "
            "dry background "
            f"{r.centre_c:.1f} °C.")


def _imagery(result: "SurveyResult", summary: dict[str, Any]) -> str:
    """Method, "Imagery checks": resolution, focus, reflection suspects, display range."""
    im = summary.get("imagery")
    if not im:
        return ""
    n = im.get("min_pixels_across", 3)
    out = ["<h3 id='imagery'>Imagery checks</h3>",
           "<p>Can the pictures carry these conclusions? A feature is measured reliably when it spans at least "
           f"{n:g} pixels of the imagery across its narrowest width ({n:g} x {n:g} pixels, common practice; "
           "smaller ones read too cool and their outlines are uncertain). Blur spreads the heat of a warm area "
           "over its surroundings and so lowers the temperatures reported; a frame much less sharp than the "
           "others is flagged. A warm patch seen from one viewpoint and not from another, or one on a shiny "
           "surface, may be a reflection.</p>"]
    rows = [
        ("Smallest area measured reliably", f"{_fmt(im.get('smallest_reliable_area_m2'), ',.3f')} m² "
         f"(pixel {_fmt(im.get('reliable_gsd_m'), '.3f')} m, median over the covered {_words(result).area_short}; "
         f"{_fmt(im.get('worst_reliable_area_m2'), ',.3f')} m² where the imagery is coarsest)"),
        ("Anomalies too small to measure reliably", _esc(", ".join(f"#{i}" for i in im.get("under_resolved", []))
                                                         or "none")),
        ("Frames flagged as blurred", _esc(", ".join(im.get("blurred", [])) or "none")),
        ("Reflection suspects", _esc(", ".join(f"#{i}" for i in im.get("reflection_suspect", [])) or "none")),
    ]
    dr = im.get("display_range") or {}
    if dr:
        s_lo, s_hi = dr.get("surface_c", [None, None])
        d_lo, d_hi = dr.get("delta_c", [None, None])
        rows.append(("Display range", f"{_fmt(s_lo, '.2f')} to {_fmt(s_hi, '.2f')} °C, centred on the dry "
                                      f"background {_fmt(dr.get('centre_c'), '.2f')} °C; ΔT {_fmt(d_lo, '+.2f')} to "
                                      f"{_fmt(d_hi, '+.2f')} °C ({_esc(dr.get('basis'))})"))
    out.append('<table class="kv" id="imagery-summary">'
               + "".join(f"<tr><th>{k}</th><td>{v}</td></tr>" for k, v in rows) + "</table>")
    u = display_units(result)
    lu = u.unit_of("m")

    def g(v: Any) -> str:
        return _fmt(v, ".4f") if not isinstance(v, (int, float)) else u.span(float(v), "m", 4)

    head = (f"<tr><th>Imagery</th><th>Kind</th><th>GSD ({lu})</th><th>GSD range ({lu})</th><th>Optics GSD ({lu})</th>"
            "<th>Sharpness</th><th>vs survey</th><th>Flags</th></tr>")
    body = []
    for src in im.get("sources", []):
        lo, hi = (src.get("gsd_range_m") or [None, None])[:2]
        flags = ", ".join(src.get("flags") or []) or "–"
        if src.get("kind") == "mosaic" and src.get("tiles"):
            flags += f" ({len(src.get('soft_tiles') or [])} soft of {src.get('tiles_judged')} tiles judged)"
        elif src.get("blending") and src.get("flags"):
            flags += f" ({src['blending']})"
        body.append(f"<tr data-path=\"{_esc(src.get('path'))}\"><td>{_esc(src.get('path'))}</td>"
                    f"<td>{_esc(src.get('kind'))}</td><td class='num'>{g(src.get('gsd_m'))}</td>"
                    f"<td class='num'>{g(lo)}-{g(hi)}</td><td class='num'>{g(src.get('optics_gsd_m'))}</td>"
                    f"{_cell(src.get('sharpness'), None, '.2f')}{_cell(src.get('sharpness_vs_survey'), None, '.2f')}"
                    f"<td>{_esc(flags)}</td></tr>")
    keep = len(body) <= 12  # a short table and its note stay on one page
    out.append(("<div class='keep'>" if keep else "")
               + f'<table id="imagery-sources" class="data"><thead>{head}</thead><tbody>{"".join(body)}</tbody></table>')
    out.append(f"<p class='small'>GSD: ground sampling distance, plan {'feet' if u.imperial else 'metres'} per image pixel (a mosaic's from its "
               "transform; a frame's from its control-point fit, its range across the image); optics: "
               "[camera] ifov_mrad x distance_m when given. Sharpness: the share of the image's gradient energy at "
               "the finest scale, noise taken out (0 = blurred, 1 = sharp); frames are compared with the median of "
               "the other frames, mosaic tiles with the median tile.</p>" + ("</div>" if keep else ""))
    suspects = summary.get("reflection_suspect") or []
    if suspects:
        head = "<tr><th>Anomaly</th><th>Rule</th><th>Finding</th></tr>"
        body = "".join(f"<tr data-anomaly='{s.get('id')}'><td class='num'>#{s.get('id')}</td><td>{_esc(s.get('rule'))}"
                       f"</td><td>{_esc(s.get('reason'))}</td></tr>" for s in suspects)
        out.append("<h3>Reflection suspects</h3>"
                   f'<table id="reflection-suspects" class="data"><thead>{head}</thead><tbody>{body}</tbody></table>'
                   "<p class='small'>Suspects keep their outlines, statuses and quantities; a core or a second "
                   "look from another angle decides.</p>")
    return "".join(out)


def _figures(result: "SurveyResult", dpi: int) -> str:
    from PIL import Image

    s = result.survey.repair
    w = _words(result)
    specs = [
        ("fig-thermal", thermal_figure(result, dpi=dpi),
         "Corrected surface temperature (cividis scale) with the anomaly outlines (vermillion solid: wet; "
         f"reddish purple dashed: unverified; blue dotted: dry), their numbers, exclusions in grey and the {w.confirmations} "
         "(filled: judged wet; ring: judged dry)." + _range_words(result)),
        ("fig-histogram", delta_histogram_figure(result, dpi=dpi),
         f"Distribution of ΔT over the surveyed {w.area_short} (area per bin, log scale), the threshold "
         f"({result.detection.threshold_c:g} °C, dashed) and the ΔT found at each {w.confirmation}."),
        ("fig-repair", repair_plan_figure(result, dpi=dpi),
         f"Repair plan: anomalies by status, the repair outline (dashed, hatched; margin {s.margin_m:g} m)"
         + (f" and the {result.takeoff.count} whole boards it touches" if result.takeoff.count and w.whole_boards
            else "")
         + ", sections and exclusions."),
    ]
    out = []
    for n, (fid, png, caption) in enumerate(specs, start=1):
        w, h = Image.open(io.BytesIO(png)).size
        out.append(f'<figure id="{fid}"><img src="{png_data_uri(png)}" width="{w}" height="{h}" '
                   f'alt="Figure {n}"><figcaption><b>Figure {n}.</b> {_esc(caption)}</figcaption></figure>')
    return "".join(out)


#: The anomaly table of the report lists at most this many rows; the rest are in
#: quantities.csv and takeoff.xlsx (a printed table of thousands of rows helps no reader
#: and costs minutes of PDF layout).
MAX_TABLE_ANOMALIES = 250
#: ... and the table of suggested cores at most this many (the most useful first).
MAX_TABLE_SUGGESTIONS = 50


def table_anomalies(anomalies: Sequence[Any], limit: int = MAX_TABLE_ANOMALIES) -> list[Any]:
    """The anomalies the report's table lists, in id order: all when at most ``limit``;
    else every anomaly with a core (or reading) inside or not unverified, then the
    largest of the rest, up to ``limit`` rows (more when more than ``limit`` are cored)."""
    if len(anomalies) <= limit:
        return list(anomalies)
    must = [a for a in anomalies if a.confirmations or a.status != "unverified"]
    others = sorted((a for a in anomalies if not (a.confirmations or a.status != "unverified")),
                    key=lambda a: (-a.area_m2, a.id))
    keep = {id(a) for a in must + others[:max(0, limit - len(must))]}
    return [a for a in anomalies if id(a) in keep]


def _anomaly_table(result: "SurveyResult", summary: dict[str, Any]) -> str:
    counted = result.counted_statuses
    inside = _words(result).confirmations.capitalize()
    u = display_units(result)
    head = (f"<tr><th>No.</th><th>Status</th><th>Section</th><th>Area ({u.area_unit})</th>"
            f"<th>Perimeter ({u.length_unit})</th>"
            f"<th>Mean ΔT ({u.temp_unit})</th><th>Max ΔT ({u.temp_unit})</th><th>{inside} inside</th>"
            "<th>Counted wet</th></tr>")
    body = []
    listed = table_anomalies(result.anomalies, MAX_TABLE_ANOMALIES)
    for a in listed:
        body.append(
            f'<tr class="anomaly" data-status="{_esc(a.status)}"><td class="num">{a.id}</td>'
            f"<td>{_esc(a.status)}</td><td>{_esc(a.section or '–')}</td>"
            f'<td class="num area">{u.area(a.area_m2):,.2f}</td><td class="num">{u.length(a.perimeter_m):,.2f}</td>'
            f'<td class="num">{_fmt(u.delta(a.delta_mean_c), "+.2f")}</td>'
            f'<td class="num">{_fmt(u.delta(a.delta_max_c), "+.2f")}</td>'
            f"<td>{_esc(', '.join(a.confirmations) or '–')}</td><td>{'yes' if a.status in counted else 'no'}</td></tr>"
        )
    if not body:
        body.append('<tr><td colspan="9">No anomaly above the threshold.</td></tr>')
    elif len(listed) < len(result.anomalies):
        shown = {id(a) for a in listed}
        rest = [a for a in result.anomalies if id(a) not in shown]
        body.append(f'<tr class="more"><td colspan="9">{len(rest):,} more anomalies, each of '
                    f'{u.area(max(a.area_m2 for a in rest)):,.2f} {u.area_unit} or less, none with a '
                    f'{_esc(_words(result).confirmation)} inside: '
                    "every anomaly is listed in quantities.csv and in takeoff.xlsx (sheet “anomalies”); "
                    "the totals below count them all.</td></tr>")
    by = {st: sum(1 for a in result.anomalies if a.status == st) for st in ("wet", "unverified", "dry")}
    foot = (
        f'<tr class="total"><th colspan="3">Wet, confirmed ({by["wet"]})</th>'
        f'{u.area_cell(summary["confirmed_wet_area_m2"], "confirmed_wet_area_m2", unit=False)}<td colspan="5"></td></tr>'
        f'<tr class="total"><th colspan="3">Unverified ({by["unverified"]})</th>'
        f'{u.area_cell(summary["unverified_area_m2"], "unverified_area_m2", unit=False)}<td colspan="5"></td></tr>'
        f'<tr class="total"><th colspan="3">Dry, refuted ({by["dry"]})</th>'
        f'{u.area_cell(summary["confirmed_dry_area_m2"], "confirmed_dry_area_m2", unit=False)}<td colspan="5"></td></tr>'
        f'<tr class="total"><th colspan="3">Wet area: confirmed + unverified</th>'
        f'{u.area_cell(summary["wet_area_m2"], "wet_area_m2", unit=False)}<td colspan="5"></td></tr>'
        f'<tr class="total"><th colspan="3">All anomalies (<span data-key="anomaly_count">'
        f'{summary["anomaly_count"]}</span>)</th>'
        f'{u.area_cell(sum(a.area_m2 for a in result.anomalies), unit=False)}<td colspan="5"></td></tr>'
    )
    flagged = [a for a in result.anomalies if getattr(a, "flags", "")]
    flags = ("<p id='anomaly-flags' class='small'>Flags (imagery: see Imagery checks in the method; "
             "“edge band”, “next to a rooftop unit”: a narrow band along the roof edge or around an exclusion, "
             "often flashing, parapet or unit heat): "
             + "; ".join(f"#{a.id}: {_esc(a.flags)}" for a in flagged) + ".</p>") if flagged else ""
    return (f'<table id="anomalies" class="data"><thead>{head}</thead><tbody>{"".join(body)}</tbody>'
            f"<tfoot>{foot}</tfoot></table>{flags}")


def _quantities(result: "SurveyResult", summary: dict[str, Any]) -> str:
    s = result.survey.repair
    w = _words(result)
    u = display_units(result)
    rows = [
        ("Repair outline area", u.area_cell(summary["repair_area_m2"], "repair_area_m2")),
        (f"Repair outline perimeter ({w.edge})", u.length_cell(float(result.repair.length))),
        ("Margin beyond the anomaly outline", u.length_cell(s.margin_m)),
    ]
    if w.whole_boards:
        rows += [
            ("Whole boards", _cell(summary["boards"], "boards")),
            *([("Whole boards, fewest to most with where the joints lie",
                f"<td class='num'>{summary['boards_range'][0]} to {summary['boards_range'][1]}</td>")]
              if summary.get("boards_range") else []),
            *([("Board grid origin", f"<td>{_esc(result.takeoff.origin_rule)}</td>")]
              if s.board_m and result.takeoff.origin_rule else []),
            ("Board size", "<td>–</td>" if not s.board_m else
             f"<td>{u.length(s.board_m[0]):.2f} x {u.length(s.board_m[1]):.2f} {u.length_unit}</td>" if u.imperial
             else f"<td>{s.board_m[0]:g} x {s.board_m[1]:g} m</td>"),
            ("Board area", u.area_cell(summary.get("board_area_m2"), "board_area_m2")),
            ("Tear-off area", u.area_cell(summary.get("tearoff_area_m2"), "tearoff_area_m2")),
        ]
    body = "".join(f"<tr><th>{k}</th>{v}</tr>" for k, v in rows)
    out = f'<table class="kv" id="quantities">{body}</table>'
    sections = summary.get("sections") or []
    if sections:
        a_u = u.area_unit
        head = (f"<tr><th>Section</th><th>Assembly</th><th>Area ({a_u})</th><th>Wet, confirmed ({a_u})</th>"
                f"<th>Unverified ({a_u})</th><th>Dry, refuted ({a_u})</th><th>Wet area ({a_u})</th>"
                f"<th>Wet fraction</th><th>Repair ({a_u})</th>" + ("<th>Boards</th>" if w.whole_boards else "")
                + "</tr>")
        rows_html = []
        for t in sections:
            frac = t.get("wet_fraction")
            rows_html.append(
                f'<tr data-section="{_esc(t.get("name"))}"><td>{_esc(t.get("name"))}</td>'
                f"<td>{_esc(t.get('assembly') or '–')}</td>"
                + u.area_cell(t.get("area_m2"), "area_m2", unit=False) + u.area_cell(t.get("confirmed_wet_area_m2"), "confirmed_wet_area_m2", unit=False)
                + u.area_cell(t.get("unverified_area_m2"), "unverified_area_m2", unit=False)
                + u.area_cell(t.get("confirmed_dry_area_m2"), "confirmed_dry_area_m2", unit=False)
                + u.area_cell(t.get("wet_area_m2"), "wet_area_m2", unit=False)
                + _cell(None if frac is None else 100 * frac, "wet_fraction", suffix=" %")
                + u.area_cell(t.get("repair_area_m2"), "repair_area_m2", unit=False)
                + (_cell(t.get("boards"), "boards") if w.whole_boards else "") + "</tr>")
        out += (f'<h3>By section</h3><table id="sections" class="data"><thead>{head}</thead>'
                f'<tbody>{"".join(rows_html)}</tbody></table>'
                "<p class='small'>Replace-or-repair rules (for example a share of wet area above which a whole "
                f"{w.area_short} is replaced) differ by jurisdiction: the local code decides.</p>")
    large = summary.get("large_wet_share") or []
    if large:
        out += ("<p id='large-wet-share'><strong>Large wet share:</strong> "
                + "; ".join(f"{_esc(e['where'])}: {100 * e['wet_fraction']:.0f} %" for e in large)
                + ". Anomalies fill more than the replace-or-repair share here (some local codes require "
                "replacement above 25 % wet; a trade rule of thumb repairs only under about 30 %): confirm the "
                f"wet boundary with {w.confirmations} before deciding.</p>")
    bill = _bill_of(result, summary)
    if bill is not None:
        out += "<h3>Bill of quantities</h3>" + _bill_html(bill, u)
    return out


def _bill_of(result: "SurveyResult", summary: dict[str, Any]) -> Any:
    """The run's bill of quantities (a result field, or the summary's ``bill``), or ``None``."""
    bill = getattr(result, "bill", None)
    if bill is None:
        bill = getattr(getattr(result, "quantities", None), "bill", None)
    if bill is None:
        bill = summary.get("bill")
    return bill


def _bill_line_cells(ln: dict[str, Any], u: DisplayUnits) -> str:
    """Quantity, unit and rate of a bill line; in imperial units a m2 or m line is shown per ft2 or ft
    (the quantity converted, the rate per the new unit, the amount unchanged)."""
    unit, qty, rate = ln.get("unit"), ln.get("quantity"), ln.get("rate")
    if u.imperial and unit == "m3" and isinstance(qty, (int, float)):  # 1 ft3 = 0.3048**3 m3 exactly
        per = M_PER_FT_EXACT ** 3
        rate_cell = (_cell(None) if not isinstance(rate, (int, float)) else
                     f'<td class="num" data-rate-metric="{float(rate)!r}">{rate * per:,.4f}</td>')
        return (f'<td class="num"><span class="conv" data-metric="{float(qty)!r}" data-from="m³">'
                f"{qty / per:,.2f}</span></td><td>ft³</td>{rate_cell}")
    if u.imperial and unit in ("m2", "m") and isinstance(qty, (int, float)):
        metric = "m²" if unit == "m2" else "m"
        per = M2_PER_FT2_EXACT if unit == "m2" else M_PER_FT_EXACT  # metres (squared) in one foot (squared)
        rate_cell = (_cell(None) if not isinstance(rate, (int, float)) else
                     f'<td class="num" data-rate-metric="{float(rate)!r}">{rate * per:,.4f}</td>')
        return (f'<td class="num">{u.span(float(qty), metric, 2)}</td><td>{u.unit_of(metric)}</td>{rate_cell}')
    shown = {"m2": "m²", "m3": "m³"}.get(unit, unit)
    return f"{_cell(qty)}<td>{_esc(shown)}</td>{_cell(rate)}"


def _bill_html(bill: Any, u: DisplayUnits = DisplayUnits()) -> str:
    data = _plain(bill)
    if not isinstance(data, dict) or not isinstance(data.get("lines"), list):
        return _generic_html(data)
    cur = data.get("currency")
    head = (f"<tr><th>Item</th><th>Description</th><th>Quantity</th><th>Unit</th>"
            f"<th>Rate{f' ({_esc(cur)})' if cur else ''}</th><th>Amount{f' ({_esc(cur)})' if cur else ''}</th></tr>")
    rows = "".join(
        f"<tr><td>{_esc(ln.get('item'))}</td><td>{_esc(ln.get('description'))}</td>{_bill_line_cells(ln, u)}"
        f"{_cell(ln.get('amount'))}</tr>"
        for ln in data["lines"] if isinstance(ln, dict))
    total = data.get("total")
    foot = (f'<tr class="total"><th colspan="5">Total{f" ({_esc(cur)})" if cur else ""}</th>'
            f'{_cell(total, "bill.total")}</tr>' if total is not None else "")
    note = f"<p class='small'>{_esc(data['note'])}</p>" if data.get("note") else ""
    basis = f"<p class='small'>Area basis: {_esc(data['area_basis'])}.</p>" if data.get("area_basis") else ""
    return (f'<table id="bill" class="data"><thead>{head}</thead><tbody>{rows}</tbody><tfoot>{foot}</tfoot>'
            f"</table>{basis}{note}")


def _position_heads(result: "SurveyResult", u: DisplayUnits) -> str:
    """Header cells of a plan position: plan metres (metric), or feet from the figures' origin."""
    if not u.imperial:
        return "<th>x (m)</th><th>y (m)</th>"
    s = result.survey.survey
    if s.kind == "hull":
        return "<th>station (ft)</th><th>girth (ft)</th>"
    if s.is_local:
        return "<th>x (ft)</th><th>y (ft)</th>"
    return "<th>ft east of the corner</th><th>ft north of the corner</th>"


def _position_cells(result: "SurveyResult", u: DisplayUnits, x: float, y: float, fmt: str = ".2f") -> str:
    """A plan position as two cells: plan metres, or in imperial feet from the figures' axes' origin."""
    if not u.imperial:
        return f"<td class='num'>{x:{fmt}}</td><td class='num'>{y:{fmt}}</td>"
    s = result.survey.survey
    x0, y0 = (0.0, 0.0) if s.kind == "hull" or s.is_local else _corner(result)
    return f"<td class='num'>{u.span(x - x0, 'm', 2)}</td><td class='num'>{u.span(y - y0, 'm', 2)}</td>"


#: Unit suffixes of cores.csv's extra columns -> metric unit (depth_mm, thickness_mm, height_m).
_EXTRA_UNITS = (("_mm", "mm"), ("_m2", "m²"), ("_m", "m"))


def _extra_unit(column: str) -> str | None:
    return next((unit for suffix, unit in _EXTRA_UNITS if column.endswith(suffix)), None)


def _is_number(text: str) -> bool:
    try:
        return math.isfinite(float(text))
    except ValueError:
        return False


def _decimals(text: str) -> int:
    return len(text.split(".")[1]) if "." in text else 0


def _confirmations(result: "SurveyResult") -> str:
    c = result.confirmations
    w = _words(result)
    if not len(c):
        return (f"<p id='cores'>No {w.confirmations_any} were given: every anomaly is <b>unverified</b>. Infrared "
                f"alone does not establish {w.wet_words}.</p>")
    u = display_units(result)
    # numeric extras with a unit in their name get a column each (converted in imperial units);
    # the text extras (layers, notes, ...) share one "Log" column so the table fits the page
    extra = [k for k in c.extra if k != "photo"]  # photos are shown beside the thermal view
    numeric = [k for k in extra if _extra_unit(k) and all(_is_number(v) for v in c.extra[k] if v)]
    texts = [k for k in extra if k not in numeric]
    labels = {"thickness_mm": "Wet thickness"}
    head = ("<tr><th>Id</th>" + _position_heads(result, u) + "<th>Graded (counted as)</th><th>Basis</th>"
            f"<th>ΔT there ({u.unit_of('K')})</th><th>In anomaly</th>"
            + "".join(f"<th>{_esc(labels.get(k, k[: k.rindex('_')].replace('_', ' ')))} "
                      f"({u.unit_of(_extra_unit(k))})</th>" for k in numeric)
            + ("<th>Log</th>" if texts else "") + "</tr>")
    rows = []
    for i, cid in enumerate(c.ids):
        basis = c.basis[i]
        value = c.values[i]
        if basis == "sound":
            shown = "sounding: dull" if c.wet[i] else "sounding: solid (does not refute alone)"
        else:
            shown = "result" if basis == "result" or not np.isfinite(value) else f"{basis} = {value:g}"
        anomaly = int(result.verdicts.anomaly_of[i])
        d = float(result.confirmation_delta_c[i])
        cells = "".join(
            f"<td class='num'>{u.span(float(c.extra[k][i]), _extra_unit(k), _decimals(c.extra[k][i])) if c.extra[k][i] else '–'}"
            "</td>" for k in numeric)
        log = "; ".join(f"{'layers' if k == 'layers' else k.replace('_', ' ')}: {c.extra[k][i]}"
                        for k in texts if c.extra[k][i])
        grade = c.grade[i] + ("" if c.grade[i] == ("wet" if c.wet[i] else "dry") else
                              f" ({'wet' if c.wet[i] else 'dry'})")
        rows.append(
            f"<tr data-grade='{_esc(c.grade[i])}'><td>{_esc(cid)}</td>"
            + _position_cells(result, u, float(c.xs[i]), float(c.ys[i]))
            + f"<td>{_esc(grade)}</td><td>{_esc(shown)}</td>"
            f"<td class='num'>{u.span(d, 'K', 2, signed=True) if math.isfinite(d) else _fmt(d)}</td>"
            f"<td>{'#' + str(anomaly + 1) if anomaly >= 0 else 'outside'}</td>"
            + cells + (f"<td class='log'>{u.html(_esc(log)) or '–'}</td>" if texts else "") + "</tr>")
    damp = sum(1 for g in c.grade if g == "damp")
    rule = "" if "result" not in c.basis else (
        "<p id='damp-rule'>Results are graded with the trade's words wet, damp and dry. A <b>damp</b> result "
        f"counts as <b>{_esc(c.damp_counts_as)}</b> for the statuses and quantities ([cores] damp_counts_as"
        f"{'' if c.damp_counts_as != 'wet' else ', the default: damp material has lost part of its value and rarely dries in place'}"
        f"); {damp} of the {len(c)} {_esc(w.confirmations)} here {'is' if damp == 1 else 'are'} damp.</p>")
    return (rule + f'<table id="cores" class="data"><thead>{head}</thead><tbody>{"".join(rows)}</tbody></table>'
            )


_PHOTO_IN = (3.3, 2.6)  # each half of a photo pair, inches


def thermal_crop_figure(result: "SurveyResult", x: float, y: float, half_m: float, *,
                        dpi: int = FIGURE_DPI) -> bytes:
    """The thermal view of the square ``2 half_m`` wide around plan ``(x, y)``, outlines and cores drawn.

    Returns
    -------
    bytes
        A PNG of ``_PHOTO_IN`` inches at ``dpi``.
    """
    from matplotlib.cm import ScalarMappable
    from matplotlib.colors import Normalize

    g = result.grid
    px = g.pixel_m
    rows, cols = result.surface_c.shape
    gx0, _, _, gy1 = g.bounds
    c0, c1 = max(0, int((x - half_m - gx0) / px)), min(cols, math.ceil((x + half_m - gx0) / px))
    r0, r1 = max(0, int((gy1 - y - half_m) / px)), min(rows, math.ceil((gy1 - y + half_m) / px))
    fig = _figure(_PHOTO_IN, dpi)
    ax = fig.add_subplot()
    imagery = getattr(result, "imagery", None)
    crop = result.surface_c[r0:max(r1, r0 + 1), c0:max(c1, c0 + 1)]
    if imagery is not None:
        lo, hi = imagery.surface_range.low_c, imagery.surface_range.high_c
    else:
        lo, hi = display_range(crop[np.isfinite(crop)] if np.isfinite(crop).any() else np.zeros(1))
    if r1 > r0 and c1 > c0:
        ax.imshow(colourise(crop, vmin=lo, vmax=hi, cmap=THERMAL_CMAP),
                  extent=(gx0 + c0 * px, gx0 + c1 * px, gy1 - r1 * px, gy1 - r0 * px),
                  interpolation="nearest", origin="upper", zorder=1)
    draw_geometry(ax, result.outline, facecolor="none", edgecolor="black", linewidth=1.0, zorder=2)
    _draw_anomalies(ax, result, filled=False, labels=False)
    _draw_cores(ax, result, labels=True)
    ax.set_xlim(x - half_m, x + half_m)
    ax.set_ylim(y - half_m, y + half_m)
    ax.set_aspect("equal")
    ax.set_xticks([])
    ax.set_yticks([])
    u = display_units(result)
    side = 2 * half_m
    ax.set_xlabel(f"{u.length(side):.0f} {u.length_unit} across", fontsize=7)
    bar = fig.colorbar(ScalarMappable(Normalize(lo, hi), THERMAL_CMAP), ax=ax, shrink=0.8, pad=0.02)
    bar.set_label(f"surface ({u.temp_unit})", fontsize=7)
    bar.ax.tick_params(labelsize=6)
    if u.imperial:
        ticks_in(bar.ax.yaxis, lo, hi, scale=1.8, offset=32.0)
    return _png(fig)


def _photo_pairs(result: "SurveyResult", dpi: int = 110) -> str:
    """Each photo beside the thermal view of the same place (cores.csv ``photo``; photos.csv by the
    nearest anomaly), both embedded; nothing when the survey has no photos."""

    s = result.survey
    if not result.photos:
        return ""
    w = _words(result)
    c = result.confirmations
    index = {cid: i for i, cid in enumerate(c.ids)}
    hull = s.survey.kind == "hull"
    out = ["<h3 id='photos'>Photos beside the thermal view</h3>"]
    for p, ai, dist in result.photos:
        if p.core is not None:
            i = index[p.core]
            bits = [f"graded {c.grade[i]}"]
            if "layers" in c.extra and c.extra["layers"][i]:
                bits.append(f"layers {c.extra['layers'][i]}")
            if "thickness_mm" in c.extra and _is_number(c.extra["thickness_mm"][i]):
                bits.append(f"wet thickness {c.extra['thickness_mm'][i]} mm")
            what = f"{w.confirmation.capitalize()} {p.core} ({'; '.join(bits)})"
            half = 0.6 if hull else 3.0
        else:
            a = result.anomalies[ai] if ai >= 0 else None
            what = (f"Photo near anomaly #{a.id} ({a.status}, {dist:.1f} m from its outline)" if a is not None
                    else "Photo (no anomaly found)") + (f": {p.caption}" if p.caption else "")
            half = 0.6 if hull else 3.0
            if a is not None:
                x0, y0, x1, y1 = a.geometry.bounds
                half = max(half, 0.6 * max(x1 - x0, y1 - y0) + dist)
        png = thermal_crop_figure(result, p.x, p.y, half, dpi=dpi)
        out.append(
            f"<figure class='photo-pair' data-photo='{_esc(p.written)}'><table class='pair'><tr>"
            f"<td><img src='{png_data_uri(png)}' alt='thermal view at {_esc(p.written)}'></td>"
            f"<td><img src='{thumbnail_uri(p.path)}' alt='{_esc(p.written)}'></td></tr></table>"
            f"<figcaption>{_esc(what)}. Left: corrected surface temperature around the "
            f"{'core' if p.core else 'place the photo was taken'} (same colours as Figure 1); right: "
            f"{_esc(p.written)}.</figcaption></figure>")
    return "".join(out)


def _calibration(summary: dict[str, Any], w: Wording, result: "SurveyResult | None" = None) -> str:
    """The threshold against the cores, the wet-area range and where the next cores are worth most."""
    parts = []
    n = w.confirmations
    by_section = summary.get("threshold_check_by_section") or []
    if by_section:
        parts.append("<p id='threshold-by-section' class='small'>The threshold within each section: " + "; ".join(
            f"{_esc(e['section'])}: {e['wet_cores']} wet and {e['dry_cores']} dry {n}, thresholds from "
            f"{e['range_c'][0]:+.2f} to {e['range_c'][1]:+.2f} °C fit them"
            + (f", misclassified {_esc(', '.join(e['misclassified']))}" if e["misclassified"] else "")
            for e in by_section) + ".</p>")
    t = summary.get("threshold_check")
    if t:
        c = t["confusion"]
        lo, hi = t["range_c"]
        by = [n if b == "cores" else b for b in t["range_bounded_by"]]
        parts.append(
            "<table id='threshold-check' class='data'><tbody>"
            f"<tr><th>Threshold used</th><td class='num'>ΔT &gt; {_fmt(t['chosen_c'], 'g')} °C</td></tr>"
            f"<tr><th>Thresholds that fit the {n} best</th><td class='num'>{_fmt(lo, '+.2f')} to "
            f"{_fmt(hi, '+.2f')} °C (low side: {_esc(by[0])}; high side: {_esc(by[1])})</td></tr>"
            f"<tr><th>Wet {n} above / at or below the threshold</th><td class='num'>{c['wet_above']} / "
            f"{c['wet_below']}</td></tr>"
            f"<tr><th>Dry {n} at or below / above the threshold</th><td class='num'>{c['dry_below']} / "
            f"{c['dry_above']}</td></tr>"
            f"<tr><th>Wet and dry {n} separable</th><td>{'yes' if t['separable'] else 'no'}</td></tr>"
            f"<tr><th>{n.capitalize()} the threshold gets wrong</th><td>{_esc(', '.join(t['misclassified']) or 'none')}"
            "</td></tr></tbody></table>")
    r = summary.get("wet_area_range")
    if r:
        parts.append(
            f"<p id='area-range'>Wet area counted: <b>{_fmt(r['likely_m2'])} m²</b> at the threshold used; "
            f"<b>{_fmt(r['low_m2'])} to {_fmt(r['high_m2'])} m²</b> across thresholds from "
            f"{_fmt(r['threshold_high_c'], '+.2f')} down to {_fmt(r['threshold_low_c'], '+.2f')} °C (the chosen "
            f"threshold ±0.5 °C, narrowed by what the {n} allow), widened by the outline's own uncertainty of "
            f"±{_fmt(r['geometric_m2'])} m² (pixel size times perimeter). Quote the range with the quantity.</p>")
    every = summary.get("suggested_cores") or []
    cores = every[:MAX_TABLE_SUGGESTIONS]  # the most useful first
    if cores:
        rows = "".join(
            f"<tr><td class='num'>{i}</td>"
            + (f"<td class='num'>{_fmt(c['x'])}</td><td class='num'>{_fmt(c['y'])}</td>" if result is None else
               _position_cells(result, display_units(result), float(c['x']), float(c['y']), ",.2f"))
            + f"<td>{_esc(c['kind'])}</td><td>{_esc(c['reason'])}</td></tr>" for i, c in enumerate(cores, 1))
        parts.append(
            f"<h3>Where the next {n} are worth most</h3><table id='suggested-cores' class='data'><thead><tr>"
            "<th>No.</th>" + ("<th>x (m)</th><th>y (m)</th>" if result is None else
                              _position_heads(result, display_units(result))) + "<th>Kind</th><th>Why</th></tr></thead>"
            f"<tbody>{rows}</tbody></table><p class='small'>{_esc(w.next_sample)}</p>")
        if len(every) > len(cores):
            parts.append(f"<p class='small more'>The {len(cores)} most useful of {len(every):,} suggestions; "
                         "all are in anomalies.gpkg (layer “suggested_cores”), map.html and summary.json.</p>")
    return "".join(parts)


def _further(result: "SurveyResult", summary: dict[str, Any]) -> str:
    parts = []
    for key, value in summary.items():
        if key in _SHOWN_KEYS or key == "bill":  # the bill is shown with the repair quantities
            continue
        u = display_units(result)
        parts.append(f"<h3>{_esc(_key_label(key, u).replace('_', ' '))}</h3><div class='further' "
                     f"data-summary-key='{_esc(key)}'>{_keyed_value(key, value, u, 0)}</div>")
    for attr, title in (("passes", "Passes"), ("registration", "Frame registration")):
        value = getattr(result, attr, None)
        if value is None or (hasattr(value, "__len__") and not len(value)) or attr in summary:
            continue
        parts.append(f"<h3>{title}</h3><div class='further'>{_generic_html(value, 0, display_units(result))}</div>")
    return "".join(parts)


def _limitations(result: "SurveyResult", summary: dict[str, Any]) -> str:
    cov = summary.get("coverage") or {}
    w = _words(result)
    items = [
        "<b>An infrared survey shows apparent thermal anomalies, not measured moisture.</b> A warm area after "
        f"cool-down is consistent with {_esc(w.wet_words)}, but it is not proof of it. Every anomaly "
        f"must be verified invasively ({_esc(w.invasive)}) before a repair decision; "
        f"anomalies without a {w.confirmation} inside are reported as <i>unverified</i>.",
        _esc(w.false_warm),
        "The result is only as good as the conditions: a dry surface, a sunny day before, light wind and no "
        "recent rain. See the warnings above.",
        f"Areas without thermal data are not surveyed, which does not mean dry "
        f"({_fmt(cov.get('uncovered_m2'))} m² here). Exclusions are not surveyed.",
        f"The survey does not find where water enters, does not judge the fitness of the {w.area_short} and is "
        "no warranty.",
        "Repair outlines and quantities are measured on the plan with a margin that is a setting, not a "
        "published value; check them on site during the work before ordering materials or quoting.",
        _esc(w.who_decides),
    ]
    if w.false_readings:
        items.insert(2, _esc(w.false_readings))
    return "<ul>" + "".join(f"<li>{i}</li>" for i in items) + "</ul>"


def _safety(w: Wording) -> str:
    """The safety cautions of the survey's kind (:attr:`wetmap.wording.Wording.safety`)."""
    return "<ul>" + "".join(f"<li>{f'<b>{_esc(head)}</b> ' if head else ''}{_esc(text)}</li>"
                            for head, text in w.safety) + "</ul>"

_CSS = """
/* Printable on A4 (210 x 297 mm) and US Letter (215.9 x 279.4 mm): no size is forced, so the
   page follows the paper chosen when printing; content fits 182 x 247 mm, the smaller of the two. */
@page { margin: 16mm 14mm 16mm 14mm; }
@page { @bottom-center { content: "Page " counter(page) " of " counter(pages); font: 8pt sans-serif; color: #555; } }
html { font: 10pt/1.4 "DejaVu Sans", "Segoe UI", Roboto, Helvetica, Arial, sans-serif; color: #111; }
body { max-width: 182mm; margin: 10mm auto; padding: 0 4mm; }
h1 { font-size: 17pt; margin: 0 0 2mm; }
h2 { font-size: 13pt; margin: 7mm 0 2mm; border-bottom: 1px solid #000; break-after: avoid; page-break-after: avoid; }
h3 { font-size: 11pt; margin: 4mm 0 1.5mm; break-after: avoid; page-break-after: avoid; }
p { margin: 1.5mm 0; }
.subtitle { color: #333; margin-bottom: 3mm; }
.notice { border: 2px solid #000; padding: 2mm 3mm; margin: 3mm 0; break-inside: avoid; }
.caution { border-left: 3px solid #D55E00; padding-left: 2mm; }
table { border-collapse: collapse; width: 100%; margin: 1.5mm 0 3mm; font-size: 9pt; }
th, td { border: 1px solid #999; padding: 0.8mm 1.5mm; text-align: left; vertical-align: top; }
table.kv th { width: 38%; font-weight: 600; background: #f2f2f2; }
table.keyfigures th { width: 62%; font-weight: 600; background: #f2f2f2; }
table.data thead th { background: #e6e6e6; }
td.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
tr.total th, tr.total td { background: #f2f2f2; font-weight: 600; }
thead { display: table-header-group; }
tfoot { display: table-row-group; }
tr, img, figure, .notice, .signature, .keep { break-inside: avoid; page-break-inside: avoid; }
figure { margin: 3mm 0 5mm; }
figure img { display: block; width: 100%; max-width: 182mm; height: auto; border: 1px solid #ccc; }
figcaption { font-size: 8.5pt; margin-top: 1mm; }
table#cores { font-size: 8pt; } table#cores td.log { font-size: 7.5pt; }
table.pair { border: none; margin: 0; table-layout: fixed; } table.pair td { border: none; padding: 0 1mm 0 0;
  width: 50%; vertical-align: middle; } table.pair img { width: 100%; height: auto; display: block; }
ul.warnings li { margin-bottom: 1mm; }
.small { font-size: 8.5pt; color: #333; }
.newpage { break-before: page; page-break-before: always; }
.signature table { margin-top: 3mm; }
.signature th { width: 34%; background: #f2f2f2; }
.signature td { height: 10mm; }
.signature td.tall { height: 22mm; }
.further table { font-size: 8.5pt; table-layout: fixed; } .further th, .further td { overflow-wrap: anywhere; }
.cover img.logo { display: block; max-height: 22mm; max-width: 70mm; margin-bottom: 4mm; }
table.client { width: auto; min-width: 60%; }
table.client th { width: auto; min-width: 35mm; }
@media screen { body { background: #fff; } .screen-note { color: #555; font-size: 9pt; } }
@media print { .screen-note { display: none; } a { color: inherit; text-decoration: none; } }
"""


_LOGO_TYPES = {".png": "image/png", ".jpg": "image/jpeg", ".jpeg": "image/jpeg", ".svg": "image/svg+xml"}


def _cover(result: "SurveyResult", title: str, sub: str) -> str:
    """The cover: logo, title and the client block of ``[report]`` (rows not given are left out)."""
    info = getattr(result.survey, "report", None)
    sv = result.survey.survey
    logo = ""
    path = getattr(info, "logo", None)
    if path is not None:
        uri = f"data:{_LOGO_TYPES.get(Path(path).suffix.lower(), 'image/png')};base64," + base64.b64encode(
            Path(path).read_bytes()).decode("ascii")
        logo = f'<img class="logo" src="{uri}" alt="logo">'
    rows = [("Client", getattr(info, "client", None)), ("Property", getattr(info, "address", None)),
            ("Job number", getattr(info, "job_number", None)), ("Prepared by", getattr(info, "company", None)),
            ("Surveyor", sv.surveyor), ("Survey date", sv.date), ("Report revision", getattr(info, "revision", None)),
            ("Date of issue", getattr(info, "issue_date", None))]
    body = "".join(f'<tr data-field="{_esc(k)}"><th>{_esc(k)}</th><td>{_esc(v)}</td></tr>' for k, v in rows if v)
    return (f"<header class='cover' id='cover'>{logo}<h1>{_esc(title)}</h1><div class='subtitle'>{_esc(sub)}</div>"
            f"<table class='kv client' id='client'>{body}</table>")


def build_report(result: "SurveyResult", *, dpi: int = FIGURE_DPI) -> str:
    """The text of ``report.html`` for ``result``.

    Parameters
    ----------
    result
        The run's results.
    dpi
        Resolution of the figures, dots per inch (each figure is 6.7 in wide).

    Returns
    -------
    str
        A self-contained HTML page (UTF-8) with no network references.
    """
    summary = result.summary()
    sv = result.survey.survey
    w = _words(result)
    title = f"Thermal survey report: {sv.title}"
    sub = ", ".join(x for x in (_kind_words(result), sv.site, sv.date) if x)
    further = _further(result, summary)
    parts = [
        "<!DOCTYPE html>",
        '<html lang="en"><head><meta charset="utf-8">',
        '<meta name="viewport" content="width=device-width, initial-scale=1">',
        f"<title>{_esc(title)}</title><style>{_CSS}</style></head><body>",
        _cover(result, title, sub),
        "<p class='screen-note'>Print this page (A4 or Letter) from the browser; the interactive map is in "
        "map.html beside it.</p></header>",
        "<div class='notice'><b>Read first.</b> This survey shows <b>apparent thermal anomalies, not measured "
        f"moisture</b>. Confirm every finding by invasive verification ({_esc(w.invasive_short)}) before any "
        "repair decision. "
        "Local codes, work-safety rules and licensed professionals decide; see Limitations and Safety at the "
        "end.</div>",
        "<section id='s-key'><h2>1. Key figures</h2>", _key_figures(summary, w, display_units(result)), "</section>",
        "<section id='s-conditions'><h2>2. Site, survey and conditions</h2>", _conditions(result),
        "<h3>Warnings from the checks</h3>", _warnings(summary), "</section>",
        "<section id='s-method'><h2>3. Method</h2>", _method(result, summary), "</section>",
        "<section id='s-figures'><h2>4. Figures</h2>", _figures(result, dpi), "</section>",
        "<section id='s-anomalies'><h2>5. Anomalies</h2>", _anomaly_table(result, summary), "</section>",
        "<section id='s-quantities'><h2>6. Repair quantities</h2>", _quantities(result, summary), "</section>",
        f"<section id='s-cores'><h2>7. {_esc(w.confirmations_title)}</h2>", _confirmations(result), _photo_pairs(result), "</section>",
        "<section id='s-calibration'><h2>8. Threshold check and wet-area range</h2>", _calibration(summary, w, result),
        "</section>",
    ]
    n = 9
    if further:
        parts += [f"<section id='s-further'><h2>{n}. Further results</h2>", further, "</section>"]
        n += 1
    parts += [
        f"<section id='s-limitations' class='newpage'><h2>{n}. Limitations</h2>", _limitations(result, summary),
        "</section>",
        f"<section id='s-safety' class='keep'><h2>{n + 1}. Safety</h2>", _safety(w), "</section>",
        f"<section id='s-signature' class='signature'><h2>{n + 2}. Sign-off</h2>",
        f"<p>I carried out or supervised this survey and checked the findings above against the {w.confirmations} "
        "listed.</p>",
        "<table><tr><th>Surveyor (name)</th><td>" + _esc(sv.surveyor or "") + "</td></tr>"
        "<tr><th>Qualification / certification</th><td></td></tr>"
        "<tr><th>Signature</th><td class='tall'></td></tr>"
        "<tr><th>Date</th><td></td></tr></table></section>",
        f"<footer class='small'><p>Prepared with wetmap {_esc(summary.get('wetmap_version', __version__))}. "
        "Files of this run: summary.json, anomalies.gpkg / .geojson, repair.gpkg, quantities.csv, sections.csv, "
        "bill.csv, takeoff.xlsx, report.pdf, "
        "surface_c.tif, delta_c.tif, map.html.</p></footer>",
        "</body></html>",
    ]
    page = display_units(result).html("\n".join(parts))  # imperial: every metric figure of the prose converted
    remote = remote_references(page)
    if remote:
        raise ProcessingError(f"report.html: the page would load {remote[0]} from the network; "
                              "this is a wetmap bug, please report it")
    return page


def write_report(result: "SurveyResult", path: Path, *, dpi: int = FIGURE_DPI, pdf: Path | None = None) -> None:
    """Write ``report.html`` (see :func:`build_report`) and, when ``pdf`` is given, the
    same text laid out as a PDF there (:func:`write_pdf`)."""
    text = build_report(result, dpi=dpi)
    Path(path).write_text(text, encoding="utf-8")
    if pdf is not None:
        write_pdf(result, pdf, html_text=text)


def _pdf_css(result: "SurveyResult") -> str:
    """Print rules of the PDF beside the report's own: paper size, a cover page, a running head."""
    info = getattr(result.survey, "report", None)
    paper = getattr(info, "paper", "A4")
    head = " · ".join(x for x in (
        result.survey.survey.title,
        f"Job {info.job_number}" if getattr(info, "job_number", None) else None,
        f"Rev. {info.revision}" if getattr(info, "revision", None) else None,
        getattr(info, "issue_date", None)) if x)
    head = head.replace("\\", "\\\\").replace('"', '\\"')
    return (f"@page {{ size: {'A4' if paper == 'A4' else 'letter'}; "
            f'@top-right {{ content: "{head}"; font: 7.5pt sans-serif; color: #555; }} }}\n'
            "@page :first { @top-right { content: none; } }\n"
            "body { margin: 0; max-width: none; padding: 0; }\n"
            "header.cover { break-after: page; padding-top: 30mm; }\n"
            "header.cover h1 { font-size: 22pt; }\n"
            ".screen-note { display: none; }\n"
            "table.data { break-inside: auto; } table.data tr, figure, .keyfigures, table.kv { break-inside: avoid; }\n"
            "#bill, #sections, #client { break-inside: avoid; }\n")


def write_pdf(result: "SurveyResult", path: Path, *, dpi: int = FIGURE_DPI, html_text: str | None = None) -> bool:
    """Write ``report.pdf``: the content of ``report.html`` laid out on ``[report] paper``.

    Rendered by WeasyPrint (HTML and CSS to PDF; it needs the Pango system library).
    Figures, table rows, key figures and the sign-off are kept whole on a page; long
    tables repeat their header row; the client block stands alone on the cover.

    Parameters
    ----------
    result
        The run's results.
    path
        Where to write the PDF.
    dpi
        Resolution of the figures (ignored when ``html_text`` is given).
    html_text
        The text of ``report.html`` when already built.

    Returns
    -------
    bool
        False when WeasyPrint or its system libraries are missing (a warning is logged and
        no PDF is written); True when written.
    """
    log = logging.getLogger(__name__)
    try:
        from weasyprint import CSS, HTML
    except (ImportError, OSError) as err:  # OSError: Pango / GObject not installed
        log.warning("report.pdf not written: WeasyPrint cannot start (%s); install the Pango library "
                    "(Debian: apt-get install libpango-1.0-0 libpangoft2-1.0-0) and `pip install weasyprint`",
                    str(err).splitlines()[0] if str(err) else type(err).__name__)
        return False
    text = html_text if html_text is not None else build_report(result, dpi=dpi)
    logging.getLogger("weasyprint").setLevel(logging.ERROR)  # its CSS notes about screen-only rules
    logging.getLogger("fontTools").setLevel(logging.ERROR)
    HTML(string=text).write_pdf(Path(path), stylesheets=[CSS(string=_pdf_css(result))])
    return True
