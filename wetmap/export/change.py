"""``change_map.html`` and ``change_report.html`` / ``.pdf``: what ``wetmap compare`` found.

The map opens with no network (Leaflet inlined, as ``map.html``): the earlier and the
later wet areas as outlines, and the changed parts filled by kind. The report is one
printable HTML page with the totals, a plan figure (matplotlib, embedded as a PNG) and
one row per changed part; WeasyPrint lays the same page out as a PDF when it is
installed. Colours are Okabe-Ito (colour-blind safe), each kind also with its own line
pattern: new (vermillion, solid), grown (orange, dashed), shrunk (sky blue, dotted), gone
(bluish green, dash-dot).

Figures follow the later survey's ``[report] units`` (``Comparison.units``): metric, or
ft² and ft with the exact factors of NIST SP 811 (:class:`wetmap.export.units.DisplayUnits`);
each converted table cell keeps its metric value in ``data-metric``. Coordinates of a
georeferenced plan stay those of its CRS (metres).
"""

from __future__ import annotations

import io
import json
import logging
import math
import warnings
from pathlib import Path

import numpy as np
import shapely
from shapely.geometry import MultiPolygon, Polygon

from ..compare import Comparison
from ..errors import ProcessingError
from ..outputs import write_folder
from .report import draw_geometry
from .units import DisplayUnits, ticks_in
from .units import esc_html as _esc
from .webmap import PAGE_CSS, Projection, add_geojson, geojson_feature, leaflet_assets, png_data_uri, remote_references

__all__ = ["CHANGE_STYLES", "build_change_map", "build_change_report", "change_figure", "write_change",
           "write_change_outputs"]

#: kind -> (colour, Leaflet dash pattern, matplotlib line style, words)
CHANGE_STYLES = {
    "new": ("#D55E00", None, "-", "counted wet now where nothing was before"),
    "grown": ("#E69F00", "8 4", "--", "added to an area already counted wet"),
    "shrunk": ("#56B4E9", "2 4", ":", "no longer counted wet, beside an area that still is"),
    "gone": ("#009E73", "8 3 2 3", "-.", "counted wet before, nothing of it now"),
}


def _units(comparison: "Comparison") -> DisplayUnits:
    """The change outputs' units: the later survey's ``[report] units``."""
    return DisplayUnits(system=getattr(comparison, "units", "metric"))


def _area(u: DisplayUnits, area_m2: float, fmt: str = ",.2f") -> str:
    """An area as plain text in the shown unit."""
    return f"{u.area(float(area_m2)):{fmt}} {u.area_unit}"


def build_change_map(comparison: "Comparison", *, old_name: str, new_name: str) -> str:
    """The text of ``change_map.html`` (self-contained, no network references)."""
    import folium
    from branca.element import Element, Figure
    proj = Projection(comparison.crs)
    fig = Figure(title=_esc(f"Change between {old_name} and {new_name} (wetmap)"))
    s = comparison.summary()
    u = _units(comparison)
    a = {k: u.area(float(s[k])) for k in ("old_wet_area_m2", "new_wet_area_m2", "growth_m2", "new_m2", "grown_m2",
                                            "shrunk_m2", "gone_m2")}
    header = Element("{{ this.text }}")
    header.text = (f'<div class="wetmap-header"><h1>Change in the wet area: {_esc(old_name)} → {_esc(new_name)}</h1>'
                   f"<div>Wet area {a['old_wet_area_m2']:,.2f} → {a['new_wet_area_m2']:,.2f} {u.area_unit} "
                   f"(growth {a['growth_m2']:+,.2f} {u.area_unit}); new {a['new_m2']:,.2f}, grown {a['grown_m2']:,.2f}, "
                   f"shrunk {a['shrunk_m2']:,.2f}, gone {a['gone_m2']:,.2f} {u.area_unit}. <span class='note'>Apparent "
                   "thermal anomalies compared, not measured moisture.</span></div></div>")
    fig.html.add_child(header, name="wetmap_header")
    if proj.local:
        m = folium.Map(location=[0.0, 0.0], tiles=None, crs="Simple", zoom_start=0, control_scale=False,
                       zoomSnap=0.25, minZoom=-8, maxZoom=10)
    else:
        m = folium.Map(location=[0.0, 0.0], tiles=None, crs="EPSG3857", zoom_start=2, control_scale=True,
                       zoomSnap=0.25, maxZoom=26)
    m.default_js = []
    m.default_css = []
    m.add_to(fig)
    for name, areas, colour in ((f"Counted wet before ({old_name})", comparison.old_areas, "#555555"),
                                (f"Counted wet now ({new_name})", comparison.new_areas, "#000000")):
        feats = [geojson_feature(g, proj, f"{name[:3]}{i}", {"label": name}) for i, g in enumerate(areas)]
        add_geojson(m, name, feats, lambda f, c=colour: {"color": c, "weight": 1.5, "fillOpacity": 0.0},
                     tooltip="label")
    for kind, (colour, dash, _, words) in CHANGE_STYLES.items():
        parts = [c for c in comparison.changes if c.kind == kind]
        feats = [geojson_feature(c.geometry, proj, f"{kind}{i}", {"kind": kind, "area": _area(u, c.area_m2),
                                                           "what": words, "label": f"{kind}: {_area(u, c.area_m2)}"})
                 for i, c in enumerate(parts)]

        def style(f, colour=colour, dash=dash, kind=kind):
            out = {"color": colour, "weight": 2.5, "fillColor": colour, "fillOpacity": 0.45,
                   "className": f"wetmap-change wetmap-change-{kind}"}
            if dash:
                out["dashArray"] = dash
            return out

        add_geojson(m, f"{kind.capitalize()} ({len(parts)})", feats, style,
                     popup=(["kind", "area", "what"], ["Change", "Area", "Meaning"]), tooltip="label")
    every = [g for g in (*comparison.old_areas, *comparison.new_areas, *(c.geometry for c in comparison.changes))]
    if every:
        bounds = MultiPolygon([p for g in every for p in (g.geoms if hasattr(g, "geoms") else [g])
                               if isinstance(p, Polygon)]).bounds
        m.fit_bounds(proj.latlng_bounds(bounds), padding=(20, 20))
    folium.LayerControl(collapsed=False, position="topright").add_to(m)
    css = Element("{{ this.text }}")
    css.text = f"<style>{PAGE_CSS}</style>"
    fig.header.add_child(css, name="wetmap_css")
    page = fig.render()
    js, style_text = leaflet_assets()
    head = page.index("<head>") + len("<head>") if "<head>" in page else 0
    page = page[:head] + f"\n<style>{style_text}</style>\n<script>{js}</script>\n" + page[head:]
    remote = remote_references(page)
    if remote:
        raise ProcessingError(f"change_map.html: the page would load {remote[0]} from the network; "
                              "this is a wetmap bug, please report it")
    return page


def change_figure(comparison: "Comparison", *, dpi: int = 130) -> bytes:
    """A plan of the changes (PNG bytes): earlier and later wet outlines, changed parts by kind."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    fig = Figure(figsize=(6.7, 4.6), dpi=dpi, layout="constrained")
    FigureCanvasAgg(fig)
    ax = fig.add_subplot()
    for kind, (colour, _, ls, _) in CHANGE_STYLES.items():
        geoms = [c.geometry for c in comparison.changes if c.kind == kind]
        if geoms:
            draw_geometry(ax, geoms, facecolor=colour, edgecolor=colour, alpha=0.5, linewidth=1.8, linestyle=ls, zorder=3)
    draw_geometry(ax, list(comparison.old_areas), facecolor="none", edgecolor="#555555", linewidth=1.0, linestyle="--", zorder=4)
    draw_geometry(ax, list(comparison.new_areas), facecolor="none", edgecolor="black", linewidth=1.2, zorder=5)
    every = [*comparison.old_areas, *comparison.new_areas, *(c.geometry for c in comparison.changes)]
    u = _units(comparison)
    xlabel, ylabel = "plan x (m)", "plan y (m)"
    ax.set_aspect("equal")
    ax.ticklabel_format(useOffset=False, style="plain")
    if every:
        x0, y0, x1, y1 = shapely.total_bounds(np.asarray(every, dtype=object))
        pad = 0.05 * max(x1 - x0, y1 - y0, 1.0)
        ax.set_xlim(x0 - pad, x1 + pad)
        ax.set_ylim(y0 - pad, y1 + pad)
        if u.imperial:  # ticks at round feet (the data stay metric); a CRS's coordinates are in metres
            ox, oy = (0.0, 0.0) if comparison.crs is None else (float(math.floor(x0)), float(math.floor(y0)))
            ft_per_m = u.length(1.0)
            ticks_in(ax.xaxis, x0 - pad, x1 + pad, scale=ft_per_m, origin=ox)
            ticks_in(ax.yaxis, y0 - pad, y1 + pad, scale=ft_per_m, origin=oy)
            xlabel, ylabel = (("plan x (ft)", "plan y (ft)") if comparison.crs is None else
                              (f"ft east of easting {ox:,.0f} m ({comparison.crs})", f"ft north of northing {oy:,.0f} m"))
    ax.tick_params(labelsize=7)
    ax.set_xlabel(xlabel, fontsize=8)
    ax.set_ylabel(ylabel, fontsize=8)
    handles = [Patch(facecolor=c, edgecolor=c, alpha=0.6, linestyle=ls, label=k) for k, (c, _, ls, _) in
               CHANGE_STYLES.items()]
    handles += [Line2D([], [], color="#555555", linestyle="--", label="wet before"),
                Line2D([], [], color="black", label="wet now")]
    fig.legend(handles=handles, loc="outside lower center", ncols=6, fontsize=7, frameon=False)
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=dpi)
    return buf.getvalue()


def build_change_report(comparison: "Comparison", *, old_name: str, new_name: str, counted: tuple[str, ...]) -> str:
    """The text of ``change_report.html``: totals, a plan figure and one row per changed part."""
    s = comparison.summary()
    u = _units(comparison)
    pct = "n/a" if s["growth_pct"] is None else f"{s['growth_pct']:+.1f} %"
    rows = [("Wet area before", _area(u, s["old_wet_area_m2"]), "old_wet_area_m2"),
            ("Wet area now", _area(u, s["new_wet_area_m2"]), "new_wet_area_m2"),
            ("Growth", f"{_area(u, s['growth_m2'], '+,.2f')} ({pct})", "growth_m2")]
    rows += [(f"{k.capitalize()}: {CHANGE_STYLES[k][3]}", f"{_area(u, s[f'{k}_m2'])} in {s['counts'][k]} part{'' if s['counts'][k] == 1 else 's'}",
              f"{k}_m2") for k in CHANGE_STYLES]

    def metric(value: float) -> str:  # each converted cell keeps its metric value
        return f" data-metric='{float(value)!r}'" if u.imperial else ""

    totals = "".join(f"<tr><th>{_esc(a)}</th><td class='num' data-key='{key}'{metric(s[key])}>{_esc(b)}</td></tr>"
                     for a, b, key in rows)
    parts = sorted(comparison.changes, key=lambda c: (list(CHANGE_STYLES).index(c.kind), -c.area_m2))
    local = comparison.crs is None  # plan coordinates: converted; a CRS's: its own metres
    xy = (lambda v: u.length(float(v))) if local else float
    xy_unit = u.length_unit if local else "m"
    body = "".join(
        f"<tr data-kind='{c.kind}'><td class='num'>{i}</td><td>{c.kind}</td>"
        f"<td class='num'{metric(c.area_m2)}>{u.area(c.area_m2):,.2f}</td>"
        f"<td class='num'>{xy(c.geometry.centroid.x):,.2f}</td><td class='num'>{xy(c.geometry.centroid.y):,.2f}</td></tr>"
        for i, c in enumerate(parts, 1)) or "<tr><td colspan='5'>No change.</td></tr>"
    png = change_figure(comparison)
    counted_words = " and ".join(counted)
    css = ("@page { margin: 16mm 14mm; } html { font: 10pt/1.4 'DejaVu Sans', sans-serif; color: #111; } "
           "body { max-width: 182mm; margin: 8mm auto; } h1 { font-size: 16pt; } h2 { font-size: 12pt; "
           "border-bottom: 1px solid #000; break-after: avoid; } table { border-collapse: collapse; width: 100%; "
           "font-size: 9pt; margin: 2mm 0 4mm; } th, td { border: 1px solid #999; padding: 0.8mm 1.5mm; "
           "text-align: left; } th { background: #f2f2f2; } td.num { text-align: right; white-space: nowrap; } "
           "tr, figure { break-inside: avoid; } thead { display: table-header-group; } figure { margin: 3mm 0; } "
           "figure img { width: 100%; height: auto; border: 1px solid #ccc; } .small { font-size: 8.5pt; }")
    return (
        '<!DOCTYPE html><html lang="en"><head><meta charset="utf-8">'
        f"<title>Change report: {_esc(old_name)} → {_esc(new_name)}</title><style>{css}</style></head><body>"
        f"<h1>Change in the wet area: {_esc(old_name)} → {_esc(new_name)}</h1>"
        f"<p>Areas counted as wet ({_esc(counted_words)} anomalies) in the earlier survey <b>{_esc(old_name)}</b> "
        f"and the later survey <b>{_esc(new_name)}</b>, both on the same plan, compared part by part. "
        "These are apparent thermal anomalies, not measured moisture; a change may also come from other "
        "survey conditions or another threshold: compare the two reports' conditions before concluding.</p>"
        f"<h2>Totals</h2><table id='change-totals'>{totals}</table>"
        f"<h2>Plan</h2><figure><img src='{png_data_uri(png)}' alt='plan of the changes'><figcaption class='small'>"
        "Changed parts filled by kind; earlier wet outlines dashed grey, later ones solid black. The interactive "
        "version is change_map.html.</figcaption></figure>"
        f"<h2>Changed parts</h2><table id='change-parts'><thead><tr><th>No.</th><th>Kind</th><th>Area ({u.area_unit})</th>"
        f"<th>Centre x ({xy_unit})</th><th>Centre y ({xy_unit})</th></tr></thead><tbody>{body}</tbody></table>"
        "<p class='small'>Files: change.gpkg (layer change: kind, area_m2), change.json (these totals"
        f"{', in m²' if u.imperial else ''}), "
        "change_map.html, change_report.html / .pdf. Prepared with wetmap compare.</p></body></html>")


def write_change_outputs(comparison: "Comparison", folder: Path, *, old_name: str, new_name: str,
                         counted: tuple[str, ...]) -> list[Path]:
    """Write the change map and report into ``folder`` (a staging folder of the safe writer).

    Returns the files written; ``change_report.pdf`` only when WeasyPrint can start.
    """
    folder = Path(folder)
    written = []
    (folder / "change_map.html").write_text(build_change_map(comparison, old_name=old_name, new_name=new_name),
                                            encoding="utf-8")
    written.append(folder / "change_map.html")
    text = build_change_report(comparison, old_name=old_name, new_name=new_name, counted=counted)
    (folder / "change_report.html").write_text(text, encoding="utf-8")
    written.append(folder / "change_report.html")
    try:
        from weasyprint import HTML

        logging.getLogger("weasyprint").setLevel(logging.ERROR)
        logging.getLogger("fontTools").setLevel(logging.ERROR)
    except (ImportError, OSError):  # WeasyPrint or Pango missing: the HTML report stands alone
        return written
    HTML(string=text).write_pdf(folder / "change_report.pdf")
    written.append(folder / "change_report.pdf")
    return written


def write_change(comparison: Comparison, out_dir: Path, *, old_name: str = "earlier survey",
                 new_name: str = "later survey") -> tuple[Path, Path]:
    """Write ``change.gpkg`` (layer ``change``: kind, area_m2) and ``change.json`` into ``out_dir``,
    with ``change_map.html`` (offline) and ``change_report.html`` (and ``change_report.pdf``
    when WeasyPrint is installed): :func:`write_change_outputs`.

    Written through :func:`wetmap.outputs.write_folder`: the other files of ``out_dir`` are
    carried over and the folder is swapped in one step; ``out_dir`` must be missing, empty
    or wetmap's own results folder, and not a survey folder.
    """
    import geopandas as gpd

    frame = gpd.GeoDataFrame(
        {"kind": [c.kind for c in comparison.changes], "area_m2": [round(c.area_m2, 4) for c in comparison.changes]},
        geometry=[c.geometry for c in comparison.changes], crs=comparison.crs,
    )

    def write(folder: Path) -> None:
        with warnings.catch_warnings():
            warnings.filterwarnings("ignore", message="'crs' was not provided")
            frame.to_file(folder / "change.gpkg", layer="change", driver="GPKG", engine="pyogrio")
        (folder / "change.json").write_text(json.dumps(comparison.summary(), indent=2) + "\n", encoding="utf-8")
        write_change_outputs(comparison, folder, old_name=old_name, new_name=new_name, counted=comparison.counted)

    out = write_folder(out_dir, write, keep=None)
    return out / "change.gpkg", out / "change.json"
