"""Reading thermal rasters onto the plan grid.

A *plan grid* is a north-up raster grid in the survey CRS (or plan metres for
``local`` surveys): ``transform`` maps ``(col, row)`` pixel-corner coordinates to
plan ``(x, y)``; pixel ``(row, col)`` is represented by its centre
``transform * (col + 0.5, row + 0.5)``.

Mosaics already on the plan grid (same pixel size, aligned) are read by window,
without resampling; anything else (another pixel size, a rotated or south-up
transform, another CRS) is resampled bilinearly with :func:`rasterio.warp.reproject`.
Values are converted ``raw * scale + offset`` then from the declared units to kelvin;
nodata (declared nodata, internal masks, non-finite values) becomes NaN.
"""

from __future__ import annotations

import warnings
import logging
import math
from dataclasses import dataclass
from pathlib import Path
from typing import Literal

import numpy as np
from affine import Affine
import shapely

from .errors import InputFileError
from .windows import roof_mask

__all__ = ["PlanGrid", "to_kelvin", "plan_grid_for", "read_onto_grid", "RasterInfo", "inspect_raster",
           "footprint", "sample_in_outline"]

#: GDAL's block cache while windows are read and written, MB (GDAL's default, 5 % of the
#: memory, would hold decompressed blocks of the mosaic worth hundreds of MB). Windows are
#: read once each, so the cache barely helps: on the 32 Mpx benchmark mosaic 0, 16 and
#: 64 MB gave the same times within the machine's noise (10-11 s).
GDAL_CACHE_MB = 16
#: The same in bytes, as GDAL_CACHEMAX takes it from rasterio (a bare 16 would mean 16 bytes).
GDAL_CACHE_BYTES = GDAL_CACHE_MB << 20
_CACHE_LIMITED = False

log = logging.getLogger(__name__)

Units = Literal["C", "K", "F"]


@dataclass(frozen=True)
class PlanGrid:
    """A north-up grid on the plan.

    Attributes
    ----------
    transform
        Affine from ``(col, row)`` pixel corners to plan ``(x, y)``; ``b == d == 0``, ``e < 0``.
    rows, cols
        Grid shape.
    crs
        The survey CRS as a string, or ``None`` for ``local`` plans.
    """

    transform: Affine
    rows: int
    cols: int
    crs: str | None

    @property
    def shape(self) -> tuple[int, int]:
        return (self.rows, self.cols)

    @property
    def pixel_m(self) -> float:
        """Pixel side in plan metres."""
        return float(self.transform.a)

    @property
    def pixel_area_m2(self) -> float:
        return float(abs(self.transform.determinant))

    @property
    def bounds(self) -> tuple[float, float, float, float]:
        """``(xmin, ymin, xmax, ymax)`` of the grid's outer pixel edges."""
        x0, y0 = self.transform.c, self.transform.f
        return (x0, y0 + self.transform.e * self.rows, x0 + self.transform.a * self.cols, y0)


def to_kelvin(values: np.ndarray, units: Units) -> np.ndarray:
    """Convert temperatures in ``units`` to kelvin, in place where possible.

    >>> to_kelvin(np.array([0.0, 100.0]), "C")
    array([273.15, 373.15])
    >>> to_kelvin(np.array([32.0, 212.0]), "F")
    array([273.15, 373.15])
    """
    if not np.issubdtype(values.dtype, np.floating):
        values = values.astype(np.float64)  # integers cannot hold kelvin in place
    if units == "C":
        values += np.float32(273.15) if values.dtype == np.float32 else 273.15
    elif units == "F":
        values -= 32.0
        values *= 5.0 / 9.0
        values += 273.15
    elif units != "K":
        raise ValueError(f"units = {units!r}: expected one of 'C', 'K', 'F'")
    return values


@dataclass(frozen=True)
class RasterInfo:
    """What a raster file declares about its placement."""

    transform: Affine
    crs: str | None
    rows: int
    cols: int
    count: int
    dtype: str
    nodata: float | None


def _open(path: Path):
    import rasterio
    from rasterio.errors import RasterioIOError


    from rasterio.errors import NotGeoreferencedWarning

    try:
        with warnings.catch_warnings():
            # a raster without a transform is reported by inspect_raster, or placed by origin/pixel_m
            warnings.simplefilter("ignore", NotGeoreferencedWarning)
            return rasterio.open(path)
    except RasterioIOError as err:
        raise InputFileError(f"{path}: cannot be opened as a raster ({err}); expected a GeoTIFF of temperatures") from None


def inspect_raster(path: Path, *, origin: tuple[float, float] | None = None, pixel_m: float | None = None,
                   survey_crs: str | None = None) -> RasterInfo:
    """Read a raster's placement and check that it can be put on a metric plan.

    Parameters
    ----------
    path
        The raster file.
    origin, pixel_m
        Upper-left corner (plan x, y) and pixel size, for a raster with no transform.
    survey_crs
        The survey CRS (``None`` for a local plan).

    Raises
    ------
    InputFileError
        No transform and no origin/pixel_m; a geographic CRS; more than one band; a palette image.
    """
    from rasterio.enums import ColorInterp

    with _open(path) as src:
        transform, crs, rows, cols = src.transform, src.crs, src.height, src.width
        count, dtype, nodata = src.count, src.dtypes[0], src.nodata
        palette = count >= 1 and src.colorinterp[0] == ColorInterp.palette
    if palette:
        raise InputFileError(
            f"{path}: is a palette (false-colour) image: its pixel values are colour indices, not temperatures; "
            "expected a single band of radiometric temperatures"
        )
    if count != 1:
        raise InputFileError(
            f"{path}: has {count} bands: looks like a colour or multi-band image; "
            "expected a single band of radiometric temperatures"
        )
    if rows < 1 or cols < 1:
        raise InputFileError(f"{path}: is empty ({rows} x {cols} pixels)")
    if origin is not None and pixel_m is not None:
        if not transform.is_identity:  # origin/pixel_m place only a raster that carries no transform
            raise InputFileError(
                f"{path}: carries its own geo-transform {tuple(round(v, 6) for v in tuple(transform)[:6])}, but its "
                "[[mosaic]] entry also gives origin and pixel_m; remove origin and pixel_m (they apply only to a "
                "raster with no transform), or fix the raster's transform where it was exported"
            )
        transform = Affine(pixel_m, 0.0, origin[0], 0.0, -pixel_m, origin[1])
    elif transform.is_identity:
        raise InputFileError(
            f"{path}: has no geo-transform (pixel coordinates only), so areas would be in pixels; "
            "add origin = [x, y] (upper-left corner) and pixel_m to its [[mosaic]] entry"
        )
    if not all(math.isfinite(v) for v in tuple(transform)[:6]) or abs(transform.determinant) == 0:
        raise InputFileError(f"{path}: degenerate geo-transform {tuple(transform)[:6]} (zero pixel size); "
                             "export the mosaic again with its placement")
    crs_text = None
    if crs is not None:
        if crs.is_geographic:
            raise InputFileError(
                f"{path}: CRS {crs.to_string()} is geographic (degrees): areas would be in square degrees; "
                "reproject the mosaic to the survey's projected CRS in metres"
            )
        crs_text = crs.to_string()
    return RasterInfo(transform=transform, crs=crs_text, rows=rows, cols=cols, count=count, dtype=dtype,
                      nodata=nodata)


def plan_grid_for(infos: list[RasterInfo], bounds: tuple[float, float, float, float], *,
                  crs: str | None, pixel_m: float | None = None) -> PlanGrid:
    """The plan grid covering ``bounds`` at the finest raster's pixel size.

    The grid is aligned to the first north-up raster whose pixel size equals the
    chosen one, so that raster is read without resampling.

    Parameters
    ----------
    infos
        Placement of each raster, in survey order.
    bounds
        ``(xmin, ymin, xmax, ymax)`` to cover (the outline's bounds), plan metres.
    pixel_m
        Override the pixel size.
    """
    sizes = [_pixel_size_in(i, crs) for i in infos]
    size = pixel_m or min(sizes)
    ax, ay = 0.0, 0.0
    for info in infos:
        t = info.transform
        if not _same_crs(info.crs, crs):
            continue  # its lattice is in another CRS: it is resampled anyway
        if t.b == 0 and t.d == 0 and t.e < 0 and math.isclose(t.a, size, rel_tol=1e-9) and math.isclose(-t.e, size, rel_tol=1e-9):
            ax, ay = t.c, t.f
            break
    xmin, ymin, xmax, ymax = bounds
    # snap outward to the alignment lattice
    c0 = math.floor((xmin - ax) / size + 1e-9)
    c1 = math.ceil((xmax - ax) / size - 1e-9)
    r0 = math.floor((ay - ymax) / size + 1e-9)
    r1 = math.ceil((ay - ymin) / size - 1e-9)
    transform = Affine(size, 0.0, ax + c0 * size, 0.0, -size, ay - r0 * size)
    return PlanGrid(transform=transform, rows=max(r1 - r0, 1), cols=max(c1 - c0, 1), crs=crs)


def _same_crs(raster_crs: str | None, grid_crs: str | None) -> bool:
    """True when raster coordinates are plan coordinates (no CRS on either side, or equal CRSs)."""
    if raster_crs is None or grid_crs is None:
        return True
    from pyproj import CRS

    return CRS(raster_crs).equals(CRS(grid_crs))


def _pixel_size_in(info: RasterInfo, crs: str | None) -> float:
    """Side of the raster's central pixel measured in ``crs`` (plan metres)."""
    t = info.transform
    if _same_crs(info.crs, crs):
        return math.sqrt(abs(t.determinant))
    from pyproj import Transformer

    tr = Transformer.from_crs(info.crs, crs, always_xy=True)
    c, r = info.cols / 2.0, info.rows / 2.0
    cols_, rows_ = np.array([c, c + 1, c]), np.array([r, r, r + 1])
    (x0, x1, x2), (y0, y1, y2) = tr.transform(t.a * cols_ + t.b * rows_ + t.c, t.d * cols_ + t.e * rows_ + t.f)
    return math.sqrt(abs((x1 - x0) * (y2 - y0) - (x2 - x0) * (y1 - y0)))


def aligned(info: RasterInfo, grid: PlanGrid) -> tuple[int, int] | None:
    """Row/col offset of the grid inside the raster when no resampling is needed."""
    if not _same_crs(info.crs, grid.crs):
        return None
    t, g = info.transform, grid.transform
    if t.b != 0 or t.d != 0 or not math.isclose(t.a, g.a, rel_tol=1e-9) or not math.isclose(t.e, g.e, rel_tol=1e-9):
        return None
    dc = (g.c - t.c) / t.a
    dr = (g.f - t.f) / t.e
    if abs(dc - round(dc)) > 1e-6 or abs(dr - round(dr)) > 1e-6:
        return None
    return int(round(dr)), int(round(dc))


def read_onto_grid(path: Path, grid: PlanGrid, *, info: RasterInfo, units: Units, scale: float = 1.0,
                   offset: float = 0.0, inside=None) -> np.ndarray:
    """Read a raster's temperatures onto ``grid``, in kelvin, float32, NaN where no data.

    Parameters
    ----------
    path
        The raster.
    grid
        Target plan grid.
    info
        From :func:`inspect_raster` (carries an origin/pixel_m override).
    units, scale, offset
        ``value = raw * scale + offset`` is in ``units``.
    inside
        The outline (plan coordinates), or ``None``. When the raster is resampled, grid pixels
        whose centres lie inside it are interpolated only from source pixels whose centres lie
        inside it too, so a warm parapet just outside never bleeds into the roof's edge row.

    Returns
    -------
    numpy.ndarray
        ``grid.shape`` float32 kelvin; NaN outside the raster and at nodata.
    """
    from rasterio.errors import RasterioError
    from rasterio.windows import Window

    try:  # GDAL's own errors (some reads raise them directly); a private module, hence the fallback
        from rasterio._err import CPLE_BaseError
    except ImportError:  # pragma: no cover
        CPLE_BaseError = RasterioError

    out = np.full(grid.shape, np.nan, dtype=np.float32)
    try:
        with _open(path) as src:
            offsets = aligned(info, grid)
            if offsets is not None:
                r0, c0 = offsets
                rr0, cc0 = max(r0, 0), max(c0, 0)
                rr1, cc1 = min(r0 + grid.rows, info.rows), min(c0 + grid.cols, info.cols)
                if rr1 > rr0 and cc1 > cc0:
                    window = Window(cc0, rr0, cc1 - cc0, rr1 - rr0)
                    data = src.read(1, window=window, masked=True)
                    block = _to_float(data, scale, offset)
                    out[rr0 - r0: rr1 - r0, cc0 - c0: cc1 - c0] = block
            else:
                _warp(src, info, grid, out, scale, offset, inside=inside)
    except (RasterioError, CPLE_BaseError) as err:
        detail = err.__cause__ or err  # rasterio's "see previous exception" hides GDAL's own reason
        raise InputFileError(
            f"{path}: cannot be read ({detail}); the file may be truncated or corrupt: export it again"
        ) from None
    return to_kelvin(out, units)


def _to_float(data: np.ma.MaskedArray, scale: float, offset: float) -> np.ndarray:
    values = np.asarray(data.data, dtype=np.float32)
    if scale != 1.0:
        values *= np.float32(scale)
    if offset != 0.0:
        values += np.float32(offset)
    mask = np.ma.getmaskarray(data)
    values[mask | ~np.isfinite(values)] = np.nan
    return values


def _warp(src, info: RasterInfo, grid: PlanGrid, out: np.ndarray, scale: float, offset: float, *,
          inside=None) -> None:
    """Bilinear resampling of the whole raster onto the grid (rotated, south-up, other size or CRS).

    With ``inside`` (the outline, plan coordinates), grid pixels whose centres lie inside are
    resampled a second time from the source pixels whose centres lie inside (GDAL's bilinear
    kernel weighs only valid source pixels), so nothing from beyond the outline mixes in.
    """
    from rasterio.warp import Resampling, reproject

    log.info("%s: resampled onto the plan grid (bilinear)", src.name)
    data = _to_float(src.read(1, masked=True), scale, offset)
    src_crs = info.crs or grid.crs
    dst_crs = grid.crs or src_crs
    if grid.crs is None:  # local plan: raster coordinates are plan metres
        src_crs = dst_crs = "EPSG:3857"  # any metric CRS: identical on both sides, so no reprojection happens

    def warp(source: np.ndarray, destination: np.ndarray) -> None:
        reproject(source=source, destination=destination, src_transform=info.transform, src_crs=src_crs,
                  src_nodata=np.nan, dst_transform=grid.transform, dst_crs=dst_crs, dst_nodata=np.nan,
                  resampling=Resampling.bilinear)

    warp(data, out)
    if inside is None or getattr(inside, "is_empty", True):
        return

    grid_in = roof_mask(inside, grid.transform, grid.shape)
    if not grid_in.any():
        return
    local = _in_raster_crs(inside, info.crs, grid.crs)
    src_in = roof_mask(local, info.transform, data.shape)  # the pixel-centre rule, any affine transform
    data[~src_in] = np.nan
    clean = np.full(out.shape, np.nan, dtype=out.dtype)
    warp(data, clean)
    out[grid_in] = clean[grid_in]


def _in_raster_crs(geometry, raster_crs: str | None, plan_crs: str | None):
    """``geometry`` (plan coordinates) in the raster's coordinates."""
    if _same_crs(raster_crs, plan_crs):
        return geometry
    from pyproj import Transformer

    tr = Transformer.from_crs(plan_crs, raster_crs, always_xy=True)
    return shapely.transform(geometry, lambda xy: np.column_stack(tr.transform(xy[:, 0], xy[:, 1])))


def footprint(info: RasterInfo, plan_crs: str | None):
    """The raster's outer edge as a polygon in plan coordinates (its corners transformed)."""
    cols = np.array([0.0, info.cols, info.cols, 0.0])
    rows = np.array([0.0, 0.0, info.rows, info.rows])
    xs, ys = info.transform @ (cols, rows)
    if not _same_crs(info.crs, plan_crs):
        from pyproj import Transformer

        xs, ys = Transformer.from_crs(info.crs, plan_crs, always_xy=True).transform(xs, ys)
    return shapely.Polygon(np.column_stack([xs, ys]))


def sample_in_outline(path: Path, info: RasterInfo, outline, *, plan_crs: str | None, units: Units,
                      scale: float = 1.0, offset: float = 0.0, max_side: int = 1024) -> np.ndarray:
    """Apparent temperatures, degC, of a sample of the raster's pixels whose centres lie in ``outline``.

    Cheap on huge mosaics: only the outline's window is read, decimated to at most
    ``max_side`` pixels a side when the file has overviews (GDAL reads one), else as 8 x 8
    patches of 32 x 32 pixels spread over the window (then decimated if they hold fewer than
    100 values inside the outline). When the
    sample holds no value, the window is scanned at full resolution in strips, stopping at the
    first strip with data, so a narrow outline is never reported empty by mistake.

    Returns
    -------
    numpy.ndarray
        1-D, finite values only; empty when no pixel with data lies inside the outline.
    """
    from rasterio.errors import RasterioError
    from rasterio.windows import Window

    try:
        from rasterio._err import CPLE_BaseError
    except ImportError:  # pragma: no cover
        CPLE_BaseError = RasterioError

    local = _in_raster_crs(outline, info.crs, plan_crs)
    inv = ~info.transform
    x0, y0, x1, y1 = local.bounds
    cs, rs = inv @ (np.array([x0, x1, x1, x0]), np.array([y0, y0, y1, y1]))
    c0, c1 = max(int(math.floor(min(cs))), 0), min(int(math.ceil(max(cs))), info.cols)
    r0, r1 = max(int(math.floor(min(rs))), 0), min(int(math.ceil(max(rs))), info.rows)
    if c1 <= c0 or r1 <= r0:
        return np.zeros(0, np.float64)

    def values_of(window, out_shape) -> np.ndarray:
        data = src.read(1, window=window, out_shape=out_shape, masked=True)
        oh, ow = out_shape
        i, j = np.indices(out_shape, dtype=np.float64)
        cols = window.col_off + (j + 0.5) * window.width / ow
        rows = window.row_off + (i + 0.5) * window.height / oh
        xs, ys = info.transform @ (cols, rows)
        keep = shapely.contains_xy(local, xs, ys) & ~np.ma.getmaskarray(data)
        values = np.asarray(data.data, dtype=np.float64)[keep] * scale + offset
        values = values[np.isfinite(values)]
        return to_kelvin(values, units) - 273.15


    try:
        with _open(path) as src:
            wr, wc = r1 - r0, c1 - c0
            if wr * wc > 4 * max_side * max_side and not src.overviews(1):
                # no overview to read from: 8 x 8 small patches spread over the window (a decimated
                # read of a tiled file without overviews would read every block)
                side, k = 32, 8
                parts = []
                for a in range(k):
                    for b in range(k):
                        row = min(max(r0 + int((a + 0.5) * wr / k) - side // 2, r0), r1 - min(side, wr))
                        col = min(max(c0 + int((b + 0.5) * wc / k) - side // 2, c0), c1 - min(side, wc))
                        parts.append(values_of(Window(col, row, min(side, wc), min(side, wr)),
                                               (min(side, wr), min(side, wc))))
                found = np.concatenate(parts)
                if found.size >= 100:
                    return found
            factor = max(1, math.ceil(max(wr, wc) / max_side))
            found = values_of(Window(c0, r0, wc, wr), (max(1, math.ceil(wr / factor)), max(1, math.ceil(wc / factor))))
            if found.size or factor == 1:
                return found
            strip = max(1, (max_side * max_side) // max(wc, 1))
            for row in range(r0, r1, strip):
                rows = min(strip, r1 - row)
                found = values_of(Window(c0, row, wc, rows), (rows, wc))
                if found.size:
                    return found
            return found
    except (RasterioError, CPLE_BaseError) as err:
        detail = err.__cause__ or err
        raise InputFileError(
            f"{path}: cannot be read ({detail}); the file may be truncated or corrupt: export it again"
        ) from None
