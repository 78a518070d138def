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
:func:`wetmap.windows.section_labels` with the pixel-centre rule of the roof mask. A window that starts
at a multiple of the block size holds whole blocks, so the passes are:

1. *surface*: read the window of each mosaic (each task opens its own dataset; rasterio
   datasets are neither picklable nor thread-safe), correct apparent to surface
   temperature, rasterise the roof (:func:`wetmap.windows.rasterize_window`) and take block statistics
   of the usable pixels; the window is kept in a scratch folder;
2. *background estimates 2 and 3*: block medians of the pixels not warmer than the
   previous background by more than the cut (the cut from the first estimate's noise);
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

The roof mask is rasterised by :func:`wetmap.windows.rasterize_window` in both modes: the pixel-centre
rule computed from the edges in whole-grid pixel coordinates, so every window gives the
same pixels as the whole grid, bit for bit (GDAL's rasteriser shifts the coordinates
into each window and can flip a centre that lies on an edge).

Results in tiled mode
---------------------
``surface_c.tif`` and ``delta_c.tif`` are written window by window (deflate level 1,
BigTIFF when needed) into a scratch folder and moved into the results by
:func:`wetmap.pipeline.write_results`. The :class:`~wetmap.results.SurveyResult` keeps
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
paths). :func:`wetmap.batch.run_batch` runs many surveys on one engine.

Modules: :mod:`wetmap.windows` (window layout, the rasteriser), :mod:`wetmap.seams`
(the pieces of each window merged across seams), this module (the engine), and
:mod:`wetmap.batch` (many surveys).
"""


import threading
from types import SimpleNamespace
import logging
import math
import os
import shutil
import tempfile
import time
import weakref
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import shapely
from affine import Affine

from .detect import (Detection, background_grid, core_blocks, fit_background, block_noise_sigma, section_block_statistics,
                     section_medians, warm_cut)
from .errors import ProcessingError
from .polygons import smooth_pixel_polygons
from .radiometry import Radiometry, section_emissivity_correction, to_surface_k
from .rasters import GDAL_CACHE_BYTES, PlanGrid, RasterInfo, aligned, inspect_raster, plan_grid_for, read_onto_grid
from .seams import MergedRegions, TilePieces, merge_pieces, tile_pieces
from .survey import Survey
from .windows import (PixelEdges, block_mean, choose_tile_px, labels_at, pixel_edges, preview_factor, preview_need,
                      rasterize_window, section_labels, windows_of)

__all__ = [
    "ArraySource",
    "ArrayDetection",
    "detect_array",
    "detect_anomalies",
    "Progress",
    "WindowProgress",
    "Engine",
    "FullRasters",
    "TiledDetection",
    "detect_in_windows",
]

log = logging.getLogger(__name__)

_CACHE_LIMITED = False  # GDAL_CACHEMAX set in this worker process

#: GeoTIFF profile of the tiled outputs (fast deflate: the files are written once and big).
_TIFF_PROFILE = dict(driver="GTiff", count=1, dtype="float32", nodata=float("nan"), compress="deflate",
                     predictor=3, ZLEVEL=1, tiled=True, blockxsize=256, blockysize=256, BIGTIFF="IF_SAFER",
                     NUM_THREADS="ALL_CPUS")  # GDAL reads this creation option in capitals only

#: Pixels written to a GeoTIFF at a time (whole 256 x 256 blocks; about 4 MB of float32).
_WRITE_PIECE_PX = 1 << 20


#: How long to try to reach a dask scheduler address, seconds.
CONNECT_TIMEOUT_S = 20

#: Progress callbacks: stage messages, and windows done of a total per stage.
Progress = Callable[[str], None]
WindowProgress = Callable[[str, int, int], None]


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

    @property
    def has_sections(self) -> bool:
        return bool(self.section_edges)

    def labels(self, row0: int, col0: int, rows: int, cols: int) -> np.ndarray:
        """The window's section labels (:func:`section_labels`)."""
        return section_labels(self.section_edges, row0=row0, col0=col0, shape=(rows, cols))

    def read(self, row0: int, col0: int, rows: int, cols: int) -> tuple[np.ndarray, np.ndarray, int]:
        """``(surface_c float32, in_roof bool, lost pixels)`` of a window, as the whole array gives them."""
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
        surface = to_surface_k(apparent, self.radiometry)
        if any(e is not None for e in self.section_emissivity):

            sections = [SimpleNamespace(emissivity=e) for e in self.section_emissivity]
            surface = section_emissivity_correction(surface, apparent, self.labels(row0, col0, rows, cols), sections,
                                                    self.radiometry)
        lost = int(np.count_nonzero(np.isnan(surface) & ~np.isnan(apparent)))
        del apparent
        surface = surface.astype(np.float32, copy=False)
        surface -= np.float32(273.15)
        in_roof = rasterize_window(self.roof_edges, row0=row0, col0=col0, shape=(rows, cols))
        return surface, in_roof, lost


@dataclass(frozen=True, eq=False)
class ArraySource:
    """Windows of a surface temperature already on the plan grid (frames blended, mosaics
    resampled, a pass aligned to another's grid): ``surface_c`` (degC), ``usable`` (bool:
    on the roof with data) and the section ``labels`` (int, or ``None``)."""

    surface_c: np.ndarray
    usable: np.ndarray
    section_labels: np.ndarray | None = None

    @property
    def has_sections(self) -> bool:
        return self.section_labels is not None

    def labels(self, row0: int, col0: int, rows: int, cols: int) -> np.ndarray:
        assert self.section_labels is not None
        return self.section_labels[row0:row0 + rows, col0:col0 + cols].astype(np.int16, copy=False)

    def read(self, row0: int, col0: int, rows: int, cols: int) -> tuple[np.ndarray, np.ndarray, int]:
        """``(surface_c float32, usable, 0)``: the pixels were corrected before."""
        sl = (slice(row0, row0 + rows), slice(col0, col0 + cols))
        return self.surface_c[sl].astype(np.float32, copy=False), self.usable[sl] & np.isfinite(self.surface_c[sl]), 0


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

    def keep_background(self, i: int, background: np.ndarray) -> None:
        """The window's background is not kept on disk (the previews sample it)."""

    def view(self, kind: str, i: int) -> np.ndarray:
        """A float32 window of ``kind``, read-only, without reading it all (a memory map)."""
        _, _, rows, cols = self.windows[i]
        return np.memmap(self.path(kind, i), dtype=np.float32, mode="r", shape=(rows, cols))

    def rect(self, kind: str, row0: int, col0: int, rows: int, cols: int) -> np.ndarray:
        """A rectangle of ``kind`` (``"surface"`` or ``"delta"``) that may span several windows."""
        out = np.empty((rows, cols), dtype=np.float32)
        tp = self.tile_px
        n_cols = -(-self.shape[1] // tp)
        for tr in range(row0 // tp, (row0 + rows - 1) // tp + 1):
            for tc in range(col0 // tp, (col0 + cols - 1) // tp + 1):
                i = tr * n_cols + tc
                wr0, wc0, wr, wc = self.windows[i]
                part = self.view(kind, i)
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
            values = self.view(kind, i)
            out[idx] = values[rows[idx] - r0, cols[idx] - c0]
            del values
        return out


@dataclass(frozen=True, eq=False)
class _MemoryStore(_Scratch):
    """The same per-window arrays kept in memory (an array already in memory, processed in
    this process: the whole array is the one-window case)."""

    arrays: dict = field(default_factory=dict)

    def limit_gdal_cache(self) -> None:
        pass

    def save(self, kind: str, i: int, values: np.ndarray) -> None:
        self.arrays[kind, i] = values

    def load(self, kind: str, i: int) -> np.ndarray:
        return self.arrays[kind, i].copy()

    def view(self, kind: str, i: int) -> np.ndarray:
        return self.arrays[kind, i]

    def save_surface(self, i: int, surface: np.ndarray, in_roof: np.ndarray) -> None:
        self.arrays["surface", i] = surface.astype(np.float32, copy=False)
        self.arrays["roof", i] = in_roof

    def save_labels(self, i: int, labels: np.ndarray) -> None:
        self.arrays["labels", i] = labels

    def keep_background(self, i: int, background: np.ndarray) -> None:
        self.arrays["background", i] = background

    def labels(self, i: int) -> np.ndarray | None:
        return self.arrays.get(("labels", i))

    def masked(self, i: int) -> np.ndarray:
        surface = self.arrays["surface", i].copy()
        surface[~self.arrays["roof", i]] = np.nan
        return surface


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
    scratch.limit_gdal_cache()
    row0, col0, rows, cols = scratch.windows[i]
    surface, in_roof, lost = source.read(row0, col0, rows, cols)
    scratch.save_surface(i, surface, in_roof)
    labels = None
    if source.has_sections:
        labels = source.labels(row0, col0, rows, cols)
        scratch.save_labels(i, labels)
    preview = block_mean(surface, factor) if factor else np.zeros((0, 0), np.float32)
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
    row0, col0, rows, cols = scratch.windows[i]
    masked = scratch.masked(i)
    labels = scratch.labels(i)
    diff = model.evaluate(labels, shape=(rows, cols), row0=row0, col0=col0)
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
        bg = model.evaluate(scratch.labels(i), shape=(rows, cols), row0=row0, col0=col0)
    delta = masked - bg
    del masked
    scratch.save("delta", i, delta)
    scratch.keep_background(i, bg)
    if factor:
        delta_preview = block_mean(delta, factor)
        # the background at each preview cell's central pixel (the last pixel of a partial
        # cell too short to hold its centre), where the cell has usable pixels
        h = factor // 2
        at_r = np.minimum(np.arange(delta_preview.shape[0]) * factor + h, rows - 1)
        at_c = np.minimum(np.arange(delta_preview.shape[1]) * factor + h, cols - 1)
        bg_preview = np.where(np.isfinite(delta_preview), bg[np.ix_(at_r, at_c)], np.nan)
    else:  # no preview: the caller keeps the full arrays
        delta_preview = bg_preview = np.zeros((0, 0), np.float32)
    del bg
    pieces = tile_pieces(delta, row0=row0, col0=col0, grid_shape=scratch.shape, threshold_c=threshold_c,
                         min_pixels=min_pixels)
    return _FinalPass(pieces=pieces, delta_preview=delta_preview, background_preview=bg_preview.astype(np.float32))


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
        if self.kind == "sync":  # one thread, in order: no graph needed
            out = []
            for item in items:
                out.append(fn(*shared, *item))
                if progress is not None:
                    progress(label, len(out), total)
            return out
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
        """:func:`wetmap.verdicts.sample_at_points` of the full-resolution delta-T (small window reads)."""
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
    out = []
    for m, info in zip(survey.mosaics, infos):
        if aligned(info, grid) is None:
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
        :func:`wetmap.verdicts.sample_at_points`), the threshold to apply (``[detect] delta_c =
        "cores"``); ``None``: ``[detect] delta_c``.
    """
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
    factor = preview_factor(tp, preview_need(grid.shape))
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
    writer: list[_Background] = []

    def write_surface() -> None:
        # surface_c.tif is complete on disk: write it while the next passes run (GDAL compresses
        # without the GIL, so the writer uses what the window tasks leave idle)
        writer.append(_Background(_write_tiff, store, "surface", rasters.surface_c, grid, None))

    try:
        _emit(progress, f"{len(windows)} windows of {tp} px on {engine.describe()}: reading and correcting the "
                        "mosaics, background estimate 1")
        run = _run_windows(engine, source, store, spec=spec, count=count, names=names, choice=choice,
                           threshold_c=sdt.delta_c, min_pixels=min_pixels, factor=factor, core_rc=core_rc,
                           wet_blocks=wet_b, dry_blocks=dry_b, threshold_from=threshold_from, progress=progress,
                           window_progress=window_progress, surface_done=write_surface)
        polygons = tuple(smooth_pixel_polygons(run.merged.polygons, grid.transform))

        _emit(progress, "writing delta_c.tif (and finishing surface_c.tif) by bands of blocks")
        _write_tiff(store, "delta", rasters.delta_c, grid, window_progress)
        for w in writer:
            w.join()
    except BaseException:
        for w in writer:
            w.join(reraise=False)
        shutil.rmtree(folder, ignore_errors=True)
        raise
    finally:
        env.__exit__(None, None, None)
        if engine is not scheduler:
            engine.close()
        for p in folder.glob("*.raw"):
            p.unlink(missing_ok=True)

    preview_grid = PlanGrid(transform=grid.transform @ Affine.scale(factor), rows=-(-grid.rows // factor),
                            cols=-(-grid.cols // factor), crs=grid.crs)
    merged = run.merged
    preview_mask = _preview_mask(merged.polygons, factor, preview_grid.shape)
    detection = Detection(background_c=run.background_preview, delta_c=run.delta_preview, mask=preview_mask,
                          background_m=background_m, threshold_c=run.threshold_c, min_pixels=min_pixels,
                          background=run.model)
    return TiledDetection(
        grid=preview_grid, surface_c=run.surface_preview, detection=detection, polygons=polygons,
        pixels=merged.pixels, delta_mean=merged.delta_mean, delta_max=merged.delta_max, roof_px=run.roof_px,
        covered_px=run.covered_px, lost_px=run.lost_px, constant=run.constant, full_rasters=rasters,
        preview_min_pixels=max(1, math.ceil(min_pixels / (factor * factor))),
    )


@dataclass(frozen=True)
class _WindowsRun:
    """What the passes over the windows found (previews: block means of ``factor`` pixels)."""

    model: Any
    threshold_c: float
    merged: MergedRegions
    surface_preview: np.ndarray
    delta_preview: np.ndarray
    background_preview: np.ndarray
    roof_px: int
    covered_px: int
    lost_px: int
    constant: bool


def _run_windows(engine: Engine, source, store: _Scratch, *, spec, count: int, names: tuple[str, ...], choice: str,
                 threshold_c: float, min_pixels: int, factor: int, core_rc=None, wet_blocks=None, dry_blocks=None,
                 threshold_from: Callable[[np.ndarray], float] | None = None, applied_c: float | None = None,
                 progress: Progress | None = None, window_progress: WindowProgress | None = None,
                 surface_done: Callable[[], None] | None = None) -> _WindowsRun:
    """The detection itself, the same for one window or many: surface and background
    estimate 1, estimates 2 and 3, the threshold, delta-T and the pieces of each window,
    merged across the seams with the clean-up in vector space (:func:`wetmap.seams.merge_pieces`)."""
    windows = store.windows
    block = spec.block_px
    rows, cols = store.shape
    nbr, nbc = -(-rows // block), -(-cols // block)
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
    preview_shape = (-(-rows // factor), -(-cols // factor)) if factor else (0, 0)
    surface_preview = _assemble_preview([f.preview for f in first], windows, factor, preview_shape)
    del first
    if surface_done is not None:
        surface_done()

    model = None
    if covered_px:
        noise = block_noise_sigma(sigma)
        cut = warm_cut(threshold_c, noise)
        fallback = None
        if not np.isfinite(median).reshape(count, -1).any(axis=1).all():
            parts = engine.map(_usable_values_task, (store,), [(i,) for i in range(len(windows))])
            values = np.concatenate([p[0] for p in parts])
            labs = None if not source.has_sections else np.concatenate([p[1] for p in parts])
            fallback = section_medians(values, np.ones(values.shape, bool), labs, count)
            del parts, values, labs
        for estimate in range(3):  # three estimates: estimate, leave out the warm pixels, re-estimate
            if estimate:
                _emit(progress, f"background estimate {estimate + 1} of 3")
                parts = engine.map(_keep_task, (store,), [(i, block, model, cut, count) for i in range(len(windows))],
                                   label=f"background estimate {estimate + 1}", progress=window_progress)
                median = np.full((count, nbr, nbc), np.nan)
                for (r0, c0, _, _), m in zip(windows, parts):
                    median[:, r0 // block:r0 // block + m.shape[1], c0 // block:c0 // block + m.shape[2]] = m
                del parts
            model = fit_background(median, block_px=block, grid_shape=store.shape, footprint=spec.footprint,
                                   threshold_c=threshold_c, noise_c=noise, names=names, choice=choice,
                                   fallback_c=fallback, previous=model, wet_blocks=wet_blocks, dry_blocks=dry_blocks)

    threshold = threshold_c if applied_c is None else applied_c
    if threshold_from is not None:
        threshold = float(threshold_from(_core_deltas(store, model, core_rc, block)))

    _emit(progress, "delta-T and anomaly outlines in windows")
    final = engine.map(_final_task, (store,),
                       [(i, block, model, threshold, min_pixels, factor) for i in range(len(windows))],
                       label="anomaly outlines", progress=window_progress)
    delta_preview = _assemble_preview([f.delta_preview for f in final], windows, factor, preview_shape)
    bg_preview = _assemble_preview([f.background_preview for f in final], windows, factor, preview_shape)
    pieces = [f.pieces for f in final]
    del final

    _emit(progress, "merging outlines across window seams; small regions and holes")
    merged = merge_pieces(pieces, windows, grid_shape=store.shape, tile_px=store.tile_px, min_pixels=min_pixels,
                          read_delta=lambda rr, cc: store.gather("delta", rr, cc))
    return _WindowsRun(model=model, threshold_c=threshold, merged=merged, surface_preview=surface_preview,
                       delta_preview=delta_preview, background_preview=bg_preview, roof_px=roof_px,
                       covered_px=covered_px, lost_px=lost_px, constant=bool(covered_px and low == high))


@dataclass(frozen=True)
class ArrayDetection:
    """The detection of an array in memory: :class:`wetmap.detect.Detection` (full arrays)
    and the anomaly regions in raster order of their first pixel, exact, with statistics."""

    detection: Detection
    pixel_polygons: np.ndarray
    """The regions as pixel polygons (integer pixel corners of the grid)."""
    pixels: np.ndarray
    delta_mean: np.ndarray
    delta_max: np.ndarray

    def polygons(self, transform: Affine) -> list:
        """The regions' smoothed outlines in plan coordinates (:func:`wetmap.polygons.smooth_pixel_polygons`)."""
        return list(smooth_pixel_polygons(self.pixel_polygons, transform))


def detect_array(surface_c: np.ndarray, usable: np.ndarray, *, pixel_m: float, threshold_c: float, background_m: float,
                 min_area_m2: float, labels: np.ndarray | None = None, names: tuple[str, ...] = ("roof",),
                 choice: str = "auto", cores: tuple[np.ndarray, np.ndarray, np.ndarray] | None = None,
                 applied_c: float | None = None, threshold_from: Callable[[np.ndarray], float] | None = None,
                 tile_px: int | None = None) -> ArrayDetection:
    """Background, delta, cleaned anomaly regions of an array in memory: the windowed engine
    with one window (``tile_px`` ``None``) or windows of ``tile_px`` pixels, in this thread.

    Parameters
    ----------
    surface_c
        Surface temperature, degC, ``(rows, cols)``.
    usable
        Pixels on the roof, outside exclusions, with data.
    pixel_m
        Pixel side, metres.
    threshold_c
        Threshold above the dry background, degC (also sets the background's warm cut).
    background_m
        Background scale, metres.
    min_area_m2
        Smallest anomaly kept, square metres (also the largest hole filled).
    labels, names, choice
        Section label of every pixel (``0 .. len(names) - 1``; ``None``: one section), one
        name per label, and the background choice (:func:`wetmap.detect.fit_background`).
    cores
        ``(rows_px, cols_px, wet)`` of the confirmations (pixel indices), or ``None``.
    applied_c
        Threshold applied when it differs from ``threshold_c`` (the primary pass's applied
        threshold); ``None``: ``threshold_c``.
    threshold_from
        Given the confirmations' delta-T (3 x 3 median at each), the threshold to apply.
    tile_px
        Window side (a multiple of the background block); ``None``: one window.
    """
    shape = surface_c.shape
    spec = background_grid(pixel_m, background_m)
    block = spec.block_px
    tp = tile_px or -(-max(shape) // block) * block
    windows = tuple(windows_of(shape, tp))
    store = _MemoryStore(folder=Path("."), windows=windows, tile_px=tp, shape=shape)
    source = ArraySource(surface_c=surface_c, usable=usable, section_labels=labels)
    count = len(names)
    wet_b = dry_b = core_rc = None
    if cores is not None and len(cores[0]):
        r, c, w = (np.asarray(a) for a in cores)
        inside = (r >= 0) & (r < shape[0]) & (c >= 0) & (c < shape[1])
        lab = np.full(len(r), -1)
        lab[inside] = 0 if labels is None else labels[r[inside], c[inside]]
        wet_b, dry_b = core_blocks(r, c, lab, np.asarray(w, bool), count=count, block=block,
                                   block_shape=(-(-shape[0] // block), -(-shape[1] // block)))
        core_rc = (r, c)
    min_pixels = max(1, int(math.ceil(min_area_m2 / (pixel_m * pixel_m) - 1e-9)))
    run = _run_windows(Engine("sync"), source, store, spec=spec, count=count, names=names, choice=choice,
                       threshold_c=threshold_c, min_pixels=min_pixels, factor=0, core_rc=core_rc, wet_blocks=wet_b,
                       dry_blocks=dry_b, threshold_from=threshold_from, applied_c=applied_c)
    if len(windows) == 1:  # the window is the array
        delta, background = store.view("delta", 0), store.view("background", 0)
    else:
        delta, background = store.rect("delta", 0, 0, *shape), store.rect("background", 0, 0, *shape)
    merged = run.merged
    mask = _preview_mask(merged.polygons, 1, shape)
    detection = Detection(background_c=background, delta_c=delta, mask=mask, background_m=background_m,
                          threshold_c=run.threshold_c, min_pixels=min_pixels, background=run.model)
    return ArrayDetection(detection=detection, pixel_polygons=merged.polygons, pixels=merged.pixels,
                          delta_mean=merged.delta_mean, delta_max=merged.delta_max)


def detect_anomalies(surface_c: np.ndarray, usable: np.ndarray, **options: Any) -> Detection:
    """:func:`detect_array`'s :class:`wetmap.detect.Detection` (background, delta-T, cleaned mask)."""
    return detect_array(surface_c, usable, **options).detection


def _core_deltas(store: _Scratch, model: Any, core_rc: tuple[np.ndarray, np.ndarray] | None,
                 block: int) -> np.ndarray:
    """Delta-T at each confirmation: the median of its 3 x 3 usable pixels (as
    :func:`wetmap.verdicts.sample_at_points`), from the scratch windows and the model."""
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
            bg = model.evaluate(lab, shape=(1, 1), row0=int(a), col0=int(b))
            vals.append(float(masked[a - wr0, b - wc0] - bg[0, 0]))
        v = np.asarray(vals, dtype=np.float32)
        if np.isfinite(v).any():
            out[k] = float(np.nanmedian(v))
    return out


class _Background:
    """``fn(*args)`` in a thread of the driver; :meth:`join` waits and re-raises its error."""

    def __init__(self, fn: Callable, *args: Any):
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
    if not factor:
        return np.zeros((0, 0), np.float32)
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
