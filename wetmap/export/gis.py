"""GeoPackage, GeoJSON and GeoTIFF outputs.

- ``anomalies.gpkg``: the anomaly polygons in the survey CRS (no CRS for ``local``), and a
  ``suggested_cores`` point layer (where one more core is worth most).
- ``anomalies.geojson``: the same; WGS84 longitude/latitude (RFC 7946) for a
  georeferenced roof, plan metres for ``local``. A hull side is never geo-referenced: its
  plan is the developed skin, so both files hold plan metres with no CRS whatever
  ``[survey] crs`` says, and the GeoJSON carries a top-level ``crs_note`` (a foreign
  member, RFC 7946 section 6.1) saying so, since RFC 7946 section 4 reads coordinates
  without such an agreement as WGS84 longitude/latitude.
- ``repair.gpkg``: layers ``repair`` (outlines), ``boards``, ``anomalies``, ``cores``.
- Both GeoPackages carry a ``layer_styles`` table (the one QGIS reads on opening): a QGIS
  style (QML) per layer, statuses in Okabe-Ito colours and outline patterns, plus an OGC
  SLD of the same colours.
- ``surface_c.tif`` / ``delta_c.tif``: float32 degC on the plan grid, NaN nodata.
"""

from __future__ import annotations

import json
import sqlite3
import warnings
from collections.abc import Callable
from functools import partial
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import shapely

from ..errors import ProcessingError

if TYPE_CHECKING:
    from ..results import SurveyResult
    from ..rasters import PlanGrid

__all__ = ["anomaly_frame", "write_anomalies", "write_repair", "write_raster", "confirmation_frame"]

ANOMALY_COLUMNS = ("id", "status", "area_m2", "perimeter_m", "delta_mean_c", "delta_max_c", "confirmations", "section",
                   "flags")
"""The contract's attributes, then ``flags`` (imagery flags, :mod:`wetmap.image_checks`; empty text when none)."""


#: The top-level note of a hull side's ``anomalies.geojson``.
HULL_CRS_NOTE = ("local plan, not longitude/latitude: x = station m along the hull, "
                 "y = girth m from the keel (the developed hull side)")


def _crs(result: "SurveyResult") -> str | None:
    info = result.survey.survey
    return None if info.is_local or info.kind == "hull" else info.crs


def _add_crs_note(path: Path, note: str) -> None:
    """Put ``crs_note`` at the top of a written GeoJSON FeatureCollection."""
    data = json.loads(path.read_text(encoding="utf-8"))
    data = {"type": data.pop("type"), "crs_note": note, **data}
    path.write_text(json.dumps(data, ensure_ascii=False) + "\n", encoding="utf-8")


def anomaly_frame(result: "SurveyResult"):
    """The anomalies as a GeoDataFrame with the format's attribute names, plan CRS."""
    import geopandas as gpd

    rows = {
        "id": [a.id for a in result.anomalies],
        "status": [a.status for a in result.anomalies],
        "area_m2": [round(a.area_m2, 4) for a in result.anomalies],
        "perimeter_m": [round(a.perimeter_m, 4) for a in result.anomalies],
        "delta_mean_c": [round(a.delta_mean_c, 3) for a in result.anomalies],
        "delta_max_c": [round(a.delta_max_c, 3) for a in result.anomalies],
        "confirmations": [",".join(a.confirmations) for a in result.anomalies],
        "section": [a.section or "" for a in result.anomalies],
        "flags": [getattr(a, "flags", "") for a in result.anomalies],
    }
    geoms = [a.geometry for a in result.anomalies]
    return gpd.GeoDataFrame(rows, geometry=geoms, crs=_crs(result))


def confirmation_frame(result: "SurveyResult"):
    """Cores and readings with their judgement and the delta-T sampled there."""
    import geopandas as gpd

    c = result.confirmations
    rows = {
        "id": list(c.ids),
        "judged": ["wet" if w else "dry" for w in c.wet],
        "grade": list(c.grade),  # wet / damp / dry as logged; "judged" is how it counted
        "basis": list(c.basis),
        "value": [None if np.isnan(v) else float(v) for v in c.values],
        "delta_c": [None if np.isnan(v) else round(float(v), 3) for v in result.confirmation_delta_c],
        "anomaly": [int(a) + 1 if a >= 0 else None for a in result.verdicts.anomaly_of],
        **{k: list(v) for k, v in c.extra.items()},
    }
    return gpd.GeoDataFrame(rows, geometry=list(shapely.points(c.xs, c.ys)) if len(c) else [], crs=_crs(result))


def suggestion_frame(result: "SurveyResult"):
    """Suggested core positions (points) with their kind, anomaly and reason."""
    import geopandas as gpd

    cores = getattr(result, "suggested_cores", ())
    rows = {
        "kind": [c.kind for c in cores],
        "anomaly": [c.anomaly for c in cores],
        "reason": [c.reason for c in cores],
    }
    return gpd.GeoDataFrame(rows, geometry=[shapely.Point(c.x, c.y) for c in cores], crs=_crs(result))


def _to_file(frame, path: Path, **kwargs) -> None:
    """Write a layer; a ``local`` plan has no CRS on purpose, so the no-CRS warning is dropped."""
    with warnings.catch_warnings():
        if frame.crs is None:
            warnings.filterwarnings("ignore", message="'crs' was not provided")
        frame.to_file(path, engine="pyogrio", **kwargs)


def _check_valid(frame, path: Path) -> None:
    if len(frame) and not shapely.is_valid(np.asarray(frame.geometry.values)).all():
        raise ProcessingError(f"{path.name}: an output geometry is invalid; this is a wetmap bug, please report it")


# --------------------------------------------------------------------------------------
# Layer styles inside the GeoPackage: QGIS reads the ``layer_styles`` table on opening
# --------------------------------------------------------------------------------------

#: Colours of the styles (Okabe-Ito palette, Okabe & Ito 2008; the map's and report's colours).
STYLE_RGB: dict[str, tuple[int, int, int]] = {
    "wet": (213, 94, 0), "unverified": (204, 121, 167), "dry": (0, 114, 178),
    "repair": (230, 159, 0), "boards": (0, 158, 115), "suggested": (240, 228, 66),
}
#: Outline pattern per status, so that the statuses differ by more than colour.
_STATUS_DASH = {"wet": "solid", "unverified": "dash", "dry": "dot"}


def _rgba(rgb: tuple[int, int, int], alpha: int) -> str:
    return ",".join(str(v) for v in (*rgb, alpha))


def _fill_symbol(name: str, rgb: tuple[int, int, int], *, fill_alpha: int, outline: str = "solid",
                 width_mm: float = 0.8) -> str:
    return (f'<symbol type="fill" name="{name}" alpha="1" clip_to_extent="1" force_rhr="0">'
            '<layer class="SimpleFill" enabled="1" pass="0" locked="0"><Option type="Map">'
            f'<Option name="color" type="QString" value="{_rgba(rgb, fill_alpha)}"/>'
            f'<Option name="style" type="QString" value="{"solid" if fill_alpha else "no"}"/>'
            f'<Option name="outline_color" type="QString" value="{_rgba(rgb, 255)}"/>'
            f'<Option name="outline_style" type="QString" value="{outline}"/>'
            f'<Option name="outline_width" type="QString" value="{width_mm:g}"/>'
            '<Option name="outline_width_unit" type="QString" value="MM"/>'
            "</Option></layer></symbol>")


def _marker_symbol(name: str, rgb: tuple[int, int, int], *, hollow: bool = False) -> str:
    return (f'<symbol type="marker" name="{name}" alpha="1" clip_to_extent="1" force_rhr="0">'
            '<layer class="SimpleMarker" enabled="1" pass="0" locked="0"><Option type="Map">'
            '<Option name="name" type="QString" value="circle"/>'
            f'<Option name="color" type="QString" value="{_rgba((255, 255, 255) if hollow else rgb, 255)}"/>'
            f'<Option name="outline_color" type="QString" value="{_rgba(rgb if hollow else (0, 0, 0), 255)}"/>'
            f'<Option name="outline_width" type="QString" value="{0.7 if hollow else 0.3:g}"/>'
            '<Option name="outline_width_unit" type="QString" value="MM"/>'
            '<Option name="size" type="QString" value="3"/><Option name="size_unit" type="QString" value="MM"/>'
            "</Option></layer></symbol>")


def _qml(renderer: str) -> str:
    return f'<qgis version="3.28.0" styleCategories="Symbology">{renderer}</qgis>'


def _categorized(attr: str, symbols: dict[str, Callable[[str], str]]) -> str:
    """A QGIS categorized renderer on ``attr``: value -> symbol (a function of the symbol's name)."""
    cats = "".join(f'<category symbol="{i}" value="{v}" label="{v}" render="true"/>' for i, v in enumerate(symbols))
    syms = "".join(make(str(i)) for i, make in enumerate(symbols.values()))
    return (f'<renderer-v2 type="categorizedSymbol" attr="{attr}" symbollevels="0" enableorderby="0" '
            f'forceraster="0"><categories>{cats}</categories><symbols>{syms}</symbols></renderer-v2>')


def _single(make: Callable[[str], str]) -> str:
    """A QGIS single-symbol renderer."""
    return (f'<renderer-v2 type="singleSymbol" symbollevels="0" enableorderby="0" forceraster="0">'
            f'<symbols>{make("0")}</symbols></renderer-v2>')


def _sld(layer: str, attr: str | None, colours: dict[str, tuple[int, int, int]]) -> str:
    """A minimal OGC SLD 1.1 of the same colours (for GIS programs other than QGIS)."""
    def hexc(rgb):
        return "#%02X%02X%02X" % rgb

    rules = []
    for value, rgb in colours.items():
        flt = (f"<ogc:Filter><ogc:PropertyIsEqualTo><ogc:PropertyName>{attr}</ogc:PropertyName>"
               f"<ogc:Literal>{value}</ogc:Literal></ogc:PropertyIsEqualTo></ogc:Filter>") if attr else ""
        rules.append(f"<se:Rule><se:Name>{value}</se:Name>{flt}<se:PolygonSymbolizer><se:Fill>"
                     f'<se:SvgParameter name="fill">{hexc(rgb)}</se:SvgParameter>'
                     '<se:SvgParameter name="fill-opacity">0.3</se:SvgParameter></se:Fill><se:Stroke>'
                     f'<se:SvgParameter name="stroke">{hexc(rgb)}</se:SvgParameter>'
                     '<se:SvgParameter name="stroke-width">2</se:SvgParameter></se:Stroke>'
                     "</se:PolygonSymbolizer></se:Rule>")
    return ('<StyledLayerDescriptor version="1.1.0" xmlns="http://www.opengis.net/sld" '
            'xmlns:se="http://www.opengis.net/se" xmlns:ogc="http://www.opengis.net/ogc">'
            f"<NamedLayer><se:Name>{layer}</se:Name><UserStyle><se:Name>wetmap</se:Name><se:FeatureTypeStyle>"
            + "".join(rules) + "</se:FeatureTypeStyle></UserStyle></NamedLayer></StyledLayerDescriptor>")


def _status_style() -> tuple[str, str]:
    symbols = {st: partial(_fill_symbol, rgb=STYLE_RGB[st], fill_alpha=70, outline=_STATUS_DASH[st])
               for st in ("wet", "unverified", "dry")}
    return (_qml(_categorized("status", symbols)),
            _sld("anomalies", "status", {st: STYLE_RGB[st] for st in ("wet", "unverified", "dry")}))


def layer_styles(layer: str) -> tuple[str, str] | None:
    """``(QML, SLD)`` of a layer wetmap writes, or ``None`` for a layer left unstyled."""
    if layer == "anomalies":
        return _status_style()
    if layer == "repair":
        return (_qml(_single(partial(_fill_symbol, rgb=STYLE_RGB["repair"], fill_alpha=50, outline="dash",
                                     width_mm=0.6))),
                _sld(layer, None, {"repair": STYLE_RGB["repair"]}))
    if layer == "boards":
        return (_qml(_single(partial(_fill_symbol, rgb=STYLE_RGB["boards"], fill_alpha=0, width_mm=0.3))),
                _sld(layer, None, {"boards": STYLE_RGB["boards"]}))
    if layer == "cores":  # filled: judged wet; ring: judged dry (as on the map)
        symbols = {"wet": partial(_marker_symbol, rgb=STYLE_RGB["wet"]),
                   "dry": partial(_marker_symbol, rgb=STYLE_RGB["dry"], hollow=True)}
        return _qml(_categorized("judged", symbols)), _sld(layer, "judged", {"wet": STYLE_RGB["wet"],
                                                                               "dry": STYLE_RGB["dry"]})
    if layer == "suggested_cores":
        return _qml(_single(partial(_marker_symbol, rgb=STYLE_RGB["suggested"]))), _sld(layer, None, {
            "suggested": STYLE_RGB["suggested"]})
    return None


def write_layer_styles(gpkg: Path) -> None:
    """Store a default style for each layer of ``gpkg`` in its ``layer_styles`` table.

    The table is the one QGIS creates and reads (``f_table_name``, ``f_geometry_column``,
    ``styleName``, ``styleQML``, ``styleSLD``, ``useAsDefault``, ...): opening the
    GeoPackage in QGIS shows the statuses in their colours and outline patterns. Each
    row also carries an OGC SLD of the same colours for other programs.
    """
    with sqlite3.connect(gpkg) as db:
        db.execute(
            "CREATE TABLE IF NOT EXISTS layer_styles (id INTEGER PRIMARY KEY AUTOINCREMENT, f_table_catalog TEXT, "
            "f_table_schema TEXT, f_table_name TEXT, f_geometry_column TEXT, styleName TEXT, styleQML TEXT, "
            "styleSLD TEXT, useAsDefault BOOLEAN, description TEXT, owner TEXT, ui TEXT, update_time DATETIME "
            "DEFAULT CURRENT_TIMESTAMP)")
        layers = db.execute("SELECT table_name, column_name FROM gpkg_geometry_columns").fetchall()
        for table, column in layers:
            style = layer_styles(table)
            if style is None:
                continue
            db.execute("DELETE FROM layer_styles WHERE f_table_name = ?", (table,))
            db.execute("INSERT INTO layer_styles (f_table_catalog, f_table_schema, f_table_name, f_geometry_column, "
                       "styleName, styleQML, styleSLD, useAsDefault, description, owner, ui) "
                       "VALUES ('', '', ?, ?, ?, ?, ?, 1, ?, '', '')",
                       (table, column, f"wetmap {table}", style[0], style[1],
                        "wetmap default style (Okabe-Ito colours)"))
        # declare the table to GeoPackage readers as plain attributes (not a feature layer)
        db.execute("INSERT OR IGNORE INTO gpkg_contents (table_name, data_type, identifier) "
                   "VALUES ('layer_styles', 'attributes', 'layer_styles')")
    db.close()


def write_anomalies(result: "SurveyResult", gpkg: Path, geojson: Path) -> None:
    """Write ``anomalies.gpkg`` (plan CRS) and ``anomalies.geojson`` (RFC 7946 when georeferenced)."""
    frame = anomaly_frame(result)
    _check_valid(frame, gpkg)
    _to_file(frame, gpkg, layer="anomalies", driver="GPKG")
    _to_file(suggestion_frame(result), gpkg, layer="suggested_cores", driver="GPKG")
    write_layer_styles(gpkg)
    out = frame.to_crs("EPSG:4326") if frame.crs is not None else frame
    # RFC 7946 writers round to 7 decimals (about 1 cm); 9 keep about 0.1 mm
    _to_file(out, geojson, driver="GeoJSON", RFC7946="YES" if frame.crs is not None else "NO",
             WRITE_NAME="NO", COORDINATE_PRECISION=9)
    if result.survey.survey.kind == "hull":
        _add_crs_note(geojson, HULL_CRS_NOTE)


def write_repair(result: "SurveyResult", gpkg: Path) -> None:
    """Write ``repair.gpkg`` with layers ``repair``, ``boards``, ``anomalies`` and ``cores``."""
    import geopandas as gpd

    crs = _crs(result)
    parts = list(shapely.get_parts(result.repair)) if not result.repair.is_empty else []
    repair = gpd.GeoDataFrame({"id": list(range(1, len(parts) + 1)),
                               "area_m2": [round(p.area, 4) for p in parts]}, geometry=parts, crs=crs)
    boards = gpd.GeoDataFrame({"id": list(range(1, result.takeoff.count + 1))},
                              geometry=list(result.takeoff.boards), crs=crs)
    for layer, frame in (("repair", repair), ("boards", boards), ("anomalies", anomaly_frame(result)),
                         ("cores", confirmation_frame(result))):
        _check_valid(frame, gpkg)
        _to_file(frame, gpkg, layer=layer, driver="GPKG")
    write_layer_styles(gpkg)


def write_raster(values: np.ndarray, grid: "PlanGrid", path: Path) -> None:
    """Write a float32 degC raster on the plan grid (tiled, deflate, NaN nodata, BigTIFF if needed)."""
    import rasterio

    rows, cols = values.shape
    tiled = rows >= 256 and cols >= 256
    profile = dict(
        driver="GTiff", width=cols, height=rows, count=1, dtype="float32", crs=grid.crs,
        transform=grid.transform, nodata=float("nan"), compress="deflate", predictor=3,
        BIGTIFF="IF_SAFER",
    )
    if tiled:
        profile.update(tiled=True, blockxsize=256, blockysize=256)
    with rasterio.open(path, "w", **profile) as dst:
        dst.write(values.astype(np.float32, copy=False), 1)
        dst.update_tags(1, units="degC")
