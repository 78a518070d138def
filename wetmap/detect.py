"""Dry background per roof section, delta-T, threshold and clean-up on the plan grid.

The dry background must not need wet areas to be small: a roof whose wet share decides
between repair and replacement is exactly the roof with large wet areas. It is modelled
per roof section (each polygon of ``sections``, and the rest of the roof; the whole roof
when there are none), on a grid of square blocks of ``block_px`` pixels:

1. each block's median of the usable pixels *of each section* is taken (a block straddling
   a section boundary gets one median per section; a block with fewer than a quarter of its
   pixels usable in that section is left empty);
2. per section, :func:`fit_background` chooses and fits the model on the block grid:

   - *trend* (:func:`fit_trend`): a plane or quadric fitted knowing that wet only warms --
     robust low starts, blocks far above the surface trimmed as wet candidates, blocks
     below counting fully, the dry spread measured on the cold side, dry cores lowering the
     start, blocks at wet cores left out. A wet area of any size, touching the outline or
     not, stays out of its own background;
   - *local*: the block median filter of ``footprint`` blocks (about ``background_m``
     across; empty blocks take the nearest filled block of the section first). It follows
     a dry surface that is not smooth but takes a wet area of about its footprint for
     background;
   - ``"auto"``: the trend where the kept blocks lie within the larger of the pixel noise
     and ``SMOOTH_DELTA_FRACTION * threshold_c`` of it, else local; the reason is recorded;
3. :meth:`BackgroundModel.evaluate` gives every pixel its section's background (the
   polynomial at the pixel centre, or the block grid interpolated bilinearly from block
   centres to pixel centres);
4. pixels warmer than the background by more than ``max(threshold_c / 2, 3 sigma)`` (sigma:
   the pixel noise, the median over blocks of each block's interquartile range / 1.349,
   measured on the first pass) are left out and steps 1-3 are repeated (three estimates).

Steps 1 and 4 are per block, step 2 on the small block grid and step 3 per pixel from the
model, so the one detection engine (:mod:`wetmap.tiles`: one window for an array in
memory, :func:`wetmap.tiles.detect_array`; many for large mosaics) computes the block
statistics in windows that start at multiples of the block size and fits the model with
the functions of this module: the background is the same, bit for bit, whatever the
windows.

A smoothed (mean or Gaussian) background is pulled up by large warm areas and loses
detections; a full-resolution median filter metres wide costs thousands of seconds per
megapixel: block medians are both robust and cheap.

Thresholding is separate from computing the threshold: ``delta > threshold_c`` on usable
pixels, then regions smaller than the minimum area are dropped and holes up to it are
filled, unless a hole holds an unusable pixel (an excluded drain, missing data).
:func:`edge_flags` names the likely cause of anomalies that hug the roof edge or ring an
exclusion; :func:`large_share` says when anomalies fill a large share of a section.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

import numpy as np
import shapely
from scipy import ndimage

from .polygons import fill_small_holes, remove_small_regions

__all__ = [
    "BackgroundGrid",
    "background_grid",
    "default_background_m",
    "anomaly_mask",
    "Detection",
    "BACKGROUND_CHOICES",
    "TrendFit",
    "fit_trend",
    "block_centres",
    "SectionBackground",
    "BackgroundModel",
    "section_block_statistics",
    "fit_background",
    "core_blocks",
    "EDGE_BAND_M",
    "EDGE_FLAG",
    "UNIT_FLAG",
    "edge_flags",
    "large_share",
    "background_warnings",
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


def block_noise_sigma(sigma: np.ndarray) -> float:
    """The survey's pixel noise, degC: the median of the blocks' robust spreads (0 if none)."""
    finite = sigma[np.isfinite(sigma)]
    return float(np.median(finite)) if finite.size else 0.0


def warm_cut(threshold_c: float, sigma: float) -> float:
    """Pixels warmer than the background by more than this are left out of the next estimate."""
    return max(0.5 * threshold_c, 3.0 * sigma)


def interp_axis(start: int, n_out: int, n_in: int, block: int) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
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

    Each run of columns that shares its two block nodes is filled by one broadcast (no
    gather of columns); checked bit for bit against a per-pixel gather in tests/test_tiles.py.
    """
    rows, cols = shape
    r0, r1, wr = interp_axis(row0, rows, grid.shape[0], block)
    c0, c1, wc = interp_axis(col0, cols, grid.shape[1], block)
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


# --------------------------------------------------------------------------------------
# The dry background as a model: a robust trend or the local method, per roof section
# --------------------------------------------------------------------------------------

BackgroundChoice = Literal["auto", "trend", "local"]
BACKGROUND_CHOICES: tuple[str, ...] = ("auto", "trend", "local")

#: Quantile of the block medians the trend starts from (a robust low level): with up to
#: 80 % of a section's blocks wet, the 0.2-quantile surface still lies among the dry blocks.
TREND_START_QUANTILE = 0.2
#: Blocks on which the trend's starts are compared (an even subsample of larger sections).
TREND_START_BLOCKS = 20_000
#: Highest polynomial degree of the trend (2: a quadric; 6 coefficients).
TREND_MAX_DEGREE = 2
#: Fewest kept blocks for a plane and for a quadric (several blocks per coefficient).
TREND_MIN_BLOCKS: dict[int, int] = {1: 6, 2: 30}
#: A quadric replaces the plane only when it shrinks the kept blocks' spread by this factor.
TREND_DEGREE_GAIN = 0.8
#: Auto choice: the trend is used when the kept blocks lie within
#: ``max(pixel noise, SMOOTH_DELTA_FRACTION * threshold_c)`` (robust spread) of it.
SMOOTH_DELTA_FRACTION = 0.1
#: Normal-consistency factor of the median absolute deviation (1 / 0.6745).
MAD_TO_SIGMA = 1.4826
#: Smallest dry spread the block trimming assumes, degC (block medians of flat synthetic data).
MIN_BLOCK_SPREAD_C = 1e-3

#: Blocks colder than the section's median block by more than this, degC, are left out of
#: the trend fit: a dry surface varies by a few kelvin across a section and wet only warms
#: it, so a block this far below is no dry surface of the section (a sky reflection,
#: misplaced pixels of sky or ground, evaporating ponding). Without this rule a cluster of
#: uniform cold blocks would give the least-scattered plane and call the rest wet.
#: Common practice (no published value): far above the 1-3 K of a natural gradient.
COLD_OUTLIER_C = 8.0


@dataclass(frozen=True)
class TrendFit:
    """A polynomial dry surface in pixel coordinates, fitted to block medians.

    The surface is ``sum(c_k u^i v^j)`` with ``u = (col - centre_col) / scale_col`` and
    ``v = (row - centre_row) / scale_row`` (pixel coordinates, pixel ``(row, col)`` at its
    centre ``(row + 0.5, col + 0.5)``); terms in the order 1, u, v, u^2, uv, v^2.

    Attributes
    ----------
    degree
        1 (plane) or 2 (quadric).
    coefficients
        degC, one per term.
    centre_rc, scale_rc
        Normalisation of the pixel coordinates (rows, cols).
    spread_c
        Robust spread (MAD x 1.4826) of the kept blocks about the surface, degC.
    kept, blocks
        Blocks kept as dry, blocks with a median.
    cut_c
        Last warm cut of the block trimming, degC (blocks further above the surface are wet candidates).
    """

    degree: int
    coefficients: tuple[float, ...]
    centre_rc: tuple[float, float]
    scale_rc: tuple[float, float]
    spread_c: float
    kept: int
    blocks: int
    cut_c: float

    def at(self, rows_px: np.ndarray, cols_px: np.ndarray) -> np.ndarray:
        """The surface at pixel coordinates (broadcast), float64 degC."""
        v = (np.asarray(rows_px, dtype=np.float64) - self.centre_rc[0]) / self.scale_rc[0]
        u = (np.asarray(cols_px, dtype=np.float64) - self.centre_rc[1]) / self.scale_rc[1]
        c = self.coefficients
        out = c[0] + c[1] * u + c[2] * v
        if self.degree >= 2:
            out = out + c[3] * (u * u) + c[4] * (u * v) + c[5] * (v * v)
        return out


def _design(u: np.ndarray, v: np.ndarray, degree: int) -> np.ndarray:
    cols = [np.ones_like(u), u, v]
    if degree >= 2:
        cols += [u * u, u * v, v * v]
    return np.stack(cols, axis=1)


def _lstsq(x: np.ndarray, y: np.ndarray, w: np.ndarray | None = None) -> np.ndarray:
    """(Weighted) least squares by the normal equations (a few well-scaled columns: the
    coordinates are normalised to [-1, 1]); SVD when they are singular."""
    xw = x if w is None else x * w[:, None]
    try:
        return np.linalg.solve(xw.T @ x, xw.T @ y)
    except np.linalg.LinAlgError:
        if w is not None:
            sw = np.sqrt(w)
            x, y = x * sw[:, None], y * sw
        return np.linalg.lstsq(x, y, rcond=None)[0]


def _quantile_start(x: np.ndarray, y: np.ndarray, tau: float, iterations: int = 60) -> np.ndarray:
    """Linear quantile regression by iteratively reweighted least squares (a robust low start)."""
    beta = _lstsq(x, y)
    eps = 1e-4 * max(float(np.ptp(y)), 1e-3)
    for _ in range(iterations):
        r = y - x @ beta
        w = np.where(r > 0, tau, 1.0 - tau) / np.maximum(np.abs(r), eps)
        new = _lstsq(x, y, w)
        if np.allclose(new, beta, rtol=0, atol=1e-7):
            beta = new
            break
        beta = new
    return beta


def fit_trend(values_c: np.ndarray, rows_px: np.ndarray, cols_px: np.ndarray, *, threshold_c: float,
              wet: np.ndarray | None = None, dry: np.ndarray | None = None,
              max_degree: int = TREND_MAX_DEGREE, iterations: int = 40) -> TrendFit | None:
    """Fit a dry surface to block medians, knowing that wet only warms.

    0. blocks more than ``COLD_OUTLIER_C`` below the median block are left out (sky
       reflections or misplaced pixels, not the dry surface);
    1. robust low starts: the ``TREND_START_QUANTILE`` plane of the blocks (quantile
       regression), so a section 45 % wet does not pull the start up; a level at half that
       quantile; and the plane of each half, outer third and quadrant of the section (a wet
       bay filling one side leaves the other side's plane as a start). Where dry cores are given and their blocks lie
       below a start, the start is lowered to them (a dry core anchors the level; a dry core
       on a warm patch of another cause never raises it);
    2. asymmetric trimming: the dry spread ``s`` is measured on the cold side
       (MAD x 1.4826 of the blocks below the surface); blocks more than
       ``min(3 s, threshold_c / 2)`` above the surface are wet candidates and left out, blocks
       below count fully; least squares on the kept blocks; repeated until the kept set
       stops changing;
    3. of the planes the starts converge to, the one whose kept blocks scatter least (wet
       blocks kept by a wrong start widen the scatter; since blocks below always count, no
       start can settle on the wet blocks alone);
    4. a quadric (degree 2) is fitted the same way from the plane's kept set and used when
       there are enough blocks and it shrinks the kept blocks' spread by ``TREND_DEGREE_GAIN``.

    Parameters
    ----------
    values_c
        Block medians, degC, ``(n,)`` (finite).
    rows_px, cols_px
        Centres of those blocks in pixel coordinates, ``(n,)``.
    threshold_c
        The detection threshold, degC (caps the warm cut at half of it).
    wet, dry
        Bool ``(n,)``: blocks holding a wet core (left out) / a dry core (anchor the start).
    max_degree
        1 or 2.

    Returns
    -------
    TrendFit or None
        ``None`` when fewer than ``TREND_MIN_BLOCKS[1]`` blocks are usable.
    """
    y = np.asarray(values_c, dtype=np.float64)
    n = y.size
    wet = np.zeros(n, bool) if wet is None else np.asarray(wet, bool)
    dry = np.zeros(n, bool) if dry is None else np.asarray(dry, bool) & ~wet
    usable = ~wet
    if usable.any():  # cold outliers are no dry surface of the section (COLD_OUTLIER_C)
        usable &= y >= float(np.median(y[usable])) - COLD_OUTLIER_C
    if usable.sum() < TREND_MIN_BLOCKS[1]:
        return None
    rows_px = np.asarray(rows_px, dtype=np.float64)
    cols_px = np.asarray(cols_px, dtype=np.float64)
    r_lo, r_hi = float(rows_px[usable].min()), float(rows_px[usable].max())
    c_lo, c_hi = float(cols_px[usable].min()), float(cols_px[usable].max())
    centre = (0.5 * (r_lo + r_hi), 0.5 * (c_lo + c_hi))
    scale = (max(0.5 * (r_hi - r_lo), 1.0), max(0.5 * (c_hi - c_lo), 1.0))
    v = (rows_px - centre[0]) / scale[0]
    u = (cols_px - centre[1]) / scale[1]
    cap = 0.5 * threshold_c

    def trim(degree: int, fitted: np.ndarray, among: np.ndarray) -> tuple[np.ndarray, np.ndarray, float]:
        """Asymmetric trimming from ``fitted`` (values at every block) over the blocks ``among``."""
        idx = np.flatnonzero(among)
        x = _design(u[idx], v[idx], degree)
        yy = y[idx]
        f = fitted[idx]
        keep = None
        cut = cap
        beta = None
        for _ in range(iterations):
            r = yy - f
            cold = -r[r <= 0]
            s = max(MAD_TO_SIGMA * float(np.median(cold)) if cold.size else 0.0, MIN_BLOCK_SPREAD_C)
            cut = min(3.0 * s, cap)
            new = r <= cut
            if new.sum() < x.shape[1]:
                break
            if keep is not None and np.array_equal(new, keep):
                break
            keep = new
            beta = _lstsq(x[keep], yy[keep])
            f = x @ beta
        if beta is None:
            keep = yy - f <= cut
            beta = (_lstsq(x[keep], yy[keep]) if keep.sum() >= x.shape[1]
                    else np.r_[np.median(yy), np.zeros(x.shape[1] - 1)])
        full = np.zeros(n, bool)
        full[idx[keep]] = True
        return beta, full, cut

    def spread(degree: int, b: np.ndarray, k: np.ndarray) -> float:
        r = y[k] - _design(u[k], v[k], degree) @ b
        return MAD_TO_SIGMA * float(np.median(np.abs(r))) if r.size else math.inf

    x1 = _design(u, v, 1)
    # the starts are compared on an even subsample of at most TREND_START_BLOCKS blocks
    # (deterministic: both engines see the same blocks); the chosen one is refined on all
    step = max(1, -(-n // TREND_START_BLOCKS))
    sub = np.zeros(n, bool)
    sub[::step] = True
    fit_on = usable & sub
    if fit_on.sum() < TREND_MIN_BLOCKS[1]:
        fit_on = usable
    starts = [_quantile_start(x1[fit_on], y[fit_on], TREND_START_QUANTILE),
              np.r_[np.quantile(y[fit_on], 0.5 * TREND_START_QUANTILE), 0.0, 0.0]]
    # a wet bay filling one side: the plane of the other side (halves, outer thirds, quadrants)
    parts = [u < 0, u > 0, v < 0, v > 0, u < -1 / 3, u > 1 / 3, v < -1 / 3, v > 1 / 3,
             (u < 0) & (v < 0), (u < 0) & (v > 0), (u > 0) & (v < 0), (u > 0) & (v > 0)]
    for half in parts:
        part = fit_on & half
        if part.sum() >= TREND_MIN_BLOCKS[1]:
            starts.append(_lstsq(x1[part], y[part]))
    best = None
    for start in starts:
        f0 = x1 @ start
        if dry.any():
            shift = float(np.median(y[dry] - f0[dry]))
            if shift < 0:
                f0 = f0 + shift
        beta, keep, cut = trim(1, f0, fit_on)
        score = (spread(1, beta, keep), -int(keep.sum()))
        if best is None or score < best[0]:
            best = (score, beta)
    beta, keep, cut = trim(1, x1 @ best[1], usable)
    best = (1, beta, keep, cut)

    s1 = spread(1, beta, keep)
    if max_degree >= 2 and keep.sum() >= TREND_MIN_BLOCKS[2]:
        beta2, keep2, cut2 = trim(2, x1 @ beta, usable)
        if len(beta2) == 6 and keep2.sum() >= TREND_MIN_BLOCKS[2]:
            s2 = spread(2, beta2, keep2)
            if s2 < TREND_DEGREE_GAIN * s1:
                best = (2, beta2, keep2, cut2)
    degree, beta, keep, cut = best
    return TrendFit(degree=degree, coefficients=tuple(float(b) for b in beta), centre_rc=centre, scale_rc=scale,
                    spread_c=spread(degree, beta, keep), kept=int(keep.sum()), blocks=int(usable.sum()),
                    cut_c=float(cut))


def block_centres(shape: tuple[int, int], block: int) -> tuple[np.ndarray, np.ndarray]:
    """Centres of the blocks of a grid in pixel coordinates: ``(rows (block rows,), cols (block cols,))``.

    A partial last block is centred on its in-grid part.

    >>> block_centres((10, 4), 4)
    (array([2., 6., 9.]), array([2.]))
    """
    def axis(n: int) -> np.ndarray:
        starts = np.arange(0, n, block, dtype=np.float64)
        return starts + 0.5 * np.minimum(block, n - starts)

    return axis(shape[0]), axis(shape[1])


@dataclass(frozen=True)
class SectionBackground:
    """The dry background of one roof section (or of the whole roof when there are no sections).

    Attributes
    ----------
    label
        The section's value in the section label raster.
    name
        The section's name.
    method
        ``"trend"`` (a robust polynomial surface), ``"local"`` (the block median filter),
        ``"median"`` (one level: too few pixels for blocks) or ``"none"`` (no usable pixel).
    reason
        Why, in one sentence.
    trend
        The fitted trend (also kept, for the record, when the local method was chosen).
    local_grid
        The smoothed block grid of the local method, ``(block rows, block cols)``; else ``None``.
    level_c
        The single level of ``"median"``, degC.
    """

    label: int
    name: str
    method: Literal["trend", "local", "median", "none"]
    reason: str
    trend: TrendFit | None = None
    local_grid: np.ndarray | None = None
    level_c: float = math.nan
    smooth_limit_c: float = math.nan
    """The spread up to which the dry surface counts as smooth (the ``"auto"`` rule), degC."""

    def as_dict(self) -> dict:
        """``summary.json`` ``background`` entry."""
        out: dict = {"section": self.name, "method": self.method, "reason": self.reason}
        if self.trend is not None:
            t = self.trend
            out.update(degree=t.degree if self.method == "trend" else None,
                       trend_spread_c=round(t.spread_c, 4), smooth_limit_c=round(self.smooth_limit_c, 4),
                       kept_blocks=t.kept, blocks=t.blocks)
        if self.method == "median":
            out["level_c"] = round(self.level_c, 4)
        return out


@dataclass(frozen=True)
class BackgroundModel:
    """The dry background of every section, evaluated per pixel by both engines.

    Attributes
    ----------
    block_px
        Block size of the block grid, pixels.
    sections
        One :class:`SectionBackground` per label ``0 .. n - 1``.
    noise_c
        The pixel noise measured on the first estimate, degC.
    choice
        ``[detect] background``.
    """

    block_px: int
    sections: tuple[SectionBackground, ...]
    noise_c: float
    choice: str = "auto"

    def evaluate(self, labels: np.ndarray | None, *, shape: tuple[int, int] | None = None, row0: int = 0,
                 col0: int = 0) -> np.ndarray:
        """Background at every pixel of a window, float32 degC (NaN for a section with no data).

        Parameters
        ----------
        labels
            Section label of each pixel of the window (int), or ``None``: every pixel in section 0.
        shape
            ``(rows, cols)`` of the window when ``labels`` is ``None``.
        row0, col0
            The window's first pixel in the whole grid: a pixel gets the same value, bit for bit,
            in every window.
        """
        rows, cols = labels.shape if labels is not None else shape
        out = np.full((rows, cols), np.nan, dtype=np.float32)
        present = (np.unique(labels) if labels is not None else np.array([0]))
        step = max(1, (1 << 20) // max(cols, 1))
        col_c = np.arange(col0, col0 + cols, dtype=np.float64) + 0.5
        for s in range(0, rows, step):
            n = min(step, rows - s)
            lab = None if labels is None else labels[s:s + n]
            row_c = np.arange(row0 + s, row0 + s + n, dtype=np.float64) + 0.5
            for g in present:
                if g < 0 or g >= len(self.sections):
                    continue
                sec = self.sections[int(g)]
                if sec.method == "none":
                    continue
                if sec.method == "trend":
                    values = sec.trend.at(row_c[:, None], col_c[None, :]).astype(np.float32)
                elif sec.method == "local":
                    values = upsample_window(sec.local_grid, self.block_px, shape=(n, cols), row0=row0 + s, col0=col0)
                else:
                    values = np.full((n, cols), sec.level_c, dtype=np.float32)
                if lab is None:
                    out[s:s + n] = values
                else:
                    sel = lab == g
                    out[s:s + n][sel] = values[sel]
        return out

    def as_dicts(self) -> list[dict]:
        return [s.as_dict() for s in self.sections]


def section_block_statistics(values: np.ndarray, usable: np.ndarray, labels: np.ndarray | None, count: int,
                             block: int) -> tuple[np.ndarray, np.ndarray]:
    """:func:`block_statistics` per section: ``(median, sigma)``, each ``(count, block rows, block cols)``.

    A block straddling a section boundary gets one median per section, each from that
    section's pixels only (a quarter of the block's pixels usable in that section).
    """
    rows, cols = values.shape
    nr, nc = -(-rows // block), -(-cols // block)
    median = np.full((count, nr, nc), np.nan)
    sigma = np.full((count, nr, nc), np.nan)
    for g in range(count):
        use = usable if labels is None else usable & (labels == g)
        rows_any = np.flatnonzero(use.any(axis=1))
        if not rows_any.size:
            continue
        cols_any = np.flatnonzero(use.any(axis=0))
        # only the blocks around the section's pixels (whole blocks: the same statistics)
        b0, b1 = rows_any[0] // block, rows_any[-1] // block + 1
        c0, c1 = cols_any[0] // block, cols_any[-1] // block + 1
        part = (slice(b0 * block, b1 * block), slice(c0 * block, c1 * block))
        st = block_statistics(values[part], use[part], block)
        median[g, b0:b1, c0:c1], sigma[g, b0:b1, c0:c1] = st.median, st.sigma
    return median, sigma


def fit_background(median: np.ndarray, *, block_px: int, grid_shape: tuple[int, int], footprint: int,
                   threshold_c: float, noise_c: float, names: tuple[str, ...], choice: str = "auto",
                   fallback_c: np.ndarray | None = None, previous: BackgroundModel | None = None,
                   wet_blocks: np.ndarray | None = None, dry_blocks: np.ndarray | None = None) -> BackgroundModel:
    """The background model of every section from its block medians (pure, on the block grid).

    Parameters
    ----------
    median
        Block medians per section, degC, ``(sections, block rows, block cols)``.
    block_px, grid_shape
        Block size and the whole grid's ``(rows, cols)`` (block centres in pixel coordinates).
    footprint
        Median-filter footprint of the local method, blocks (odd).
    threshold_c
        Detection threshold, degC.
    noise_c
        Pixel noise, degC (:func:`block_noise_sigma` of the first estimate).
    names
        Section names, one per label.
    choice
        ``"auto"``: per section, the trend when its kept blocks lie within
        ``max(noise_c, SMOOTH_DELTA_FRACTION * threshold_c)`` of it, else the local method;
        ``"trend"`` / ``"local"``: that method for every section.
    fallback_c
        Per section, the median of its usable pixels, degC (used when no block has a median;
        NaN: no usable pixel). ``None``: not needed (every section has a block).
    previous
        The previous estimate (a section that lost every block keeps its previous background).
    wet_blocks, dry_blocks
        Bool ``(sections, block rows, block cols)``: blocks holding a wet core (left out of
        the trend) or a dry core (anchoring its start).
    """
    rows_px, cols_px = block_centres(grid_shape, block_px)
    out: list[SectionBackground] = []
    limit = max(noise_c, SMOOTH_DELTA_FRACTION * threshold_c)
    for g, name in enumerate(names):
        m = median[g]
        finite = np.isfinite(m)
        if not finite.any():
            if previous is not None and previous.sections[g].method != "none":
                out.append(previous.sections[g])
                continue
            level = math.nan if fallback_c is None else float(fallback_c[g])
            if math.isfinite(level):
                out.append(SectionBackground(g, name, "median", "too few usable pixels for any block: one median "
                                             "of the section's pixels", level_c=level))
            else:
                out.append(SectionBackground(g, name, "none", "no usable pixel"))
            continue
        br, bc = np.nonzero(finite)
        wet = None if wet_blocks is None else wet_blocks[g][finite]
        dry = None if dry_blocks is None else dry_blocks[g][finite]
        trend = None
        if choice != "local":
            trend = fit_trend(m[finite], rows_px[br], cols_px[bc], threshold_c=threshold_c, wet=wet, dry=dry)
        if choice == "local":
            method, reason = "local", '[detect] background = "local"'
        elif trend is None:
            method, reason = "local", (f"too few blocks for a trend ({int(finite.sum())}, at least "
                                       f"{TREND_MIN_BLOCKS[1]} needed): local block median")
        elif choice == "trend":
            method, reason = "trend", f'[detect] background = "trend" (degree {trend.degree})'
        elif trend.spread_c <= limit:
            method = "trend"
            reason = (f"smooth: the dry blocks lie within {trend.spread_c:.3f} °C of a degree-{trend.degree} "
                      f"surface (limit {limit:.3f} °C: the larger of the pixel noise and "
                      f"{SMOOTH_DELTA_FRACTION:g} x delta-T)")
        else:
            method = "local"
            reason = (f"not smooth: the dry blocks scatter {trend.spread_c:.3f} °C about the best "
                      f"degree-{trend.degree} surface (limit {limit:.3f} °C): local block median over "
                      f"{footprint} blocks; wet areas about that size or larger may be under-found")
        local = smooth_block_grid(m, footprint) if method == "local" else None
        out.append(SectionBackground(g, name, method, reason, trend=trend, local_grid=local, smooth_limit_c=limit))
    return BackgroundModel(block_px=block_px, sections=tuple(out), noise_c=noise_c, choice=choice)


def core_blocks(rows_px: np.ndarray, cols_px: np.ndarray, labels_at: np.ndarray, wet: np.ndarray, *, count: int,
                block: int, block_shape: tuple[int, int], wet_radius_blocks: int = 1) -> tuple[np.ndarray, np.ndarray]:
    """Blocks holding confirmations: ``(wet_blocks, dry_blocks)``, each ``(count, block rows, block cols)``.

    A wet core marks its block and the ``wet_radius_blocks`` around it (left out of the trend);
    a dry core marks its block. ``rows_px, cols_px`` are pixel indices, ``labels_at`` the
    section label there (-1: off the roof, ignored).
    """
    wet_b = np.zeros((count, *block_shape), bool)
    dry_b = np.zeros((count, *block_shape), bool)
    for r, c, g, w in zip(rows_px, cols_px, labels_at, wet):
        br, bc = int(r) // block, int(c) // block
        if not (0 <= g < count and 0 <= br < block_shape[0] and 0 <= bc < block_shape[1]):
            continue
        if w:
            k = wet_radius_blocks
            wet_b[g, max(br - k, 0):br + k + 1, max(bc - k, 0):bc + k + 1] = True
        else:
            dry_b[g, br, bc] = True
    return wet_b, dry_b


def section_medians(values: np.ndarray, usable: np.ndarray, labels: np.ndarray | None, count: int) -> np.ndarray:
    """Median of the usable pixels of each section, degC, ``(count,)`` (NaN: none usable)."""
    out = np.full(count, np.nan)
    for g in range(count):
        use = usable if labels is None else usable & (labels == g)
        if use.any():
            out[g] = float(np.median(values[use]))
    return out


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
    background: BackgroundModel | None = None
    """The dry-background model per section (method, reason, trend)."""


# --------------------------------------------------------------------------------------
# Anomalies that hug the roof edge or ring a rooftop unit; large wet share
# --------------------------------------------------------------------------------------

#: Width of the band along the outline and around exclusions in which an anomaly is looked
#: at as a likely edge or unit effect, metres (common practice: parapet and curb flashing,
#: ballast against a parapet and heat from a unit warm a band of about a metre).
EDGE_BAND_M = 1.5
#: Share of an anomaly's area inside that band for the flag.
EDGE_BAND_SHARE = 0.8
#: Elongation (perimeter^2 / (4 pi area); 1 for a disc, 1.27 for a square) above which an
#: anomaly counts as a band or a ring rather than a patch.
EDGE_MIN_ELONGATION = 3.0
EDGE_FLAG = "edge band"
UNIT_FLAG = "next to a rooftop unit"


def edge_flags(polygons, *, outline, exclusions, band_m: float = EDGE_BAND_M,
               share: float = EDGE_BAND_SHARE) -> list[tuple[str, ...]]:
    """Flags naming the likely cause of anomalies that hug the roof edge or ring an exclusion.

    An anomaly is a narrow band (mean width ``2 area / perimeter`` at most ``band_m``, and
    elongated: ``perimeter^2 / (4 pi area) >= EDGE_MIN_ELONGATION``) with at least ``share``
    of its area within ``band_m`` of the outline's edge (``"edge band"``) or of an exclusion
    (``"next to a rooftop unit"``).

    Parameters
    ----------
    polygons
        Anomaly polygons, plan coordinates.
    outline, exclusions
        The plan outline and the union of the exclusions (may be empty).
    band_m
        Band width, metres.
    share
        Share of the area in the band.

    Returns
    -------
    list of tuple of str
        One tuple of flags per polygon (empty when none applies).

    >>> import shapely
    >>> roof = shapely.box(0, 0, 50, 30)
    >>> edge_flags([shapely.box(0, 29, 50, 30), shapely.box(10, 10, 20, 20)], outline=roof,
    ...            exclusions=shapely.Polygon())
    [('edge band',), ()]
    """
    polys = np.asarray(list(polygons), dtype=object)
    out: list[tuple[str, ...]] = [() for _ in range(len(polys))]
    if not len(polys):
        return out
    area = shapely.area(polys)
    perimeter = shapely.length(polys)
    with np.errstate(divide="ignore", invalid="ignore"):
        narrow = (2.0 * area / perimeter <= band_m) & (perimeter ** 2 / (4.0 * math.pi * area) >= EDGE_MIN_ELONGATION)
    if not narrow.any():
        return out
    inner = outline.buffer(-band_m, join_style="mitre")
    near_edge = area - shapely.area(shapely.difference(polys, inner)) <= (1.0 - share) * area
    if exclusions is not None and not exclusions.is_empty:
        ring = exclusions.buffer(band_m, join_style="mitre")
        near_unit = shapely.area(shapely.intersection(polys, ring)) >= share * area
    else:
        near_unit = np.zeros(len(polys), bool)
    for i in np.flatnonzero(narrow):
        out[i] = tuple(f for f, on in ((EDGE_FLAG, near_edge[i]), (UNIT_FLAG, near_unit[i])) if on)
    return out


def large_share(wet_fraction: float, *, above_pct: float) -> bool:
    """True when anomalies fill more than ``above_pct`` percent of a section.

    >>> large_share(0.38, above_pct=25.0), large_share(0.2, above_pct=25.0)
    (True, False)
    """
    return 100.0 * wet_fraction > above_pct


def background_warnings(model: BackgroundModel, *, background_m: float, kind: str = "roof") -> list[str]:
    """Plain warnings about the background of each section: a trend forced on a surface that is
    not smooth, or (roofs) the local method chosen, which can under-find large wet areas."""
    out = []
    for sec in model.sections:
        t = sec.trend
        if sec.method == "trend" and t is not None and t.spread_c > sec.smooth_limit_c:
            out.append(f"section {sec.name}: [detect] background = \"trend\" but the dry blocks scatter "
                       f"{t.spread_c:.2f} °C about it (smooth up to {sec.smooth_limit_c:.2f} °C): the background is off "
                       'by about that much in places; consider background = "auto"')
        elif sec.method == "local" and model.choice == "auto" and kind == "roof":
            out.append(f"section {sec.name}: the dry surface is not smooth, so the local background "
                       f"({background_m:g} m) was used: wet areas about that size or larger may be under-found; "
                       "core the middle of any large warm area")
    return out
