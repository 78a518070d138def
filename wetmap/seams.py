"""Seams between windows: each window's raw regions, merged exactly, cleaned up in vector space.

Each window outlines its raw anomaly regions ``delta > threshold`` in integer pixel
coordinates of the whole grid (:func:`tile_pieces`). :func:`merge_pieces` then does the
clean-up of :func:`wetmap.detect.anomaly_mask` in vector space, exactly: pieces that share
a pixel edge across a seam are merged (union of integer polygons is exact); regions of
fewer than ``min_pixels`` pixels are dropped; each bounded background component (a hole:
the bounded parts of the grid's box minus every region, which also finds a pocket closed
by regions that touch at pixel corners) of at most ``min_pixels`` pixels is filled unless
it holds an unusable pixel (checked by reading just its bounding window), and joins the
regions it shares an edge with.
"""

from __future__ import annotations

import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass

import numpy as np
import shapely
from affine import Affine

from .errors import ProcessingError
from .polygons import label_regions, polygonize

__all__ = ["TilePieces", "tile_pieces", "MergedRegions", "merge_pieces"]


@dataclass(frozen=True)
class TilePieces:
    """The raw anomaly regions of one window, outlined in whole-grid pixel coordinates.

    Attributes
    ----------
    polygons
        Object array ``(n,)`` of pixel polygons (integer pixel corners of the whole grid).
    pixels, delta_sum, delta_max
        ``(n,)`` pixel count, sum (float64) and maximum of delta-T per region.
    top, bottom, left, right
        Region numbers ``1..n`` (0: none) along the window's four edges, for merging across
        seams; ``top``/``bottom`` have the window's columns, ``left``/``right`` its rows.
    """

    polygons: np.ndarray
    pixels: np.ndarray
    delta_sum: np.ndarray
    delta_max: np.ndarray
    top: np.ndarray
    bottom: np.ndarray
    left: np.ndarray
    right: np.ndarray


def tile_pieces(delta_c: np.ndarray, *, row0: int, col0: int, grid_shape: tuple[int, int], threshold_c: float,
                min_pixels: int) -> TilePieces:
    """Outline the raw anomaly regions ``delta > threshold_c`` of one window.

    Regions that touch no seam (a window edge inside the grid) and have fewer than
    ``min_pixels`` pixels are dropped here: they merge with nothing, so the whole-array
    clean-up would drop them too. The others are outlined with ``outline="pixel"`` in
    pixel coordinates of the whole grid (exact integers).

    Parameters
    ----------
    delta_c
        The window's delta-T, degC, ``(rows, cols)``; NaN where not usable.
    row0, col0
        The window's first pixel in the grid.
    grid_shape
        ``(rows, cols)`` of the whole grid.
    threshold_c
        ``[detect] delta_c``.
    min_pixels
        Smallest region kept, pixels.
    """
    rows, cols = delta_c.shape
    with np.errstate(invalid="ignore"):
        raw = delta_c > threshold_c
    labels, count = label_regions(raw)
    del raw
    sizes = np.bincount(labels.ravel(), minlength=count + 1)
    seam = np.zeros(count + 1, dtype=bool)
    if row0 > 0:
        seam[labels[0]] = True
    if row0 + rows < grid_shape[0]:
        seam[labels[-1]] = True
    if col0 > 0:
        seam[labels[:, 0]] = True
    if col0 + cols < grid_shape[1]:
        seam[labels[:, -1]] = True
    keep = seam | (sizes >= min_pixels)
    keep[0] = False
    renumber = np.zeros(count + 1, dtype=np.int32)
    n = int(keep.sum())
    renumber[keep] = np.arange(1, n + 1, dtype=np.int32)
    labels = renumber[labels]
    inside = labels.ravel() > 0
    lab = labels.ravel()[inside].astype(np.intp)
    vals = delta_c.ravel()[inside].astype(np.float64)
    pixels = np.bincount(lab, minlength=n + 1)[1:].astype(np.int64)
    total = np.bincount(lab, weights=vals, minlength=n + 1)[1:]
    largest = np.full(n + 1, -np.inf)
    np.maximum.at(largest, lab, vals)
    if n:
        from rasterio.errors import NotGeoreferencedWarning

        with warnings.catch_warnings():  # the first window's transform is the identity
            warnings.simplefilter("ignore", NotGeoreferencedWarning)
            polys = np.asarray(polygonize(labels, n, Affine.translation(col0, row0), outline="pixel"), dtype=object)
    else:
        polys = np.zeros(0, dtype=object)
    return TilePieces(polygons=polys, pixels=pixels, delta_sum=total, delta_max=largest[1:],
                      top=labels[0].copy(), bottom=labels[-1].copy(), left=labels[:, 0].copy(),
                      right=labels[:, -1].copy())


# --------------------------------------------------------------------------------------
# Merging the pieces and the clean-up in vector space
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class MergedRegions:
    """Anomaly regions after the clean-up, in raster order of their first pixel.

    Attributes
    ----------
    polygons
        Pixel polygons (integer pixel corners of the whole grid), object array ``(n,)``.
    pixels, delta_sum, delta_max
        ``(n,)`` per region (filled holes included).
    """

    polygons: np.ndarray
    pixels: np.ndarray
    delta_sum: np.ndarray
    delta_max: np.ndarray

    @property
    def delta_mean(self) -> np.ndarray:
        with np.errstate(invalid="ignore", divide="ignore"):
            return np.where(self.pixels > 0, self.delta_sum / np.maximum(self.pixels, 1), np.nan)


def _components(n: int, a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Connected components of ``n`` nodes joined by the pairs ``(a, b)``: a label per node."""
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    if n == 0:
        return np.zeros(0, dtype=np.int64)
    graph = coo_matrix((np.ones(len(a), dtype=np.int8), (a, b)), shape=(n, n))
    return connected_components(graph, directed=False)[1]


def _exact(merged) -> bool:
    """One valid Polygon with integer vertices (an exact union of pixel polygons)."""
    if shapely.get_type_id(merged) != 3 or not shapely.is_valid(merged):
        return False
    xy = shapely.get_coordinates(merged)
    return bool(np.array_equal(xy, np.rint(xy)))


def _union(polys: Sequence) -> shapely.Polygon:
    """Union of pixel polygons that make one 4-connected region (integer coordinates: exact)."""
    if len(polys) == 1:
        return polys[0]
    polys = np.asarray(polys, dtype=object)
    merged = shapely.union_all(polys)  # floating overlay: exact on integer pixel corners
    if not _exact(merged):
        merged = shapely.union_all(polys, grid_size=1.0)  # snap-rounding: slower, always exact
    if shapely.get_type_id(merged) != 3:
        raise ProcessingError(f"tiles: merged pixel outlines gave a {merged.geom_type}, expected one Polygon "
                              "(a wetmap fault: please report it)")
    return merged


def _fill_rings(region: shapely.Polygon, holes: np.ndarray) -> shapely.Polygon | None:
    """``region`` with the interior rings that ``holes`` fill exactly removed; ``None`` if one does not."""
    if np.any(shapely.get_num_interior_rings(holes) > 0):
        return None
    rings = np.asarray(region.interiors, dtype=object) if len(region.interiors) else np.zeros(0, dtype=object)
    ring_polys = shapely.polygons(rings) if len(rings) else rings
    by_bounds: dict[tuple[float, ...], list[int]] = {}
    for i, b in enumerate(shapely.bounds(ring_polys).tolist() if len(rings) else []):
        by_bounds.setdefault(tuple(b), []).append(i)
    drop = set()
    for h, b in zip(holes, shapely.bounds(holes).tolist()):
        match = [i for i in by_bounds.get(tuple(b), []) if i not in drop and ring_polys[i].equals(h)]
        if not match:
            return None
        drop.add(match[0])
    return shapely.Polygon(region.exterior, [r for i, r in enumerate(rings) if i not in drop])


def _group(members: np.ndarray, polys: np.ndarray, pixels: np.ndarray, sums: np.ndarray,
           maxes: np.ndarray, *, n_regions: int | None = None) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Merge items by group label: unions, summed pixels and sums, largest maximum.

    With ``n_regions``, items from that index on are filled holes: a group of one region and
    holes that are its own interior rings only loses those rings (no overlay needed).
    """
    n = int(members.max()) + 1 if len(members) else 0
    order = np.argsort(members, kind="stable")
    bounds = np.searchsorted(members[order], np.arange(n + 1))
    out = np.empty(n, dtype=object)
    for g in range(n):
        items = order[bounds[g]:bounds[g + 1]]
        if n_regions is not None and len(items) > 1 and np.count_nonzero(items < n_regions) == 1:
            region = polys[items[items < n_regions][0]]
            fast = _fill_rings(region, polys[items[items >= n_regions]])
            if fast is not None:
                out[g] = fast
                continue
        out[g] = _union(polys[items])
    px = np.bincount(members, weights=pixels, minlength=n).astype(np.int64)
    total = np.bincount(members, weights=sums, minlength=n)
    largest = np.full(n, -np.inf)
    np.maximum.at(largest, members, maxes)
    return out, px, total, largest


def merge_pieces(pieces: Sequence[TilePieces], windows: Sequence[tuple[int, int, int, int]], *,
                 grid_shape: tuple[int, int], tile_px: int, min_pixels: int,
                 read_delta: Callable[[np.ndarray, np.ndarray], np.ndarray]) -> MergedRegions:
    """The clean-up of :func:`wetmap.detect.anomaly_mask`, done on the windows' pixel polygons.

    1. Pieces that share a pixel edge across a seam are one region (4-connectivity);
       their pixel polygons are united exactly (integer coordinates).
    2. Regions of fewer than ``min_pixels`` pixels are dropped.
    3. Bounded background components (holes, and pockets closed by regions touching at
       pixel corners: the bounded parts of the grid's box minus every region) of at most
       ``min_pixels`` pixels are filled unless one of their pixels is not fillable; a
       filled hole joins every region it shares a pixel edge with.

    Parameters
    ----------
    pieces, windows
        :func:`tile_pieces` of each window and the windows ``(row0, col0, rows, cols)``.
    grid_shape
        ``(rows, cols)`` of the grid.
    tile_px
        Window side (windows are ``windows_of(grid_shape, tile_px)``).
    min_pixels
        Smallest region kept and largest hole filled, pixels.
    read_delta
        ``read_delta(rows, cols) -> delta_c`` at pixels of the grid (int arrays); a pixel
        is fillable when its delta-T is finite (usable), as in :func:`wetmap.detect.anomaly_mask`.

    Returns
    -------
    MergedRegions
    """
    n_cols = -(-grid_shape[1] // tile_px)
    offsets = np.cumsum([0] + [len(p.pixels) for p in pieces])
    total = int(offsets[-1])
    pairs_a: list[np.ndarray] = []
    pairs_b: list[np.ndarray] = []

    def link(a_labels: np.ndarray, a_off: int, b_labels: np.ndarray, b_off: int) -> None:
        both = (a_labels > 0) & (b_labels > 0)
        pairs_a.append(a_off + a_labels[both].astype(np.int64) - 1)
        pairs_b.append(b_off + b_labels[both].astype(np.int64) - 1)

    for i, p in enumerate(pieces):
        tr, tc = divmod(i, n_cols)
        right = i + 1 if tc + 1 < n_cols else None
        below = i + n_cols if i + n_cols < len(pieces) else None
        if right is not None:
            link(p.right, int(offsets[i]), pieces[right].left, int(offsets[right]))
        if below is not None:
            link(p.bottom, int(offsets[i]), pieces[below].top, int(offsets[below]))
    a = np.concatenate(pairs_a) if pairs_a else np.zeros(0, np.int64)
    b = np.concatenate(pairs_b) if pairs_b else np.zeros(0, np.int64)
    group = _components(total, a, b)
    if total:
        polys, pixels, sums, maxes = _group(
            group, np.concatenate([p.polygons for p in pieces]), np.concatenate([p.pixels for p in pieces]),
            np.concatenate([p.delta_sum for p in pieces]), np.concatenate([p.delta_max for p in pieces]))
    else:
        polys, pixels, sums, maxes = (np.zeros(0, dtype=object), np.zeros(0, np.int64), np.zeros(0), np.zeros(0))
    kept = pixels >= min_pixels
    polys, pixels, sums, maxes = polys[kept], pixels[kept], sums[kept], maxes[kept]

    holes, owner = _small_holes(polys, grid_shape, min_pixels)
    h_pixels, h_sum, h_max, h_ok = _hole_statistics(holes, read_delta)
    if h_ok.any():
        hole_polys, owner = holes[h_ok], owner[h_ok]
        n = len(polys)
        # a plain interior ring borders its own region only; other holes: every region sharing an edge
        plain = np.flatnonzero(owner >= 0)
        other = np.flatnonzero(owner < 0)
        hole_idx, region_idx = plain, owner[plain]
        if len(other):
            q_hole, q_region = shapely.STRtree(polys).query(hole_polys[other], predicate="touches")
            shares_edge = shapely.relate_pattern(hole_polys[other][q_hole], polys[q_region], "F***1****")
            hole_idx = np.concatenate([hole_idx, other[q_hole[shares_edge]]])
            region_idx = np.concatenate([region_idx, q_region[shares_edge]])
        group = _components(n + len(hole_polys), n + hole_idx, region_idx)
        _, group = np.unique(group, return_inverse=True)
        polys, pixels, sums, maxes = _group(
            group, np.concatenate([polys, hole_polys]), np.concatenate([pixels, h_pixels[h_ok]]),
            np.concatenate([sums, h_sum[h_ok]]), np.concatenate([maxes, h_max[h_ok]]), n_regions=n)
    order = np.lexsort(_first_pixel(polys)[::-1]) if len(polys) else np.zeros(0, dtype=np.intp)
    return MergedRegions(polygons=polys[order], pixels=pixels[order], delta_sum=sums[order], delta_max=maxes[order])


def _hole_pixels(holes: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``(hole index, row, col)`` of every pixel of integer-cornered pixel polygons.

    Exact scan conversion of the vertical edges (even-odd per row; a pixel ``(r, c)`` is in a
    polygon when ``c`` lies between a pair of crossings of row ``r``), vectorised over all
    the polygons.
    """
    empty = np.zeros(0, dtype=np.int64)
    if not len(holes):
        return empty, empty, empty
    rings, ring_owner = shapely.get_rings(holes, return_index=True)
    coords, ring = shapely.get_coordinates(rings, return_index=True)
    xy = np.rint(coords).astype(np.int64)
    same = ring[:-1] == ring[1:]
    x0, y0, x1, y1 = xy[:-1, 0], xy[:-1, 1], xy[1:, 0], xy[1:, 1]
    vertical = same & (x0 == x1) & (y0 != y1)
    owner = ring_owner[ring[:-1][vertical]]
    x = x0[vertical]
    low = np.minimum(y0, y1)[vertical]
    n = np.abs(y1 - y0)[vertical]
    hole = np.repeat(owner, n)
    row = np.repeat(low, n) + (np.arange(int(n.sum())) - np.repeat(np.cumsum(n) - n, n))
    col = np.repeat(x, n)
    order = np.lexsort((col, row, hole))
    hole, row, col = hole[order][0::2], row[order][0::2], col[order]
    start, stop = col[0::2], col[1::2]
    width = stop - start
    pixels_hole = np.repeat(hole, width)
    pixels_row = np.repeat(row, width)
    pixels_col = np.repeat(start, width) + (np.arange(int(width.sum())) - np.repeat(np.cumsum(width) - width, width))
    return pixels_hole, pixels_row, pixels_col


def _hole_statistics(holes: np.ndarray, read_delta: Callable[[np.ndarray, np.ndarray], np.ndarray]
                     ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Pixels, delta sum and maximum of each hole, and whether all its pixels are fillable (finite delta).

    In batches of about 260 000 pixels, so memory stays bounded however many holes there are.
    """
    n = len(holes)
    area = np.rint(shapely.area(holes)).astype(np.int64) if n else np.zeros(0, np.int64)
    pixels = np.zeros(n, dtype=np.int64)
    total = np.zeros(n)
    largest = np.full(n, -np.inf)
    bad = np.zeros(n, dtype=np.int64)
    batch = np.cumsum(area) // (1 << 18)
    for b in np.unique(batch):
        part = np.flatnonzero(batch == b)
        which, rows, cols = _hole_pixels(holes[part])
        which = part[which]
        values = read_delta(rows, cols).astype(np.float64) if len(rows) else np.zeros(0)
        del rows, cols
        ok = np.isfinite(values)
        pixels += np.bincount(which, minlength=n)
        bad += np.bincount(which[~ok], minlength=n)
        total += np.bincount(which[ok], weights=values[ok], minlength=n)
        np.maximum.at(largest, which[ok], values[ok])
    if not np.array_equal(pixels, area):
        raise ProcessingError("tiles: a hole's pixels do not add up to its area (a wetmap fault: please report it)")
    return pixels, total, largest, bad == 0


def _small_holes(polys: np.ndarray, grid_shape: tuple[int, int], min_pixels: int
                 ) -> tuple[np.ndarray, np.ndarray]:
    """Bounded background components of at most ``min_pixels`` pixels (pixel polygons).

    Returns the components and, for each, the one region whose interior ring it is (-1 for
    a component bounded otherwise: a hole holding islands, or a pocket closed by regions
    that touch at pixel corners).

    A region's interior ring with no region inside is such a component as it is (the
    common case: dropouts in a wet area). The others lie strictly inside the box of the
    regions that enclose them, so the parts of (that box, one pixel wider, minus every
    region with its plain rings filled) that do not reach the box's edge are exactly the rest.
    """
    none = (np.zeros(0, dtype=object), np.zeros(0, dtype=np.int64))
    if not len(polys) or min_pixels <= 0:
        return none
    rows, cols = grid_shape
    tree = shapely.STRtree(polys)
    a, b = tree.query(polys, predicate="touches")
    general = np.zeros(len(polys), dtype=bool)
    general[a[a != b]] = True  # touches another region at a pixel corner
    rings, ring_owner = shapely.get_rings(polys, return_index=True)
    interior = np.r_[False, ring_owner[1:] == ring_owner[:-1]]  # every ring after a polygon's first
    rings, ring_owner = rings[interior], ring_owner[interior]
    ring_polys = shapely.polygons(rings) if len(rings) else np.zeros(0, dtype=object)
    inside_ring, _ = tree.query(ring_polys, predicate="covers") if len(rings) else (np.zeros(0, np.int64),) * 2
    with_island = np.zeros(len(rings), dtype=bool)
    with_island[inside_ring] = True
    general[ring_owner[with_island]] = True
    plain = ~with_island
    small = plain & (shapely.area(ring_polys) <= min_pixels + 0.5) if len(rings) else plain
    holes, owners = [ring_polys[small]], [ring_owner[small]]
    if general.any():
        x0, y0, x1, y1 = shapely.total_bounds(polys[general])
        fx0, fy0, fx1, fy1 = max(x0 - 1, 0), max(y0 - 1, 0), min(x1 + 1, cols), min(y1 + 1, rows)
        frame = shapely.box(fx0, fy0, fx1, fy1)
        near = tree.query(frame)
        kept_rings = {}  # per region: its rings that hold islands (the plain ones are filled)
        for ring, owner in zip(rings[with_island], ring_owner[with_island]):
            kept_rings.setdefault(int(owner), []).append(ring)
        filled = [shapely.Polygon(polys[i].exterior, kept_rings.get(int(i), [])) for i in near]
        rest = shapely.difference(frame, shapely.multipolygons(filled), grid_size=1.0)
        parts = shapely.get_parts(rest)
        if len(parts):
            bx0, by0, bx1, by1 = shapely.bounds(parts).T
            bounded = (bx0 > fx0) & (by0 > fy0) & (bx1 < fx1) & (by1 < fy1)
            keep = bounded & (shapely.area(parts) <= min_pixels + 0.5)
            holes.append(parts[keep])
            owners.append(np.full(int(keep.sum()), -1, dtype=np.int64))
    return np.concatenate(holes), np.concatenate(owners).astype(np.int64)


def _first_pixel(polys: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``(row, col)`` of each pixel polygon's first pixel in raster order (as ndimage.label numbers)."""
    rows = np.empty(len(polys), dtype=np.int64)
    cols = np.empty(len(polys), dtype=np.int64)
    for i, p in enumerate(polys):
        xy = np.asarray(p.exterior.coords)
        top = xy[:, 1].min()
        rows[i] = int(top)
        cols[i] = int(xy[xy[:, 1] == top, 0].min())
    return rows, cols
