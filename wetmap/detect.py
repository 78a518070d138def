"""Dry background, delta-T, threshold and clean-up on the plan grid.

The dry background is estimated robustly, so that a wet area several metres across is
not absorbed into its own background:

1. the roof is cut into square blocks of ``block_px`` pixels and each block's median of
   the usable pixels is taken (a block with fewer than a quarter of its pixels usable is
   left empty; when every block is empty, one median of the whole roof is used);
2. empty blocks take the value of the nearest filled block; a median filter of
   ``footprint`` blocks (an odd number; about ``background_m`` across) smooths the block grid;
3. the block grid is interpolated bilinearly back to every pixel (block centres are
   the interpolation nodes; the pixel-centre rule holds throughout);
4. pixels warmer than the background by more than ``max(delta_c / 2, 3 sigma)``
   (sigma: the pixel noise, the median over blocks of each block's interquartile range
   / 1.349, measured on the first pass) are warm outliers; they are left out and steps
   1-3 are repeated (``iterations`` times in all).

Every step is either per block (1, 3, 4) or on the small block grid (2), so a mosaic
processed in windows that start at multiples of the block size gives the same
background, bit for bit, as the whole array.

A smoothed (mean or Gaussian) background is pulled up by large warm areas and loses
detections; a full-resolution median filter metres wide costs thousands of seconds per
megapixel: the block median is both robust and cheap.

Thresholding is separate from computing the threshold: ``delta > delta_c`` on usable
pixels, then regions smaller than the minimum area are dropped and holes up to it are
filled, unless a hole holds an unusable pixel (an excluded drain, missing data).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

import numpy as np
from scipy import ndimage

from .polygons import fill_small_holes, remove_small_regions

__all__ = [
    "BackgroundGrid",
    "background_grid",
    "default_background_m",
    "dry_background",
    "anomaly_mask",
    "Detection",
    "detect_anomalies",
]

#: Default dry-background scale: a fraction of the plan's longest side, clamped per kind
#: (common practice: the reference area must be several times larger than the largest
#: wet area it is compared with, and stay within one construction).
BACKGROUND_FRACTION = 0.3
BACKGROUND_LIMITS_M: dict[str, tuple[float, float]] = {"roof": (8.0, 40.0), "hull": (1.0, 4.0)}

#: Blocks across the background footprint (odd). With this many, each footprint holds
#: enough blocks for a stable median while the block grid stays small.
FOOTPRINT_BLOCKS = 15
MIN_BLOCK_FILL = 0.25


def default_background_m(kind: Literal["roof", "hull"], longest_side_m: float) -> float:
    """Background scale in metres for a plan whose longest side is ``longest_side_m``.

    >>> default_background_m("roof", 60.0)
    18.0
    >>> default_background_m("roof", 10.0), default_background_m("hull", 11.0)
    (8.0, 3.3)
    """
    low, high = BACKGROUND_LIMITS_M[kind]
    return float(min(max(BACKGROUND_FRACTION * longest_side_m, low), high))


@dataclass(frozen=True)
class BackgroundGrid:
    """Block size (pixels) and median footprint (blocks) for a background scale."""

    block_px: int
    footprint: int

    @property
    def footprint_px(self) -> int:
        return self.block_px * self.footprint


def background_grid(pixel_m: float, background_m: float) -> BackgroundGrid:
    """Choose block size and footprint so that ``block_px * footprint * pixel_m ~ background_m``.

    >>> background_grid(0.1, 18.0)
    BackgroundGrid(block_px=12, footprint=15)
    >>> background_grid(0.1, 0.5)    # tiny scales: 1-pixel blocks, at least 3 of them
    BackgroundGrid(block_px=1, footprint=5)
    """
    across_px = max(background_m / pixel_m, 3.0)
    block = max(1, int(round(across_px / FOOTPRINT_BLOCKS)))
    footprint = int(round(across_px / block))
    footprint = max(3, footprint + (footprint % 2 == 0))
    return BackgroundGrid(block_px=block, footprint=footprint)


@dataclass(frozen=True)
class BlockStats:
    """Per-block statistics of the usable pixels (shape ``(block rows, block cols)``).

    Attributes
    ----------
    median
        Median, degC; NaN where fewer than a quarter of the block's pixels are usable.
    sigma
        Robust spread, degC: interquartile range / 1.349 (a normal distribution's
        standard deviation); NaN where the median is NaN.
    """

    median: np.ndarray
    sigma: np.ndarray


def block_statistics(values: np.ndarray, usable: np.ndarray, block: int) -> BlockStats:
    """Median and robust spread of the usable pixels of each ``block`` x ``block`` block.

    Exact (no binning): each block is sorted with NaN last; the median is the middle
    (mean of the two middle values for an even count), the quartiles are the values at
    ranks ``floor(0.25 (n - 1))`` and ``floor(0.75 (n - 1))``. Blocks are anchored at
    ``(0, 0)`` of ``values``: a window of a larger grid gives the same blocks when it
    starts at a multiple of ``block``. Edge blocks are partial; a block needs a quarter of
    its pixels inside the array usable.
    """
    rows, cols = values.shape
    nr, nc = -(-rows // block), -(-cols // block)
    median = np.full((nr, nc), np.nan, dtype=np.float64)
    sigma = np.full((nr, nc), np.nan, dtype=np.float64)
    extent_r = np.minimum(block, rows - np.arange(nr) * block)
    extent_c = np.minimum(block, cols - np.arange(nc) * block)
    need_all = np.maximum(1, np.ceil(MIN_BLOCK_FILL * extent_r[:, None] * extent_c[None, :])).astype(np.int64)
    band_rows = max(1, (1 << 22) // max(cols * block, 1))  # bound the temporary to a few MB

    def rank(v: np.ndarray, k: np.ndarray) -> np.ndarray:
        return np.take_along_axis(v, np.clip(k, 0, None)[..., None], -1)[..., 0].astype(np.float64)

    for br0 in range(0, nr, band_rows):
        br1 = min(nr, br0 + band_rows)
        r0, r1 = br0 * block, min(rows, br1 * block)
        v = np.where(usable[r0:r1], values[r0:r1], np.nan).astype(np.float32, copy=False)
        pad_r = (br1 - br0) * block - (r1 - r0)
        pad_c = nc * block - cols
        if pad_r or pad_c:
            v = np.pad(v, ((0, pad_r), (0, pad_c)), constant_values=np.nan)
        v = v.reshape(br1 - br0, block, nc, block).transpose(0, 2, 1, 3).reshape(br1 - br0, nc, block * block)
        v = np.sort(v, axis=-1)  # NaN sort last
        n = np.count_nonzero(~np.isnan(v), axis=-1)
        med = 0.5 * (rank(v, (n - 1) // 2) + rank(v, n // 2))
        spread = (rank(v, (3 * (n - 1)) // 4) - rank(v, (n - 1) // 4)) / 1.349
        few = n < need_all[br0:br1]
        med[few] = np.nan
        spread[few] = np.nan
        median[br0:br1] = med
        sigma[br0:br1] = spread
    return BlockStats(median=median, sigma=sigma)


def _fill_nearest(grid: np.ndarray) -> np.ndarray:
    missing = np.isnan(grid)
    if not missing.any() or missing.all():
        return grid
    idx = ndimage.distance_transform_edt(missing, return_distances=False, return_indices=True)
    return grid[tuple(idx)]


def smooth_block_grid(median: np.ndarray, footprint: int) -> np.ndarray:
    """Empty blocks take the nearest filled block's value; then a ``footprint``-block median filter.

    Works on the whole (small) block grid; returns NaN everywhere when every block is empty.
    """
    return ndimage.median_filter(_fill_nearest(median), size=footprint, mode="nearest")


def noise_sigma(sigma: np.ndarray) -> float:
    """The survey's pixel noise, degC: the median of the blocks' robust spreads (0 if none)."""
    finite = sigma[np.isfinite(sigma)]
    return float(np.median(finite)) if finite.size else 0.0


def warm_cut(delta_c: float, sigma: float) -> float:
    """Pixels warmer than the background by more than this are left out of the next estimate."""
    return max(0.5 * delta_c, 3.0 * sigma)


def _interp_axis(start: int, n_out: int, n_in: int, block: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Bilinear weights from block centres to pixel centres ``start .. start + n_out - 1``."""
    u = (np.arange(start, start + n_out) + 0.5) / block - 0.5
    u = np.clip(u, 0.0, n_in - 1)
    i0 = np.floor(u).astype(np.intp)
    i1 = np.minimum(i0 + 1, n_in - 1)
    return i0, i1, (u - i0).astype(np.float32)


def upsample_window(grid: np.ndarray, block: int, *, shape: tuple[int, int], row0: int = 0,
                    col0: int = 0) -> np.ndarray:
    """Separable bilinear interpolation of block values (at block centres) to pixel centres.

    Parameters
    ----------
    grid
        The whole block grid, ``(block rows, block cols)``.
    block
        Block size, pixels.
    shape
        ``(rows, cols)`` of the window to fill.
    row0, col0
        The window's first pixel in the full grid. Every pixel gets the same value,
        bit for bit, whichever window it is computed in.

    Returns
    -------
    numpy.ndarray
        float32 ``shape``.
    """
    rows, cols = shape
    r0, r1, wr = _interp_axis(row0, rows, grid.shape[0], block)
    c0, c1, wc = _interp_axis(col0, cols, grid.shape[1], block)
    g = grid.astype(np.float32)
    by_row = g[r0] * (1 - wr)[:, None] + g[r1] * wr[:, None]  # (rows, block cols)
    out = np.empty(shape, dtype=np.float32)
    step = max(1, (1 << 22) // max(cols, 1))
    for s in range(0, rows, step):
        part = by_row[s:s + step]
        np.multiply(part[:, c0], 1 - wc, out=out[s:s + step])
        out[s:s + step] += part[:, c1] * wc
    return out


def dry_background(surface_c: np.ndarray, usable: np.ndarray, *, pixel_m: float, background_m: float,
                   delta_c: float, iterations: int = 3) -> np.ndarray:
    """Robust dry-background temperature at every pixel.

    Parameters
    ----------
    surface_c
        Surface temperature, degC, shape ``(rows, cols)``; NaN where unknown.
    usable
        Bool ``(rows, cols)``: pixels on the roof, outside exclusions, with data.
    pixel_m
        Pixel side, metres.
    background_m
        Scale of the background, metres (about the median footprint).
    delta_c
        The detection threshold, degC (sets the warm-outlier cut).
    iterations
        Estimate / exclude warm outliers / re-estimate, this many estimates in all.

    Returns
    -------
    numpy.ndarray
        float32 ``(rows, cols)`` background in degC; NaN everywhere when no pixel is usable.
    """
    usable = usable & np.isfinite(surface_c)
    if not usable.any():
        return np.full(surface_c.shape, np.nan, dtype=np.float32)
    spec = background_grid(pixel_m, background_m)
    keep = usable
    background = None
    cut = None
    for _ in range(max(1, iterations)):
        stats = block_statistics(surface_c, keep, spec.block_px)
        median = stats.median
        if np.isnan(median).all():
            if background is not None:
                break  # every block lost to outliers: keep the previous estimate
            # usable pixels too sparse for any block: one median for the whole roof
            median = np.full(median.shape, float(np.median(surface_c[keep])))
        if cut is None:  # the noise is measured once, on the first (all usable) pass
            cut = warm_cut(delta_c, noise_sigma(stats.sigma))
        background = upsample_window(smooth_block_grid(median, spec.footprint), spec.block_px,
                                     shape=surface_c.shape)
        keep = usable & ~(surface_c - background > cut)
    assert background is not None  # the first pass always sets it
    return background


def anomaly_mask(delta_c: np.ndarray, threshold_c: float, *, min_pixels: int) -> np.ndarray:
    """Apply the threshold: ``delta > threshold_c``, small regions dropped, small holes filled.

    NaN deltas (unusable pixels) are never anomalous.

    >>> d = np.zeros((6, 6)); d[1:4, 1:4] = 2.0; d[5, 5] = 3.0
    >>> int(anomaly_mask(d, 1.0, min_pixels=2).sum())
    9
    """
    with np.errstate(invalid="ignore"):
        mask = delta_c > threshold_c
    mask = remove_small_regions(mask, min_pixels=min_pixels)
    # a hole holding an excluded or unusable pixel (a drain, a curb, missing data) stays open
    return fill_small_holes(mask, max_pixels=min_pixels, fillable=np.isfinite(delta_c))


@dataclass(frozen=True)
class Detection:
    """Result of detection on the plan grid (all arrays ``(rows, cols)``)."""

    background_c: np.ndarray
    delta_c: np.ndarray
    """Surface minus background, degC, NaN where not usable."""
    mask: np.ndarray
    background_m: float
    threshold_c: float
    min_pixels: int


def detect_anomalies(surface_c: np.ndarray, usable: np.ndarray, *, pixel_m: float, delta_c: float,
                     background_m: float, min_area_m2: float) -> Detection:
    """Background, delta and cleaned anomaly mask.

    Parameters
    ----------
    surface_c
        Surface temperature, degC, ``(rows, cols)``.
    usable
        Pixels on the roof, outside exclusions, with data.
    pixel_m
        Pixel side, metres.
    delta_c
        Threshold above the dry background, degC.
    background_m
        Background scale, metres.
    min_area_m2
        Smallest anomaly kept, square metres (also the largest hole filled).
    """
    background = dry_background(surface_c, usable, pixel_m=pixel_m, background_m=background_m, delta_c=delta_c)
    delta = surface_c - background
    delta[~usable] = np.nan
    min_pixels = max(1, int(math.ceil(min_area_m2 / (pixel_m * pixel_m) - 1e-9)))
    mask = anomaly_mask(delta, delta_c, min_pixels=min_pixels)
    return Detection(background_c=background, delta_c=delta, mask=mask, background_m=background_m,
                     threshold_c=delta_c, min_pixels=min_pixels)
