"""Repair quantities: margin, whole boards, roof sections, units and the bill.

All areas are square metres on the plan (for a hull side, the developed area); lengths
are metres. Other area units are derived only for display (:func:`convert_area`).

- The *repair outline* is the union of the anomalies counted as wet (``wet``, plus
  ``unverified`` when ``include_unverified``) grown by ``margin_m`` (common practice:
  0.3-0.6 m beyond the marked boundary; no published value), merged where the grown
  shapes overlap, clipped to the outline and out of the exclusions.
- *Whole boards*: a grid of ``board_m`` boards aligned with the outline's dominant edge
  direction (or a given angle and origin); every board the repair outline overlaps
  (more than touching) is replaced (rounding up to whole boards is common practice). A
  board's *tear-off* is the board clipped to the roof (outline minus exclusions); the
  tear-off area is their sum. The count depends on where the board joints lie. With a
  given origin (``[repair] board_origin``, a board corner found on site) it is exact;
  without one the grid is tried at :data:`ORIGIN_STEPS` x :data:`ORIGIN_STEPS` offsets
  across one board, the range of counts is reported and the reported grid is the one
  with the median count (:func:`board_takeoff_over_origins`).
- *Sections*: anomaly, repair and board figures per roof section. Each board belongs to
  the section holding the largest share of its tear-off area, or to no section, so the
  sections (plus the part of the roof in no section) add up to the totals.
- *Replace rather than repair*: a section whose wet fraction is above
  ``replace_above_pct`` is flagged (default 25 %: some local codes require full
  replacement when more than 25 % of a roof is wet; the local code decides).
- *Bill of quantities*: tear-off and replacement area, boards, cut edge (the repair
  outline's perimeter) and mobilisation, priced when unit rates are given. A hull side
  (``kind = "hull"``) has its own bill, by area and edge length with no boards: remove
  skin and core, scarf edge, re-core, re-laminate, fair and finish (:func:`hull_bill`).
"""

from __future__ import annotations

import os
from concurrent.futures import ThreadPoolExecutor
import math
from collections.abc import Sequence
from dataclasses import dataclass, replace
from decimal import ROUND_HALF_UP, Decimal
from typing import TYPE_CHECKING, Any

import numpy as np
import shapely
from shapely import affinity
from shapely.geometry import MultiPolygon, Polygon, box
from shapely.geometry.base import BaseGeometry

from .verdicts import NOT_REFUTED, Status, counted_statuses

if TYPE_CHECKING:
    from .survey import AreaUnit, Prices, Repair
    from .vectors import Section

__all__ = [
    "M_PER_FT",
    "M2_PER_FT2",
    "FT2_PER_SQUARE",
    "M2_PER_SQUARE",
    "QUAD_SEGS",
    "MARGIN_CHORD_FRACTION",
    "OUTSIDE_SECTIONS",
    "convert_area",
    "dominant_angle_deg",
    "repair_outline",
    "BoardTakeoff",
    "board_takeoff",
    "ORIGIN_STEPS",
    "board_takeoff_over_origins",
    "overlap_areas",
    "SectionTotals",
    "section_totals",
    "largest_overlap",
    "BillLine",
    "Bill",
    "bill_of_quantities",
    "HULL_BILL_ITEMS",
    "hull_bill",
    "Quantities",
    "compute_quantities",
]

#: One international foot in metres, exactly (International Yard and Pound Agreement,
#: 1959; NIST SP 811, appendix B).
M_PER_FT = 0.3048
#: One square foot in square metres (0.09290304 exactly).
M2_PER_FT2 = M_PER_FT * M_PER_FT
#: A roofing "square" is 100 ft2 (common practice in the trade).
FT2_PER_SQUARE = 100.0
#: One roofing square in square metres (9.290304).
M2_PER_SQUARE = FT2_PER_SQUARE * M2_PER_FT2

#: Largest chord error of the margin's rounded corners, as a fraction of the margin: the
#: chords of a corner arc of radius ``m`` stay within ``MARGIN_CHORD_FRACTION * m`` of the arc
#: (3 mm on the common 0.3 m margin, a tenth of a 3 cm pixel).
MARGIN_CHORD_FRACTION = 0.01

#: Segments per quarter circle of the margin's rounded corners: the fewest whose chord error
#: ``m * (1 - cos(pi / (4 * QUAD_SEGS)))`` stays within :data:`MARGIN_CHORD_FRACTION` of the
#: margin (6: 0.86 %). Every segment of every rounded corner is a vertex that the merge, the
#: clip, the board take-off and every file pay for. The buffer of a square of side ``a`` by
#: ``m`` has area ``a**2 + 4*a*m + 2*QUAD_SEGS*m**2*sin(pi/(2*QUAD_SEGS))``, 1.1 % short of
#: ``pi*m**2`` on the corners (an inscribed polygon).
QUAD_SEGS = int(np.ceil(np.pi / (4.0 * np.arccos(1.0 - MARGIN_CHORD_FRACTION))))

#: Name given to the part of the roof that lies in no section: its row of sections.csv and
#: summary.json ``outside_sections``, and its dry-background group (``background``, the report).
#: The one constant; :mod:`wetmap.results` shows it under the same name.
OUTSIDE_SECTIONS = "(outside sections)"

_TOUCH_M2 = 1e-6  # an overlap smaller than this is a touch, not an overlap

#: Offsets tried along each board side when no board origin is given (odd, so that the
#: median of the counts is one of them): 7 x 7 = 49 grid origins.
ORIGIN_STEPS = 7
_FINE_BATCH = 1 << 15  # fine cells clipped per batch (a few MB of boxes), batches run in threads
_OVERLAP_NOTE_M2 = 0.01  # sections overlapping by more than this are reported


def convert_area(area_m2: float, unit: "AreaUnit") -> float:
    """An area in square metres expressed in ``unit``.

    Parameters
    ----------
    area_m2
        Area, m2.
    unit
        ``"m2"``, ``"ft2"`` (international foot, 0.3048 m exactly) or ``"squares"``
        (roofing squares of 100 ft2).

    Examples
    --------
    >>> convert_area(M2_PER_FT2, "ft2")
    1.0
    >>> round(convert_area(100.0, "squares"), 6)   # 100 m2 = 1076.39 ft2
    10.76391
    """
    if unit == "m2":
        return float(area_m2)
    if unit == "ft2":
        return float(area_m2) / M2_PER_FT2
    if unit == "squares":
        return float(area_m2) / M2_PER_SQUARE
    raise ValueError(f"area unit {unit!r}: expected one of 'm2', 'ft2', 'squares'")


def _polygonal(geom: BaseGeometry) -> BaseGeometry:
    """The polygonal part of ``geom`` (lines and points from touching edges dropped)."""
    if geom.is_empty:
        return Polygon()
    if not geom.is_valid:
        geom = shapely.make_valid(geom)
    polys = [p for p in shapely.get_parts(geom) if isinstance(p, (Polygon, MultiPolygon)) and p.area > 0]
    if not polys:
        return Polygon()
    parts = [q for p in polys for q in shapely.get_parts(p)]
    return parts[0] if len(parts) == 1 else MultiPolygon(parts)


def dominant_angle_deg(outline: BaseGeometry) -> float:
    """Direction of the outline's edges, degrees in ``[0, 90)``, weighted by edge length.

    Only exterior rings count. The mean is taken on the 90-degree period, so the edges of
    a rectangle all vote for the same direction.

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


def _buffer_threaded(geoms: np.ndarray, distance: float) -> np.ndarray:
    """``shapely.buffer(geoms, distance, quad_segs=QUAD_SEGS)`` on every core.

    Buffering outlines with a vertex every few centimetres by a margin of tens of
    centimetres is the slow step of the take-off; shapely releases the GIL inside its
    vectorised functions, so slices of the array run in threads (the same result).
    """
    workers = min(os.cpu_count() or 1, max(1, len(geoms) // 16))
    if workers == 1:
        return shapely.buffer(geoms, distance, quad_segs=QUAD_SEGS)
    chunks = np.array_split(geoms, workers * 4)  # small slices balance uneven outlines
    with ThreadPoolExecutor(workers) as pool:
        done = list(pool.map(lambda c: shapely.buffer(c, distance, quad_segs=QUAD_SEGS), chunks))
    return np.concatenate(done)


def repair_outline(wet: Sequence[BaseGeometry], *, margin_m: float, outline: BaseGeometry,
                   exclusions: BaseGeometry | None = None) -> BaseGeometry:
    """Wet anomalies grown by ``margin_m``, merged, clipped to the roof.

    Parameters
    ----------
    wet
        The anomalies counted as wet, plan coordinates.
    margin_m
        Distance added beyond each anomaly's boundary, metres (round corners,
        :data:`QUAD_SEGS` segments per quarter circle).
    outline
        Roof outline; the result is clipped to it.
    exclusions
        Curbs, units, skylights...; cut out of the result.

    Returns
    -------
    Polygon or MultiPolygon
        Empty when nothing is counted as wet.

    Examples
    --------
    >>> from shapely.geometry import box
    >>> r = repair_outline([box(4, 4, 6, 6)], margin_m=1.0, outline=box(0, 0, 100, 100))
    >>> round(r.area, 2)  # a^2 + 4 a m + pi m^2 (buffered square), less 1.1 % of the corners
    15.11
    """
    if not len(wet):
        return Polygon()
    arr = np.asarray(list(wet), dtype=object)
    grown = shapely.union_all(_buffer_threaded(arr, margin_m) if margin_m > 0 else arr)
    out = grown.intersection(outline)
    if exclusions is not None and not exclusions.is_empty:
        out = out.difference(exclusions)
    return _polygonal(out)


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
        Area of the boards clipped to the roof (outline minus exclusions), m2: the sum
        of ``tearoff_m2``.
    angle_deg
        Direction of the board grid, degrees anticlockwise from plan x.
    origin_xy
        Plan x, y of a corner of the board grid.
    board_m
        Board size ``(along, across)`` the grid direction, metres; ``None`` when no
        whole-board take-off was asked for.
    tearoff_m2
        Per board, its area inside the roof, m2 (shape ``(count,)``).
    count_range
        Fewest and most boards over the grid origins tried when no origin was given;
        ``None`` when the origin was given (the count is then exact).
    origins_tried
        Number of grid origins tried (0 when the origin was given).
    origin_rule
        How the origin of the reported grid was chosen, in words.
    """

    boards: tuple[Polygon, ...]
    count: int
    board_area_m2: float
    tearoff_area_m2: float
    angle_deg: float
    origin_xy: tuple[float, float] = (0.0, 0.0)
    board_m: tuple[float, float] | None = None
    tearoff_m2: tuple[float, ...] = ()
    count_range: tuple[int, int] | None = None
    origins_tried: int = 0
    origin_rule: str = ""

    @property
    def range_note(self) -> str | None:
        """One warning line when the count depends on the unknown joints; ``None`` otherwise."""
        if self.count_range is None or self.count_range[0] == self.count_range[1]:
            return None
        low, high = self.count_range
        return (f"whole boards: {self.count} reported, but the count runs from {low} to {high} with where the "
                f"board joints lie ({self.origin_rule}); give [repair] board_origin = [x, y], a board corner "
                "found on site, for the exact count")


def overlap_areas(cells: np.ndarray, geom: BaseGeometry) -> np.ndarray:
    """Area of each of many small ``cells`` inside one large polygonal ``geom``, m2.

    Equal to ``shapely.area(shapely.intersection(cells, geom))`` but it never clips a cell
    against the whole of ``geom``: its polygons go in an STR-tree, a cell lying wholly
    inside one counts its own area, and only the cells crossing an edge are clipped, against
    that polygon alone. (The polygons of a valid polygonal geometry do not overlap, so the
    pieces add up.)

    >>> from shapely.geometry import MultiPolygon, box
    >>> cells = shapely.box([0, 5, 20], [0, 0, 0], [1, 6, 21], [1, 1, 1])
    >>> overlap_areas(cells, MultiPolygon([box(0, 0, 4, 4), box(5.5, 0, 9, 4)])).tolist()
    [1.0, 0.5, 0.0]
    """
    cells = np.asarray(cells, dtype=object)
    out = np.zeros(len(cells))
    parts = np.asarray([p for p in shapely.get_parts(geom) if p.geom_type == "Polygon" and not p.is_empty],
                       dtype=object)
    if not len(cells) or not len(parts):
        return out
    shapely.prepare(parts)
    cell_i, part_i = shapely.STRtree(parts).query(cells, predicate="intersects")
    pieces = shapely.area(cells[cell_i])
    crossing = ~shapely.contains_properly(parts[part_i], cells[cell_i])
    pieces[crossing] = shapely.area(shapely.intersection(cells[cell_i[crossing]], parts[part_i[crossing]]))
    np.add.at(out, cell_i, pieces)
    return out


def board_takeoff(repair: BaseGeometry, *, board_m: tuple[float, float], roof: BaseGeometry,
                  angle_deg: float | None = None, origin_xy: tuple[float, float] | None = None,
                  grid_of: BaseGeometry | None = None) -> BoardTakeoff:
    """Every board of the grid that the repair outline overlaps.

    Parameters
    ----------
    repair
        Repair outline, plan coordinates.
    board_m
        Board size ``(along, across)`` the grid direction, metres.
    roof
        Outline minus exclusions (where insulation exists); tear-off is clipped to it.
    angle_deg
        Grid direction, degrees anticlockwise from plan x; default the dominant edge
        direction of ``grid_of``.
    origin_xy
        A grid corner, plan x, y; default the lower-left corner of ``grid_of`` in the
        grid's frame.
    grid_of
        The shape the default grid is aligned with (the roof outline); default ``roof``.

    Examples
    --------
    >>> from shapely.geometry import box
    >>> t = board_takeoff(box(0.1, 0.1, 2.3, 1.1), board_m=(1.2, 2.4), roof=box(0, 0, 12, 12))
    >>> t.count, round(t.board_area_m2, 2)   # 2 boards along x, 1 across
    (2, 5.76)
    """
    ref = roof if grid_of is None else grid_of
    if angle_deg is None:
        angle_deg = dominant_angle_deg(ref)
    pivot = (0.0, 0.0)
    if origin_xy is None:
        rot_ref = affinity.rotate(ref, -angle_deg, origin=pivot)
        ox, oy = rot_ref.bounds[0], rot_ref.bounds[1]
        origin_xy = tuple(affinity.rotate(shapely.Point(ox, oy), angle_deg, origin=pivot).coords[0])  # type: ignore[assignment]
    else:
        ox, oy = affinity.rotate(shapely.Point(origin_xy), -angle_deg, origin=pivot).coords[0]
    origin_xy = (float(origin_xy[0]), float(origin_xy[1]))
    if repair.is_empty:
        return BoardTakeoff((), 0, 0.0, 0.0, float(angle_deg), origin_xy, tuple(board_m))
    w, h = board_m
    rot_repair = affinity.rotate(repair, -angle_deg, origin=pivot)
    cells = _grid_cells(rot_repair, ox, oy, w, h)
    boards = tuple(_rotated_about_origin(cells, angle_deg))
    tearoff = tuple(float(a) for a in overlap_areas(np.asarray(boards, dtype=object), roof))
    return BoardTakeoff(boards, len(boards), len(boards) * w * h, math.fsum(tearoff), float(angle_deg),
                        origin_xy, (float(w), float(h)), tearoff)


def _unique_pairs(ij: np.ndarray) -> np.ndarray:
    """``np.unique(ij, axis=0)`` of integer pairs (sorted by the first, then the second), by
    one integer key per pair: numpy sorts one column of integers far faster than rows."""
    if not len(ij):
        return ij.reshape(0, 2)
    lo = ij.min(axis=0)
    span = int(ij[:, 1].max() - lo[1]) + 1
    keys = np.unique((ij[:, 0] - lo[0]).astype(np.int64) * span + (ij[:, 1] - lo[1]))
    return np.column_stack([keys // span + lo[0], keys % span + lo[1]]).astype(ij.dtype, copy=False)


def _rotated_about_origin(geoms: np.ndarray, angle_deg: float) -> np.ndarray:
    """``[affinity.rotate(g, angle_deg, origin=(0, 0)) for g in geoms]`` in one call: the same
    matrix and the same arithmetic (shapely.affinity's), on every coordinate at once."""
    angle = angle_deg * math.pi / 180.0
    cosp, sinp = math.cos(angle), math.sin(angle)
    cosp = 0.0 if abs(cosp) < 2.5e-16 else cosp
    sinp = 0.0 if abs(sinp) < 2.5e-16 else sinp

    def turn(coords: np.ndarray) -> np.ndarray:
        x, y = coords.T
        return np.stack([cosp * x + -sinp * y + 0.0, sinp * x + cosp * y + 0.0]).T

    return shapely.transform(np.asarray(geoms, dtype=object), turn)


def _cells_under(rot_repair: BaseGeometry, ox: float, oy: float, w: float, h: float) -> np.ndarray:
    """``(i, j)`` of the ``w`` x ``h`` cells from ``(ox, oy)`` under the bounding box of each
    polygon of ``rot_repair`` (not of them all, which on a big roof with scattered repairs is
    most of the roof), unique, sorted by ``i`` then ``j``."""
    cand = []
    for xmin, ymin, xmax, ymax in shapely.bounds(shapely.get_parts(rot_repair)):
        i0, i1 = math.floor((xmin - ox) / w), math.ceil((xmax - ox) / w)
        j0, j1 = math.floor((ymin - oy) / h), math.ceil((ymax - oy) / h)
        ii, jj = np.meshgrid(np.arange(i0, i1), np.arange(j0, j1), indexing="ij")
        cand.append(np.column_stack([ii.ravel(), jj.ravel()]))
    return _unique_pairs(np.concatenate(cand))


def _grid_cells(rot_repair: BaseGeometry, ox: float, oy: float, w: float, h: float) -> np.ndarray:
    """Boards (in the grid's frame) of the grid with corner ``(ox, oy)`` that ``rot_repair`` overlaps."""
    ij = _cells_under(rot_repair, ox, oy, w, h)  # candidate boards, in the order of one grid
    x0 = ox + ij[:, 0] * w
    y0 = oy + ij[:, 1] * h
    cells = shapely.box(x0, y0, x0 + w, y0 + h)
    return cells[overlap_areas(cells, rot_repair) > _TOUCH_M2]


def _counts_over_origins(rot_repair: BaseGeometry, ox0: float, oy0: float, w: float, h: float,
                         steps: int) -> np.ndarray:
    """Boards counted by ``_grid_cells`` for each origin ``(ox0 + i w / steps, oy0 + j h / steps)``.

    Every board of every one of those grids is a block of ``steps`` x ``steps`` cells of
    the fine grid of ``w / steps`` by ``h / steps`` from ``(ox0, oy0)``: the repair outline
    is clipped against the fine cells once, and each origin's boards add up their cells'
    areas (the same overlaps as clipping each board, to rounding), instead of clipping
    every board crossing the outline once per origin. Returned in the order
    ``[(i, j) for i in range(steps) for j in range(steps)]``.
    """
    fw, fh = w / steps, h / steps
    fine = _cells_under(rot_repair, ox0, oy0, fw, fh)

    def batch_areas(start: int) -> np.ndarray:  # batches bound the memory of the cell boxes
        part = fine[start:start + _FINE_BATCH]
        x0, y0 = ox0 + part[:, 0] * fw, oy0 + part[:, 1] * fh
        return overlap_areas(shapely.box(x0, y0, x0 + fw, y0 + fh), rot_repair)

    starts = range(0, len(fine), _FINE_BATCH)
    workers = min(os.cpu_count() or 1, len(starts))
    if workers > 1:  # shapely's predicates and clipping release the GIL: batches on every core
        with ThreadPoolExecutor(workers) as pool:
            done = list(pool.map(batch_areas, starts))
    else:
        done = [batch_areas(start) for start in starts]
    areas = np.concatenate(done) if done else np.zeros(0)
    used = areas > 0
    fine, areas = fine[used], areas[used]
    counts = np.zeros(steps * steps, dtype=np.int64)
    for k, (i, j) in enumerate((i, j) for i in range(steps) for j in range(steps)):
        bi, bj = np.floor_divide(fine[:, 0] - i, steps), np.floor_divide(fine[:, 1] - j, steps)
        if not len(bi):
            continue
        bi, bj = bi - bi.min(), bj - bj.min()
        board = bi * (int(bj.max()) + 1) + bj  # one number per board of this grid
        counts[k] = int(np.count_nonzero(np.bincount(board, weights=areas) > _TOUCH_M2))
    return counts


def board_takeoff_over_origins(repair: BaseGeometry, *, board_m: tuple[float, float], roof: BaseGeometry,
                               angle_deg: float | None = None, grid_of: BaseGeometry | None = None,
                               steps: int = ORIGIN_STEPS) -> BoardTakeoff:
    """Whole boards when the board joints' position is unknown: the range over grid origins.

    The grid (direction as in :func:`board_takeoff`) is laid with its corner at ``steps``
    x ``steps`` offsets across one board, ``(i w / steps, j h / steps)`` from the default
    corner (the outline's lower-left corner in the grid's frame). Each origin gives a
    count; the result is the take-off of the origin with the *median* count (the lowest
    offset among equals), with the fewest and most boards in ``count_range``. The median
    is the count to expect when the joints may lie anywhere (common practice: state the
    range, price the typical case); the contractor cannot choose where existing joints
    lie, so the minimum is not an achievable figure.

    Parameters
    ----------
    repair, board_m, roof, angle_deg, grid_of
        As in :func:`board_takeoff`.
    steps
        Offsets per board side, an odd number >= 1 (so the median is one of the counts).

    Returns
    -------
    BoardTakeoff
        With ``count_range``, ``origins_tried`` and ``origin_rule`` set.

    Examples
    --------
    >>> from shapely.geometry import box
    >>> t = board_takeoff_over_origins(box(0.4, 0.4, 1.4, 1.4), board_m=(1.0, 1.0), roof=box(0, 0, 10, 10),
    ...                                steps=5)
    >>> t.count_range, t.count, t.origins_tried   # a 1 m square on a 1 m grid: 1 board only when aligned
    ((1, 4), 4, 25)
    """
    if steps < 1 or steps % 2 == 0:
        raise ValueError(f"steps = {steps!r}: expected an odd number >= 1")
    ref = roof if grid_of is None else grid_of
    if angle_deg is None:
        angle_deg = dominant_angle_deg(ref)
    pivot = (0.0, 0.0)
    rot_ref = affinity.rotate(ref, -angle_deg, origin=pivot)
    ox0, oy0 = rot_ref.bounds[0], rot_ref.bounds[1]
    w, h = board_m
    rule = (f"no [repair] board_origin: the median count over {steps * steps} grid origins "
            f"({steps} x {steps} offsets across one board), the lowest offset among equals")
    if repair.is_empty:
        base = board_takeoff(repair, board_m=board_m, roof=roof, angle_deg=angle_deg, grid_of=grid_of)
        return replace(base, count_range=(0, 0), origins_tried=steps * steps, origin_rule=rule)
    rot_repair = affinity.rotate(repair, -angle_deg, origin=pivot)
    offsets = [(i, j) for i in range(steps) for j in range(steps)]
    counts = _counts_over_origins(rot_repair, ox0, oy0, w, h, steps)
    median = int(np.sort(counts)[len(counts) // 2])
    k = int(np.flatnonzero(counts == median)[0])  # offsets run from the default corner outward
    i, j = offsets[k]
    corner = affinity.rotate(shapely.Point(ox0 + i * w / steps, oy0 + j * h / steps), angle_deg, origin=pivot)
    take = board_takeoff(repair, board_m=board_m, roof=roof, angle_deg=angle_deg,
                         origin_xy=(float(corner.x), float(corner.y)), grid_of=grid_of)
    return replace(take, count_range=(int(counts.min()), int(counts.max())), origins_tried=len(offsets),
                   origin_rule=rule)


def largest_overlap(geoms: Sequence[BaseGeometry], zones: Sequence[BaseGeometry]) -> list[int]:
    """For each geometry, the index of the zone it overlaps most, or -1.

    Ties go to the first zone.

    >>> from shapely.geometry import box
    >>> largest_overlap([box(0, 0, 2, 1), box(5, 5, 6, 6)], [box(0, 0, 0.5, 1), box(0.5, 0, 9, 1)])
    [1, -1]
    """
    if not len(zones):
        return [-1] * len(geoms)
    out = []
    zone_arr = np.asarray(list(zones), dtype=object)
    for g in geoms:
        areas = shapely.area(shapely.intersection(zone_arr, g))
        out.append(int(np.argmax(areas)) if areas.max() > 0 else -1)
    return out


@dataclass(frozen=True)
class SectionTotals:
    """Figures of one roof section (areas m2), its wet fraction and replace flag.

    ``wet_area_m2`` is confirmed wet plus unverified (as in the survey totals);
    ``wet_fraction`` is ``wet_area_m2 / area_m2``; ``replace_flag`` is true when the wet
    fraction is above the replace-rather-than-repair threshold.
    """

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
    board_area_m2: float = 0.0
    tearoff_area_m2: float = 0.0
    replace_flag: bool = False


def section_totals(name: str, zone: BaseGeometry, *, roof: BaseGeometry, anomalies: Sequence[BaseGeometry],
                   status: Sequence[Status], repair: BaseGeometry, boards: Sequence[Polygon],
                   assembly: str | None = None, insulation: str | None = None,
                   in_zone: np.ndarray | None = None, board_m: tuple[float, float] | None = None,
                   tearoff_m2: Sequence[float] | None = None,
                   replace_above_pct: float | None = None) -> SectionTotals:
    """Areas of the anomalies and repair inside one section (clipped to it).

    Parameters
    ----------
    name, zone, assembly, insulation
        The section and its polygon, plan coordinates.
    roof
        Outline minus exclusions: ``area_m2`` is the zone's part of it.
    anomalies, status
        Every anomaly and its status (same length); their parts inside the zone count.
    repair
        The repair outline; its part inside the zone counts.
    boards
        Board rectangles.
    in_zone
        Which boards belong to this section (bool, shape ``(len(boards),)``); default:
        those whose centroid the zone covers.
    board_m
        Board size, metres (for ``board_area_m2``).
    tearoff_m2
        Per board, its tear-off area (for ``tearoff_area_m2``).
    replace_above_pct
        Threshold for ``replace_flag``, percent; ``None``: never flagged.
    """
    area = zone.intersection(roof).area
    by = {s: 0.0 for s in ("wet", "dry", "unverified")}
    if len(anomalies):
        parts = shapely.area(shapely.intersection(np.asarray(list(anomalies), dtype=object), zone))
        for s, a in zip(status, parts):
            by[s] += float(a)
    wet = by["wet"] + by["unverified"]
    if in_zone is None:
        in_zone = (shapely.covers(zone, shapely.centroid(np.asarray(list(boards), dtype=object)))
                   if len(boards) else np.zeros(0, dtype=bool))
    in_zone = np.asarray(in_zone, dtype=bool)
    n_boards = int(in_zone.sum())
    board_area = n_boards * board_m[0] * board_m[1] if board_m else 0.0
    tearoff = math.fsum(np.asarray(tearoff_m2, dtype=float)[in_zone]) if tearoff_m2 is not None and len(in_zone) else 0.0
    fraction = wet / area if area > 0 else 0.0
    return SectionTotals(
        name=name, assembly=assembly, insulation=insulation, area_m2=area,
        confirmed_wet_area_m2=by["wet"], unverified_area_m2=by["unverified"], confirmed_dry_area_m2=by["dry"],
        wet_area_m2=wet, repair_area_m2=repair.intersection(zone).area if not repair.is_empty else 0.0,
        boards=n_boards, wet_fraction=fraction, board_area_m2=board_area, tearoff_area_m2=tearoff,
        replace_flag=replace_above_pct is not None and 100.0 * fraction > replace_above_pct,
    )


# --------------------------------------------------------------------------------------
# Bill of quantities
# --------------------------------------------------------------------------------------

_CENT = Decimal("0.01")


def _dec(value: float) -> Decimal:
    return Decimal(repr(float(value)))


def _round2(value: float) -> float:
    """Round half up to 2 decimals (as a bill is written), from the shortest decimal repr."""
    return float(_dec(value).quantize(_CENT, rounding=ROUND_HALF_UP))


@dataclass(frozen=True)
class BillLine:
    """One line of the bill of quantities.

    Attributes
    ----------
    item
        ``"tear-off"``, ``"replace"``, ``"boards"``, ``"cut edge"`` or ``"mobilisation"``.
    description
        What the line covers, in words.
    unit
        Unit of ``quantity`` and of ``rate``: an area unit (``"m2"``, ``"ft2"``,
        ``"squares"``), ``"board"``, ``"m"`` or ``"item"``.
    quantity
        Billed quantity, rounded to 0.01 (boards and items: whole numbers).
    rate
        Currency per ``unit``; ``None``: not priced.
    amount
        ``quantity * rate`` rounded half up to 0.01; ``None``: not priced.
    areas
        Area lines only: the area in each reported unit, ``(unit, value)`` pairs, each
        rounded to 0.01.
    """

    item: str
    description: str
    unit: str
    quantity: float
    rate: float | None = None
    amount: float | None = None
    areas: tuple[tuple[str, float], ...] = ()

    def as_dict(self) -> dict[str, Any]:
        """The line as JSON-ready data (``quantity_<unit>`` keys for the areas)."""
        qty: float | int = int(self.quantity) if self.unit in ("board", "item") else self.quantity
        out: dict[str, Any] = {"item": self.item, "description": self.description, "unit": self.unit,
                               "quantity": qty, "rate": self.rate, "amount": self.amount}
        out.update({f"quantity_{u}": v for u, v in self.areas})
        return out


@dataclass(frozen=True)
class Bill:
    """A bill of quantities, priced where rates were given.

    Attributes
    ----------
    currency
        Currency of rates and amounts; ``None`` when no ``[prices]`` were given.
    lines
        The lines, in order.
    total
        Sum of the priced amounts; ``None`` when no line is priced.
    area_basis
        Which area the tear-off and replace lines measure.
    """

    currency: str | None
    lines: tuple[BillLine, ...]
    total: float | None
    area_basis: str

    def as_dict(self) -> dict[str, Any]:
        """The bill as JSON-ready data."""
        return {"currency": self.currency, "area_basis": self.area_basis,
                "lines": [line.as_dict() for line in self.lines], "total": self.total,
                "note": "quantities measured on the plan from apparent thermal anomalies and confirmations; "
                        "check them on site before ordering or quoting"}


def bill_of_quantities(*, tearoff_area_m2: float, cut_edge_m: float, boards: int | None = None,
                       prices: "Prices | None" = None, area_units: Sequence["AreaUnit"] = ("m2",),
                       area_basis: str = "tear-off area", wet_thickness_mm: float | None = None) -> Bill:
    """Lines for tear-off, replacement, boards, cut edge and mobilisation, priced if asked.

    Quantities are rounded to 0.01 first; each amount is then ``quantity * rate``
    rounded half up to 0.01, and the total is the sum of the amounts (as a bill is
    checked by hand).

    Parameters
    ----------
    tearoff_area_m2
        Area torn off and replaced, m2.
    cut_edge_m
        Length of cut edge, metres (the repair outline's perimeter).
    boards
        Whole boards replaced; ``None``: no board line.
    prices
        Unit rates (``[prices]``); ``None``: an unpriced bill.
    area_units
        Units in which the area lines are also given (``"m2"`` always).
    area_basis
        Words saying what the area is.
    wet_thickness_mm
        Thickness of the wet layer removed (the cores' logged ``thickness_mm``); with it a
        ``removal volume`` line (m3 = tear-off area x thickness) follows the tear-off,
        priced by ``[prices] disposal_per_m3``.

    Examples
    --------
    >>> from wetmap.survey import Prices
    >>> b = bill_of_quantities(tearoff_area_m2=10.0, cut_edge_m=12.5, boards=4,
    ...                        prices=Prices(currency="EUR", tearoff_rate=20.0, board_each=15.0,
    ...                                      cut_edge_per_m=3.0, mobilisation=100.0))
    >>> [(line.item, line.amount) for line in b.lines]
    [('tear-off', 200.0), ('replace', None), ('boards', 60.0), ('cut edge', 37.5), ('mobilisation', 100.0)]
    >>> b.total
    397.5
    """
    units = ["m2", *[u for u in area_units if u != "m2"]]

    def area_line(item: str, words: str, rate: float | None, unit: "AreaUnit") -> BillLine:
        areas = tuple((u, _round2(convert_area(tearoff_area_m2, u))) for u in units)  # type: ignore[arg-type]
        qty = dict(areas).get(unit, _round2(convert_area(tearoff_area_m2, unit)))
        return _priced(BillLine(item, words, unit, qty, areas=areas), rate)

    p = prices
    lines = [
        area_line("tear-off", "remove membrane and wet insulation, dispose",
                  p.tearoff_rate if p else None, p.tearoff_unit if p else "m2"),
        area_line("replace", "new insulation and membrane over the torn-off area",
                  p.replace_rate if p else None, p.replace_unit if p else "m2"),
    ]
    if wet_thickness_mm is not None:
        lines.insert(1, _priced(BillLine("removal volume", f"wet layer removed: the tear-off area x {wet_thickness_mm:g} mm "
                                         "(median wet thickness logged in the cores)", "m3",
                                         _round2(tearoff_area_m2 * wet_thickness_mm / 1000.0)),
                                getattr(p, "disposal_per_m3", None) if p else None))
    if boards is not None:
        lines.append(_priced(BillLine("boards", "whole insulation boards", "board", float(boards)),
                             p.board_each if p else None))
    lines.append(_priced(BillLine("cut edge", "membrane cut and tie-in along the repair outline", "m",
                                  _round2(cut_edge_m)), p.cut_edge_per_m if p else None))
    if p is not None and p.mobilisation is not None:
        lines.append(_priced(BillLine("mobilisation", "fixed: access, set-up, removal", "item", 1.0),
                             p.mobilisation))
    amounts = [_dec(line.amount) for line in lines if line.amount is not None]
    total = float(sum(amounts, Decimal(0))) if amounts else None
    return Bill(currency=p.currency if p else None, lines=tuple(lines), total=total, area_basis=area_basis)


#: The hull repair, step by step (common practice for wet cored FRP: cut the outer skin
#: and the wet core out back to dry core, taper the skin edge so the new laminate bonds,
#: bond in new core, laminate over it lapping onto the taper, fair and finish).
HULL_BILL_ITEMS = ("remove skin and core", "scarf edge", "re-core", "re-laminate", "fair and finish")


def hull_bill(*, repair_area_m2: float, edge_m: float, prices: "Prices | None" = None,
              area_units: Sequence["AreaUnit"] = ("m2",),
              area_basis: str = "repair area: the wet anomalies grown by the margin") -> Bill:
    """A hull side's repair bill: by area and edge length, priced if asked; no boards.

    Lines (:data:`HULL_BILL_ITEMS`, then ``mobilisation`` when priced): remove the outer
    skin and wet core (area), scarf the skin edge along the repair outline (length), bond
    in new core (area), re-laminate over it (area), fair and finish (area). Every area
    line measures the repair outline (the wet anomalies grown by ``[repair] margin_m``,
    merged and clipped to the hull side); the edge is its perimeter, holes included.
    Rounding as :func:`bill_of_quantities`.

    Parameters
    ----------
    repair_area_m2
        Area of the repair outline, m2 (developed skin).
    edge_m
        Its perimeter, metres.
    prices
        ``[prices]`` rates (``remove_per_m2``, ``recore_per_m2``, ``relaminate_per_m2``,
        ``fair_per_m2`` or their ``_per_ft2`` forms, ``scarf_per_m``, ``mobilisation``).
    area_units
        Units in which the area lines are also given (``"m2"`` always; ``"ft2"``).
    area_basis
        Words saying what the area is.

    Examples
    --------
    >>> from wetmap.survey import Prices
    >>> b = hull_bill(repair_area_m2=1.5, edge_m=5.25, prices=Prices(currency="EUR", remove_rate=80.0,
    ...                                                                scarf_per_m=12.0))
    >>> [(line.item, line.unit, line.quantity, line.amount) for line in b.lines]  # doctest: +NORMALIZE_WHITESPACE
    [('remove skin and core', 'm2', 1.5, 120.0), ('scarf edge', 'm', 5.25, 63.0), ('re-core', 'm2', 1.5, None),
     ('re-laminate', 'm2', 1.5, None), ('fair and finish', 'm2', 1.5, None)]
    >>> b.total
    183.0
    """
    units = ["m2", *[u for u in area_units if u != "m2"]]

    def area_line(item: str, words: str, rate: float | None, unit: "AreaUnit") -> BillLine:
        areas = tuple((u, _round2(convert_area(repair_area_m2, u))) for u in units)  # type: ignore[arg-type]
        qty = dict(areas).get(unit, _round2(convert_area(repair_area_m2, unit)))
        return _priced(BillLine(item, words, unit, qty, areas=areas), rate)

    p = prices
    lines = [
        area_line("remove skin and core", "cut out the outer skin and the wet core back to dry core, dispose",
                  p.remove_rate if p else None, p.remove_unit if p else "m2"),
        _priced(BillLine("scarf edge", "outer skin edge cut back and tapered (scarfed) along the repair outline, "
                         "so the new laminate bonds", "m", _round2(edge_m)), p.scarf_per_m if p else None),
        area_line("re-core", "new core bonded to the inner skin over the cut-out",
                  p.recore_rate if p else None, p.recore_unit if p else "m2"),
        area_line("re-laminate", "new outer laminate over the new core, lapped onto the scarfed edge",
                  p.relaminate_rate if p else None, p.relaminate_unit if p else "m2"),
        area_line("fair and finish", "fair, prime and finish (gelcoat or paint) over the repair",
                  p.fair_rate if p else None, p.fair_unit if p else "m2"),
    ]
    if p is not None and p.mobilisation is not None:
        lines.append(_priced(BillLine("mobilisation", "fixed: access, set-up, removal", "item", 1.0),
                             p.mobilisation))
    amounts = [_dec(line.amount) for line in lines if line.amount is not None]
    total = float(sum(amounts, Decimal(0))) if amounts else None
    return Bill(currency=p.currency if p else None, lines=tuple(lines), total=total, area_basis=area_basis)


def _priced(line: BillLine, rate: float | None) -> BillLine:
    if rate is None:
        return line
    amount = float((_dec(line.quantity) * _dec(rate)).quantize(_CENT, rounding=ROUND_HALF_UP))
    return BillLine(line.item, line.description, line.unit, line.quantity, float(rate), amount, line.areas)


# --------------------------------------------------------------------------------------
# The whole step
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Quantities:
    """Everything the quantities step computes.

    Attributes
    ----------
    repair
        Repair outline (Polygon or MultiPolygon; empty when nothing is counted wet).
    repair_perimeter_m
        Its perimeter including holes, metres (the cut edge).
    takeoff
        Whole boards.
    sections
        One entry per section, in the order given.
    outside
        The part of the roof in no section (``name`` :data:`OUTSIDE_SECTIONS`); ``None``
        when no sections were given.
    board_section
        Per board, the index of its section, or -1 for no section.
    bill
        The bill of quantities.
    wet_fraction
        Wet (confirmed plus unverified) area over the roof area.
    replace_flag
        The whole roof's wet fraction is above ``replace_above_pct``.
    notes
        Warning lines (replace flags, overlapping sections).
    """

    repair: BaseGeometry
    repair_perimeter_m: float
    takeoff: BoardTakeoff
    sections: tuple[SectionTotals, ...]
    outside: SectionTotals | None
    board_section: tuple[int, ...]
    bill: Bill
    wet_fraction: float
    replace_flag: bool
    notes: tuple[str, ...]


def _replace_note(where: str, fraction: float, threshold_pct: float, kind: str) -> str:
    head = (f"{where}: wet fraction {100 * fraction:.1f} % is above {threshold_pct:g} % "
            "([repair] replace_above_pct): consider replacement rather than repair")
    if kind == "hull":
        return head + "; an accredited marine surveyor decides"
    return (head + "; some local codes require full replacement when more than 25 % of a roof is wet, and the "
            "International Building Code (1511.3.1.1 in recent editions) forbids re-covering a water-soaked "
            "roof; the local code decides, check which rule applies")


def compute_quantities(anomalies: Sequence[BaseGeometry], status: Sequence[Status], *,
                       outline: BaseGeometry, exclusions: BaseGeometry | None = None,
                       sections: Sequence["Section"] = (), settings: "Repair",
                       prices: "Prices | None" = None, kind: str = "roof",
                       drawn: Sequence[BaseGeometry] | None = None,
                       wet_thickness_mm: float | None = None) -> Quantities:
    """Repair outline, whole boards, section totals and the bill for one survey.

    Parameters
    ----------
    anomalies, status
        Anomaly polygons (plan coordinates) and their statuses, same length; the section
        figures are measured on them.
    outline, exclusions
        The roof outline and what is cut out of it.
    sections
        Roof sections (``name``, ``geometry``, ``assembly``, ``insulation``).
    settings
        The ``[repair]`` settings: margin, board size and grid, what counts as wet, the
        replace threshold and area units.
    prices
        The ``[prices]`` rates, or ``None``.
    kind
        ``"roof"`` or ``"hull"``: a hull has no board take-off (a ``board_m`` given is noted
        and not used) and its own bill (:func:`hull_bill`); the replace note's words differ.
    drawn
        The same anomalies with fewer vertices (simplified within a fraction of a pixel,
        :func:`wetmap.polygons.simplify_outlines`), grown into the repair outline instead
        of ``anomalies``; ``None``: grow ``anomalies``.
    wet_thickness_mm
        The wet layer's thickness logged in the cores (a roof's removal-volume line).
    """
    excl = exclusions if exclusions is not None and not exclusions.is_empty else None
    roof = outline.difference(excl) if excl is not None else outline
    counted = counted_statuses(include_unverified=settings.include_unverified)
    grow = anomalies if drawn is None else drawn
    repair = repair_outline([g for g, s in zip(grow, status) if s in counted],
                            margin_m=settings.margin_m, outline=outline, exclusions=excl)
    notes: list[str] = []
    hull = kind == "hull"
    if settings.board_m and hull:
        notes.append(f"[repair] board_m = {list(settings.board_m)} is not used on a hull side: a hull is cut back "
                     "to dry core and billed by area and edge length")
    if settings.board_m and not hull and settings.board_origin is not None:
        takeoff = board_takeoff(repair, board_m=settings.board_m, roof=roof, angle_deg=settings.board_angle_deg,
                                origin_xy=settings.board_origin, grid_of=outline)
        takeoff = replace(takeoff, origin_rule="[repair] board_origin (a board corner given)")
    elif settings.board_m and not hull:
        takeoff = board_takeoff_over_origins(repair, board_m=settings.board_m, roof=roof,
                                             angle_deg=settings.board_angle_deg, grid_of=outline)
    else:
        takeoff = BoardTakeoff((), 0, 0.0, 0.0, 0.0)
    threshold = settings.replace_above_pct

    totals: tuple[SectionTotals, ...] = ()
    outside: SectionTotals | None = None
    board_section = np.full(takeoff.count, -1, dtype=int)
    if sections:
        zones = [s.geometry for s in sections]
        tree = shapely.STRtree(zones)
        left, right = tree.query(zones, predicate="intersects")
        for i, j in zip(left, right):
            if i < j:
                shared = zones[i].intersection(zones[j]).area
                if shared > _OVERLAP_NOTE_M2:
                    notes.append(f"sections {sections[i].name} and {sections[j].name} overlap by {shared:.2f} m2: "
                                 "that area counts in both; correct the sections file so they do not overlap")
        union = shapely.union_all(np.asarray(zones, dtype=object))
        everything = [outline, *anomalies, *zones, *takeoff.boards]
        x0, y0, x1, y1 = shapely.total_bounds(np.asarray(everything, dtype=object))
        rest = box(x0 - 1.0, y0 - 1.0, x1 + 1.0, y1 + 1.0).difference(union)
        if takeoff.count:
            boards = np.asarray(takeoff.boards, dtype=object)
            shapely.prepare(roof)
            pieces = boards.copy()  # a board wholly inside the roof is its own piece
            edge = ~shapely.contains_properly(roof, boards)
            pieces[edge] = shapely.intersection(boards[edge], roof)
            board_section = np.asarray(largest_overlap(list(pieces), [*zones, rest]), dtype=int)
            board_section[board_section == len(zones)] = -1
        common = dict(roof=roof, anomalies=anomalies, status=status, repair=repair, boards=takeoff.boards,
                      board_m=takeoff.board_m, tearoff_m2=takeoff.tearoff_m2, replace_above_pct=threshold)
        totals = tuple(
            section_totals(s.name, s.geometry, assembly=s.assembly, insulation=s.insulation,
                           in_zone=board_section == k, **common)  # type: ignore[arg-type]
            for k, s in enumerate(sections)
        )
        outside = section_totals(OUTSIDE_SECTIONS, rest, in_zone=board_section == -1, **common)  # type: ignore[arg-type]
        for t in totals:
            if t.replace_flag:
                notes.append(_replace_note(f"section {t.name}", t.wet_fraction, threshold, kind))
        if outside.replace_flag and outside.area_m2 > 0:
            notes.append(_replace_note(f"the {'hull side' if hull else 'roof'} outside every section",
                                       outside.wet_fraction, threshold, kind))

    wet = math.fsum(g.area for g, s in zip(anomalies, status) if s in NOT_REFUTED)
    fraction = wet / roof.area if roof.area > 0 else 0.0
    flag = 100.0 * fraction > threshold
    if flag and not sections:
        notes.append(_replace_note("the whole roof" if kind == "roof" else "the hull side", fraction, threshold, kind))

    perimeter = float(repair.length)
    if hull:
        bill = hull_bill(repair_area_m2=repair.area, edge_m=perimeter, prices=prices, area_units=settings.area_units,
                         area_basis=f"repair area: the wet anomalies grown by the margin ({settings.margin_m:g} m), "
                                    "merged and clipped to the hull side; edge: its perimeter")
    else:
        basis = ("tear-off area: the whole boards clipped to the roof" if settings.board_m
                 else "repair area: the repair outline")
        bill = bill_of_quantities(
            tearoff_area_m2=takeoff.tearoff_area_m2 if settings.board_m else repair.area,
            cut_edge_m=perimeter, boards=takeoff.count if settings.board_m else None, prices=prices,
            area_units=settings.area_units, area_basis=basis, wet_thickness_mm=wet_thickness_mm,
        )
    return Quantities(repair=repair, repair_perimeter_m=perimeter, takeoff=takeoff, sections=totals,
                      outside=outside, board_section=tuple(int(k) for k in board_section), bill=bill,
                      wet_fraction=fraction, replace_flag=flag, notes=tuple(notes))
