"""``map.html``: an interactive map of the survey that opens with no network connection.

The map is built with folium (Leaflet). Every script and style it needs is written
*inside* the file: Leaflet 1.9.4 is vendored under ``wetmap/export/assets/leaflet/``
(BSD 2-Clause, its licence beside it) and inlined, and the images (thermal overlays,
colour bars) are embedded as base64 ``data:`` URIs. No background tile map is drawn
unless asked for (``tiles=``), so the file shows the survey from a USB stick on a laptop
with no network.

Coordinates
    A georeferenced survey is drawn on real coordinates: vectors are reprojected to
    WGS84 longitude/latitude and the thermal rasters are warped onto the Web Mercator
    grid Leaflet draws in, so overlay and outlines line up to a pixel. A ``local`` plan
    (and a developed hull side) is drawn on a plain metric plane (Leaflet's
    ``CRS.Simple``: one map unit = one plan metre, ``lat = y``, ``lng = x``).

Colours (our own choice, chosen to read with colour-vision deficiency)
    - Thermal images: matplotlib's ``cividis`` (a dark-blue-to-yellow map designed to be
      read the same with red-green colour-vision deficiency: Nuñez, Anderton & Renslow
      2018, PLOS ONE 13:e0199239), range from robust percentiles of the roof's pixels.
    - Anomaly status: colours from the Okabe & Ito (2008) colour-universal-design palette,
      and a line pattern per status so colour is never the only cue: ``wet`` vermillion
      solid, ``unverified`` reddish purple dashed, ``dry`` blue dotted.
    - Cores and readings: judged wet = filled vermillion disc; judged dry = white disc
      with a thick blue ring (fill versus ring, not hue alone).
    - Repair outline black dashed, whole boards bluish green, exclusions grey, uncovered
      roof light grey: all from the same palette or neutral greys.

Every layer but the second thermal view and the boards is shown when the page opens;
all can be toggled in the layer list. A title block names the site, date and
conditions; a legend carries the colour bars in degC (degF with ``[report] units = "imperial"``,
as does the display-range control); a scale bar sits bottom left.
"""

from __future__ import annotations

import base64
import html
import io
import json
import math
import re
import warnings
from collections.abc import Callable
from contextlib import contextmanager
from functools import lru_cache
from importlib import resources
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import shapely
from shapely.geometry import mapping
from shapely.geometry.base import BaseGeometry
from affine import Affine

from ..errors import ProcessingError
from ..photos import thumbnail_uri
from ..style import CORE_COLOURS, LAYER_COLOURS, STATUS_STYLES, THERMAL_CMAP, StatusStyle, display_range
from ..wording import Wording, wording_of
from .units import display_units, ticks_in  # the report's units setting, one for every output
from .units import esc_html as _esc

if TYPE_CHECKING:
    from ..results import SurveyResult

__all__ = [
    "THERMAL_CMAP",
    "StatusStyle",
    "STATUS_STYLES",
    "CORE_COLOURS",
    "LAYER_COLOURS",
    "display_range",
    "decimate",
    "colourise",
    "png_bytes",
    "png_data_uri",
    "colour_bar_png",
    "data_png",
    "RECOLOUR_PALETTES",
    "uncovered_area",
    "remote_references",
    "build_map",
    "write_map",
]

_ASSETS = "assets/leaflet"
_GEO_DIGITS = 8  # decimal places of longitude/latitude in the file (about 1 mm)
_PLAN_DIGITS = 3  # decimal places of plan metres


# --------------------------------------------------------------------------------------
# Raster helpers (shared with the report)
# --------------------------------------------------------------------------------------


def decimate(values: np.ndarray, factor: int) -> np.ndarray:
    """Block means over ``factor x factor`` pixels, NaN ignored (NaN where a block is all NaN).

    The last row and column of blocks may be partial. Works in strips, so memory stays
    near the output's size.

    Parameters
    ----------
    values
        ``(rows, cols)`` array.
    factor
        Block side in pixels, ``>= 1``.

    Returns
    -------
    numpy.ndarray
        float32, ``(ceil(rows / factor), ceil(cols / factor))``.

    Examples
    --------
    >>> a = np.arange(16, dtype=float).reshape(4, 4)
    >>> a[0, 0] = np.nan
    >>> decimate(a, 2)
    array([[ 3.3333333,  4.5      ],
           [10.5      , 12.5      ]], dtype=float32)
    >>> decimate(a, 3).shape
    (2, 2)
    """
    if factor <= 1:
        return np.asarray(values, dtype=np.float32)
    rows, cols = values.shape
    out_r, out_c = -(-rows // factor), -(-cols // factor)
    out = np.full((out_r, out_c), np.nan, dtype=np.float32)
    strip_blocks = max(1, 4096 // factor)
    for b0 in range(0, out_r, strip_blocks):
        b1 = min(out_r, b0 + strip_blocks)
        strip = np.asarray(values[b0 * factor: b1 * factor], dtype=np.float32)
        pad_r = (b1 - b0) * factor - strip.shape[0]
        pad_c = out_c * factor - cols
        if pad_r or pad_c:
            strip = np.pad(strip, ((0, pad_r), (0, pad_c)), constant_values=np.nan)
        blocks = strip.reshape(b1 - b0, factor, out_c, factor)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)  # all-NaN blocks give NaN, as documented
            out[b0:b1] = np.nanmean(blocks, axis=(1, 3))
    return out


def colourise(values: np.ndarray, *, vmin: float, vmax: float, cmap: str = THERMAL_CMAP) -> np.ndarray:
    """Values -> RGBA bytes through a matplotlib colour map; NaN becomes transparent.

    Parameters
    ----------
    values
        ``(rows, cols)``, degC.
    vmin, vmax
        Colour range, degC; values outside are clipped to the ends.

    Returns
    -------
    numpy.ndarray
        uint8 ``(rows, cols, 4)``.

    Examples
    --------
    >>> rgba = colourise(np.array([[0.0, 1.0, np.nan]]), vmin=0.0, vmax=1.0)
    >>> rgba.shape, int(rgba[0, 2, 3]), int(rgba[0, 0, 3])
    ((1, 3, 4), 0, 255)
    """
    import matplotlib

    cm = matplotlib.colormaps[cmap]
    lut = cm(np.arange(cm.N), bytes=True)  # (N, 4) uint8: the map's own colours
    span = vmax - vmin if vmax > vmin else 1.0
    # the colour map's own rule (index = floor(x * N), 1.0 -> N - 1) on float32, in place:
    # a few bytes a pixel instead of the float64 and int64 copies of calling the map
    x = np.asarray(values, dtype=np.float32) - np.float32(vmin)
    x /= np.float32(span)
    finite = np.isfinite(x)
    np.clip(x, 0.0, 1.0, out=x)
    x[np.isnan(x)] = 0.0
    x *= np.float32(cm.N)
    index = x.astype(np.uint16)
    del x
    np.minimum(index, cm.N - 1, out=index)
    rgba = lut[index]
    rgba[..., 3] = np.where(finite, 255, 0)
    return rgba


def png_bytes(rgba: np.ndarray) -> bytes:
    """An RGBA or RGB uint8 array as PNG file bytes (Pillow).

    Examples
    --------
    >>> png_bytes(np.zeros((2, 3, 4), np.uint8))[:8] == b"\\x89PNG\\r\\n\\x1a\\n"
    True
    """
    from PIL import Image

    buf = io.BytesIO()
    # level 1: noisy thermal images gain under 1 % from zlib's default level 6, at 4 x the time
    Image.fromarray(np.ascontiguousarray(rgba)).save(buf, format="PNG", compress_level=1)
    return buf.getvalue()


def png_data_uri(png: bytes) -> str:
    """PNG bytes as a ``data:image/png;base64,...`` URI.

    Examples
    --------
    >>> png_data_uri(b"abc")
    'data:image/png;base64,YWJj'
    """
    return "data:image/png;base64," + base64.b64encode(png).decode("ascii")


def colour_bar_png(vmin: float, vmax: float, *, label: str, cmap: str = THERMAL_CMAP,
                   width_in: float = 2.8, height_in: float = 0.62, dpi: int = 100,
                   fahrenheit: str | None = None) -> bytes:
    """A horizontal colour bar with ticks in degC (or degF), as PNG bytes (matplotlib Agg).

    Parameters
    ----------
    vmin, vmax
        Range, degC.
    label
        Text under the bar (say the unit).
    width_in, height_in, dpi
        Size: the PNG is ``round(width_in * dpi) x round(height_in * dpi)`` pixels.
    fahrenheit
        ``"temperature"`` or ``"difference"``: ticks at round degF values (the range stays degC).
    """
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.cm import ScalarMappable
    from matplotlib.colors import Normalize
    from matplotlib.figure import Figure

    fig = Figure(figsize=(width_in, height_in), dpi=dpi)
    FigureCanvasAgg(fig)
    ax = fig.add_axes((0.05, 0.55, 0.9, 0.3))
    bar = fig.colorbar(ScalarMappable(Normalize(vmin, vmax), cmap), cax=ax, orientation="horizontal")
    bar.ax.tick_params(labelsize=7, length=2, pad=1)
    if fahrenheit is not None:
        ticks_in(bar.ax.xaxis, vmin, vmax, scale=1.8, offset=32.0 if fahrenheit == "temperature" else 0.0)
    bar.set_label(label, fontsize=7, labelpad=1)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi)
    return buf.getvalue()


def uncovered_area(result: "SurveyResult", *, factor: int = 1) -> BaseGeometry:
    """The part of the roof with no thermal data (NaN surface pixels inside the roof).

    Parameters
    ----------
    result
        The run's results.
    factor
        Work on ``factor x factor`` blocks (a block is uncovered when all its pixels are).

    Returns
    -------
    shapely geometry
        Polygon or MultiPolygon in plan coordinates, clipped to the roof; empty when
        every roof pixel has data.
    """
    from rasterio.features import shapes

    surface = result.surface_c if factor <= 1 else decimate(result.surface_c, factor)
    nodata = ~np.isfinite(surface)
    if not nodata.any() or result.roof.is_empty:
        return shapely.Polygon()
    transform = result.grid.transform @ Affine.scale(max(factor, 1))
    polys = [shapely.geometry.shape(g) for g, _ in
             shapes(nodata.astype(np.uint8), mask=nodata, transform=transform, connectivity=4)]
    area = shapely.union_all(np.asarray(polys, dtype=object)).intersection(result.roof)
    parts = [p for p in shapely.get_parts(area) if isinstance(p, shapely.Polygon) and p.area > 0]
    return shapely.MultiPolygon(parts) if parts else shapely.Polygon()


# --------------------------------------------------------------------------------------
# Coordinates
# --------------------------------------------------------------------------------------


class Projection:
    """Plan coordinates -> what Leaflet takes (lon/lat, or plan metres on CRS.Simple)."""

    def __init__(self, crs: str | None):
        self.crs = crs
        if crs is None:
            self._to_ll = None
            self.digits = _PLAN_DIGITS
        else:
            from pyproj import Transformer

            self._to_ll = Transformer.from_crs(crs, "EPSG:4326", always_xy=True)
            self.digits = _GEO_DIGITS

    @property
    def local(self) -> bool:
        return self._to_ll is None

    def xy(self, xs: np.ndarray, ys: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """GeoJSON coordinate order: ``(lon, lat)`` or ``(x, y)``."""
        xs, ys = np.asarray(xs, dtype=float), np.asarray(ys, dtype=float)
        if self._to_ll is not None:
            xs, ys = self._to_ll.transform(xs, ys)
        return np.round(xs, self.digits), np.round(ys, self.digits)

    def geometry(self, geom: BaseGeometry) -> BaseGeometry:
        def fn(coords: np.ndarray) -> np.ndarray:
            x, y = self.xy(coords[:, 0], coords[:, 1])
            return np.column_stack([x, y])

        return shapely.transform(geom, fn)

    def latlng_bounds(self, bounds: tuple[float, float, float, float]) -> list[list[float]]:
        """Plan ``(xmin, ymin, xmax, ymax)`` -> ``[[south, west], [north, east]]`` of its corners."""
        x0, y0, x1, y1 = bounds
        xs, ys = self.xy(np.array([x0, x1, x1, x0]), np.array([y0, y0, y1, y1]))
        return [[float(ys.min()), float(xs.min())], [float(ys.max()), float(xs.max())]]


def _overlay(values: np.ndarray, result: "SurveyResult", factor: int, proj: Projection
             ) -> tuple[np.ndarray, list[list[float]]]:
    """Decimated values placed for Leaflet: ``(array, [[south, west], [north, east]])``.

    On a georeferenced survey the array is warped (nearest neighbour) onto a north-up
    Web Mercator grid, the plane Leaflet draws in, so the image lines up with the
    reprojected outlines; its bounds are given as longitude/latitude.
    """
    transform = result.grid.transform @ Affine.scale(factor)
    rows, cols = values.shape
    x0, y1 = transform.c, transform.f
    x1, y0 = x0 + transform.a * cols, y1 + transform.e * rows
    if proj.local:
        return values, [[y0, x0], [y1, x1]]
    from pyproj import Transformer
    from rasterio.warp import Resampling, calculate_default_transform, reproject

    dst_transform, width, height = calculate_default_transform(
        result.grid.crs, "EPSG:3857", cols, rows, left=x0, bottom=y0, right=x1, top=y1)
    out = np.full((height, width), np.nan, dtype=np.float32)
    reproject(values.astype(np.float32), out, src_transform=transform, src_crs=result.grid.crs,
              src_nodata=np.nan, dst_transform=dst_transform, dst_crs="EPSG:3857", dst_nodata=np.nan,
              resampling=Resampling.nearest)
    mx0, my1 = dst_transform.c, dst_transform.f
    mx1, my0 = mx0 + dst_transform.a * width, my1 + dst_transform.e * height
    lons, lats = Transformer.from_crs("EPSG:3857", "EPSG:4326", always_xy=True).transform([mx0, mx1], [my0, my1])
    return out, [[lats[0], lons[0]], [lats[1], lons[1]]]


# --------------------------------------------------------------------------------------
# Text helpers
# --------------------------------------------------------------------------------------


def _num(value: float | None, fmt: str, unit: str = "") -> str:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return "n/a"
    return f"{value:{fmt}}{unit}"


def _sq(value: float) -> str:
    return f"{value:,.2f} m²"


def _status_words(status: str, w: Wording | None = None) -> str:
    c1, cn = (w.confirmation, w.confirmations) if w is not None else ("core", "cores")
    return {"wet": f"wet (confirmed by a {c1})", "dry": f"dry (refuted: {cn} inside all dry)",
            "unverified": f"unverified (no {c1} inside)"}.get(status, status)


def _status_legend(status: str, w: Wording) -> str:
    """The legend's words for a status, in the survey's vocabulary."""
    c1 = w.confirmation
    return {"wet": f"wet: a {c1} inside says wet", "unverified": f"unverified: no {c1} inside",
            "dry": f"dry: every {c1} inside says dry"}.get(status, STATUS_STYLES[status].label if status in
                                                        STATUS_STYLES else status)


def _photo_html(result: "SurveyResult", units=None) -> tuple[dict[str, str], dict[int, str]]:
    """Popup HTML of the survey's photos: by core id, and by anomaly id (photos.csv, nearest anomaly)."""
    by_core: dict[str, str] = {}
    by_anomaly: dict[int, str] = {}
    for p, ai, dist in result.photos:
        img = (f'<img class="wetmap-photo" src="{thumbnail_uri(p.path, max_px=480)}" alt="{_esc(p.written)}" '
               f'style="display:block;max-width:300px;height:auto"><span>{_esc(p.written)}'
               + (f": {_esc(p.caption)}" if p.caption else "") + "</span>")
        if units is not None:
            img = units.html(img)
        if p.core is not None:
            by_core[p.core] = img
        elif ai >= 0:
            a = result.anomalies[ai]
            away = f"{dist:.1f} m from the outline"
            by_anomaly[a.id] = (by_anomaly.get(a.id, "") + img
                                + f"<span> ({units.html(away) if units is not None else away})</span>")
    return by_core, by_anomaly


#: Popup labels of the core log's optional columns.
_EXTRA_LABELS = {"layers": "Layers (build-up)", "thickness_mm": "Wet thickness", "photo": "Photo"}


def _core_basis(result: "SurveyResult", i: int) -> str:
    c = result.confirmations
    basis = c.basis[i]
    value = c.values[i]
    if basis == "sound":
        return ("percussion sounding: dull (counted as wet)" if c.wet[i]
                else "percussion sounding: solid (does not refute an anomaly alone)")
    if basis == "result" or not np.isfinite(value):
        return "core result (graded wet/damp/dry as entered)"
    if basis == "moisture_pct":
        limit = result.survey.cores.wet_above_pct if result.survey.cores else None
        return f"moisture {value:g} % by weight (wet above {_num(limit, 'g', ' %')})"
    limit = result.survey.cores.wet_above if result.survey.cores else None
    return f"meter reading {value:g} (wet above {_num(limit, 'g')})"


# --------------------------------------------------------------------------------------
# Leaflet assets and the page furniture
# --------------------------------------------------------------------------------------


@lru_cache(maxsize=1)
def leaflet_assets() -> tuple[str, str]:
    """Leaflet's JS and CSS from the vendored copy, CSS images as data URIs."""
    base = resources.files("wetmap.export").joinpath(_ASSETS)
    try:
        js = base.joinpath("leaflet.js").read_text(encoding="utf-8")
        css = base.joinpath("leaflet.css").read_text(encoding="utf-8")

        def inline(match: re.Match) -> str:
            data = base.joinpath(match.group(1)).read_bytes()
            return f"url({png_data_uri(data)})"

        css = re.sub(r"url\((images/[\w.-]+\.png)\)", inline, css)
    except (FileNotFoundError, OSError) as err:
        raise ProcessingError(
            f"wetmap/export/{_ASSETS}: Leaflet's files are missing from the installation ({err}); "
            "reinstall wetmap (pip install --force-reinstall wetmap)"
        ) from err
    js = re.sub(r"//# sourceMappingURL=\S+\s*$", "", js)  # no map file travels with the page
    return js.replace("</script", "<\\/script"), css


#: The map's north arrow: drawn inline (no image file, no network), pointing up the page.
NORTH_ARROW_SVG = (
    '<svg class="wetmap-north-arrow" width="26" height="40" viewBox="0 0 26 40" role="img" '
    'aria-label="north arrow: north is up"><title>North</title>'
    '<polygon points="13,2 22,30 13,24 4,30" fill="#000000"/>'
    '<polygon points="13,2 13,24 4,30" fill="#ffffff" stroke="#000000" stroke-width="1"/>'
    '<text x="13" y="39" text-anchor="middle" font-size="11" font-weight="bold" '
    'font-family="DejaVu Sans, sans-serif">N</text></svg>'
)


PAGE_CSS = """
html, body { display: flex; flex-direction: column; }
.folium-map { flex: 1 1 auto; height: auto !important; min-height: 0; }
.wetmap-header { flex: none; padding: 5px 12px 6px; background: #ffffff; border-bottom: 2px solid #000000;
  font: 13px/1.35 system-ui, -apple-system, "Segoe UI", Roboto, "DejaVu Sans", sans-serif; color: #111; }
.wetmap-header h1 { font-size: 17px; margin: 0 12px 0 0; display: inline; white-space: nowrap; }
.wetmap-header .facts span { margin-right: 14px; white-space: nowrap; }
.wetmap-header .facts span.conv { margin-right: 0; }
.wetmap-header .note { font-size: 12px; color: #333; }
.wetmap-panel { background: #ffffff; padding: 5px 8px; border-radius: 5px;
  box-shadow: 0 1px 5px rgba(0,0,0,0.4); font: 12px/1.3 system-ui, -apple-system, "Segoe UI", Roboto,
  "DejaVu Sans", sans-serif; color: #111; max-width: 300px; }
.wetmap-panel summary { font-weight: bold; cursor: pointer; }
.wetmap-legend .row { display: flex; align-items: center; gap: 6px; margin: 1px 0; }
.wetmap-legend svg { flex: none; }
.wetmap-legend img { display: block; margin: 2px 0; }
.wetmap-legend .note { margin-top: 3px; font-size: 11px; color: #333; }
.leaflet-control-layers { font-size: 12px; }
.wetmap-north { padding: 3px 5px 1px; line-height: 0; }
.wetmap-display .row { margin: 3px 0 1px; }
.wetmap-display .note { margin-top: 3px; font-size: 11px; color: #333; max-width: 240px; }
.wetmap-label { background: rgba(255,255,255,0.88); border: 1px solid #555; padding: 0 3px;
  font: bold 11px/1.2 system-ui, sans-serif; box-shadow: none; }
.wetmap-section-label { font-style: italic; font-weight: normal; border-style: dashed; }
.leaflet-container { background: #f4f4f4; }
.foliumpopup th { text-align: left; padding-right: 8px; }
"""


def _line_sample(colour: str, dash: str | None, *, width: int = 3, fill: str | None = None) -> str:
    dash_attr = f' stroke-dasharray="{dash}"' if dash else ""
    if fill is not None:
        return (f'<svg width="28" height="14"><rect x="2" y="2" width="24" height="10" fill="{fill}" '
                f'fill-opacity="0.6" stroke="{colour}" stroke-width="{width}"{dash_attr}/></svg>')
    return (f'<svg width="28" height="14"><line x1="1" y1="7" x2="27" y2="7" stroke="{colour}" '
            f'stroke-width="{width}"{dash_attr}/></svg>')


def _disc_sample(fill: str, ring: str, ring_px: int) -> str:
    return (f'<svg width="28" height="14"><circle cx="14" cy="7" r="5" fill="{fill}" stroke="{ring}" '
            f'stroke-width="{ring_px}"/></svg>')


def _header_html(result: "SurveyResult", summary: dict[str, Any]) -> str:
    """The title block: site, date, survey, conditions, camera, threshold, what was found."""
    s, c = result.survey.survey, result.survey.conditions
    facts: list[str] = []
    if s.site:
        facts.append(f"<b>Site</b> {_esc(s.site)}")
    if s.date:
        facts.append(f"<b>Date</b> {_esc(s.date)}")
    w = wording_of(result.survey)
    kind = w.area
    facts.append(f"<b>Survey</b> {_esc(kind)}, plan {_esc('in local metres' if s.is_local else s.crs)}")
    cond = [f"air {c.air_c:g} °C", f"RH {c.humidity_pct:g} %"]
    if c.wind_m_s is not None:
        cond.append(f"wind {c.wind_m_s:g} m/s")
    if c.sky:
        cond.append(f"sky {c.sky}")
    if c.time is not None:
        cond.append(f"at {c.time.strftime('%H:%M')}" + (f" (sunset {c.sunset.strftime('%H:%M')})" if c.sunset else ""))
    facts.append(f"<b>Conditions</b> {_esc(', '.join(cond))}")
    r = result.radiometry
    how = "measured" if r.reflected_source.startswith("measured") else "estimated"
    facts.append(f"<b>Camera</b> ε {r.emissivity:g}, reflected {r.reflected_c:.1f} °C ({how})")
    facts.append(f"<b>Threshold</b> ΔT &gt; {result.detection.threshold_c:g} °C above the dry background")
    found = (f"<b>Found</b> {summary['anomaly_count']} anomalies: wet {_sq(summary['confirmed_wet_area_m2'])}, "
             f"unverified {_sq(summary['unverified_area_m2'])}, dry {_sq(summary['confirmed_dry_area_m2'])}; "
             f"repair outline {_sq(summary['repair_area_m2'])}")
    n_warn = len(summary.get("warnings", []))
    warn = f"; <b>{n_warn} warning{'s' if n_warn != 1 else ''}</b> (see report.html)" if n_warn else ""
    return (f'<div class="wetmap-header"><h1>{_esc(s.title)}</h1><span class="facts">'
            + " ".join(f"<span>{f}</span>" for f in facts) + "</span>"
            f"<div>{found}{warn}. <span class=\"note\">Apparent thermal anomalies, not measured moisture: "
            f"verify by {_esc(w.verify_by)} before any repair decision."
            "</span></div></div>")


def _legend_html(bars: list[tuple[str, bytes]], result: "SurveyResult") -> str:
    vocab = wording_of(result.survey)
    parts = ["<details open><summary>Legend</summary><b>Anomalies</b>"]
    for status, st in STATUS_STYLES.items():
        parts.append(f'<div class="row">{_line_sample(st.colour, st.dash)}<span>{_esc(_status_legend(status, vocab))}'
                     "</span></div>")
    if len(result.confirmations):
        parts.append(f"<b>{_esc(vocab.confirmations_title)}</b>")
        parts.append(f'<div class="row">{_disc_sample(CORE_COLOURS["wet"], "#000000", 1)}<span>judged wet</span></div>')
        parts.append(f'<div class="row">{_disc_sample("#FFFFFF", CORE_COLOURS["dry"], 3)}<span>judged dry</span></div>')
    if getattr(result, "suggested_cores", ()):
        if not len(result.confirmations):
            parts.append(f"<b>{_esc(vocab.confirmations_title)}</b>")
        parts.append(f'<div class="row">{_disc_sample("#F0E442", "#000000", 2)}<span>suggested next '
                     f"{_esc(vocab.confirmation)}</span></div>")
    parts.append("<b>Plan</b>")
    parts.append(f'<div class="row">{_line_sample(LAYER_COLOURS["repair"], "6 4", width=2)}'
                 f"<span>repair outline (margin {result.survey.repair.margin_m:g} m)</span></div>")
    if result.takeoff.count and vocab.whole_boards:
        parts.append(f'<div class="row">{_line_sample(LAYER_COLOURS["boards"], None, width=1)}'
                     "<span>whole boards replaced</span></div>")
    if not result.exclusions.is_empty:
        parts.append(f'<div class="row">{_line_sample("#666666", None, width=1, fill=LAYER_COLOURS["exclusions"])}'
                     "<span>exclusions (not surveyed)</span></div>")
    if result.coverage.uncovered_m2 > 0:
        parts.append(f'<div class="row">{_line_sample("#777777", "3 3", width=1, fill=LAYER_COLOURS["uncovered"])}'
                     "<span>no thermal data (not surveyed, not dry)</span></div>")
    for label, png in bars:
        from PIL import Image

        w, h = Image.open(io.BytesIO(png)).size
        parts.append(f'<img alt="{_esc(label)}" src="{png_data_uri(png)}" width="{w}" height="{h}">')
    imagery = getattr(result, "imagery", None)
    if imagery is not None:
        r, d = imagery.surface_range, imagery.delta_range
        parts.append(f'<div class="note wetmap-range">Colour range {r.low_c:.1f} to {r.high_c:.1f} °C (ΔT '
                     f'{d.low_c:+.1f} to {d.high_c:+.1f} °C): {r.percentile_words} of the {vocab.area_short} '
                     f'alone, centred on the dry background {r.centre_c:.1f} °C; change it under "Display range".</div>')
    parts.append('<div class="note">Colours: cividis thermal scale, Okabe-Ito status colours.</div></details>')
    return "".join(parts)


# --------------------------------------------------------------------------------------
# GeoJSON layers
# --------------------------------------------------------------------------------------


def geojson_feature(geom: BaseGeometry, proj: Projection, fid: str, props: dict[str, Any]) -> dict[str, Any]:
    return {"type": "Feature", "id": fid, "geometry": mapping(proj.geometry(geom)), "properties": props}


def _collection(features: list[dict[str, Any]]) -> dict[str, Any]:
    return {"type": "FeatureCollection", "features": features}


def _polygon_parts(geom: BaseGeometry) -> list[BaseGeometry]:
    if geom is None or geom.is_empty:
        return []
    return [p for p in shapely.get_parts(geom) if p.geom_type in ("Polygon", "MultiPolygon") and p.area > 0]


def add_geojson(parent, name: str, features: list[dict[str, Any]], style: Callable[[dict], dict], *,
                 show: bool = True, popup: tuple[list[str], list[str]] | None = None,
                 tooltip: str | None = None, permanent_tooltip: bool = False, marker=None, units=None,
                 label_class: str = "wetmap-label") -> None:
    """One toggleable layer (an empty, named group when there is nothing to draw).

    With a permanent tooltip every feature carries its own label, of CSS class ``label_class``.
    ``units``: the report's :class:`~wetmap.export.units.DisplayUnits`; in imperial units
    the metric figures of the layer name and of every text property are converted.
    """
    import folium

    if units is not None and units.imperial:
        name = _plain_text(units.html(name))
        features = [{**f, "properties": {k: (units.html(v) if isinstance(v, str) and "<img" not in v else v)
                                         for k, v in f.get("properties", {}).items()}} for f in features]

    if not features:
        folium.FeatureGroup(name=name, show=show).add_to(parent)
        return
    label_each = None
    if tooltip is not None and permanent_tooltip:  # one label per feature (a group's tooltip is a single one)
        from folium.utilities import JsCode

        label_each = JsCode("function (feature, layer) { layer.bindTooltip(String(feature.properties["
                            + json.dumps(tooltip) + "]), {permanent: true, direction: 'right', offset: [7, 0], "
                            "className: " + json.dumps(label_class) + "}); }")
    layer = folium.GeoJson(_collection(features), name=name, show=show, style_function=style, marker=marker,
                           smooth_factor=0.5, on_each_feature=label_each)
    if popup is not None:
        folium.GeoJsonPopup(fields=popup[0], aliases=popup[1], labels=True, localize=False,
                            max_width=360).add_to(layer)
    if tooltip is not None and not permanent_tooltip:
        folium.GeoJsonTooltip(fields=[tooltip], labels=False, localize=False, sticky=True).add_to(layer)
    layer.add_to(parent)


# --------------------------------------------------------------------------------------
# The map
# --------------------------------------------------------------------------------------


@contextmanager
def _rendered_text_kept():
    """Render a folium figure without compiling each element's rendered text again.

    branca's ``MacroElement.render`` wraps the text it has just rendered (a layer's
    script with its whole GeoJSON) in ``Element(text)``, which compiles that text as a
    Jinja template only to render it back unchanged: on the 256 Mpx benchmark roof,
    3.3 s of the map's 8 s and a copy of every layer. While this is active those
    wrappers keep the text as it is (also when it happens to contain ``{{``, which the
    template would have eaten); elements made with no text behave as before. The swap is
    process-wide: wetmap renders one map at a time (no two maps in threads at once).
    """
    import branca.element as be

    original = be.Element

    class _Text(original):  # type: ignore[misc, valid-type]
        def __init__(self, template: str | None = None, template_name: str | None = None):
            super().__init__(None, template_name)
            self._text = template

        def render(self, **kwargs):
            return self._text if self._text is not None else super().render(**kwargs)

    be.Element = _Text
    try:
        yield
    finally:
        be.Element = original


def _plain_text(fragment: str) -> str:
    """Converted figures without their ``<span>`` wrappers (layer names are plain text)."""
    return re.sub(r'<span class="conv"[^>]*>(.*?)</span>', r"\1", fragment)


def _furniture_class():
    from branca.element import MacroElement
    from jinja2 import Template

    class _Furniture(MacroElement):
        """The metric scale bar, then Leaflet controls holding our HTML panels.

        In a bottom corner Leaflet stacks each new control above the earlier ones, so a
        legend placed bottom-left sits above the scale bar.
        """

        _template = Template("""
            {% macro script(this, kwargs) %}
            (function (map) {
              L.control.scale({metric: {{ this.metric|tojson }}, imperial: {{ this.imperial|tojson }}, maxWidth: 220, position: "bottomleft"}).addTo(map);
              {% for position, cls, content in this.panels %}
              (function () {
                var c = L.control({position: {{ position|tojson }}});
                c.onAdd = function () {
                  var d = L.DomUtil.create("div", {{ cls|tojson }});
                  d.innerHTML = {{ content|tojson }};
                  L.DomEvent.disableClickPropagation(d);
                  L.DomEvent.disableScrollPropagation(d);
                  return d;
                };
                c.addTo(map);
              })();
              {% endfor %}
            })({{ this._parent.get_name() }});
            {% endmacro %}
        """)

        def __init__(self, panels: list[tuple[str, str, str]]):
            super().__init__()
            self._name = "WetmapFurniture"
            self.panels = panels

    return _Furniture


# --------------------------------------------------------------------------------------
# Display range and palette, changed in the browser (offline)
# --------------------------------------------------------------------------------------

#: Palettes offered by the map's display control (matplotlib colour maps, 256 entries each,
#: embedded in the page): perceptually uniform ones, a grey scale, and a diverging one for ΔT.
RECOLOUR_PALETTES = ("cividis", "viridis", "magma", "gray", "coolwarm")
_DATA_MAX_PX = 1024  # longest side of the values embedded for recolouring


def data_png(values: np.ndarray, *, max_px: int = _DATA_MAX_PX) -> dict[str, Any]:
    """Values embedded for recolouring in the browser: 16-bit levels in a PNG's red and green.

    Each finite value becomes ``round((v - vmin) / (vmax - vmin) * 65534)``, stored as red =
    high byte, green = low byte, alpha 255; no data is alpha 0. Arrays longer than
    ``max_px`` are block-averaged by a whole factor ``step`` first; the browser draws each
    embedded value over ``step x step`` overlay pixels, so the image stays aligned.

    Parameters
    ----------
    values
        ``(rows, cols)`` of the overlay as placed on the map, degC.

    Returns
    -------
    dict
        ``data`` (a PNG ``data:`` URI), ``vmin``, ``vmax`` (degC), ``step``, ``width``,
        ``height`` (of the overlay, pixels).

    Examples
    --------
    >>> d = data_png(np.array([[0.0, 1.0], [np.nan, 0.5]]))
    >>> d["vmin"], d["vmax"], d["step"], d["width"], d["height"]
    (0.0, 1.0, 1, 2, 2)
    """
    v = np.asarray(values, dtype=np.float32)
    rows, cols = v.shape
    step = max(1, math.ceil(max(rows, cols) / max_px))
    small = decimate(v, step) if step > 1 else v
    finite = np.isfinite(small)
    vmin = float(np.min(small[finite])) if finite.any() else 0.0
    vmax = float(np.max(small[finite])) if finite.any() else 1.0
    span = vmax - vmin if vmax > vmin else 1.0
    q = np.where(finite, np.rint((np.where(finite, small, vmin) - vmin) / span * 65534.0), 0).astype(np.uint16)
    rgba = np.zeros((*small.shape, 4), dtype=np.uint8)
    rgba[..., 0] = q >> 8
    rgba[..., 1] = q & 0xFF
    rgba[..., 3] = np.where(finite, 255, 0)
    return {"data": png_data_uri(png_bytes(rgba)), "vmin": vmin, "vmax": vmax, "step": step, "width": cols,
            "height": rows}


def _palette_hex(name: str) -> str:
    import matplotlib

    rgb = matplotlib.colormaps[name](np.linspace(0.0, 1.0, 256), bytes=True)[:, :3]
    return rgb.astype(np.uint8).tobytes().hex()


def _range_basis(result: "SurveyResult", units: Any = None) -> str:
    """The words under the display control: how the opening range was chosen (plain text, in ``units``)."""
    imagery = getattr(result, "imagery", None)
    area = wording_of(result.survey).area_short
    if imagery is None:
        return f"Opening range: 1st-99th percentile of the {area} pixels."
    r = imagery.surface_range
    centre = f"{r.centre_c:.1f} °C" if units is None else f"{units.temp(r.centre_c):.1f} {units.temp_unit}"
    return (f"Opening range: {r.percentile_words} of the {area} alone (exclusions and ground "
            f"outside the outline left out), centred on the dry background {centre}; ΔT centred on 0.")


def _recolour_class():
    from branca.element import MacroElement
    from jinja2 import Template

    class _Recolour(MacroElement):
        """A panel to change the thermal overlays' range and palette in the browser.

        The values are embedded (:func:`data_png`); the page decodes them on a canvas,
        colours them with the chosen palette and range, and swaps the overlay image (and its
        colour bar in the legend). Nothing is loaded from a network. ``window.wetmapDisplay``
        exposes ``set(index, low, high[, palette])`` and ``reset()`` (both return a promise).
        Values, inputs and ``set`` are in the unit the map shows (``[report] units``: °C, or
        °F and °F differences in imperial units).
        """

        _template = Template("""
            {% macro script(this, kwargs) %}
            (function (map) {
              var cfg = {{ this.config|tojson }};
              var layers = [{% for name in this.layer_names %}{{ name }}{{ "," if not loop.last }}{% endfor %}];
              var luts = {};
              Object.keys(cfg.palettes).forEach(function (k) {
                var h = cfg.palettes[k], a = new Uint8Array(h.length / 2);
                for (var i = 0; i < a.length; i++) { a[i] = parseInt(h.substr(2 * i, 2), 16); }
                luts[k] = a;
              });
              var palette = cfg.palette;
              cfg.layers.forEach(function (c, i) { c.layer = layers[i]; c.lo0 = c.lo; c.hi0 = c.hi; });
              function decode(c) {
                if (c.ready) { return c.ready; }
                c.ready = new Promise(function (resolve, reject) {
                  var img = new Image();
                  img.onload = function () {
                    var cv = document.createElement("canvas"); cv.width = img.width; cv.height = img.height;
                    var ctx = cv.getContext("2d"); ctx.drawImage(img, 0, 0);
                    var d = ctx.getImageData(0, 0, cv.width, cv.height).data, n = cv.width * cv.height;
                    var q = new Float32Array(n), per = (c.vmax - c.vmin) / 65534;
                    for (var i = 0; i < n; i++) {
                      q[i] = d[4 * i + 3] < 128 ? NaN : c.vmin + (d[4 * i] * 256 + d[4 * i + 1]) * per;
                    }
                    c.q = q; c.qw = cv.width; resolve();
                  };
                  img.onerror = reject;
                  img.src = c.data;
                });
                return c.ready;
              }
              function paint(c) {
                var lut = luts[palette], lo = +c.lo, hi = +c.hi, span = hi > lo ? hi - lo : 1;
                var cv = document.createElement("canvas"); cv.width = c.width; cv.height = c.height;
                var ctx = cv.getContext("2d"), im = ctx.createImageData(c.width, c.height), o = im.data;
                for (var r = 0; r < c.height; r++) {
                  var row = Math.floor(r / c.step) * c.qw;
                  for (var col = 0; col < c.width; col++) {
                    var v = c.q[row + Math.floor(col / c.step)], j = 4 * (r * c.width + col);
                    if (v !== v) { o[j + 3] = 0; continue; }
                    var k = Math.round(Math.min(Math.max((v - lo) / span, 0), 1) * 255);
                    o[j] = lut[3 * k]; o[j + 1] = lut[3 * k + 1]; o[j + 2] = lut[3 * k + 2]; o[j + 3] = 255;
                  }
                }
                ctx.putImageData(im, 0, 0);
                c.layer.setUrl(cv.toDataURL("image/png"));
                bar(c);
              }
              function bar(c) {
                var img = document.querySelector('.wetmap-legend img[alt="' + c.label + '"]');
                if (!img) { return; }
                var w = +img.getAttribute("width") || 280, h = +img.getAttribute("height") || 62;
                var cv = document.createElement("canvas"); cv.width = w; cv.height = h;
                var ctx = cv.getContext("2d"), lut = luts[palette];
                ctx.fillStyle = "#ffffff"; ctx.fillRect(0, 0, w, h);
                var x0 = Math.round(0.05 * w), x1 = Math.round(0.95 * w), y0 = Math.round(0.15 * h), y1 = Math.round(0.45 * h);
                for (var x = x0; x < x1; x++) {
                  var k = Math.round((x - x0) / Math.max(x1 - x0 - 1, 1) * 255);
                  ctx.fillStyle = "rgb(" + lut[3 * k] + "," + lut[3 * k + 1] + "," + lut[3 * k + 2] + ")";
                  ctx.fillRect(x, y0, 1, y1 - y0);
                }
                ctx.strokeStyle = "#000000"; ctx.strokeRect(x0 + 0.5, y0 + 0.5, x1 - x0 - 1, y1 - y0);
                ctx.fillStyle = "#000000"; ctx.font = "9px sans-serif"; ctx.textBaseline = "top";
                [0, 0.5, 1].forEach(function (f) {
                  var x = x0 + f * (x1 - x0 - 1);
                  ctx.textAlign = f === 0 ? "left" : (f === 1 ? "right" : "center");
                  ctx.fillText((+c.lo + f * (c.hi - c.lo)).toFixed(1), x, y1 + 3);
                  ctx.fillRect(Math.round(x), y1, 1, 3);
                });
                ctx.textAlign = "center"; ctx.fillText(c.label, w / 2, y1 + 14);
                img.src = cv.toDataURL("image/png");
              }
              function redraw(list) {
                return Promise.all(list.map(function (c) { return decode(c).then(function () { paint(c); }); }));
              }
              var inputs = [];
              function sync() {
                cfg.layers.forEach(function (c, i) { inputs[i][0].value = (+c.lo).toFixed(2); inputs[i][1].value = (+c.hi).toFixed(2); });
              }
              var api = {
                set: function (i, lo, hi, pal) {
                  var c = cfg.layers[i]; c.lo = +lo; c.hi = +hi;
                  if (pal) { palette = pal; select.value = pal; }
                  sync();
                  return redraw(pal ? cfg.layers : [c]);
                },
                reset: function () {
                  cfg.layers.forEach(function (c) { c.lo = c.lo0; c.hi = c.hi0; });
                  palette = cfg.palette; select.value = palette; sync();
                  return redraw(cfg.layers);
                }
              };
              window.wetmapDisplay = api;
              var select;
              var ctl = L.control({position: "topleft"});
              ctl.onAdd = function () {
                var d = L.DomUtil.create("div", "wetmap-panel wetmap-display");
                var det = L.DomUtil.create("details", "", d);
                L.DomUtil.create("summary", "", det).textContent = "Display range";
                var p = L.DomUtil.create("div", "row", det);
                p.appendChild(document.createTextNode("Palette "));
                select = L.DomUtil.create("select", "wetmap-palette", p);
                Object.keys(cfg.palettes).forEach(function (k) {
                  var o = document.createElement("option"); o.value = k; o.textContent = k; select.appendChild(o);
                });
                select.value = palette;
                select.addEventListener("change", function () { palette = select.value; redraw(cfg.layers); });
                cfg.layers.forEach(function (c, i) {
                  var row = L.DomUtil.create("div", "row", det);
                  L.DomUtil.create("b", "", row).textContent = c.label;
                  var line = L.DomUtil.create("div", "", det);
                  var lo = L.DomUtil.create("input", "wetmap-lo", line), hi;
                  line.appendChild(document.createTextNode(" to "));
                  hi = L.DomUtil.create("input", "wetmap-hi", line);
                  line.appendChild(document.createTextNode(" " + c.unit));
                  [lo, hi].forEach(function (e) { e.type = "number"; e.step = "0.1"; e.style.width = "5em"; });
                  inputs.push([lo, hi]);
                  function changed() {
                    var a = parseFloat(lo.value), b = parseFloat(hi.value);
                    if (isFinite(a) && isFinite(b) && b > a) { c.lo = a; c.hi = b; redraw([c]); }
                  }
                  lo.addEventListener("change", changed); hi.addEventListener("change", changed);
                });
                var btn = L.DomUtil.create("button", "wetmap-reset", det);
                btn.type = "button"; btn.textContent = cfg.reset_label;
                btn.addEventListener("click", function () { api.reset(); });
                L.DomUtil.create("div", "note", det).textContent = cfg.basis;
                sync();
                L.DomEvent.disableClickPropagation(d);
                L.DomEvent.disableScrollPropagation(d);
                return d;
              };
              ctl.addTo(map);
            })({{ this._parent.get_name() }});
            {% endmacro %}
        """)

        def __init__(self, layers: list[tuple[Any, dict[str, Any]]], *, basis: str, area: str = "roof"):
            super().__init__()
            self._name = "WetmapDisplay"
            self.layer_names = [layer.get_name() for layer, _ in layers]
            self.config = {
                "palette": THERMAL_CMAP, "basis": basis, "reset_label": f"Back to the {area} range",
                "palettes": {name: _palette_hex(name) for name in RECOLOUR_PALETTES},
                "layers": [data for _, data in layers],
            }

    return _Recolour


def remote_references(page: str) -> list[str]:
    """``src``/``href`` attributes of script, link, img and iframe tags that load from a network.

    Examples
    --------
    >>> remote_references('<script src="https://x.org/a.js"></script><img src="data:image/png;base64,AA">')
    ['https://x.org/a.js']
    >>> remote_references('<link rel="stylesheet" href="//cdn.example/a.css">')
    ['//cdn.example/a.css']
    """
    pattern = re.compile(r"<(?:script|link|img|iframe|source|embed)\b[^>]*?\b(?:src|href)\s*=\s*[\"']?"
                         r"((?:https?:)?//[^\"'\s>]+)", re.IGNORECASE)
    return pattern.findall(page)


def build_map(result: "SurveyResult", *, tiles: str | None = None, tiles_attribution: str | None = None,
              max_overlay_px: int = 2048) -> str:
    """The text of ``map.html`` for ``result``.

    Parameters
    ----------
    result
        The run's results.
    tiles
        Optional background tile map: a Leaflet URL template (``.../{z}/{x}/{y}.png``).
        Off by default; with it the background (only) needs a network. Ignored for
        ``local`` plans, which have no geographic position.
    tiles_attribution
        Attribution text the tile provider requires (required with ``tiles``).
    max_overlay_px
        Longest side of the embedded thermal images, pixels; larger grids are averaged
        down by whole-pixel blocks.

    Returns
    -------
    str
        A self-contained HTML page (UTF-8).
    """
    import folium
    from branca.element import Element, Figure

    if tiles is not None and not tiles_attribution:
        raise ProcessingError(f"map.html: tiles={tiles!r} needs tiles_attribution (the provider's required credit)")
    if max_overlay_px < 16:
        raise ProcessingError(f"map.html: max_overlay_px = {max_overlay_px}: expected at least 16 pixels")

    summary = result.summary()
    survey = result.survey.survey
    proj = Projection(None if survey.is_local else result.grid.crs)

    units = display_units(result)

    def add_layer(*args, **kwargs) -> None:
        add_geojson(*args, units=units, **kwargs)
    rows, cols = result.grid.shape
    factor = max(1, math.ceil(max(rows, cols) / max_overlay_px))

    # Thermal overlays and their colour ranges (robust range over the usable roof pixels).
    # Thermal overlays (averaged down to max_overlay_px) and their robust colour ranges,
    # taken over the usable roof pixels (where delta-T is defined).
    small_surface = decimate(result.surface_c, factor)
    small_delta = decimate(result.detection.delta_c, factor)
    usable = np.isfinite(small_delta)
    s_lo, s_hi = display_range(small_surface[usable] if usable.any() else small_surface)
    d_lo, d_hi = display_range(small_delta)
    d_lo = min(d_lo, -result.detection.threshold_c)
    d_hi = max(d_hi, 2.0 * result.detection.threshold_c)
    imagery = getattr(result, "imagery", None)
    if imagery is not None:  # from the roof alone, centred on the dry background (wetmap.image_checks)
        s_lo, s_hi = imagery.surface_range.low_c, imagery.surface_range.high_c
        d_lo, d_hi = imagery.delta_range.low_c, imagery.delta_range.high_c

    fig = Figure(title=html.escape(f"{survey.title}: thermal survey map (wetmap)"))
    header = Element("{{ this.text }}")
    header.text = units.html(_header_html(result, summary))  # imperial: figures converted
    fig.html.add_child(header, name="wetmap_header")  # before the map, so it sits above it
    if proj.local:
        m = folium.Map(location=[0.0, 0.0], tiles=None, crs="Simple", zoom_start=0, control_scale=False,
                       zoomSnap=0.25, zoomDelta=0.5, minZoom=-8, maxZoom=10)
    else:
        m = folium.Map(location=[0.0, 0.0], tiles=None, crs="EPSG3857", zoom_start=2, control_scale=False,
                       zoomSnap=0.25, zoomDelta=0.5, maxZoom=26)
        if tiles is not None:
            folium.TileLayer(tiles=tiles, attr=tiles_attribution, name="Background map", max_zoom=26,
                             max_native_zoom=19, overlay=False).add_to(m)
    m.default_js = []  # Leaflet is inlined below; nothing else is loaded
    m.default_css = []
    m.add_to(fig)

    bars: list[tuple[str, bytes]] = []
    recolour: list[tuple[Any, dict[str, Any]]] = []  # (layer, data) for the in-browser display control
    for name, values, lo, hi, show, cls, kind in (
        ("Surface temperature, °C", small_surface, s_lo, s_hi, True, "wetmap-overlay wetmap-surface", "temperature"),
        ("ΔT above the dry background, °C", small_delta, d_lo, d_hi, False, "wetmap-overlay wetmap-delta",
         "difference"),
    ):
        placed, bounds = _overlay(values, result, factor, proj)
        uri = png_data_uri(png_bytes(colourise(placed, vmin=lo, vmax=hi)))
        shown = name.replace("°C", "°F") if units.imperial else name
        layer = folium.raster_layers.ImageOverlay(image=uri, bounds=bounds, name=shown, show=show, opacity=0.95,
                                                  interactive=False, pixelated=True, className=cls)
        layer.add_to(m)
        bars.append((shown, colour_bar_png(lo, hi, label=shown, fahrenheit=kind if units.imperial else None)))
        # the display control works in the unit shown: °F (temperatures) or °F differences in imperial units;
        # a linear change of unit, so the colours it paints at the opening range are the ones drawn above
        to_shown = units.temp if kind == "temperature" else units.delta
        recolour.append((layer, {"label": shown, "unit": units.temp_unit, "lo": round(to_shown(lo), 2),
                                 "hi": round(to_shown(hi), 2), **data_png(to_shown(placed))}))
    words = wording_of(result.survey)
    m.add_child(_recolour_class()(recolour, basis=_range_basis(result, units), area=words.area_short))

    # Uncovered roof, exclusions, outline, sections.
    uncovered = uncovered_area(result, factor=factor) if result.coverage.uncovered_m2 > 0 else None
    if uncovered is not None:
        feats = [geojson_feature(p, proj, f"u{i}", {"label": f"no thermal data: not surveyed, not dry ({p.area:,.1f} m²)"})
                 for i, p in enumerate(_polygon_parts(uncovered))]
        add_layer(m, "No thermal data (not surveyed)", feats, lambda f: {
            "color": "#777777", "weight": 1, "dashArray": "3 3", "fillColor": LAYER_COLOURS["uncovered"],
            "fillOpacity": 0.75, "className": "wetmap-uncovered"}, tooltip="label")
    feats = [geojson_feature(p, proj, f"x{i}", {"label": f"exclusion ({p.area:,.1f} m²): not surveyed"})
             for i, p in enumerate(_polygon_parts(result.exclusions))]
    add_layer(m, "Exclusions", feats, lambda f: {
        "color": "#666666", "weight": 1, "fillColor": LAYER_COLOURS["exclusions"], "fillOpacity": 0.8,
        "className": "wetmap-exclusion"}, tooltip="label")
    outline_name = f"{words.area_title} outline"
    add_layer(m, outline_name, [geojson_feature(result.outline, proj, "outline", {})], lambda f: {
        "color": LAYER_COLOURS["outline"], "weight": 2, "fill": False, "interactive": False,
        "className": "wetmap-outline"})
    totals = {t["name"]: t for t in summary.get("sections", [])}
    feats = []
    for i, sec in enumerate(result.sections):
        t = totals.get(sec.name, {})
        feats.append(geojson_feature(sec.geometry, proj, f"s{i}", {
            "name": _esc(sec.name), "assembly": _esc(sec.assembly or "not given"),
            "insulation": _esc(sec.insulation or "not given"),
            "area": _sq(t["area_m2"]) if "area_m2" in t else "n/a",
            "wet": _sq(t["wet_area_m2"]) if "wet_area_m2" in t else "n/a",
            "fraction": _num(100 * t["wet_fraction"], ".1f", " %") if t.get("wet_fraction") is not None else "n/a",
            "label": _esc(f"section {sec.name}"),
        }))
    add_layer(m, "Sections", feats, lambda f: {
        "color": LAYER_COLOURS["sections"], "weight": 1, "dashArray": "10 4 2 4", "fill": True,
        "fillOpacity": 0.0, "className": "wetmap-section"},
        popup=(["name", "assembly", "insulation", "area", "wet", "fraction"],
               ["Section", "Assembly", words.wet_material.capitalize(), "Area", "Wet area", "Wet fraction"]),
        tooltip="label", permanent_tooltip=len(feats) <= 40,  # each section named on the plan
        label_class="wetmap-label wetmap-section-label")

    # Repair outlines and boards.
    feats = [geojson_feature(p, proj, f"r{i}", {"label": f"repair outline {i + 1}: {_sq(p.area)}"})
             for i, p in enumerate(_polygon_parts(result.repair))]
    add_layer(m, f"Repair outline (margin {result.survey.repair.margin_m:g} m)", feats, lambda f: {
        "color": LAYER_COLOURS["repair"], "weight": 2, "dashArray": "6 4", "fillColor": "#000000",
        "fillOpacity": 0.05, "className": "wetmap-repair"}, tooltip="label")
    board_m = result.survey.repair.board_m
    feats = [geojson_feature(b, proj, f"b{i}", {"label": f"board {i + 1}"}) for i, b in enumerate(result.takeoff.boards)]
    board_words = f"{board_m[0]:g} x {board_m[1]:g} m" if board_m else ""
    if board_m and units.imperial:  # both sides converted (the prose converter sees only the last)
        board_words = " x ".join(f"{units.length(v):.2f}" for v in board_m) + " ft"
    if words.whole_boards:  # a hull is cut back to dry core: no board layer
        add_layer(m, f"Whole boards ({result.takeoff.count} x {board_words})".replace(" x )", ")"), feats,
                     lambda f: {"color": LAYER_COLOURS["boards"], "weight": 1, "fillOpacity": 0.0,
                                "className": "wetmap-board"}, show=False)

    # Photos: embedded (downscaled JPEG), tied to cores (cores.csv photo) and to the nearest anomaly (photos.csv).
    core_photos, anomaly_photos = _photo_html(result, units)

    # Anomalies, one layer per status.
    counted = result.counted_statuses
    fields = ["anomaly", "status", "area", "perimeter", "delta_mean", "delta_max", "confirmations", "section",
              "counted", "flags"] + (["photos"] if anomaly_photos else [])
    aliases = ["Anomaly", "Status", "Area", "Perimeter", "Mean ΔT", "Max ΔT", "Confirmations", "Section",
               "Counted in repair", "Flags"] + (["Photos"] if anomaly_photos else [])
    for status, st in STATUS_STYLES.items():
        feats = [
            geojson_feature(a.geometry, proj, f"a{a.id}", {
                "anomaly": a.id, "status": _esc(_status_words(a.status, words)), "area": _sq(a.area_m2),
                "perimeter": f"{a.perimeter_m:,.2f} m", "delta_mean": _num(a.delta_mean_c, "+.2f", " °C"),
                "delta_max": _num(a.delta_max_c, "+.2f", " °C"),
                "confirmations": _esc(", ".join(a.confirmations) or "none"), "section": _esc(a.section or "none"),
                "counted": "yes" if a.status in counted else "no", "label": f"anomaly {a.id} ({a.status})"
                + (f": {a.flags}" if getattr(a, "flags", "") else ""),
                "flags": _esc(getattr(a, "flags", "") or "none"),
                **({"photos": anomaly_photos.get(a.id, "none")} if anomaly_photos else {}),
            })
            for a in result.anomalies if a.status == status
        ]

        def style(f: dict, st: StatusStyle = st, status: str = status) -> dict:
            out = {"color": st.colour, "weight": 3, "fillColor": st.colour, "fillOpacity": 0.12,
                   "className": f"wetmap-anomaly wetmap-{status}"}
            if st.dash:
                out["dashArray"] = st.dash
            return out

        add_layer(m, f"Anomalies: {status} ({len(feats)})", feats, style, popup=(fields, aliases),
                     tooltip="label")

    # Cores and readings.
    conf = result.confirmations
    if len(conf):
        xs, ys = proj.xy(conf.xs, conf.ys)
        feats = []
        for i, cid in enumerate(conf.ids):
            judged = "wet" if conf.wet[i] else "dry"
            anomaly = int(result.verdicts.anomaly_of[i])
            props = {
                "id": _esc(cid), "judged": judged, "basis": _esc(_core_basis(result, i)),
                "grade": _esc(conf.grade[i] if conf.grade[i] != "damp" else f"damp (counted as {judged})"),
                "delta": _num(float(result.confirmation_delta_c[i]), "+.2f", " °C"),
                "anomaly": f"anomaly {anomaly + 1}" if anomaly >= 0 else "outside every anomaly",
                "label": _esc(cid),
            }
            for k, v in conf.extra.items():
                text = _esc(v[i]) if v[i] not in ("", None) else "-"
                unit = next((un for suffix, un in (("_mm", "mm"), ("_m", "m")) if k.endswith(suffix)), None)
                if unit and text != "-" and re.fullmatch(r"[-+]?\d+(\.\d+)?", text):
                    text = f"{text} {unit}"  # the unit of the column name shown, converted in imperial units
                props[f"extra_{k}"] = text
            if cid in core_photos:
                props["extra_photo"] = core_photos[cid]
            feats.append({"type": "Feature", "id": f"c{i}", "properties": props,
                          "geometry": {"type": "Point", "coordinates": [float(xs[i]), float(ys[i])]}})
        extra = list(conf.extra)

        def core_style(f: dict) -> dict:
            wet = f["properties"]["judged"] == "wet"
            return {"radius": 6, "weight": 1 if wet else 3, "fill": True, "color": "#000000" if wet else CORE_COLOURS["dry"],
                    "fillColor": CORE_COLOURS["wet"] if wet else "#FFFFFF", "fillOpacity": 1.0, "opacity": 1.0,
                    "className": f"wetmap-core wetmap-core-{f['properties']['judged']}"}

        add_layer(m, f"{words.confirmations_title} ({len(conf)})", feats, core_style,
                     popup=(["id", "grade", "judged", "basis", "delta", "anomaly", *[f"extra_{k}" for k in extra]],
                            [words.confirmation_label, "Graded", "Counted as", "Basis", "ΔT there", "Lies in",
                             *[_EXTRA_LABELS.get(k, re.sub(r"_(mm|m)$", "", k).replace("_", " ")) for k in extra]]),
                     tooltip="label", permanent_tooltip=len(conf) <= 25, marker=folium.CircleMarker(radius=6))

    # Where a further core would help most (added by the confirmation stage when it has any).
    suggested = tuple(getattr(result, "suggested_cores", ()) or ())
    if suggested:
        xs, ys = proj.xy(np.array([float(getattr(c, "x", np.nan)) for c in suggested]),
                         np.array([float(getattr(c, "y", np.nan)) for c in suggested]))
        feats = [{"type": "Feature", "id": f"k{i}", "geometry": {"type": "Point", "coordinates": [float(x), float(y)]},
                  "properties": {"n": f"suggested {words.confirmation} {i + 1}",
                                 "why": _esc(getattr(c, "reason", "") or "-"),
                                 "label": f"suggested {words.confirmation} {i + 1}"}}
                 for i, (c, x, y) in enumerate(zip(suggested, xs, ys)) if np.isfinite(x) and np.isfinite(y)]
        add_layer(m, f"Suggested next {words.confirmations} ({len(feats)})", feats, lambda f: {
            "radius": 7, "weight": 2, "dashArray": "3 3", "color": "#000000", "fill": True, "fillColor": "#F0E442",
            "fillOpacity": 0.9, "className": "wetmap-suggested"},
            popup=(["n", "why"], ["Suggestion", "Why here"]), tooltip="label", marker=folium.CircleMarker(radius=7))

    # Legend, scale bar, layer list; fit to the outline.
    panels = [("bottomleft", "wetmap-panel wetmap-legend", units.html(_legend_html(bars, result)))]
    if not survey.is_local and survey.kind != "hull":  # the page is drawn north-up (Web Mercator)
        panels.insert(0, ("topleft", "wetmap-panel wetmap-north", NORTH_ARROW_SVG))
    furniture = _furniture_class()(panels)
    furniture.metric, furniture.imperial = not units.imperial, units.imperial  # the scale bar follows [report] units
    m.add_child(furniture)
    folium.LayerControl(collapsed=False, position="topright").add_to(m)
    # Room for the legend (left, at most 300 px wide plus its margin) and the layer list (right)
    # when the page opens, so neither covers the plan; the legend also folds away (<details>).
    m.fit_bounds(proj.latlng_bounds(result.outline.bounds), padding_top_left=(320, 12),
                 padding_bottom_right=(250, 12))

    css = Element("{{ this.text }}")
    css.text = f"<style>{PAGE_CSS}</style>"
    fig.header.add_child(css, name="wetmap_css")
    with _rendered_text_kept():
        page = fig.render()
    js, css = leaflet_assets()
    inline = (f"\n<!-- Leaflet 1.9.4, BSD 2-Clause licence (c) 2010-2023 Volodymyr Agafonkin, "
              f"(c) 2010-2011 CloudMade -->\n<style>{css}</style>\n<script>{js}</script>\n")
    head = re.search(r"<head[^>]*>", page)
    if head is None:  # pragma: no cover - folium always writes a head
        raise ProcessingError("map.html: the page folium rendered has no <head>; this is a wetmap bug, please report it")
    page = page[: head.end()] + inline + page[head.end():]
    page = page.replace("<html>", '<html lang="en">', 1)
    remote = remote_references(page)
    if remote:
        raise ProcessingError(f"map.html: the page would load {remote[0]} from the network; "
                              "this is a wetmap bug, please report it")
    return page


def write_map(result: "SurveyResult", path: Path, *, tiles: str | None = None,
              tiles_attribution: str | None = None, max_overlay_px: int = 2048) -> None:
    """Write ``map.html`` (see :func:`build_map` for the options)."""
    page = build_map(result, tiles=tiles, tiles_attribution=tiles_attribution, max_overlay_px=max_overlay_px)
    Path(path).write_text(page, encoding="utf-8")
