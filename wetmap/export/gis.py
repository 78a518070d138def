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
- ``surface_c.tif`` / ``delta_c.tif``: float32 degC on the plan grid, NaN nodata.
"""

from __future__ import annotations

import warnings
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
import shapely

from ..errors import ProcessingError

if TYPE_CHECKING:
    from ..pipeline import SurveyResult
    from ..rasters import PlanGrid

__all__ = ["anomaly_frame", "write_anomalies", "write_repair", "write_raster", "confirmation_frame"]

ANOMALY_COLUMNS = ("id", "status", "area_m2", "perimeter_m", "delta_mean_c", "delta_max_c", "confirmations", "section",
                   "flags")
"""The contract's attributes, then ``flags`` (imagery flags, :mod:`wetmap.imagery`; empty text when none)."""


#: The top-level note of a hull side's ``anomalies.geojson``.
HULL_CRS_NOTE = ("local plan, not longitude/latitude: x = station m along the hull, "
                 "y = girth m from the keel (the developed hull side)")


def _crs(result: "SurveyResult") -> str | None:
    info = result.survey.survey
    return None if info.is_local or info.kind == "hull" else info.crs


def _add_crs_note(path: Path, note: str) -> None:
    """Put ``crs_note`` at the top of a written GeoJSON FeatureCollection."""
    import json

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


def write_anomalies(result: "SurveyResult", gpkg: Path, geojson: Path) -> None:
    """Write ``anomalies.gpkg`` (plan CRS) and ``anomalies.geojson`` (RFC 7946 when georeferenced)."""
    frame = anomaly_frame(result)
    _check_valid(frame, gpkg)
    _to_file(frame, gpkg, layer="anomalies", driver="GPKG")
    _to_file(suggestion_frame(result), gpkg, layer="suggested_cores", driver="GPKG")
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
