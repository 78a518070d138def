"""Windowed and Dask-parallel processing of large mosaics, equal to whole-array processing.

A mosaic of hundreds of megapixels does not fit the whole-array chain (one float32 copy
of the grid is 4 bytes a pixel; the chain holds several). Here the plan grid is cut into
square *windows* of ``tile_px`` pixels, a multiple of the background block size
(:func:`wetmap.detect.background_grid`), anchored at pixel ``(0, 0)``; each window is one
task. The result is the same as whole-array processing -- same polygons
(``shapely.equals``), areas and per-anomaly delta-T statistics to rounding, same rasters
bit for bit -- with the memory of the raster work set by the window size, not the mosaic
size (the vector work still grows with the number of anomaly outlines and holes).

Why no halo is needed
---------------------
Every step of the dry background is either per block (block medians and spreads per
section, the warm-outlier cut), on the small global block grid (the per-section model of
:func:`wetmap.detect.fit_background`: the trend fit, or nearest fill and median filter) or
per pixel from that model (:meth:`wetmap.detect.BackgroundModel.evaluate`: the polynomial
at the pixel centre, or the bilinear upsampling, which gives the same value at a pixel
whichever window computes it). The section labels are rasterised by
:func:`section_labels` with the pixel-centre rule of the roof mask. A window that starts
at a multiple of the block size holds whole blocks, so the passes are:

1. *surface*: read the window of each mosaic (each task opens its own dataset; rasterio
   datasets are neither picklable nor thread-safe), correct apparent to surface
   temperature, rasterise the roof (:func:`rasterize_window`) and take block statistics
   of the usable pixels; the window is kept in a scratch folder;
2. *background estimates 2 and 3*: block medians of the pixels not warmer than the
   previous background by more than the cut (the cut from the first estimate's noise),
   exactly as :func:`wetmap.detect.estimate_background` iterates;
3. *outlines*: delta-T, the raw mask ``delta > threshold`` and its 4-connected regions
   outlined in integer pixel coordinates of the whole grid (``outline="pixel"``).

The clean-up of :func:`wetmap.detect.anomaly_mask` is then done in vector space on the
pixel polygons, exactly: pieces that share a pixel edge across a seam are merged
(union of integer polygons is exact); regions of fewer than ``min_pixels`` pixels are
dropped; each bounded background component (a hole: the bounded parts of the grid's box
minus every region, which also finds a pocket closed by regions that touch at pixel
corners) of at most ``min_pixels`` pixels is filled unless it holds an unusable pixel
(checked by reading just its bounding window), and joins the regions it shares an edge
with. The merged pixel polygons are smoothed by :func:`wetmap.polygons.smooth_pixel_polygons`,
the implementation :func:`wetmap.polygons.polygonize` itself uses.

The roof mask is rasterised by :func:`rasterize_window` in both modes: the pixel-centre
rule computed from the edges in whole-grid pixel coordinates, so every window gives the
same pixels as the whole grid, bit for bit (GDAL's rasteriser shifts the coordinates
into each window and can flip a centre that lies on an edge).

Results in tiled mode
---------------------
``surface_c.tif`` and ``delta_c.tif`` are written window by window (deflate level 1,
BigTIFF when needed) into a scratch folder and moved into the results by
:func:`wetmap.pipeline.write_results`. The :class:`~wetmap.pipeline.SurveyResult` keeps
a *preview*: block means of ``f x f`` pixels (long side at most
:data:`PREVIEW_MAX_SIDE`) with its own :class:`~wetmap.rasters.PlanGrid`, which the map,
the report, the wet-area range and the boundary-core suggestions use; the confirmation
delta-T is read from ``delta_c.tif`` at full resolution.

Engines
-------
Windows run as Dask tasks: dask's threaded scheduler by default (scipy's filters and
numpy's sort release the GIL; rasterio's polygonizer does not, hence the ``"processes"``
option), or a ``dask.distributed`` cluster when a scheduler address or a ``Client`` is
given (every worker must see the survey folder and the scratch folder at the same
paths). :func:`run_batch` runs many surveys on one engine.
"""

from __future__ import annotations

import logging
import math
import os
import shutil
import tempfile
import time
import weakref
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import shapely
from affine import Affine

from .errors import ProcessingError, WetmapError

if TYPE_CHECKING:  # pragma: no cover
    from .pipeline import Radiometry
    from .rasters import PlanGrid, RasterInfo
    from .survey import Survey

__all__ = [
    "TILE_TARGET_PX",
    "WHOLE_ARRAY_MAX_PX",
    "PREVIEW_MAX_SIDE",
    "PixelEdges",
    "pixel_edges",
    "rasterize_window",
    "section_labels",
    "section_label_raster",
    "labels_at",
    "choose_tile_px",
    "preview_factor",
    "windows_of",
    "upsample_window_fast",
    "TilePieces",
    "tile_pieces",
    "merge_pieces",
    "Engine",
    "FullRasters",
    "TiledDetection",
    "detect_in_windows",
    "BatchOutcome",
    "run_batch",
]

log = logging.getLogger(__name__)

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

#: GeoTIFF profile of the tiled outputs (fast deflate: the files are written once and big).
_TIFF_PROFILE = dict(driver="GTiff", count=1, dtype="float32", nodata=float("nan"), compress="deflate",
                     predictor=3, ZLEVEL=1, tiled=True, blockxsize=256, blockysize=256, BIGTIFF="IF_SAFER",
                     NUM_THREADS="ALL_CPUS")  # GDAL reads this creation option in capitals only

#: Pixels written to a GeoTIFF at a time (whole 256 x 256 blocks; about 4 MB of float32).
_WRITE_PIECE_PX = 1 << 20

#: GDAL's block cache while windows are read and written, MB (GDAL's default, 5 % of the
#: memory, would hold decompressed blocks of the mosaic worth hundreds of MB). Windows are
#: read once each, so the cache barely helps: on the 32 Mpx benchmark mosaic 0, 16 and
#: 64 MB gave the same times within the machine's noise (10-11 s).
GDAL_CACHE_MB = 16
#: The same in bytes, as GDAL_CACHEMAX takes it from rasterio (a bare 16 would mean 16 bytes).
GDAL_CACHE_BYTES = GDAL_CACHE_MB << 20
_CACHE_LIMITED = False

#: How long to try to reach a dask scheduler address, seconds.
CONNECT_TIMEOUT_S = 20

#: Progress callbacks: stage messages, and windows done of a total per stage.
Progress = Callable[[str], None]
WindowProgress = Callable[[str, int, int], None]


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
    need = _preview_need(shape)
    low, high = max(1, round(0.75 * TILE_TARGET_PX / block_px)), max(1, round(1.33 * TILE_TARGET_PX / block_px))
    candidates = [k * block_px for k in range(low, high + 1)]
    return min(candidates, key=lambda tp: (preview_factor(tp, need) - need, abs(tp - TILE_TARGET_PX)))


def _preview_need(shape: tuple[int, int]) -> int:
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


def upsample_window_fast(grid: np.ndarray, block: int, *, shape: tuple[int, int], row0: int = 0,
                         col0: int = 0) -> np.ndarray:
    """:func:`wetmap.detect.upsample_window`, bit for bit, without gathering columns.

    The same float32 operations in the same order, applied to each run of columns that
    share their two block nodes (a broadcast instead of a fancy-indexed gather): about
    twice as fast. Checked bit for bit against the reference in tests/test_tiles.py.
    """
    from .detect import _interp_axis

    rows, cols = shape
    r0, r1, wr = _interp_axis(row0, rows, grid.shape[0], block)
    c0, c1, wc = _interp_axis(col0, cols, grid.shape[1], block)
    g = grid.astype(np.float32)
    by_row = g[r0] * (1 - wr)[:, None] + g[r1] * wr[:, None]  # (rows, block cols)
    out = np.empty(shape, dtype=np.float32)
    one_minus = 1 - wc
    starts = np.flatnonzero(np.r_[True, (c0[1:] != c0[:-1]) | (c1[1:] != c1[:-1])])
    ends = np.r_[starts[1:], cols]
    for s, e in zip(starts, ends):
        a, b = int(c0[s]), int(c1[s])
        part = out[:, s:e]
        np.multiply(by_row[:, a:a + 1], one_minus[s:e], out=part)
        part += by_row[:, b:b + 1] * wc[s:e]
    return out


def _block_mean(values: np.ndarray, factor: int) -> np.ndarray:
    """NaN-ignoring means of ``factor x factor`` blocks (partial at the end), float32.

    >>> _block_mean(np.array([[1.0, 3.0, 5.0], [np.nan, 5.0, np.nan]]), 2)
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


# --------------------------------------------------------------------------------------
# Reading a window: mosaics -> apparent -> surface temperature, roof mask
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class MosaicWindowSource:
    """One ``[[mosaic]]`` entry, read by window (aligned with the plan grid)."""

    path: Path
    info: "RasterInfo"
    units: str
    scale: float
    offset: float


@dataclass(frozen=True)
class SurfaceSource:
    """Everything a task needs to compute a window's surface temperature and roof mask.

    Picklable (paths, numbers and small arrays), so it can be sent to Dask workers.
    """

    mosaics: tuple[MosaicWindowSource, ...]
    grid: "PlanGrid"
    radiometry: "Radiometry"
    roof_edges: PixelEdges
    section_edges: tuple[PixelEdges, ...] = ()
    """The sections' edges (label ``k`` = section ``k``; :func:`section_labels`)."""
    section_emissivity: tuple[float | None, ...] = ()
    """Each section's own emissivity (``None``: the camera's)."""

    def labels(self, row0: int, col0: int, rows: int, cols: int) -> np.ndarray:
        """The window's section labels (:func:`section_labels`)."""
        return section_labels(self.section_edges, row0=row0, col0=col0, shape=(rows, cols))

    def read(self, row0: int, col0: int, rows: int, cols: int) -> tuple[np.ndarray, np.ndarray, int]:
        """``(surface_c float32, in_roof bool, lost pixels)`` of a window, as the whole array gives them."""
        from .pipeline import _to_surface_k
        from .rasters import PlanGrid, read_onto_grid

        t = self.grid.transform
        sub = PlanGrid(transform=t @ Affine.translation(col0, row0), rows=rows, cols=cols, crs=self.grid.crs)
        apparent = None
        for m in self.mosaics:
            values = read_onto_grid(m.path, sub, info=m.info, units=m.units, scale=m.scale, offset=m.offset)
            if apparent is None:
                apparent = values
            else:  # later mosaics fill what earlier ones do not cover
                gap = np.isnan(apparent)
                apparent[gap] = values[gap]
        assert apparent is not None  # a tiled survey has at least one mosaic
        surface = _to_surface_k(apparent, self.radiometry)
        if any(e is not None for e in self.section_emissivity):
            from types import SimpleNamespace

            from .pipeline import section_emissivity_correction

            sections = [SimpleNamespace(emissivity=e) for e in self.section_emissivity]
            surface = section_emissivity_correction(surface, apparent, self.labels(row0, col0, rows, cols), sections,
                                                    self.radiometry)
        lost = int(np.count_nonzero(np.isnan(surface) & ~np.isnan(apparent)))
        del apparent
        surface = surface.astype(np.float32, copy=False)
        surface -= np.float32(273.15)
        in_roof = rasterize_window(self.roof_edges, row0=row0, col0=col0, shape=(rows, cols))
        return surface, in_roof, lost


# --------------------------------------------------------------------------------------
# Scratch: the windows between passes
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _Scratch:
    """Per-window arrays between passes: raw binary files in one folder (shape and dtype are
    known from the window; no header to parse, which ``np.load`` does with ``ast``, not
    thread-safe in some CPython versions)."""

    folder: Path
    windows: tuple[tuple[int, int, int, int], ...]
    tile_px: int
    shape: tuple[int, int]
    driver_pid: int = 0
    """The process that made the scratch (it bounds GDAL's block cache itself)."""

    def limit_gdal_cache(self) -> None:
        """In another process (a Dask worker), bound GDAL's block cache once."""
        global _CACHE_LIMITED
        if os.getpid() != self.driver_pid and not _CACHE_LIMITED:
            from rasterio.env import set_gdal_config

            set_gdal_config("GDAL_CACHEMAX", GDAL_CACHE_BYTES)
            _CACHE_LIMITED = True

    def path(self, kind: str, i: int) -> Path:
        return self.folder / f"{kind}_{i:06d}.raw"

    def save(self, kind: str, i: int, values: np.ndarray) -> None:
        np.ascontiguousarray(values).tofile(self.path(kind, i))

    def load(self, kind: str, i: int) -> np.ndarray:
        """A float32 window (``"surface"`` or ``"delta"``)."""
        _, _, rows, cols = self.windows[i]
        return np.fromfile(self.path(kind, i), dtype=np.float32).reshape(rows, cols)

    def save_surface(self, i: int, surface: np.ndarray, in_roof: np.ndarray) -> None:
        self.save("surface", i, surface.astype(np.float32, copy=False))
        self.save("roof", i, np.packbits(in_roof, axis=None))

    def save_labels(self, i: int, labels: np.ndarray) -> None:
        self.save("labels", i, labels.astype(np.int16, copy=False))

    def labels(self, i: int) -> np.ndarray | None:
        """The window's section labels (int16), or ``None`` when the survey has no sections."""
        path = self.path("labels", i)
        if not path.is_file():
            return None
        _, _, rows, cols = self.windows[i]
        return np.fromfile(path, dtype=np.int16).reshape(rows, cols)

    def masked(self, i: int) -> np.ndarray:
        """The window's surface temperature, NaN where not usable (off the roof or no data)."""
        _, _, rows, cols = self.windows[i]
        surface = self.load("surface", i)
        roof = np.fromfile(self.path("roof", i), dtype=np.uint8)
        roof = np.unpackbits(roof, count=rows * cols).reshape(rows, cols).view(bool)
        surface[~roof] = np.nan
        return surface

    def rect(self, kind: str, row0: int, col0: int, rows: int, cols: int) -> np.ndarray:
        """A rectangle of ``kind`` (``"surface"`` or ``"delta"``) that may span several windows."""
        out = np.empty((rows, cols), dtype=np.float32)
        tp = self.tile_px
        n_cols = -(-self.shape[1] // tp)
        for tr in range(row0 // tp, (row0 + rows - 1) // tp + 1):
            for tc in range(col0 // tp, (col0 + cols - 1) // tp + 1):
                i = tr * n_cols + tc
                wr0, wc0, wr, wc = self.windows[i]
                part = np.memmap(self.path(kind, i), dtype=np.float32, mode="r", shape=(wr, wc))
                r_a, r_b = max(row0, wr0), min(row0 + rows, wr0 + wr)
                c_a, c_b = max(col0, wc0), min(col0 + cols, wc0 + wc)
                out[r_a - row0:r_b - row0, c_a - col0:c_b - col0] = part[r_a - wr0:r_b - wr0, c_a - wc0:c_b - wc0]
                del part
        return out

    def gather(self, kind: str, rows: np.ndarray, cols: np.ndarray) -> np.ndarray:
        """Values of ``kind`` (``"surface"`` or ``"delta"``) at pixels ``(rows, cols)`` of the grid."""
        out = np.empty(len(rows), dtype=np.float32)
        tp = self.tile_px
        n_cols = -(-self.shape[1] // tp)
        tile = (rows // tp) * n_cols + cols // tp
        order = np.argsort(tile, kind="stable")
        bounds = np.flatnonzero(np.r_[True, tile[order][1:] != tile[order][:-1], True])
        for a, b in zip(bounds[:-1], bounds[1:]):
            idx = order[a:b]
            i = int(tile[idx[0]])
            r0, c0, h, w = self.windows[i]
            values = np.memmap(self.path(kind, i), dtype=np.float32, mode="r", shape=(h, w))
            out[idx] = values[rows[idx] - r0, cols[idx] - c0]
            del values
        return out


# --------------------------------------------------------------------------------------
# The passes (module-level functions: tasks must pickle)
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class _SurfacePass:
    median: np.ndarray
    sigma: np.ndarray
    roof_px: int
    covered_px: int
    lost_px: int
    low_c: float
    high_c: float
    preview: np.ndarray


def _surface_task(source: SurfaceSource, scratch: _Scratch, i: int, block: int, factor: int,
                  count: int = 1) -> _SurfacePass:
    from .detect import section_block_statistics

    scratch.limit_gdal_cache()
    row0, col0, rows, cols = scratch.windows[i]
    surface, in_roof, lost = source.read(row0, col0, rows, cols)
    scratch.save_surface(i, surface, in_roof)
    labels = None
    if source.section_edges:
        labels = source.labels(row0, col0, rows, cols)
        scratch.save_labels(i, labels)
    preview = _block_mean(surface, factor)
    usable = in_roof & np.isfinite(surface)
    median, sigma = section_block_statistics(surface, usable, labels, count, block)
    covered = int(np.count_nonzero(usable))
    if covered:
        values = surface[usable]
        low, high = float(values.min()), float(values.max())
    else:
        low, high = math.inf, -math.inf
    return _SurfacePass(median=median, sigma=sigma, roof_px=int(np.count_nonzero(in_roof)),
                        covered_px=covered, lost_px=lost, low_c=low, high_c=high, preview=preview)


def _keep_task(scratch: _Scratch, i: int, block: int, model: Any, cut: float, count: int = 1) -> np.ndarray:
    """Block medians per section of the usable pixels not warmer than the background by more than ``cut``."""
    from .detect import section_block_statistics

    row0, col0, rows, cols = scratch.windows[i]
    masked = scratch.masked(i)
    labels = scratch.labels(i)
    diff = model.evaluate(labels, shape=(rows, cols), row0=row0, col0=col0, upsample=upsample_window_fast)
    np.subtract(masked, diff, out=diff)  # surface - background, NaN where not usable
    keep = np.isfinite(masked)
    keep &= ~(diff > cut)
    return section_block_statistics(masked, keep, labels, count, block)[0]


def _usable_values_task(scratch: _Scratch, i: int) -> tuple[np.ndarray, np.ndarray | None]:
    masked = scratch.masked(i)
    ok = np.isfinite(masked)
    labels = scratch.labels(i)
    return masked[ok], (None if labels is None else labels[ok])


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
    from .polygons import label_regions, polygonize

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
        import warnings

        from rasterio.errors import NotGeoreferencedWarning

        with warnings.catch_warnings():  # the first window's transform is the identity
            warnings.simplefilter("ignore", NotGeoreferencedWarning)
            polys = np.asarray(polygonize(labels, n, Affine.translation(col0, row0), outline="pixel"), dtype=object)
    else:
        polys = np.zeros(0, dtype=object)
    return TilePieces(polygons=polys, pixels=pixels, delta_sum=total, delta_max=largest[1:],
                      top=labels[0].copy(), bottom=labels[-1].copy(), left=labels[:, 0].copy(),
                      right=labels[:, -1].copy())


@dataclass(frozen=True)
class _FinalPass:
    pieces: TilePieces
    delta_preview: np.ndarray
    background_preview: np.ndarray


def _final_task(scratch: _Scratch, i: int, block: int, model: Any, threshold_c: float,
                min_pixels: int, factor: int) -> _FinalPass:
    row0, col0, rows, cols = scratch.windows[i]
    masked = scratch.masked(i)
    if model is None:
        bg = np.full((rows, cols), np.nan, dtype=np.float32)
    else:
        bg = model.evaluate(scratch.labels(i), shape=(rows, cols), row0=row0, col0=col0,
                            upsample=upsample_window_fast)
    delta = masked - bg
    del masked
    scratch.save("delta", i, delta)
    delta_preview = _block_mean(delta, factor)
    # the background at each preview cell's central pixel, where the cell has usable pixels
    h = factor // 2
    bg_preview = np.where(np.isfinite(delta_preview), bg[h::factor, h::factor][:delta_preview.shape[0],
                                                                               :delta_preview.shape[1]], np.nan)
    del bg
    pieces = tile_pieces(delta, row0=row0, col0=col0, grid_shape=scratch.shape, threshold_c=threshold_c,
                         min_pixels=min_pixels)
    return _FinalPass(pieces=pieces, delta_preview=delta_preview, background_preview=bg_preview.astype(np.float32))


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


# --------------------------------------------------------------------------------------
# Engines: dask's local schedulers or a dask.distributed cluster
# --------------------------------------------------------------------------------------


class Engine:
    """Runs window tasks on Dask.

    Parameters
    ----------
    scheduler
        ``None`` or ``"threads"``: dask's threaded scheduler (the default);
        ``"processes"``: dask's multiprocessing scheduler (for the GIL-bound polygonizer);
        ``"sync"``: one thread, in order (debugging); an address such as
        ``"tcp://10.0.0.5:8786"``: a ``dask.distributed`` cluster; or a
        ``distributed.Client``.
    workers
        Threads or processes for the local schedulers (default: all cores).

    The engine connects to a cluster when created; :meth:`close` disconnects a client
    it opened itself (also as a context manager).
    """

    def __init__(self, scheduler: Any = None, *, workers: int | None = None):
        self.workers = workers or os.cpu_count() or 1
        self.client = None
        self._owned = False
        if scheduler is None or scheduler in ("threads", "processes", "sync", "synchronous"):
            self.kind = "threads" if scheduler is None else ("sync" if scheduler == "synchronous" else scheduler)
        elif isinstance(scheduler, str):
            try:
                from distributed import Client

                self.client = Client(scheduler, timeout=f"{CONNECT_TIMEOUT_S}s")
            except (OSError, TimeoutError, ValueError) as err:
                raise ProcessingError(f"--scheduler {scheduler}: cannot connect to a Dask scheduler there ({err}); "
                                      "expected an address such as tcp://host:8786 of a running dask scheduler, "
                                      "or threads / processes") from None
            self._owned = True
            self.kind = "distributed"
        elif hasattr(scheduler, "submit") and hasattr(scheduler, "gather"):
            self.client = scheduler
            self.kind = "distributed"
        else:
            raise ProcessingError(f"scheduler = {scheduler!r}: expected None, \"threads\", \"processes\", \"sync\", "
                                  "a scheduler address or a distributed.Client")

    def __enter__(self) -> "Engine":
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def close(self) -> None:
        if self._owned and self.client is not None:
            self.client.close()
        self.client = None

    def describe(self) -> str:
        if self.kind == "distributed":
            return f"dask.distributed at {getattr(self.client, 'scheduler', None) and self.client.scheduler.address}"
        return f"dask {self.kind}" + ("" if self.kind == "sync" else f" ({self.workers} workers)")

    def map(self, fn: Callable, shared: tuple, items: Sequence[tuple], *, label: str = "",
            progress: WindowProgress | None = None) -> list:
        """``[fn(*shared, *item) for item in items]`` as Dask tasks, in the order of ``items``.

        ``shared`` arguments are sent once (scattered on a cluster); ``progress`` gets
        ``(label, done, total)`` as tasks finish.
        """
        total = len(items)
        if progress is not None:
            progress(label, 0, total)
        if not total:
            return []
        if self.kind == "distributed":
            return self._map_distributed(fn, shared, items, label, progress)
        import dask
        from dask.callbacks import Callback

        shared_d = [dask.delayed(s, traverse=False, name=f"{type(s).__name__}-{id(s)}-{time.monotonic_ns()}")
                    if isinstance(s, (SurfaceSource, _Scratch)) else s for s in shared]
        tasks = [dask.delayed(fn, pure=False, traverse=False)(*shared_d, *item) for item in items]
        done = [0]
        keys = {t.key for t in tasks}

        def posttask(key, result, dsk, state, worker_id) -> None:
            if key in keys:
                done[0] += 1
                if progress is not None:
                    progress(label, done[0], total)

        with Callback(posttask=posttask):
            kwargs = {} if self.kind == "sync" else {"num_workers": self.workers}
            return list(dask.compute(*tasks, scheduler=self.kind, **kwargs))

    def _map_distributed(self, fn, shared, items, label, progress) -> list:
        from distributed import as_completed

        client = self.client
        sent = [client.scatter(s, broadcast=True, hash=False) if isinstance(s, (SurfaceSource, _Scratch)) else s for s in shared]
        futures = [client.submit(fn, *sent, *item, pure=False) for item in items]
        done = 0
        try:
            for fut in as_completed(futures):
                if fut.status == "error":
                    fut.result()  # raises the task's error here
                done += 1
                if progress is not None:
                    progress(label, done, len(futures))
            return client.gather(futures)
        finally:
            for fut in futures:
                fut.release()


# --------------------------------------------------------------------------------------
# Tiled detection: the whole survey
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class FullRasters:
    """The full-resolution rasters of a tiled run, in a scratch folder until written.

    Attributes
    ----------
    grid
        The full plan grid (the result's ``grid`` is the preview's).
    surface_c, delta_c
        Paths of ``surface_c.tif`` and ``delta_c.tif`` in ``folder``.
    folder
        The scratch folder; removed when this object is garbage-collected or at exit.
    tile_px, windows, preview_factor
        Window side, number of windows, and the preview's block size (pixels).
    """

    grid: "PlanGrid"
    surface_c: Path
    delta_c: Path
    folder: Path
    tile_px: int
    windows: int
    preview_factor: int

    def place(self, out_dir: Path) -> None:
        """Put ``surface_c.tif`` and ``delta_c.tif`` into ``out_dir`` (hard link, else copy)."""
        for src in (self.surface_c, self.delta_c):
            dst = Path(out_dir) / src.name
            if not src.is_file():
                raise ProcessingError(f"{src}: the tiled raster is gone (its scratch folder was removed): "
                                      "process the survey again")
            try:
                os.link(src, dst)
            except OSError:
                shutil.copy2(src, dst)

    def sample(self, xs: np.ndarray, ys: np.ndarray, *, radius_px: int = 1) -> np.ndarray:
        """:func:`wetmap.confirm.sample_at_points` of the full-resolution delta-T (small window reads)."""
        import rasterio
        from rasterio.windows import Window

        out = np.full(len(xs), np.nan)
        if not len(xs):
            return out
        cols, rows = ~self.grid.transform @ (np.asarray(xs, float), np.asarray(ys, float))
        with rasterio.open(self.delta_c) as src:
            for i, (r, c) in enumerate(zip(np.floor(rows).astype(int), np.floor(cols).astype(int))):
                if not (0 <= r < self.grid.rows and 0 <= c < self.grid.cols):
                    continue
                r0, c0 = max(r - radius_px, 0), max(c - radius_px, 0)
                r1, c1 = min(r + radius_px + 1, self.grid.rows), min(c + radius_px + 1, self.grid.cols)
                window = src.read(1, window=Window(c0, r0, c1 - c0, r1 - r0))
                if np.isfinite(window).any():
                    out[i] = float(np.nanmedian(window))
        return out

    def as_dict(self) -> dict[str, Any]:
        return {"mode": "windows", "tile_px": self.tile_px, "windows": self.windows,
                "preview_factor": self.preview_factor, "full_grid": [self.grid.rows, self.grid.cols]}


@dataclass(frozen=True)
class TiledDetection:
    """What the tiled path gives :func:`wetmap.pipeline.process_survey`.

    ``grid``, ``surface_c`` and ``detection`` are the preview (block means); the
    anomaly polygons and their statistics are exact (full resolution).
    """

    grid: "PlanGrid"
    surface_c: np.ndarray
    detection: Any
    polygons: tuple[shapely.Polygon, ...]
    pixels: np.ndarray
    delta_mean: np.ndarray
    delta_max: np.ndarray
    roof_px: int
    covered_px: int
    lost_px: int
    constant: bool
    full_rasters: FullRasters
    preview_min_pixels: int


def _mosaic_sources(survey: "Survey", grid: "PlanGrid", infos) -> tuple[MosaicWindowSource, ...] | None:
    """The mosaics as window sources, or ``None`` when one is not aligned with the grid."""
    from .rasters import _aligned

    out = []
    for m, info in zip(survey.mosaics, infos):
        if _aligned(info, grid) is None:
            return None
        out.append(MosaicWindowSource(path=m.path, info=info, units=m.units, scale=m.scale, offset=m.offset))
    return tuple(out)


def _new_scratch(parent: Path | None, survey_folder: Path) -> Path:
    for where in (*([parent] if parent is not None else []), survey_folder, None):
        try:
            if where is not None:
                Path(where).mkdir(parents=True, exist_ok=True)
            return Path(tempfile.mkdtemp(prefix=".wetmap-windows-", dir=where))
        except OSError:
            continue
    raise ProcessingError(f"{survey_folder}: no writable folder for the window scratch files")  # pragma: no cover


def detect_in_windows(survey: "Survey", *, outline, roof, radiometry: "Radiometry", background_m: float,
                      tile_px: int | None = None, scheduler: Any = None, scratch: Path | None = None,
                      progress: Progress | None = None, window_progress: WindowProgress | None = None,
                      sections: Sequence = (), names: tuple[str, ...] = ("roof",), choice: str = "auto",
                      cores: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None,
                      threshold_from: Callable[[np.ndarray], float] | None = None,
                      section_emissivity: tuple[float | None, ...] = ()) -> TiledDetection | None:
    """Detection in windows when it applies; ``None`` when the whole array is used.

    The windowed path applies to a single pass of mosaics only (no ``[[frame]]``), each
    on the plan grid's lattice (same CRS and pixel size: read by window, not resampled),
    when :func:`choose_tile_px` gives a window size (``tile_px`` overrides
    ``[detect] tile_px``).

    Parameters
    ----------
    survey
        The (single-pass) survey.
    outline, roof
        The plan outline and the roof (outline minus exclusions), plan coordinates.
    radiometry
        Apparent -> surface correction parameters.
    background_m
        Background scale, metres.
    tile_px
        Window side override (``None``: ``[detect] tile_px`` or the size rule).
    scheduler
        See :class:`Engine` (an :class:`Engine` is used as it is).
    scratch
        Folder in which the scratch folder is made (default: the survey folder).
    progress, window_progress
        Stage messages; ``(stage, windows done, windows)``.
    sections, names, choice
        Section geometries (label ``k`` = ``sections[k]``; the rest of the roof is label
        ``len(sections)``), one name per label, and ``[detect] background``.
    cores
        ``(xs, ys, wet)`` of the confirmations, plan coordinates (the trend's anchors).
    section_emissivity
        Each section's own emissivity (``None``: ``[camera] emissivity``).
    threshold_from
        Given the confirmations' delta-T (3 x 3 median at each, as
        :func:`wetmap.confirm.sample_at_points`), the threshold to apply (``[detect] delta_c =
        "cores"``); ``None``: ``[detect] delta_c``.
    """
    from .detect import Detection, background_grid, core_blocks, fit_background, noise_sigma, warm_cut
    from .rasters import PlanGrid, inspect_raster, plan_grid_for

    if survey.frames or not survey.mosaics:
        return None
    crs = None if survey.survey.is_local else survey.survey.crs
    infos = [inspect_raster(m.path, origin=m.origin, pixel_m=m.pixel_m, survey_crs=crs) for m in survey.mosaics]
    grid = plan_grid_for(infos, outline.bounds, crs=crs, pixel_m=survey.plan.pixel_m)
    spec = background_grid(grid.pixel_m, background_m)
    requested = tile_px if tile_px is not None else survey.detect.tile_px
    tp = choose_tile_px(spec.block_px, requested, grid.shape)
    if not tp:
        return None
    sources = _mosaic_sources(survey, grid, infos)
    if sources is None:
        log.info("a mosaic is not on the plan grid's lattice: it is resampled, so the whole array is used")
        return None
    block = spec.block_px
    windows = tuple(windows_of(grid.shape, tp))
    factor = preview_factor(tp, _preview_need(grid.shape))
    folder = _new_scratch(scratch, survey.folder)
    rasters = FullRasters(grid=grid, surface_c=folder / "surface_c.tif", delta_c=folder / "delta_c.tif",
                          folder=folder, tile_px=tp, windows=len(windows), preview_factor=factor)
    weakref.finalize(rasters, shutil.rmtree, str(folder), True)
    store = _Scratch(folder=folder, windows=windows, tile_px=tp, shape=grid.shape, driver_pid=os.getpid())
    section_edges = tuple(pixel_edges(g, grid.transform) for g in sections)
    count = len(names)
    source = SurfaceSource(mosaics=sources, grid=grid, radiometry=radiometry, roof_edges=pixel_edges(roof, grid.transform),
                           section_edges=section_edges, section_emissivity=tuple(section_emissivity))
    nbr, nbc = -(-grid.rows // block), -(-grid.cols // block)
    wet_b = dry_b = None
    core_rc = None
    if cores is not None and len(cores[0]):
        ccols, crows = ~grid.transform @ (np.asarray(cores[0], float), np.asarray(cores[1], float))
        crows, ccols = np.floor(crows).astype(np.intp), np.floor(ccols).astype(np.intp)
        core_rc = (crows, ccols)
        lab = labels_at(section_edges, crows, ccols, grid.shape) if section_edges else np.where(
            (crows >= 0) & (crows < grid.rows) & (ccols >= 0) & (ccols < grid.cols), 0, -1)
        wet_b, dry_b = core_blocks(crows, ccols, lab, np.asarray(cores[2], bool), count=count, block=block,
                                   block_shape=(nbr, nbc))
    engine = scheduler if isinstance(scheduler, Engine) else Engine(scheduler)
    sdt = survey.detect
    min_pixels = max(1, int(math.ceil(sdt.min_area_m2 / (grid.pixel_m * grid.pixel_m) - 1e-9)))
    import rasterio

    env = rasterio.Env(GDAL_CACHEMAX=GDAL_CACHE_BYTES)  # bounds the block cache of every thread's reads
    env.__enter__()
    writer: _Background | None = None
    try:
        _emit(progress, f"{len(windows)} windows of {tp} px on {engine.describe()}: reading and correcting the "
                        "mosaics, background estimate 1")
        first = engine.map(_surface_task, (source, store), [(i, block, factor, count) for i in range(len(windows))],
                           label="surface temperature", progress=window_progress)
        median = np.full((count, nbr, nbc), np.nan)
        sigma = np.full((count, nbr, nbc), np.nan)
        for (r0, c0, _, _), f in zip(windows, first):
            br, bc = r0 // block, c0 // block
            median[:, br:br + f.median.shape[1], bc:bc + f.median.shape[2]] = f.median
            sigma[:, br:br + f.sigma.shape[1], bc:bc + f.sigma.shape[2]] = f.sigma
        roof_px = sum(f.roof_px for f in first)
        covered_px = sum(f.covered_px for f in first)
        lost_px = sum(f.lost_px for f in first)
        low = min(f.low_c for f in first)
        high = max(f.high_c for f in first)
        preview_grid = PlanGrid(transform=grid.transform @ Affine.scale(factor), rows=-(-grid.rows // factor),
                                cols=-(-grid.cols // factor), crs=grid.crs)
        surface_preview = _assemble_preview([f.preview for f in first], windows, factor, preview_grid.shape)
        del first
        # surface_c.tif is complete on disk: write it while the next passes run (GDAL compresses
        # without the GIL, so the writer uses what the window tasks leave idle)
        writer = _Background(_write_tiff, store, "surface", rasters.surface_c, grid, None)

        model = None
        if covered_px:
            noise = noise_sigma(sigma)
            cut = warm_cut(sdt.delta_c, noise)
            fallback = None
            if not np.isfinite(median).reshape(count, -1).any(axis=1).all():
                from .detect import section_medians

                parts = engine.map(_usable_values_task, (store,), [(i,) for i in range(len(windows))])
                values = np.concatenate([p[0] for p in parts])
                labs = None if not section_edges else np.concatenate([p[1] for p in parts])
                fallback = section_medians(values, np.ones(values.shape, bool), labs, count)
                del parts, values, labs
            for estimate in range(3):  # as wetmap.detect.estimate_background: three estimates
                if estimate:
                    _emit(progress, f"background estimate {estimate + 1} of 3")
                    parts = engine.map(_keep_task, (store,), [(i, block, model, cut, count) for i in range(len(windows))],
                                       label=f"background estimate {estimate + 1}", progress=window_progress)
                    median = np.full((count, nbr, nbc), np.nan)
                    for (r0, c0, _, _), m in zip(windows, parts):
                        median[:, r0 // block:r0 // block + m.shape[1], c0 // block:c0 // block + m.shape[2]] = m
                    del parts
                model = fit_background(median, block_px=block, grid_shape=grid.shape, footprint=spec.footprint,
                                       delta_c=sdt.delta_c, noise_c=noise, names=names, choice=choice,
                                       fallback_c=fallback, previous=model, wet_blocks=wet_b, dry_blocks=dry_b)

        threshold_c = sdt.delta_c
        if threshold_from is not None:
            threshold_c = float(threshold_from(_core_deltas(store, model, core_rc, block)))

        _emit(progress, "delta-T and anomaly outlines in windows")
        final = engine.map(_final_task, (store,),
                           [(i, block, model, threshold_c, min_pixels, factor) for i in range(len(windows))],
                           label="anomaly outlines", progress=window_progress)
        delta_preview = _assemble_preview([f.delta_preview for f in final], windows, factor, preview_grid.shape)
        bg_preview = _assemble_preview([f.background_preview for f in final], windows, factor, preview_grid.shape)
        pieces = [f.pieces for f in final]
        del final

        _emit(progress, "merging outlines across window seams; small regions and holes")

        merged = merge_pieces(pieces, windows, grid_shape=grid.shape, tile_px=tp, min_pixels=min_pixels,
                              read_delta=lambda rows, cols: store.gather("delta", rows, cols))
        del pieces
        from .polygons import smooth_pixel_polygons

        polygons = tuple(smooth_pixel_polygons(merged.polygons, grid.transform))

        _emit(progress, "writing delta_c.tif (and finishing surface_c.tif) by bands of blocks")
        _write_tiff(store, "delta", rasters.delta_c, grid, window_progress)
        writer.join()
    except BaseException:
        if writer is not None:
            writer.join(reraise=False)
        shutil.rmtree(folder, ignore_errors=True)
        raise
    finally:
        env.__exit__(None, None, None)
        if engine is not scheduler:
            engine.close()
        for p in folder.glob("*.raw"):
            p.unlink(missing_ok=True)

    preview_mask = _preview_mask(merged.polygons, factor, preview_grid.shape)
    detection = Detection(background_c=bg_preview, delta_c=delta_preview, mask=preview_mask,
                          background_m=background_m, threshold_c=threshold_c, min_pixels=min_pixels, background=model)
    return TiledDetection(
        grid=preview_grid, surface_c=surface_preview, detection=detection, polygons=polygons,
        pixels=merged.pixels, delta_mean=merged.delta_mean, delta_max=merged.delta_max, roof_px=roof_px,
        covered_px=covered_px, lost_px=lost_px, constant=bool(covered_px and low == high), full_rasters=rasters,
        preview_min_pixels=max(1, math.ceil(min_pixels / (factor * factor))),
    )


def _core_deltas(store: _Scratch, model: Any, core_rc: tuple[np.ndarray, np.ndarray] | None,
                 block: int) -> np.ndarray:
    """Delta-T at each confirmation: the median of its 3 x 3 usable pixels (as
    :func:`wetmap.confirm.sample_at_points`), from the scratch windows and the model."""
    if core_rc is None:
        return np.zeros(0)
    rows, cols = core_rc
    out = np.full(len(rows), np.nan)
    if model is None:
        return out
    for k, (r, c) in enumerate(zip(rows, cols)):
        if not (0 <= r < store.shape[0] and 0 <= c < store.shape[1]):
            continue  # off the grid: no data, as sample_at_points
        r0, c0 = max(int(r) - 1, 0), max(int(c) - 1, 0)
        r1, c1 = min(int(r) + 2, store.shape[0]), min(int(c) + 2, store.shape[1])
        if r0 >= r1 or c0 >= c1:
            continue
        rr, cc = np.mgrid[r0:r1, c0:c1]
        rr, cc = rr.ravel(), cc.ravel()
        tp = store.tile_px
        n_cols = -(-store.shape[1] // tp)
        vals = []
        for a, b in zip(rr, cc):
            i = (a // tp) * n_cols + b // tp
            wr0, wc0, _, _ = store.windows[i]
            masked = store.masked(i)
            labels = store.labels(i)
            lab = None if labels is None else labels[a - wr0:a - wr0 + 1, b - wc0:b - wc0 + 1]
            bg = model.evaluate(lab, shape=(1, 1), row0=int(a), col0=int(b), upsample=upsample_window_fast)
            vals.append(float(masked[a - wr0, b - wc0] - bg[0, 0]))
        v = np.asarray(vals, dtype=np.float32)
        if np.isfinite(v).any():
            out[k] = float(np.nanmedian(v))
    return out


class _Background:
    """``fn(*args)`` in a thread of the driver; :meth:`join` waits and re-raises its error."""

    def __init__(self, fn: Callable, *args: Any):
        import threading

        self.error: BaseException | None = None

        def run() -> None:
            try:
                fn(*args)
            except BaseException as err:  # noqa: BLE001 -- handed to the driver by join()
                self.error = err

        self.thread = threading.Thread(target=run, name="wetmap-writer", daemon=True)
        self.thread.start()

    def join(self, *, reraise: bool = True) -> None:
        self.thread.join()
        if reraise and self.error is not None:
            raise self.error


def _emit(progress: Progress | None, message: str) -> None:
    log.info(message)
    if progress is not None:
        progress(message)


def _preview_mask(polygons: np.ndarray, factor: int, shape: tuple[int, int]) -> np.ndarray:
    """The preview cells whose centre lies in a region (pixel polygons scaled by ``1 / factor``).

    In batches of about 260 000 vertices, so memory does not grow with the number of
    anomalies: the even-odd rule is a parity, so the masks of disjoint batches XOR to
    the mask of all the polygons at once, bit for bit.
    """
    out = np.zeros(shape, dtype=bool)
    if not len(polygons):
        return out
    batch = np.cumsum(shapely.get_num_coordinates(polygons)) // (1 << 18)
    for b in np.unique(batch):
        scaled = shapely.transform(polygons[batch == b], lambda xy: xy / factor)
        out ^= rasterize_window(pixel_edges(shapely.multipolygons(scaled), Affine.identity()), row0=0, col0=0,
                                shape=shape)
    return out


def _assemble_preview(parts: list[np.ndarray], windows, factor: int, shape: tuple[int, int]) -> np.ndarray:
    out = np.full(shape, np.nan, dtype=np.float32)
    for (r0, c0, _, _), p in zip(windows, parts):
        out[r0 // factor:r0 // factor + p.shape[0], c0 // factor:c0 // factor + p.shape[1]] = p
    return out


def _write_tiff(store: _Scratch, kind: str, path: Path, grid: "PlanGrid", window_progress: WindowProgress | None) -> None:
    """Write the windows of ``kind`` as one float32 GeoTIFF in pieces of whole 256 x 256 blocks.

    Pieces of whole blocks are compressed once each (on all cores) and never re-read: windows
    that cut blocks would leave partial blocks in GDAL's cache, to be flushed, read back and
    rewritten (slower, and garbage in the file). A piece holds about :data:`_WRITE_PIECE_PX`
    pixels (one row of blocks, cut into runs of columns when the grid is wide), so the
    memory of the writer does not grow with the mosaic.
    """
    import rasterio
    from rasterio.windows import Window

    profile = dict(_TIFF_PROFILE, width=grid.cols, height=grid.rows, crs=grid.crs, transform=grid.transform)
    if grid.rows < 256 or grid.cols < 256:
        profile.update(tiled=False)
        profile.pop("blockxsize")
        profile.pop("blockysize")
    band = max(256, (_WRITE_PIECE_PX // max(grid.cols, 1)) // 256 * 256)
    width = grid.cols if band > 256 or grid.rows < 256 else max(256, _WRITE_PIECE_PX // band // 256 * 256)
    label = f"writing {path.name}"
    pieces = [(r0, c0) for r0 in range(0, grid.rows, band) for c0 in range(0, grid.cols, width)]
    if window_progress is not None:
        window_progress(label, 0, len(pieces))
    with rasterio.open(path, "w", **profile) as dst:
        for k, (r0, c0) in enumerate(pieces):
            rows, cols = min(band, grid.rows - r0), min(width, grid.cols - c0)
            dst.write(store.rect(kind, r0, c0, rows, cols), 1, window=Window(c0, r0, cols, rows))
            if window_progress is not None:
                window_progress(label, k + 1, len(pieces))
        dst.update_tags(1, units="degC")


# --------------------------------------------------------------------------------------
# Batches: many surveys on one engine
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class BatchOutcome:
    """How one survey of a batch went.

    Attributes
    ----------
    folder
        The survey folder.
    ok
        True when its results were written.
    seconds
        Wall time of the survey.
    anomalies, wet_area_m2
        From its summary (``None`` when it failed).
    results
        The results folder (``None`` when it failed).
    problems
        The error lines when it failed (empty when ok).
    """

    folder: Path
    ok: bool
    seconds: float
    anomalies: int | None = None
    wet_area_m2: float | None = None
    results: Path | None = None
    problems: tuple[str, ...] = field(default_factory=tuple)
    warnings: int = 0


def _run_one(folder: Path, out: Path | None, options: dict[str, Any], scheduler: Any,
             progress: Progress | None, window_progress: WindowProgress | None) -> BatchOutcome:
    from .pipeline import run_survey

    start = time.perf_counter()
    try:
        if scheduler is None:  # on a cluster worker: the survey's windows go to the same cluster
            try:
                from distributed import get_worker, worker_client

                get_worker()
            except (ImportError, ValueError):
                result = run_survey(folder, out=out, scheduler="sync", **options)
            else:
                with worker_client() as client:
                    result = run_survey(folder, out=out, scheduler=client, **options)
        else:
            result = run_survey(folder, out=out, scheduler=scheduler, progress=progress,
                                window_progress=window_progress, **options)
    except WetmapError as err:
        return BatchOutcome(folder=Path(folder), ok=False, seconds=time.perf_counter() - start, problems=err.problems)
    except Exception as err:  # noqa: BLE001 -- one survey's fault must not stop the others
        log.exception("%s: unexpected failure", folder)
        return BatchOutcome(folder=Path(folder), ok=False, seconds=time.perf_counter() - start,
                            problems=(f"{folder}: unexpected failure ({type(err).__name__}: {err}): a wetmap "
                                      "fault, please report it",))
    s = result.summary()
    return BatchOutcome(folder=Path(folder), ok=True, seconds=time.perf_counter() - start,
                        anomalies=s["anomaly_count"], wet_area_m2=s["wet_area_m2"],
                        results=Path(out) if out is not None else result.survey.folder / "results",
                        warnings=len(s["warnings"]))


def _batch_out_folders(folders: list[Path], out_root: Path) -> list[Path | None]:
    """``out_root/<name>`` for each survey, distinct for same-named surveys; refused (every
    problem at once, before any work) when one would be, hold or lie in any survey of the
    batch, or when a survey is given twice."""
    from .errors import OutputError
    from .outputs import check_out_dir, results_name_for

    problems: list[str] = []
    seen: dict[Path, Path] = {}
    for f in folders:
        key = f.resolve()
        if key in seen:
            problems.append(f"{f}: given twice in the batch (also as {seen[key]}); give each survey once")
        seen.setdefault(key, f)
    outs = [out_root / name for name in results_name_for([f.resolve() for f in folders])]
    for out in outs:
        try:
            check_out_dir(out, surveys=folders)
        except OutputError as err:
            problems.extend(err.problems)
    if problems:
        raise OutputError(problems)
    return list(outs)


def run_batch(folders: Iterable[str | Path], *, scheduler: Any = None, out_root: str | Path | None = None,
              progress: Progress | None = None, window_progress: WindowProgress | None = None,
              survey_done: Callable[[BatchOutcome, int, int], None] | None = None,
              map_html: bool = True, report_html: bool = True) -> tuple[BatchOutcome, ...]:
    """Run many surveys, each writing its own results atomically; a failure stops only its survey.

    On the local schedulers the surveys run one after another, each with its windows in
    parallel; on a ``dask.distributed`` cluster every survey is a task (its windows are
    sent to the same cluster from the worker), so many surveys run at once.

    Parameters
    ----------
    folders
        Survey folders.
    scheduler
        See :class:`Engine`.
    out_root
        Write each survey's results to ``out_root/<folder name>`` instead of
        ``<folder>/results``; same-named surveys get as many trailing path parts as tell
        them apart (``x/roof``, ``y/roof`` -> ``x_roof``, ``y_roof``). Refused before any
        work when a results folder would be, hold or lie in a survey of the batch.
    progress, window_progress
        Passed to each survey (local schedulers only).
    survey_done
        ``survey_done(outcome, done, total)`` after each survey.

    Returns
    -------
    tuple of BatchOutcome
        In the order of ``folders``.
    """
    folders = [Path(f) for f in folders]
    options: dict[str, Any] = dict(map_html=map_html, report_html=report_html)
    outs: list[Path | None] = [None] * len(folders)
    if out_root is not None:
        outs = _batch_out_folders(folders, Path(out_root))
        options["surveys"] = tuple(str(f) for f in folders)

    outcomes: list[BatchOutcome | None] = [None] * len(folders)
    with (scheduler if isinstance(scheduler, Engine) else Engine(scheduler)) as engine:
        if engine.kind == "distributed":
            from distributed import as_completed

            futures = {engine.client.submit(_run_one, f, outs[i], options, None, None, None, pure=False): i
                       for i, f in enumerate(folders)}
            done = 0
            for fut in as_completed(list(futures)):
                i = futures[fut]
                try:
                    outcomes[i] = fut.result()
                except Exception as err:  # noqa: BLE001 -- a lost worker fails one survey, not the batch
                    outcomes[i] = BatchOutcome(folder=folders[i], ok=False, seconds=0.0,
                                               problems=(f"{folders[i]}: the cluster lost the task ({err})",))
                done += 1
                if survey_done is not None:
                    survey_done(outcomes[i], done, len(folders))
        else:
            for i, f in enumerate(folders):
                if progress is not None:
                    progress(f"survey {i + 1} of {len(folders)}: {f}")
                outcomes[i] = _run_one(f, outs[i], options, engine, progress, window_progress)
                if survey_done is not None:
                    survey_done(outcomes[i], i + 1, len(folders))
    return tuple(o for o in outcomes if o is not None)
