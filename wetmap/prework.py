"""Every check made before any work: ``wetmap check`` and ``wetmap run`` call the same function.

:func:`prepare_survey` reads the plan files and looks at each input just enough to know
whether a run can give a right answer: the outline and the layers, the CRS at the site,
each mosaic's placement, coverage and units (on a decimated sample, so it stays cheap on
huge mosaics), the plan grid's size, every row of cores.csv and where the cores lie, and
the size of the board take-off. It reports every problem it finds at once (one line each)
and returns what it read, so a run does not read it again.
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import shapely
from shapely.geometry import Polygon
from shapely.geometry.base import BaseGeometry

from .confirmations import Confirmations, read_confirmations
from .errors import ProcessingError, WetmapError
from .frames import read_frame
from .photos import Photo, find_photos
from .rasters import RasterInfo, footprint, inspect_raster, plan_grid_for, sample_in_outline
from .survey import Mosaic, Survey
from .vectors import Section, read_layer, read_outline, read_sections

__all__ = ["Prepared", "prepare_survey", "MAX_GRID_PX", "MAX_BOARDS", "AIR_GAP_K", "AREAL_SCALE_TOLERANCE",
           "units_problem"]

log = logging.getLogger(__name__)

#: Largest plan grid a run accepts, pixels (beyond it the outline or the pixel size is wrong).
MAX_GRID_PX = 2_000_000_000
#: Largest board take-off a run accepts (common practice: the largest flat roofs, some
#: 500 000 m2, take under 200 000 boards of 1.2 x 2.4 m).
MAX_BOARDS = 250_000
#: A roof's or hull's median apparent temperature further than this from the air temperature
#: means the units are wrong (common practice: at night surfaces sit within about 15 K of the
#: air; a sunlit dark membrane reaches about 40 K above it).
AIR_GAP_K = 40.0
#: Areas in the survey CRS may differ from true areas by at most this fraction at the site
#: (a UTM zone's edge: about 0.2 %; Web Mercator at 49 degrees: 132 %).
AREAL_SCALE_TOLERANCE = 0.02
#: Apparent temperatures outside this range (degC) are not a roof or a hull (as for frames).
PLAUSIBLE_C = (-100.0, 200.0)


@dataclass(frozen=True)
class Prepared:
    """What the pre-work checks read (plan coordinates)."""

    outline: BaseGeometry
    exclusions: BaseGeometry
    roof: BaseGeometry
    sections: tuple[Section, ...]
    specular: BaseGeometry | None
    infos: tuple[RasterInfo, ...]
    """Placement of each ``[[mosaic]]``, in survey order."""
    confirmations: Confirmations | None
    warnings: tuple[str, ...]
    photos: tuple[Photo, ...] = ()
    """The usable site photos (:func:`wetmap.photos.find_photos`)."""


def _union(geoms) -> BaseGeometry:
    return shapely.union_all(np.asarray(list(geoms), dtype=object)) if geoms else Polygon()


def prepare_survey(survey: Survey) -> Prepared:
    """Read the plan and check every input before work; every problem at once.

    Parameters
    ----------
    survey
        A loaded survey (:func:`wetmap.survey.load_survey`).

    Returns
    -------
    Prepared
        The plan geometries, the mosaics' placement, the confirmations and the warnings.

    Raises
    ------
    WetmapError
        With one line per problem: unreadable or empty plan files, exclusions covering the
        whole outline, a CRS that distorts areas at the site, a mosaic that misses the
        outline, holds no data on it or whose values are not temperatures in the declared
        units, a plan grid too large, cores.csv problems or cores far off the roof, a board
        take-off beyond :data:`MAX_BOARDS`.
    """
    crs = None if survey.survey.is_local else survey.survey.crs
    problems: list[str] = []
    warnings: list[str] = []
    crs_notes: list[str] = []  # the CRS at the site: said with any refusal too, as it is a likely cause

    caught: list[type] = []  # the classes of the errors caught, one entry per problem

    def attempt(fn, *args, **kwargs):
        try:
            return fn(*args, **kwargs)
        except WetmapError as err:
            problems.extend(err.problems)
            caught.extend([type(err)] * len(err.problems))
            return None

    outline = None
    got = attempt(read_outline, survey.plan.outline, survey_crs=crs)
    if got is not None:
        outline, notes = got
        warnings.extend(notes)
    exclusions: BaseGeometry = Polygon()
    if survey.plan.exclusions is not None:
        layer = attempt(read_layer, survey.plan.exclusions, survey_crs=crs, what="exclusions")
        if layer is not None:
            warnings.extend(layer.notes)
            exclusions = _union(layer.geometries)
    sections: list[Section] = []
    if survey.plan.sections is not None:
        got = attempt(read_sections, survey.plan.sections, survey_crs=crs)
        if got is not None:
            sections, notes = got
            warnings.extend(notes)
    specular: BaseGeometry | None = None
    if survey.plan.specular is not None:
        layer = attempt(read_layer, survey.plan.specular, survey_crs=crs, what="specular surfaces")
        if layer is not None:
            warnings.extend(layer.notes)
            specular = _union(layer.geometries)
    roof = None
    if outline is not None:
        roof = outline.difference(exclusions) if not exclusions.is_empty else outline
        if roof.area <= 0:
            problems.append(f"{survey.plan.exclusions}: the exclusions cover the whole outline; nothing is left "
                            "to survey: check the exclusions file")
        if crs is not None:
            _check_crs_at_site(survey, crs, outline, problems, crs_notes)
            warnings.extend(crs_notes)

    infos: list[RasterInfo | None] = []
    for i, m in enumerate(survey.mosaics):
        info = attempt(inspect_raster, m.path, origin=m.origin, pixel_m=m.pixel_m, survey_crs=crs)
        infos.append(info)
        if info is not None and outline is not None:
            attempt(_check_mosaic, survey, i, m, info, outline, crs, problems)  # a corrupt read: one more line
    for i, f in enumerate(survey.frames):  # frames: read whole (they are small), median against the air
        image = attempt(read_frame, f.path, units=f.units, scale=f.scale, offset=f.offset)
        if image is None:
            continue
        finite = np.isfinite(image.values_k)
        problem = units_problem(float(np.median(image.values_k[finite])) - 273.15, air_c=survey.conditions.air_c,
                                units=f.units, scale=f.scale, offset=f.offset, kind=survey.survey.kind,
                                where="frame")
        if problem:
            problems.append(f"{survey.file}: [[frame]] #{i + 1} ({f.path.name}): {problem}")
    if outline is not None and infos and all(info is not None for info in infos):
        grid = plan_grid_for(infos, outline.bounds, crs=crs, pixel_m=survey.plan.pixel_m)  # type: ignore[arg-type]
        if grid.rows * grid.cols > MAX_GRID_PX:
            problems.append(f"{survey.file}: the plan grid would be {grid.rows} x {grid.cols} pixels at "
                            f"{grid.pixel_m:g} m; check the outline's coordinates and the imagery's pixel size, "
                            "or set [plan] pixel_m")
    elif outline is not None and not survey.mosaics and survey.plan.pixel_m is not None:
        x0, y0, x1, y1 = outline.bounds
        px = survey.plan.pixel_m
        if math.ceil((x1 - x0) / px) * math.ceil((y1 - y0) / px) > MAX_GRID_PX:
            problems.append(f"{survey.file}: [plan] pixel_m = {px:g}: the plan grid over the outline would exceed "
                            f"{MAX_GRID_PX:.0e} pixels; check the outline's coordinates or set a larger pixel_m")

    confirmations = None
    if survey.cores is not None:
        confirmations = attempt(read_confirmations, survey.cores.path, wet_above=survey.cores.wet_above,
                                wet_above_pct=survey.cores.wet_above_pct,
                                damp_counts_as=survey.cores.damp_counts_as)
        if confirmations is not None and outline is not None and len(confirmations):
            _check_cores_near(survey, confirmations, outline, problems)
    # a missing or unreadable photo: one warning naming the file, row and fix
    photos, photo_problems = find_photos(survey.folder, survey.cores.path if survey.cores else None, confirmations)
    warnings.extend(f"{line} (left out of the report and the map until then)" for line in photo_problems)

    if roof is not None and survey.repair.board_m is not None and roof.area > 0:
        along, across = survey.repair.board_m
        estimate = roof.area / (along * across)
        if estimate > MAX_BOARDS:
            problems.append(f"{survey.file}: [repair] board_m = [{along:g}, {across:g}]: a take-off over the "
                            f"{roof.area:.0f} m2 roof could need about {estimate:.3g} boards, more than "
                            f"{MAX_BOARDS}; check the board size (metres) and the outline's coordinates")

    if problems:  # errors of one kind keep their class (InputFileError, ...); a mix is a ProcessingError
        kind = caught[0] if len(caught) == len(problems) and len(set(caught)) == 1 else ProcessingError
        raise kind([*crs_notes, *problems])
    assert outline is not None and roof is not None  # a missing outline is a problem above
    return Prepared(outline=outline, exclusions=exclusions, roof=roof, sections=tuple(sections), specular=specular,
                    infos=tuple(infos), confirmations=confirmations,  # type: ignore[arg-type]
                    warnings=tuple(warnings), photos=tuple(photos))


def _check_crs_at_site(survey: Survey, crs_text: str, outline: BaseGeometry, problems: list[str],
                       warnings: list[str]) -> None:
    """Refuse a CRS whose areas are wrong at the site; warn when the plan lies outside its area of use.

    The areal scale factor comes from PROJ (``pyproj.Proj.get_factors``); for Web Mercator it is
    1/cos^2(latitude) (Snyder, Map Projections: A Working Manual, USGS PP 1395).
    """
    from pyproj import CRS, Proj, Transformer
    from pyproj.exceptions import ProjError

    try:
        crs = CRS.from_user_input(crs_text)
        to_lonlat = Transformer.from_crs(crs, crs.geodetic_crs, always_xy=True)
        x0, y0, x1, y1 = outline.bounds
        xs = np.array([x0, x1, x1, x0, (x0 + x1) / 2])
        ys = np.array([y0, y0, y1, y1, (y0 + y1) / 2])
        lons, lats = to_lonlat.transform(xs, ys, errcheck=False)
    except (ProjError, ValueError, TypeError) as err:  # pragma: no cover - a CRS pyproj read before
        log.info("CRS check skipped: %s", err)
        return
    lons, lats = np.asarray(lons, float), np.asarray(lats, float)
    where = f"{survey.file}: [survey] crs = \"{crs_text}\""
    if not (np.isfinite(lons).all() and np.isfinite(lats).all()) or np.abs(lats).max() > 90:
        warnings.append(f"{where}: the plan's coordinates {tuple(round(v, 1) for v in outline.bounds)} are not a "
                        f"place on Earth in {crs.name}: check the crs (coordinates of another CRS?)")
        return
    area = crs.area_of_use
    if area is not None:
        west, south, east, north = area.west, area.south, area.east, area.north
        lon_ok = (west <= lons) & (lons <= east) if west <= east else (lons >= west) | (lons <= east)
        inside = lon_ok & (south <= lats) & (lats <= north)
        if not inside.all():
            warnings.append(
                f"{where}: the plan (about {lats[4]:.3f}, {lons[4]:.3f} degrees lat, lon) lies outside the CRS's "
                f"area of use ({_cut(area.name)}: {south:g}..{north:g} N, {west:g}..{east:g} E): areas and positions may "
                "be wrong; check that the crs is the one the plan was drawn in")
    try:
        factors = Proj(crs).get_factors(float(lons[4]), float(lats[4]), errcheck=False)
        scale = float(factors.areal_scale)
    except Exception as err:  # pragma: no cover - PROJ cannot compute factors for every CRS
        log.info("areal scale not computed: %s", err)
        return
    if math.isfinite(scale) and abs(scale - 1.0) > AREAL_SCALE_TOLERANCE:
        problems.append(f"{where}: at the site ({lats[4]:.3f} N) this projection scales areas by {scale:.3f}, so "
                        f"areas would be wrong by {100 * (scale - 1):+.0f} %; use the site's UTM zone or national "
                        "grid (an equal-area or conformal CRS made for the region)")


def _cut(text: str, limit: int = 50) -> str:
    """``text`` up to its first " - " or ``limit`` characters (an area-of-use name can run to a paragraph)."""
    head = text.split(" - ")[0]
    return head if len(head) <= limit else head[: limit - 3] + "..."


def _check_mosaic(survey: Survey, index: int, m: Mosaic, info: RasterInfo, outline: BaseGeometry,
                  crs: str | None, problems: list[str]) -> None:
    """The mosaic covers the outline, holds data there, and its values are temperatures in its units."""
    where = f"{survey.file}: [[mosaic]] #{index + 1} ({m.path.name})"
    edge = None
    try:
        edge = footprint(info, crs)
        overlaps = bool(edge.is_valid and edge.intersects(outline))
    except Exception:  # a corner that cannot be transformed: the placement is far off
        overlaps = False
    if not overlaps:
        spans = ("bounds " + str(tuple(round(v, 2) for v in edge.bounds))
                 if edge is not None and np.isfinite(edge.bounds).all() else "a place that cannot be transformed")
        problems.append(f"{where}: misses the outline (the mosaic covers {spans} in plan coordinates; the outline "
                        f"{tuple(round(v, 2) for v in outline.bounds)}): check its placement and the outline's CRS")
        return
    values = sample_in_outline(m.path, info, outline, plan_crs=crs, units=m.units, scale=m.scale, offset=m.offset)
    if values.size == 0:
        problems.append(f"{where}: holds no data inside the outline (every pixel there is nodata): check the "
                        "mosaic's nodata value and placement")
        return
    problem = units_problem(float(np.median(values)), air_c=survey.conditions.air_c, units=m.units,
                            scale=m.scale, offset=m.offset, kind=survey.survey.kind)
    if problem:
        problems.append(f"{where}: {problem}")


def units_problem(median_c: float, *, air_c: float, units: str, scale: float = 1.0, offset: float = 0.0,
                  kind: str = "roof", where: str = "outline") -> str | None:
    """Why a median apparent temperature cannot be right, and what it looks like; ``None`` when plausible.

    Parameters
    ----------
    median_c
        Median apparent temperature on the outline, degC, as read with ``units``, ``scale``, ``offset``.
    air_c
        ``[conditions] air_c``.
    where
        ``"outline"`` (a mosaic's pixels inside the outline) or ``"frame"`` (a whole frame).

    Examples
    --------
    >>> units_problem(6.5, air_c=6.0, units="C") is None
    True
    >>> "look like kelvin" in units_problem(279.6, air_c=6.0, units="C")
    True
    """
    low, high = PLAUSIBLE_C
    gap = median_c - air_c
    if low <= median_c <= high and abs(gap) <= AIR_GAP_K:
        return None
    value = {"C": median_c, "K": median_c + 273.15, "F": median_c * 9.0 / 5.0 + 32.0}[units]  # in declared units
    raw = (value - offset) / scale
    candidates = [("kelvin", 'units = "K"', value - 273.15), ("degrees Celsius", 'units = "C"', value),
                  ("degrees Fahrenheit", 'units = "F"', (value - 32.0) * 5.0 / 9.0)]
    unit_name = {"C": "degrees Celsius", "K": "kelvin", "F": "degrees Fahrenheit"}[units]
    fits = [(name, fix) for name, fix, c in candidates if name != unit_name and abs(c - air_c) <= AIR_GAP_K]
    if fits:
        looks = f"the values look like {fits[0][0]}: set {fits[0][1]}"
    else:
        counts = [(f"scale = {s:g}", raw * s - 273.15) for s in (0.01, 0.04, 0.1)]
        near = [fix for fix, c in counts if abs(c - air_c) <= AIR_GAP_K]
        if near:
            looks = ("the values look like raw camera counts: set scale and offset (value = raw * scale + offset), "
                     f"e.g. {near[0]} with units = \"K\"")
        elif low <= median_c <= high:
            looks = (f"no other unit fits either: check [conditions] air_c = {air_c:g} (the air temperature on site, "
                     "°C), then units, scale and offset")
        else:
            looks = ("the values are not temperatures in any unit wetmap knows: check units, scale and offset "
                     "(value = raw * scale + offset)")
    surface = "frame" if where == "frame" else "hull" if kind == "hull" else "roof"
    settings = f'units = "{units}"' + (f", scale = {scale:g}" if scale != 1.0 else "") + \
        (f", offset = {offset:g}" if offset != 0.0 else "")
    return (f"{settings}: median apparent temperature on the {surface} {median_c:.1f} °C, {abs(gap):.0f} K from the "
            f"air temperature {air_c:g} °C ([conditions] air_c); {looks}")


def _check_cores_near(survey: Survey, conf: Confirmations, outline: BaseGeometry, problems: list[str]) -> None:
    """A core much further from the outline than the roof is wide is a coordinate mistake."""
    x0, y0, x1, y1 = outline.bounds
    limit = max(100.0, math.hypot(x1 - x0, y1 - y0))
    distance = shapely.distance(outline, shapely.points(conf.xs, conf.ys))
    path = survey.cores.path if survey.cores is not None else Path("cores.csv")
    for i in np.flatnonzero(distance > limit):
        problems.append(f"{path}: {conf.ids[i]!r} at ({conf.xs[i]:.2f}, {conf.ys[i]:.2f}) lies {distance[i]:.0f} m from "
                        f"the outline (more than {limit:.0f} m): a coordinate mistake? check x and y (plan "
                        "coordinates in the survey's crs, x east, y north)")
