"""Windows of the plan grid and the rasteriser that gives every window the same pixels.

The plan grid is cut into square *windows* of ``tile_px`` pixels, a multiple of the
background block size (:func:`wetmap.detect.background_grid`), anchored at pixel
``(0, 0)`` (:func:`choose_tile_px`, :func:`windows_of`); a grid small enough is one window.

The roof mask and the section labels are rasterised here (:func:`rasterize_window`) with
the pixel-centre rule computed from the edges in whole-grid pixel coordinates, so every
window gives the same pixels as the whole grid, bit for bit (GDAL's rasteriser shifts the
coordinates into each window and can flip a centre that lies on an edge).
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import shapely
from affine import Affine

__all__ = [
    "TILE_TARGET_PX",
    "WHOLE_ARRAY_MAX_PX",
    "PREVIEW_MAX_SIDE",
    "PixelEdges",
    "pixel_edges",
    "rasterize_window",
    "roof_mask",
    "section_labels",
    "section_label_raster",
    "labels_at",
    "choose_tile_px",
    "preview_factor",
    "windows_of",
    "block_mean",
]

#: Window side aimed at, pixels (rounded to a multiple of the background block). Chosen
#: on the benchmarks (benchmarks/RESULTS.md): a 1 Mpx window keeps each task's working set
#: near 40 MB while the per-window overhead stays small.
TILE_TARGET_PX = 1024

#: Plan grids up to this many pixels are processed as one array unless ``[detect] tile_px``
#: says otherwise; larger ones in windows.
WHOLE_ARRAY_MAX_PX = 8_000_000

#: Longest side of the preview kept in memory in tiled mode, pixels (about the report's
#: figure resolution; the map's overlays are drawn from it too).
PREVIEW_MAX_SIDE = 1400

# --------------------------------------------------------------------------------------
# The roof mask: the pixel-centre rule, the same in every window
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class PixelEdges:
    """Non-horizontal edges of polygon rings in pixel coordinates of a grid.

    Each edge runs from ``(x0, y0)`` to ``(x1, y1)`` with ``y0 < y1`` (``x`` = column,
    ``y`` = row, pixel corners at integers, pixel ``(row, col)`` centred at
    ``(col + 0.5, row + 0.5)``); ``slope`` is ``(x1 - x0) / (y1 - y0)``. Float64, shape ``(E,)``.
    """

    x0: np.ndarray
    y0: np.ndarray
    y1: np.ndarray
    slope: np.ndarray

    def __len__(self) -> int:
        return len(self.x0)


def pixel_edges(geometry, transform: Affine) -> PixelEdges:
    """The polygon edges of ``geometry`` (plan coordinates) in pixel coordinates of ``transform``.

    Parameters
    ----------
    geometry
        Any shapely geometry; only its polygonal parts count (points and lines cover no
        pixel centre).
    transform
        Pixel-corner ``(col, row)`` -> plan ``(x, y)`` of the grid.

    Returns
    -------
    PixelEdges

    Examples
    --------
    >>> e = pixel_edges(shapely.box(0.0, 0.0, 1.0, 1.0), Affine(0.5, 0, 0, 0, -0.5, 1.0))
    >>> len(e), sorted(e.x0.tolist())
    (2, [0.0, 2.0])
    """
    empty = np.zeros(0)
    if geometry is None or shapely.is_empty(geometry):
        return PixelEdges(empty, empty, empty, empty)
    parts = shapely.get_parts(geometry)
    polys = parts[np.isin(shapely.get_type_id(parts), (3, 6))]
    polys = shapely.get_parts(polys)  # multipolygons -> polygons
    polys = polys[shapely.get_type_id(polys) == 3]
    if not len(polys):
        return PixelEdges(empty, empty, empty, empty)
    rings = shapely.get_rings(polys)
    coords, ring = shapely.get_coordinates(rings, return_index=True)
    inv = ~transform
    cols = inv.a * coords[:, 0] + inv.b * coords[:, 1] + inv.c
    rows = inv.d * coords[:, 0] + inv.e * coords[:, 1] + inv.f
    same = ring[:-1] == ring[1:]
    xa, ya, xb, yb = cols[:-1][same], rows[:-1][same], cols[1:][same], rows[1:][same]
    keep = ya != yb
    xa, ya, xb, yb = xa[keep], ya[keep], xb[keep], yb[keep]
    swap = ya > yb
    x0 = np.where(swap, xb, xa)
    x1 = np.where(swap, xa, xb)
    y0 = np.where(swap, yb, ya)
    y1 = np.where(swap, ya, yb)
    return PixelEdges(x0=x0, y0=y0, y1=y1, slope=(x1 - x0) / (y1 - y0))


def rasterize_window(edges: PixelEdges, *, row0: int, col0: int, shape: tuple[int, int]) -> np.ndarray:
    """Pixels of a window whose centre lies inside the polygons (the pixel-centre rule).

    Even-odd rule along each pixel row: the row's centre line ``y = row + 0.5`` crosses an
    edge when ``y0 <= y < y1``, at ``x = x0 + (y - y0) * slope``; a pixel is inside when an
    odd number of crossings lie left of its centre (a centre exactly on an edge counts as
    inside on the right-hand side of a polygon and outside on its left). Every crossing
    is computed in whole-grid coordinates, so a window gives exactly the pixels the whole
    grid gives there.

    Parameters
    ----------
    edges
        From :func:`pixel_edges`.
    row0, col0
        The window's first pixel in the grid.
    shape
        ``(rows, cols)`` of the window.

    Returns
    -------
    numpy.ndarray
        Bool ``shape``.

    Examples
    --------
    >>> e = pixel_edges(shapely.box(1.0, 1.0, 3.0, 2.0), Affine.identity())
    >>> rasterize_window(e, row0=0, col0=0, shape=(3, 4)).astype(int)
    array([[0, 0, 0, 0],
           [0, 1, 1, 0],
           [0, 0, 0, 0]])
    """
    rows, cols = shape
    out = np.zeros((rows, cols + 1), dtype=np.uint8)
    if rows and cols and len(edges):
        first = np.maximum(np.ceil(edges.y0 - 0.5), row0)  # first row whose centre is >= y0
        end = np.minimum(np.ceil(edges.y1 - 0.5), row0 + rows)  # first row whose centre is >= y1
        n = np.maximum(end - first, 0).astype(np.int64)
        active = np.flatnonzero(n)
        if active.size:
            n = n[active]
            e = np.repeat(active, n)
            r = np.repeat(first[active], n) + (np.arange(int(n.sum())) - np.repeat(np.cumsum(n) - n, n))
            x = edges.x0[e] + ((r + 0.5) - edges.y0[e]) * edges.slope[e]
            c = np.floor(x - 0.5) + 1.0 - col0  # first column whose centre is right of the crossing
            c = np.clip(c, 0, cols).astype(np.int64)
            np.bitwise_xor.at(out, ((r - row0).astype(np.int64), c), 1)
    np.bitwise_xor.accumulate(out, axis=1, out=out)
    return out[:, :cols].view(bool)


def roof_mask(geometry, transform: Affine, shape: tuple[int, int]) -> np.ndarray:
    """The whole grid's roof mask by :func:`rasterize_window` (the rule the windows use).

    Parameters
    ----------
    geometry
        Roof (outline minus exclusions), plan coordinates.
    transform, shape
        The plan grid.
    """
    edges = pixel_edges(geometry, transform)
    out = np.empty(shape, dtype=bool)
    step = max(1, (1 << 22) // max(shape[1], 1))
    for r in range(0, shape[0], step):
        n = min(step, shape[0] - r)
        out[r:r + n] = rasterize_window(edges, row0=r, col0=0, shape=(n, shape[1]))
    return out


def section_labels(edges: Sequence[PixelEdges], *, row0: int, col0: int, shape: tuple[int, int]) -> np.ndarray:
    """Section label of every pixel of a window by the pixel-centre rule (:func:`rasterize_window`).

    Label ``k`` is the first section (in the order given) whose polygon holds the pixel's
    centre; pixels in no section get ``len(edges)`` (with no sections at all: 0, one section
    for the whole roof). int16 ``shape``; the same in every window as in the whole grid.
    """
    out = np.full(shape, len(edges), dtype=np.int16)
    for k in range(len(edges) - 1, -1, -1):
        out[rasterize_window(edges[k], row0=row0, col0=col0, shape=shape)] = k
    return out


def section_label_raster(edges: Sequence[PixelEdges], shape: tuple[int, int]) -> np.ndarray:
    """:func:`section_labels` of the whole grid (computed in bands of rows)."""
    out = np.empty(shape, dtype=np.int16)
    step = max(1, (1 << 22) // max(shape[1], 1))
    for r in range(0, shape[0], step):
        n = min(step, shape[0] - r)
        out[r:r + n] = section_labels(edges, row0=r, col0=0, shape=(n, shape[1]))
    return out


def labels_at(edges: Sequence[PixelEdges], rows: np.ndarray, cols: np.ndarray, shape: tuple[int, int]) -> np.ndarray:
    """Section labels at pixels ``(rows, cols)`` of the grid (-1 off the grid), as :func:`section_labels`."""
    out = np.full(len(rows), -1, dtype=np.int64)
    for i, (r, c) in enumerate(zip(rows, cols)):
        if 0 <= r < shape[0] and 0 <= c < shape[1]:
            out[i] = int(section_labels(edges, row0=int(r), col0=int(c), shape=(1, 1))[0, 0])
    return out


# --------------------------------------------------------------------------------------
# Windows
# --------------------------------------------------------------------------------------


def choose_tile_px(block_px: int, requested: int | None, shape: tuple[int, int]) -> int:
    """Window side in pixels, a multiple of ``block_px``; 0 means whole-array processing.

    Parameters
    ----------
    block_px
        Background block size, pixels.
    requested
        ``[detect] tile_px``: ``None`` chooses by size (whole array up to
        :data:`WHOLE_ARRAY_MAX_PX` pixels, else a multiple of the block within a quarter of
        :data:`TILE_TARGET_PX` that the preview's block size divides, nearest the target),
        ``0`` the whole array, any other value about that many pixels (rounded to the
        nearest multiple of the block, at least one block).
    shape
        ``(rows, cols)`` of the plan grid.

    Examples
    --------
    >>> choose_tile_px(80, None, (20000, 20000)), choose_tile_px(80, None, (1000, 1000))
    (960, 0)
    >>> choose_tile_px(8, 100, (500, 500)), choose_tile_px(89, 10, (500, 500))
    (96, 89)
    """
    if requested == 0:
        return 0
    if requested is not None:
        return int(block_px * max(1, round(requested / block_px)))
    if shape[0] * shape[1] <= WHOLE_ARRAY_MAX_PX:
        return 0
    need = preview_need(shape)
    low, high = max(1, round(0.75 * TILE_TARGET_PX / block_px)), max(1, round(1.33 * TILE_TARGET_PX / block_px))
    candidates = [k * block_px for k in range(low, high + 1)]
    return min(candidates, key=lambda tp: (preview_factor(tp, need) - need, abs(tp - TILE_TARGET_PX)))


def preview_need(shape: tuple[int, int]) -> int:
    return max(1, math.ceil(max(shape) / PREVIEW_MAX_SIDE))


def preview_factor(tile_px: int, need: int) -> int:
    """The smallest divisor of ``tile_px`` that is at least ``need`` (preview cells never straddle windows).

    A window smaller than ``need`` gives one preview cell per window (``tile_px``).

    >>> preview_factor(960, 15), preview_factor(89, 2), preview_factor(64, 100)
    (15, 89, 64)
    """
    return next((f for f in range(max(1, need), tile_px + 1) if tile_px % f == 0), max(tile_px, 1))


def windows_of(shape: tuple[int, int], tile_px: int) -> list[tuple[int, int, int, int]]:
    """Windows ``(row0, col0, rows, cols)`` of ``tile_px`` covering ``shape``, row by row.

    >>> windows_of((5, 3), 2)
    [(0, 0, 2, 2), (0, 2, 2, 1), (2, 0, 2, 2), (2, 2, 2, 1), (4, 0, 1, 2), (4, 2, 1, 1)]
    """
    rows, cols = shape
    return [(r, c, min(tile_px, rows - r), min(tile_px, cols - c))
            for r in range(0, rows, tile_px) for c in range(0, cols, tile_px)]


def block_mean(values: np.ndarray, factor: int) -> np.ndarray:
    """NaN-ignoring means of ``factor x factor`` blocks (partial at the end), float32.

    >>> block_mean(np.array([[1.0, 3.0, 5.0], [np.nan, 5.0, np.nan]]), 2)
    array([[3., 5.]], dtype=float32)
    """
    if factor == 1:
        return values.astype(np.float32, copy=True)
    rows, cols = values.shape
    nr, nc = -(-rows // factor), -(-cols // factor)
    finite = np.isfinite(values)
    z = np.where(finite, values, np.float32(0)).astype(np.float32, copy=False)
    if rows % factor or cols % factor:
        z = np.pad(z, ((0, nr * factor - rows), (0, nc * factor - cols)))
        finite = np.pad(finite, ((0, nr * factor - rows), (0, nc * factor - cols)))
    total = z.reshape(nr, factor, nc * factor).sum(axis=1, dtype=np.float64).reshape(nr, nc, factor).sum(axis=2)
    count = finite.reshape(nr, factor, nc * factor).sum(axis=1, dtype=np.int32).reshape(nr, nc, factor).sum(axis=2)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(count > 0, total / np.maximum(count, 1), np.nan).astype(np.float32)
