"""``repair.dxf``: the plan, anomalies, repair outlines and boards for CAD users.

Plan coordinates (the survey CRS, or plan metres for ``local``), drawing units metres.
Every polygon ring is a closed ``LWPOLYLINE``: exteriors anticlockwise, holes clockwise
as separate polylines on the same layer, so a CAD area command on an exterior less its
holes gives the polygon's area, and the signed areas of a layer's rings add up to it.
Repair outlines are also filled with a hatch (holes left open) on their own layer, and
each anomaly is also one hatch on ``ANOMALY-HATCH`` (its colour) with the exterior as the
outer path and each hole as an inner path: one object whose CAD area is the anomaly's.

Colours are the Okabe-Ito colour-blind-safe palette (Okabe & Ito 2008, "Color Universal
Design"), as true colours on the layers with the nearest AutoCAD colour index beside:
wet vermillion, unverified reddish purple, dry blue (the map's and report's colours), so
wet and dry differ in hue and lightness for every common colour-vision deficiency.

Layers (names of wetmap's own; see :data:`LAYERS`): ``OUTLINE``, ``EXCLUSIONS``,
``SECTIONS``, ``ANOMALY-WET``, ``ANOMALY-UNVERIFIED``, ``ANOMALY-DRY``, ``REPAIR``,
``REPAIR-HATCH``, ``ANOMALY-HATCH``, ``BOARDS``, ``CORES``, ``LABELS``.
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Callable

import numpy as np
import shapely
from shapely.geometry import Polygon
from shapely.geometry.base import BaseGeometry

from ..errors import ProcessingError
from ..quantities import convert_area
from ..wording import Wording, wording_of
from .forked import write_beside
from .tables import quantities_of

if TYPE_CHECKING:
    from ..results import SurveyResult

__all__ = ["LAYERS", "LAYER_RGB", "STATUS_LAYER", "layers_for", "write_dxf", "write_dxf_beside", "polygon_rings"]

#: Layer name -> (AutoCAD colour index, description) of a roof survey (see :func:`layers_for`).
LAYERS: dict[str, tuple[int, str]] = {
    "OUTLINE": (7, "roof outline, plan coordinates"),
    "EXCLUSIONS": (8, "curbs, rooftop units, skylights and other areas left out"),
    "SECTIONS": (9, "roof sections"),
    "ANOMALY-WET": (30, "apparent thermal anomalies confirmed wet by a core or reading"),
    "ANOMALY-UNVERIFIED": (221, "apparent thermal anomalies with no confirmation inside"),
    "ANOMALY-DRY": (150, "apparent thermal anomalies refuted: confirmations inside all dry"),
    "ANOMALY-HATCH": (7, "one hatch per anomaly, holes as inner paths, in its status colour"),
    "REPAIR": (40, "repair outlines: counted anomalies plus the margin, clipped to the roof"),
    "REPAIR-HATCH": (40, "fill of the repair outlines"),
    "BOARDS": (4, "whole insulation boards to replace"),
    "CORES": (7, "cores and readings with their judgement"),
    "LABELS": (7, "ids and areas"),
}

def layers_for(words: Wording) -> dict[str, tuple[int, str]]:
    """The drawing's layers in the survey's vocabulary: :data:`LAYERS` on a roof; on a hull
    side the descriptions speak of the hull side, its readings and soundings, and there is
    no board layer (a hull is cut back to dry core, not replaced board by board).

    >>> from wetmap.wording import wording_for
    >>> layers_for(wording_for("hull", side="port"))["OUTLINE"]
    (7, 'port hull side outline (developed), plan coordinates')
    """
    if words.whole_boards:
        return dict(LAYERS)
    text = {
        "OUTLINE": f"{words.area} outline (developed), plan coordinates",
        "EXCLUSIONS": "fittings and other areas left out of the survey",
        "SECTIONS": f"{words.area_short} sections",
        "ANOMALY-WET": f"apparent thermal anomalies confirmed wet by {words.confirmations_any}",
        "REPAIR": f"repair outlines: counted anomalies plus the margin, clipped to the {words.area_short}",
        "CORES": f"{words.confirmations_all} with their judgement",
    }
    return {name: (colour, text.get(name, description)) for name, (colour, description) in LAYERS.items()
            if name != "BOARDS"}


#: Layer -> true colour (Okabe-Ito palette, Okabe & Ito 2008): vermillion, reddish purple,
#: blue for the statuses (as on the map), orange for the repair, bluish green for boards.
LAYER_RGB: dict[str, tuple[int, int, int]] = {
    "ANOMALY-WET": (213, 94, 0),
    "ANOMALY-UNVERIFIED": (204, 121, 167),
    "ANOMALY-DRY": (0, 114, 178),
    "REPAIR": (230, 159, 0),
    "REPAIR-HATCH": (230, 159, 0),
    "BOARDS": (0, 158, 115),
}

#: Anomaly status -> layer.
STATUS_LAYER = {"wet": "ANOMALY-WET", "unverified": "ANOMALY-UNVERIFIED", "dry": "ANOMALY-DRY"}


def polygon_rings(geom: BaseGeometry) -> list[tuple[np.ndarray, bool]]:
    """The rings of a (multi)polygon as ``(xy, is_hole)``, exteriors anticlockwise, holes clockwise.

    ``xy`` has shape ``(n, 2)`` without the repeated closing vertex.

    >>> from shapely.geometry import box
    >>> [(len(xy), hole) for xy, hole in polygon_rings(box(0, 0, 4, 4).difference(box(1, 1, 2, 2)))]
    [(4, False), (4, True)]
    """
    out: list[tuple[np.ndarray, bool]] = []
    if geom.is_empty:
        return out
    for poly in shapely.get_parts(shapely.orient_polygons(geom, exterior_cw=False)):
        if not isinstance(poly, Polygon) or poly.is_empty:
            continue
        out.append((np.asarray(poly.exterior.coords)[:-1, :2], False))
        out.extend((np.asarray(r.coords)[:-1, :2], True) for r in poly.interiors)
    return out


def _text_height_m(outline: BaseGeometry) -> float:
    x0, y0, x1, y1 = outline.bounds
    return float(np.clip(max(x1 - x0, y1 - y0) / 150.0, 0.05, 2.0))


def _area_text(area_m2: float, units: tuple[str, ...]) -> str:
    parts = [f"{area_m2:.2f} m2"]
    if "ft2" in units:
        parts.append(f"{convert_area(area_m2, 'ft2'):.1f} ft2")
    if "squares" in units:
        parts.append(f"{convert_area(area_m2, 'squares'):.2f} sq")
    return " / ".join(parts)


def write_dxf(result: "SurveyResult", path: Path) -> None:
    """Write ``repair.dxf`` (DXF R2010, metres, plan coordinates) and audit it.

    Parameters
    ----------
    result
        The survey's results.
    path
        File to write.

    Raises
    ------
    ProcessingError
        ezdxf's audit found an error in the drawing (a wetmap bug).
    """
    import ezdxf
    from ezdxf import bbox, zoom
    from ezdxf.enums import TextEntityAlignment


    q = quantities_of(result)
    units = tuple(result.survey.repair.area_units)
    doc = ezdxf.new("R2010", setup=True)
    doc.units = ezdxf.units.M
    doc.header["$MEASUREMENT"] = 1  # metric
    doc.header["$LUNITS"] = 2  # decimal
    for name, (colour, description) in layers_for(wording_of(result.survey)).items():
        layer = doc.layers.add(name, color=colour)
        layer.description = description
        if name in LAYER_RGB:
            layer.rgb = LAYER_RGB[name]
    msp = doc.modelspace()
    h = _text_height_m(result.outline)

    drawn: list[BaseGeometry] = []  # polygons written, for the extents
    marks: list = []  # texts and circles, for the extents

    def rings(geom: BaseGeometry, layer: str) -> None:
        drawn.append(geom)
        for xy, _ in polygon_rings(geom):
            # the points in one array (x, y, start width, end width, bulge), not one by one:
            # ezdxf's per-point path parses each point in Python (the same stored values)
            line = msp.add_lwpolyline([], close=True, dxfattribs={"layer": layer})
            line.lwpoints.extend(np.column_stack([xy, np.zeros((len(xy), 3))]))

    def label(text: str, xy: tuple[float, float], *, height: float = h, layer: str = "LABELS") -> None:
        marks.append(msp.add_text(text, height=height, dxfattribs={"layer": layer}).set_placement(
            xy, align=TextEntityAlignment.MIDDLE_CENTER))

    def inside(geom: BaseGeometry) -> tuple[float, float]:
        p = geom.representative_point()
        return float(p.x), float(p.y)

    rings(result.outline, "OUTLINE")
    rings(result.exclusions, "EXCLUSIONS")
    for s in result.sections:
        rings(s.geometry, "SECTIONS")
        part = s.geometry.intersection(result.roof)
        if not part.is_empty and part.area > 0:
            label(f"section {s.name}", inside(part), height=1.5 * h)
    for a in result.anomalies:
        rings(a.geometry, STATUS_LAYER[a.status])
        layer = STATUS_LAYER[a.status]
        fill = msp.add_hatch(color=LAYERS[layer][0], dxfattribs={"layer": "ANOMALY-HATCH"})
        fill.rgb = LAYER_RGB[layer]
        fill.set_pattern_fill("ANSI37", scale=h / 4.0)  # cross-hatch, the plan stays readable under it
        for xy, hole in polygon_rings(a.geometry):  # one hatch: the exterior and its islands
            fill.paths.add_polyline_path(
                xy.tolist(), is_closed=True,
                flags=ezdxf.const.BOUNDARY_PATH_DEFAULT if hole else ezdxf.const.BOUNDARY_PATH_EXTERNAL)
        label(f"A{a.id} {a.status} {_area_text(a.area_m2, units)}", inside(a.geometry))
    parts = list(shapely.get_parts(q.repair)) if not q.repair.is_empty else []
    for k, part in enumerate(parts, start=1):
        rings(part, "REPAIR")
        hatch = msp.add_hatch(color=LAYERS["REPAIR"][0], dxfattribs={"layer": "REPAIR-HATCH"})
        hatch.set_pattern_fill("ANSI31", scale=h / 4.0)  # 45-degree lines 3.175 x scale apart
        for xy, hole in polygon_rings(part):
            hatch.paths.add_polyline_path(
                xy.tolist(), is_closed=True,
                flags=ezdxf.const.BOUNDARY_PATH_DEFAULT if hole else ezdxf.const.BOUNDARY_PATH_EXTERNAL)
        x, y = inside(part)
        label(f"R{k} repair {_area_text(part.area, units)}", (x, y - 1.2 * h))
    for board in q.takeoff.boards if wording_of(result.survey).whole_boards else ():  # no board layer on a hull
        rings(board, "BOARDS")
    c = result.confirmations
    for i in range(len(c)):
        x, y = float(c.xs[i]), float(c.ys[i])
        marks.append(msp.add_circle((x, y), radius=0.4 * h, dxfattribs={"layer": "CORES"}))
        msp.add_point((x, y), dxfattribs={"layer": "CORES"})
        judged = "wet" if c.wet[i] else "dry"
        marks.append(msp.add_text(f"{c.ids[i]} {judged}", height=0.8 * h, dxfattribs={"layer": "CORES"}).set_placement(
            (x + 0.6 * h, y), align=TextEntityAlignment.MIDDLE_LEFT))

    # a title block under the outline: what the drawing is, the totals, the caution
    x0, y0, _, _ = result.outline.bounds
    s = result.survey
    crs = "plan metres (local)" if s.survey.is_local else f"{s.survey.crs}, metres"
    lines = [
        f"{s.survey.title}: repair take-off by wetmap; coordinates {crs}",
        f"repair outlines {_area_text(q.repair.area, units)}, perimeter {q.repair_perimeter_m:.2f} m, "
        f"margin {s.repair.margin_m:g} m",
    ]
    if s.repair.board_m and wording_of(s).whole_boards:
        lines.append(f"{q.takeoff.count} boards of {s.repair.board_m[0]:g} x {s.repair.board_m[1]:g} m, "
                     f"tear-off {_area_text(q.takeoff.tearoff_area_m2, units)}, "
                     f"grid at {q.takeoff.angle_deg:.2f} deg")
    words = wording_of(s)
    lines.append(f"Apparent thermal anomalies, not measured moisture: verify by {words.verify_by}; "
                 f"{words.decides}.")
    for n, text in enumerate(lines):
        marks.append(msp.add_text(text, height=h, dxfattribs={"layer": "LABELS"}).set_placement(
            (x0, y0 - (2.0 + 1.6 * n) * h), align=TextEntityAlignment.LEFT))

    # header and model-space extents: the polygons' bounds from shapely, ezdxf's estimate for
    # the texts and circles alone (its bounding box of every entity walks each vertex in Python)
    extents = bbox.extents(marks, fast=True)
    if drawn:
        gx0, gy0, gx1, gy1 = shapely.total_bounds(np.asarray(drawn, dtype=object))
        if np.isfinite(gx0):
            extents.extend([(gx0, gy0, 0.0), (gx1, gy1, 0.0)])
    if extents.has_data:  # the initial view: CAD opens on the roof
        msp.dxf.extmin, msp.dxf.extmax = extents.extmin, extents.extmax
        doc.header["$EXTMIN"], doc.header["$EXTMAX"] = extents.extmin, extents.extmax
        zoom.window(msp, extents.extmin, extents.extmax)
    auditor = doc.audit()
    if auditor.has_errors:
        first = auditor.errors[0].message if auditor.errors else "unknown"
        raise ProcessingError(f"{path.name}: ezdxf's audit found {len(auditor.errors)} errors (first: {first}); "
                              "this is a wetmap bug, please report it")
    doc.saveas(path)


def write_dxf_beside(result: "SurveyResult", path: Path) -> Callable[[], None]:
    """Start :func:`write_dxf` beside the caller's work (a forked process on Linux: ezdxf
    builds every vertex in Python and holds the GIL); returns the function that waits for it
    and raises the writer's own error. See :func:`wetmap.export.forked.write_beside`."""
    return write_beside(write_dxf, path, result, path, name="wetmap-dxf")
