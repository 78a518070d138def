"""Repair quantities: margin, whole boards, roof sections and totals.

All areas are square metres on the plan (for a hull side, the developed area).

- The *repair outline* is the union of the anomalies counted as wet (``wet``, plus
  ``unverified`` when ``include_unverified``) grown by ``margin_m`` (common practice:
  0.3-0.6 m beyond the marked boundary; no published value), clipped to the outline
  and out of the exclusions.
- *Whole boards*: a grid of ``board_m`` boards aligned with the outline's dominant edge
  direction; every board the repair outline overlaps (more than touching) is replaced
  (rounding up to whole boards is common practice). The tear-off area is the union of
  those boards clipped to the roof.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import shapely
from shapely import affinity
from shapely.geometry import Polygon
from shapely.geometry.base import BaseGeometry

from .confirm import Status

__all__ = [
    "dominant_angle_deg",
    "repair_outline",
    "BoardTakeoff",
    "board_takeoff",
    "SectionTotals",
    "section_totals",
    "largest_overlap",
]

_TOUCH_M2 = 1e-6  # an overlap smaller than this is a touch, not an overlap


def dominant_angle_deg(outline: BaseGeometry) -> float:
    """Direction of the outline's edges, degrees in ``[0, 90)``, weighted by edge length.

    >>> from shapely.geometry import box
    >>> dominant_angle_deg(box(0, 0, 10, 5))
    0.0
    >>> round(dominant_angle_deg(affinity.rotate(box(0, 0, 10, 5), 30)), 6)
    30.0
    """
    coords = [np.asarray(ring.coords) for poly in shapely.get_parts(outline) for ring in [poly.exterior]]
    d = np.concatenate([np.diff(c, axis=0) for c in coords])
    length = np.hypot(d[:, 0], d[:, 1])
    angle = np.degrees(np.arctan2(d[:, 1], d[:, 0])) % 90.0
    # circular mean on the 90-degree period, weighted by length
    z = np.sum(length * np.exp(1j * np.radians(angle * 4.0)))
    best = (np.degrees(np.angle(z)) / 4.0) % 90.0
    return float(round(best, 9) % 90.0)


def repair_outline(wet: list[BaseGeometry], *, margin_m: float, outline: BaseGeometry,
                   exclusions: BaseGeometry | None = None) -> BaseGeometry:
    """Wet anomalies grown by ``margin_m``, merged, clipped to the roof.

    >>> from shapely.geometry import box
    >>> r = repair_outline([box(4, 4, 6, 6)], margin_m=1.0, outline=box(0, 0, 100, 100))
    >>> round(r.area, 2)  # a^2 + 4 a m + pi m^2 (buffered square)
    15.14
    """
    if not wet:
        return Polygon()
    grown = shapely.union_all(shapely.buffer(np.asarray(wet, dtype=object), margin_m, quad_segs=16)) if margin_m > 0 \
        else shapely.union_all(np.asarray(wet, dtype=object))
    out = grown.intersection(outline)
    if exclusions is not None and not exclusions.is_empty:
        out = out.difference(exclusions)
    return out


@dataclass(frozen=True)
class BoardTakeoff:
    """Whole boards replaced under a repair outline.

    Attributes
    ----------
    boards
        Board rectangles in plan coordinates (full boards, not clipped).
    count
        Number of boards.
    board_area_m2
        ``count`` times one board's area.
    tearoff_area_m2
        Area of the boards' union clipped to the roof (outline minus exclusions).
    angle_deg
        Direction of the board grid.
    """

    boards: tuple[Polygon, ...]
    count: int
    board_area_m2: float
    tearoff_area_m2: float
    angle_deg: float


def board_takeoff(repair: BaseGeometry, *, board_m: tuple[float, float], roof: BaseGeometry,
                  angle_deg: float | None = None, origin_xy: tuple[float, float] | None = None) -> BoardTakeoff:
    """Every board of the grid that the repair outline overlaps.

    Parameters
    ----------
    repair
        Repair outline, plan coordinates.
    board_m
        Board size ``(along, across)`` the grid direction, metres.
    roof
        Outline minus exclusions (where insulation exists).
    angle_deg
        Grid direction; default the roof's dominant edge direction.
    origin_xy
        A grid corner; default the lower-left corner of the roof in the grid's frame.

    Examples
    --------
    >>> from shapely.geometry import box
    >>> t = board_takeoff(box(0.1, 0.1, 2.3, 1.1), board_m=(1.2, 2.4), roof=box(0, 0, 12, 12))
    >>> t.count, round(t.board_area_m2, 2)   # 2 boards along x, 1 across
    (2, 5.76)
    """
    if angle_deg is None:
        angle_deg = dominant_angle_deg(roof)
    if repair.is_empty:
        return BoardTakeoff((), 0, 0.0, 0.0, angle_deg)
    w, h = board_m
    pivot = (0.0, 0.0)
    rot_roof = affinity.rotate(roof, -angle_deg, origin=pivot)
    rot_repair = affinity.rotate(repair, -angle_deg, origin=pivot)
    if origin_xy is None:
        ox, oy = rot_roof.bounds[0], rot_roof.bounds[1]
    else:
        ox, oy = affinity.rotate(shapely.Point(origin_xy), -angle_deg, origin=pivot).coords[0]
    xmin, ymin, xmax, ymax = rot_repair.bounds
    i0, i1 = math.floor((xmin - ox) / w), math.ceil((xmax - ox) / w)
    j0, j1 = math.floor((ymin - oy) / h), math.ceil((ymax - oy) / h)
    ii, jj = np.meshgrid(np.arange(i0, i1), np.arange(j0, j1), indexing="ij")
    x0 = ox + ii.ravel() * w
    y0 = oy + jj.ravel() * h
    cells = shapely.box(x0, y0, x0 + w, y0 + h)
    shapely.prepare(rot_repair)
    hit = shapely.intersects(rot_repair, cells)
    cells = cells[hit]
    if len(cells):
        overlap = shapely.area(shapely.intersection(cells, rot_repair))
        cells = cells[overlap > _TOUCH_M2]
    boards = tuple(affinity.rotate(c, angle_deg, origin=pivot) for c in cells)
    tearoff = shapely.union_all(np.asarray(boards, dtype=object)).intersection(roof).area if boards else 0.0
    return BoardTakeoff(boards, len(boards), len(boards) * w * h, float(tearoff), angle_deg)


def largest_overlap(geoms: list[BaseGeometry], zones: list[BaseGeometry]) -> list[int]:
    """For each geometry, the index of the zone it overlaps most, or -1."""
    if not zones:
        return [-1] * len(geoms)
    out = []
    zone_arr = np.asarray(zones, dtype=object)
    for g in geoms:
        areas = shapely.area(shapely.intersection(zone_arr, g))
        out.append(int(np.argmax(areas)) if areas.max() > 0 else -1)
    return out


@dataclass(frozen=True)
class SectionTotals:
    """Areas of one roof section (m2), and its wet fraction."""

    name: str
    assembly: str | None
    insulation: str | None
    area_m2: float
    confirmed_wet_area_m2: float
    unverified_area_m2: float
    confirmed_dry_area_m2: float
    wet_area_m2: float
    repair_area_m2: float
    boards: int
    wet_fraction: float


def section_totals(name: str, zone: BaseGeometry, *, roof: BaseGeometry, anomalies: list[BaseGeometry],
                   status: tuple[Status, ...], repair: BaseGeometry, boards: tuple[Polygon, ...],
                   assembly: str | None = None, insulation: str | None = None) -> SectionTotals:
    """Areas of the anomalies and repair inside one section (clipped to it).

    A board is counted in the section holding its centroid, so sections add up to the total.
    """
    area = zone.intersection(roof).area
    by = {s: 0.0 for s in ("wet", "dry", "unverified")}
    if anomalies:
        parts = shapely.area(shapely.intersection(np.asarray(anomalies, dtype=object), zone))
        for s, a in zip(status, parts):
            by[s] += float(a)
    wet = by["wet"] + by["unverified"]
    n_boards = 0
    if boards:
        n_boards = int(shapely.covers(zone, shapely.centroid(np.asarray(boards, dtype=object))).sum())
    return SectionTotals(
        name=name, assembly=assembly, insulation=insulation, area_m2=area,
        confirmed_wet_area_m2=by["wet"], unverified_area_m2=by["unverified"], confirmed_dry_area_m2=by["dry"],
        wet_area_m2=wet, repair_area_m2=repair.intersection(zone).area if not repair.is_empty else 0.0,
        boards=n_boards, wet_fraction=wet / area if area > 0 else 0.0,
    )
