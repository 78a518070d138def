"""Reading the plan's vector files (outline, exclusions, sections) into shapely geometries.

Coordinates are plan coordinates in the survey CRS. A file that declares another
projected CRS is reprojected. A GeoJSON file without a ``crs`` member is declared
WGS84 by the format (RFC 7946) and read so by GDAL; when its coordinates cannot be
longitude/latitude (beyond +-180 / +-90) they are taken as plan coordinates, which is
how most plan drawings are exported. For a ``local`` survey every coordinate is taken
as plan metres. Invalid polygons are repaired with
:func:`shapely.make_valid` and reported.
"""

from __future__ import annotations

import warnings
import logging
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import shapely
from shapely.geometry.base import BaseGeometry

from .errors import InputFileError

__all__ = ["PlanLayer", "read_layer", "read_outline", "read_sections", "Section"]

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class PlanLayer:
    """Polygons of one plan file, with their attribute columns.

    Attributes
    ----------
    geometries
        Polygons or MultiPolygons in plan coordinates.
    attributes
        Column name -> tuple of values, one per geometry.
    notes
        Things worth telling the user (repairs, assumed CRS).
    """

    path: Path
    geometries: tuple[BaseGeometry, ...]
    attributes: dict[str, tuple] = field(default_factory=dict)
    notes: tuple[str, ...] = ()


@dataclass(frozen=True)
class Section:
    """A roof section (or hull zone) with its construction."""

    name: str
    geometry: BaseGeometry
    assembly: str | None = None
    insulation: str | None = None
    emissivity: float | None = None
    """The section's surface emissivity in the camera band (``None``: ``[camera] emissivity``)."""


def _looks_like_lonlat(bounds: np.ndarray) -> bool:
    xmin, ymin, xmax, ymax = bounds
    return -180 <= xmin and xmax <= 180 and -90 <= ymin and ymax <= 90


def read_layer(path: Path, *, survey_crs: str | None, what: str) -> PlanLayer:
    """Read polygons from any vector file the vector library reads.

    Parameters
    ----------
    path
        GeoJSON, GeoPackage, Shapefile, ...
    survey_crs
        The survey CRS, or ``None`` for a local plan.
    what
        What the file is (``"outline"``, ...), for messages.

    Raises
    ------
    InputFileError
        Unreadable file, no features, a feature without geometry or not a polygon.

    Notes
    -----
    On a local plan (``survey_crs=None``) every coordinate is read as plan metres, whatever
    CRS the file declares (see the survey format); a declared geographic CRS whose
    features span less than a metre gets a note, as those are surely degrees.
    """
    import pyogrio
    from pyproj import CRS


    try:
        with warnings.catch_warnings():  # NaN coordinates warn in shapely: refused below, in one line
            warnings.simplefilter("ignore", RuntimeWarning)
            frame = pyogrio.read_dataframe(path)
    except Exception as err:  # pyogrio raises several unrelated types for unreadable files
        raise InputFileError(f"{path}: cannot be read as a vector file ({err}); expected GeoJSON, GeoPackage or Shapefile") from None
    notes: list[str] = []
    if len(frame) == 0 or frame.geometry.isna().all():
        raise InputFileError(f"{path}: holds no features; expected the {what} as polygons")
    geoms = np.asarray(frame.geometry.values, dtype=object)
    missing = np.array([g is None or g.is_empty for g in geoms])
    if missing.any():
        raise InputFileError(f"{path}: feature {int(np.flatnonzero(missing)[0])} has no geometry; every {what} feature needs a polygon")
    kinds = set(shapely.get_type_id(geoms).tolist())
    if not kinds <= {3, 6}:  # Polygon, MultiPolygon
        bad = [shapely.get_type_id(g) for g in geoms]
        index = next(i for i, k in enumerate(bad) if k not in (3, 6))
        raise InputFileError(
            f"{path}: feature {index} is a {geoms[index].geom_type}; expected polygons for the {what}"
        )
    geoms = shapely.force_2d(geoms)
    coords, owner = shapely.get_coordinates(geoms, return_index=True)
    bad = ~np.isfinite(coords).all(axis=1)
    if bad.any():  # NaN or infinity: GEOS cannot compute with them
        raise InputFileError(f"{path}: feature {int(owner[np.flatnonzero(bad)[0]])} has a coordinate that is not a "
                             f"finite number ({coords[np.flatnonzero(bad)[0]].tolist()}); fix the {what} in the drawing")
    file_crs = frame.crs
    bounds = np.asarray(shapely.total_bounds(geoms))
    if survey_crs is None:
        if file_crs is not None and CRS(file_crs).is_geographic and max(bounds[2] - bounds[0], bounds[3] - bounds[1]) < 1.0:
            notes.append(
                f"{path.name}: declares {CRS(file_crs).to_string()} and spans under 1 unit: these look like "
                "longitude/latitude degrees, but a local survey reads them as plan metres; export the plan "
                "in metres or give the survey a projected crs"
            )
        file_crs = None  # a local plan: coordinates are plan metres, whatever the file declares
    elif file_crs is not None and CRS(file_crs).is_geographic and not _looks_like_lonlat(bounds):
        file_crs = None  # plan coordinates in a GeoJSON with no crs member
    if file_crs is not None and survey_crs is not None and not CRS(file_crs).equals(CRS(survey_crs)):
        from pyproj import Transformer

        tr = Transformer.from_crs(file_crs, survey_crs, always_xy=True)
        geoms = shapely.transform(geoms, lambda xy: np.column_stack(tr.transform(xy[:, 0], xy[:, 1])))
        notes.append(f"{path.name}: reprojected from {CRS(file_crs).to_string()} to {survey_crs}")
        if not np.isfinite(shapely.get_coordinates(geoms)).all():
            raise InputFileError(f"{path}: its coordinates cannot be reprojected from {CRS(file_crs).to_string()} "
                                 f"to {survey_crs} (they fall outside what either CRS can represent); check the "
                                 "CRS the file declares and the survey's crs")
    invalid = ~shapely.is_valid(geoms)
    if invalid.any():
        for i in np.flatnonzero(invalid):
            reason = shapely.is_valid_reason(geoms[i])
            notes.append(f"{path.name}: feature {i} was an invalid polygon ({reason}); repaired")
        repaired = shapely.make_valid(geoms[invalid])
        geoms[invalid] = [shapely.union_all(shapely.get_parts(g)[shapely.get_type_id(shapely.get_parts(g)) == 3])
                          for g in repaired]
    attributes = {c: tuple(frame[c].tolist()) for c in frame.columns if c != frame.geometry.name}
    for note in notes:
        log.warning(note)
    return PlanLayer(path=path, geometries=tuple(geoms), attributes=attributes, notes=tuple(notes))


def _missing(value: object) -> bool:
    """True for an absent attribute: None, or the NaN a data frame puts in an empty cell."""
    return value is None or (isinstance(value, float) and np.isnan(value))


def read_outline(path: Path, *, survey_crs: str | None) -> tuple[BaseGeometry, tuple[str, ...]]:
    """The roof outline (or developed hull side) as one polygonal geometry."""
    layer = read_layer(path, survey_crs=survey_crs, what="outline")
    outline = shapely.union_all(layer.geometries)
    if outline.area <= 0:
        raise InputFileError(f"{path}: the outline has no area; expected a closed polygon around the roof")
    return outline, layer.notes


def read_sections(path: Path, *, survey_crs: str | None) -> tuple[list[Section], tuple[str, ...]]:
    """Roof sections: polygons with a ``name`` and optional ``assembly`` and ``insulation``."""
    layer = read_layer(path, survey_crs=survey_crs, what="sections")
    if "name" not in layer.attributes:
        raise InputFileError(f"{path}: has no 'name' column; every section needs a name (and optionally assembly, insulation)")
    names = ["" if _missing(n) else str(n) for n in layer.attributes["name"]]
    for i, n in enumerate(names):
        if not n.strip():
            raise InputFileError(f"{path}: feature {i} has no name (column 'name' is empty); give every section a name")
    dup = {n for n in names if names.count(n) > 1}
    if dup:
        raise InputFileError(f"{path}: section names repeat ({', '.join(sorted(dup))}); names must be unique")

    def column(key: str) -> list[str | None]:
        values = layer.attributes.get(key, (None,) * len(names))
        return [None if _missing(v) else str(v) for v in values]

    emissivity: list[float | None] = []
    for i, v in enumerate(layer.attributes.get("emissivity", (None,) * len(names))):
        if _missing(v):
            emissivity.append(None)
            continue
        try:
            e = float(v)
        except (TypeError, ValueError):
            e = math.nan
        if not (0.0 < e <= 1.0):
            raise InputFileError(f"{path}: section {names[i]!r} (feature {i}) has emissivity {v!r}: expected a number "
                                 "above 0 and at most 1 (e.g. 0.90), or leave it empty for [camera] emissivity")
        emissivity.append(e)
    sections = [
        Section(name=n, geometry=g, assembly=a, insulation=ins, emissivity=e)
        for n, g, a, ins, e in zip(names, layer.geometries, column("assembly"), column("insulation"), emissivity)
    ]
    return sections, layer.notes
