"""Can the imagery carry the survey's conclusions? Resolution, focus, reflections, display range.

Four checks a thermographer makes before trusting a picture, made for every run. The
functions here take arrays, affine transforms, 3 x 3 homographies and shapely
geometries and return numbers, arrays and frozen dataclasses; :func:`assess_imagery`
gathers them for :func:`wetmap.pipeline.process_survey`, which passes it what it placed
on the plan grid. The one exception to "arrays in, arrays out" is
:func:`mosaic_tile_sharpness`, which reads a mosaic's own pixels in windows.

Resolution (ground sampling distance, GSD)
------------------------------------------
- A mosaic: from its affine transform. The footprint of one pixel is the parallelogram
  spanned by the column axis ``(a, d)`` and the row axis ``(b, e)``; its area is
  ``|det|`` and the GSD is ``|det| ** 0.5``; both axis lengths are reported
  (:func:`mosaic_gsd_m`).
- A frame: from the fitted homography (image ``(col, row)`` -> plan ``(x, y)``). The
  footprint of an image pixel changes across an oblique frame; its range over the part
  of the frame that lands on the plan is reported (:func:`frame_gsd_range_m`), with the
  longest footprint side.
- From the optics, when ``[camera] ifov_mrad`` (the instantaneous field of view of one
  detector element, milliradians) and ``distance_m`` are given: ``IFOV x distance`` for a
  square-on view (:func:`optics_gsd_m`; small-angle geometry). A mosaic exported at a
  finer pixel than its camera resolves is upsampled: the coarser of the two counts.
- Reliability (:func:`pixels_across`, :func:`smallest_reliable_area_m2`): a feature is
  measured reliably when it spans at least ``min_pixels_across`` pixels (default 3, that
  is 3 x 3 pixels; common practice: smaller features mix with their surroundings in
  the camera's spot size, read too cool and have uncertain outlines) across its
  smallest width. The width of an anomaly polygon is the smaller of its minimum rotated
  rectangle's short side and twice its largest inscribed circle's radius
  (:func:`feature_width_m`). The pixel counted is the imagery's (the footprint's long
  side for frames; the optics' when coarser), never finer than the plan grid's.

Focus (:func:`sharpness`)
-------------------------
A no-reference sharpness index in ``[0, 1]``: the share of the image's gradient energy
that lives at the finest scale. With ``E_fine`` the mean squared forward difference of
the image (both axes) and ``E_coarse`` the same after a Gaussian of
:data:`COARSE_SIGMA_PX` pixels, ``sharpness = 1 - E_coarse / E_fine``. A sharp step
loses most of its gradient energy to the smoothing (index near 1); a blurred one has
little to lose (index near 0). Camera noise would look like fine detail, so the noise
is estimated robustly and its expected share is taken out of both energies: the noise
standard deviation from the median absolute response to Immerkær's mask
``[[1, -2, 1], [-2, 4, -2], [1, -2, 1]]`` (the mask of J. Immerkær, "Fast noise variance
estimation", Computer Vision and Image Understanding 64(2), 1996; the median instead of
the mean so edges do not count as noise: common practice), and for white noise of
standard deviation ``s`` a forward difference has variance ``2 s**2`` per axis. The
index does not depend on the contrast or the temperature scale of the scene, so frames
of one survey compare with each other; a noisier frame is not called sharper.

Frames are compared with the median of the *other* frames of the survey; mosaic tiles
(:data:`FOCUS_TILE_PX` pixels of the mosaic's own raster) with the median tile of the
survey's mosaics. An image with too little structure to judge (the smoothed image's
gradient energy below :data:`MIN_DETAIL` times the noise's) gets no index. One is
flagged when its index is below ``focus_ratio`` (default 0.5) times that median:
likely out of focus or moved. Blur spreads the heat of a small warm area over its
surroundings: its temperatures read low and small anomalies shrink or vanish. A flagged
frame is used in the blend only where no sharper frame covers the ground
(``exclude_blurred``, default on; :func:`wetmap.register.blend_frames` ``fallback``).

Reflections
-----------
- Where frames overlap (:func:`view_deltas`, :func:`multi_view_reflections`): each
  frame's own resampled surface temperature minus the run's dry background is averaged
  over each anomaly's pixels, for every frame that covers at least ``min_cover`` (0.8)
  of them (blurred frames are left out of the comparison). A real wet area is warm from
  every viewpoint; a reflection of something warm appears from one viewpoint and not
  from another, or moves. An anomaly is a *reflection suspect* when its weakest view's
  mean delta-T is below ``reflection_ratio`` (default 0.5) times its strongest's (and
  the strongest is above the threshold), or when the warm pixels' centroid moves
  between views by more than half the anomaly's width (and 3 plan pixels).
- On a mosaic (one viewpoint per spot): warm patches on surfaces declared specular are
  suspects: a section whose ``assembly`` names a metal, glass or glazing, a
  thermoplastic single-ply (TPO, PVC) or a reflective coating as its surface (the words
  before the first ``on``/``over``/comma; EPDM is not counted), or the plan layer
  ``[plan] specular``; at least half the anomaly's area must lie on them
  (:func:`specular_words`). An anomaly that two or more views agree on is not flagged by
  this rule.
Suspects keep their polygons and statuses; they get the flag ``reflection suspect``.

Display range (:func:`roof_display_range`)
------------------------------------------
Colour ranges come from the roof alone (pixels inside the outline, outside the
exclusions, with data): the ``low_pct``-``high_pct`` percentiles (default 1-99) of the
surface temperature, centred on the median of the dry background over the roof (the
half-width is the larger distance from the centre to either percentile). A hot rooftop
unit or the ground around the building never stretches the scale. Delta-T is centred
on 0 (the dry background) with a half-width of at least twice the threshold.

Examples
--------
>>> from affine import Affine
>>> mosaic_gsd_m(Affine(0.05, 0.0, 500.0, 0.0, -0.05, 900.0)).gsd_m
0.05
>>> round(optics_gsd_m(1.1, 30.0), 4)   # 1.1 mrad at 30 m
0.033
>>> round(smallest_reliable_area_m2(0.1, pixels_across=3), 6)
0.09
"""

from __future__ import annotations

import math
import re
import warnings
from collections.abc import Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import shapely
from shapely.geometry.base import BaseGeometry
from shapely.ops import polylabel

from .rasters import GDAL_CACHE_BYTES, inspect_raster
from .register import ground_sampling_m, lattice, project, usable_view
from .style import DISPLAY_PCT, DisplayRange, delta_display_range, finite_sample, roof_display_range
from .wording import wording_of

if TYPE_CHECKING:
    from affine import Affine

    from .detect import Detection
    from .survey import Survey

__all__ = [
    "PixelSize",
    "GsdRange",
    "Sharpness",
    "TileSharpness",
    "FrameView",
    "ViewDelta",
    "ReflectionSuspect",
    "DisplayRange",
    "SourceQuality",
    "ImageryReport",
    "mosaic_gsd_m",
    "frame_gsd_range_m",
    "optics_gsd_m",
    "feature_width_m",
    "pixels_across",
    "smallest_reliable_area_m2",
    "image_noise_sigma",
    "sharpness",
    "tile_sharpness",
    "mosaic_tile_sharpness",
    "flag_blurred",
    "view_deltas",
    "multi_view_reflections",
    "specular_words",
    "roof_display_range",
    "delta_display_range",
    "assess_imagery",
    "frame_views",
    "MIN_PIXELS_ACROSS",
    "FOCUS_RATIO",
    "REFLECTION_RATIO",
    "MIN_VIEW_COVER",
    "COARSE_SIGMA_PX",
    "FOCUS_TILE_PX",
    "MIN_DETAIL",
    "DISPLAY_PCT",
    "REFLECTION_FLAG",
    "UNDER_RESOLVED_FLAG",
]

#: Pixels a feature must span across its smallest width to be measured reliably
#: (common practice: 3 x 3 pixels; ``[limits] min_pixels_across``).
MIN_PIXELS_ACROSS = 3.0
#: A frame or mosaic tile is flagged as blurred below this fraction of the survey's median
#: sharpness (our own choice; ``[limits] focus_ratio``).
FOCUS_RATIO = 0.5
#: An anomaly is a reflection suspect when its weakest view's mean delta-T is below this
#: fraction of its strongest view's (our own choice; ``[limits] reflection_ratio``).
REFLECTION_RATIO = 0.5
#: A frame takes part in the view comparison of an anomaly when it covers at least this
#: share of the anomaly's pixels.
MIN_VIEW_COVER = 0.8
#: Gaussian sigma of the coarse scale of the sharpness index, pixels.
COARSE_SIGMA_PX = 2.0
#: Side of the mosaic tiles whose sharpness is compared, pixels of the mosaic's raster.
FOCUS_TILE_PX = 128
#: At most this many mosaic tiles are read per mosaic (a regular subset beyond it).
MAX_TILES = 400
#: An image is judged only when the smoothed image's gradient energy is at least this
#: multiple of the noise's gradient energy (``4 s**2``).
MIN_DETAIL = 0.05
#: Smallest noise standard deviation assumed, in the image's temperature units (degrees):
#: keeps the detail test meaningful on noiseless synthetic images.
NOISE_FLOOR = 0.01
#: The flag an anomaly gets when it may be a reflection.
REFLECTION_FLAG = "reflection suspect"
#: The flag an anomaly gets when it spans fewer pixels than a reliable measurement needs.
UNDER_RESOLVED_FLAG = "under-resolved"
_KELVIN = 273.15


# --------------------------------------------------------------------------------------
# Resolution
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class PixelSize:
    """The footprint of one mosaic pixel on the plan.

    Attributes
    ----------
    gsd_m
        ``|det| ** 0.5``: the side of a square of the same area, metres.
    x_m, y_m
        Lengths of the column axis ``(a, d)`` and the row axis ``(b, e)``, metres.
    """

    gsd_m: float
    x_m: float
    y_m: float

    @property
    def coarse_m(self) -> float:
        """The longer axis, metres."""
        return max(self.x_m, self.y_m)


def mosaic_gsd_m(transform: "Affine") -> PixelSize:
    """Ground sampling distance of a raster from its affine transform.

    Parameters
    ----------
    transform
        Pixel corner ``(col, row)`` -> plan ``(x, y)``, metres.

    Returns
    -------
    PixelSize

    Examples
    --------
    A 0.1 m north-up grid, and one rotated by 30° with 0.2 x 0.1 m pixels
    (``|det| = 0.02 m2``, GSD ``0.02 ** 0.5 = 0.1414 m``):

    >>> from affine import Affine
    >>> mosaic_gsd_m(Affine(0.1, 0.0, 0.0, 0.0, -0.1, 0.0))
    PixelSize(gsd_m=0.1, x_m=0.1, y_m=0.1)
    >>> t = Affine.rotation(30) @ Affine.scale(0.2, -0.1)
    >>> p = mosaic_gsd_m(t)
    >>> round(p.gsd_m, 4), round(p.x_m, 4), round(p.y_m, 4)
    (0.1414, 0.2, 0.1)
    """
    a, b, _, d, e, _ = tuple(transform)[:6]
    det = abs(a * e - b * d)
    return PixelSize(gsd_m=float(math.sqrt(det)), x_m=float(math.hypot(a, d)), y_m=float(math.hypot(b, e)))


@dataclass(frozen=True)
class GsdRange:
    """Ground sampling distance across a frame (metres per image pixel).

    Attributes
    ----------
    gsd_m
        Median of ``sqrt(fine * coarse)`` (the square root of the Jacobian determinant).
    low_m, high_m
        Smallest and largest ``sqrt(fine * coarse)``.
    coarse_max_m
        The longest footprint side anywhere on the part used.
    """

    gsd_m: float
    low_m: float
    high_m: float
    coarse_max_m: float


def frame_gsd_range_m(matrix: np.ndarray, shape: tuple[int, int], *,
                      bounds: tuple[float, float, float, float] | None = None) -> GsdRange:
    """Ground sampling distance across a frame from its homography.

    Evaluated on a lattice of image points (every ``min(shape) // 40`` pixels, the outer
    pixel edges included) where the view is usable (in front of the camera, footprint at
    most :data:`wetmap.register.MAX_FORESHORTENING` times longer than wide) and, when
    ``bounds`` is given, the point lands within them.

    Parameters
    ----------
    matrix
        ``(3, 3)`` image ``(col, row)`` -> plan ``(x, y)``.
    shape
        ``(rows, cols)`` of the frame.
    bounds
        ``(xmin, ymin, xmax, ymax)`` of the plan, metres.

    Returns
    -------
    GsdRange
        NaN everywhere when no usable part lands within ``bounds``.

    Examples
    --------
    ``x = 0.05 col``, ``y = 0.02 row`` (an affine homography): every footprint is
    0.05 x 0.02 m, ``sqrt(0.05 * 0.02) = 0.0316 m``:

    >>> m = np.array([[0.05, 0, 0], [0, 0.02, 0], [0, 0, 1.0]])
    >>> g = frame_gsd_range_m(m, (80, 100))
    >>> round(g.gsd_m, 4), round(g.low_m, 4), round(g.high_m, 4), round(g.coarse_max_m, 4)
    (0.0316, 0.0316, 0.0316, 0.05)
    """
    cols, rows = lattice(shape, max(1, min(shape) // 40))
    ok = usable_view(matrix, cols, rows)
    if bounds is not None:
        xs, ys = project(matrix, cols, rows)
        x0, y0, x1, y1 = bounds
        with np.errstate(invalid="ignore"):
            ok &= (xs >= x0) & (xs <= x1) & (ys >= y0) & (ys <= y1)
    if not ok.any():
        return GsdRange(math.nan, math.nan, math.nan, math.nan)
    fine, coarse = ground_sampling_m(matrix, cols[ok], rows[ok])
    g = np.sqrt(fine * coarse)
    return GsdRange(gsd_m=float(np.median(g)), low_m=float(g.min()), high_m=float(g.max()),
                    coarse_max_m=float(coarse.max()))


def optics_gsd_m(ifov_mrad: float, distance_m: float) -> float:
    """Ground sampling distance of a square-on view from the optics: ``IFOV x distance``.

    Parameters
    ----------
    ifov_mrad
        Instantaneous field of view of one detector element, milliradians.
    distance_m
        Distance from the camera to the surface, metres.

    Returns
    -------
    float
        Metres per pixel (small-angle geometry: ``2 d tan(IFOV / 2)`` differs by less
        than 1e-6 relative below 5 mrad).

    Examples
    --------
    A 640-pixel camera with a 25° lens (IFOV = 0.4363 rad / 640 = 0.682 mrad) at 35 m:

    >>> round(optics_gsd_m(math.radians(25) / 640 * 1000, 35.0), 4)
    0.0239
    """
    return float(ifov_mrad) * 1e-3 * float(distance_m)


def feature_width_m(polygon: BaseGeometry) -> float:
    """Smallest width of a polygon, metres.

    The smaller of the minimum rotated rectangle's short side and twice the radius of
    the largest inscribed circle (the second is the width of the thickest part of an L
    or a ring, where the rectangle spans the whole shape).

    Examples
    --------
    >>> from shapely.geometry import box
    >>> feature_width_m(box(0, 0, 4, 1))          # a 4 x 1 m strip
    1.0
    >>> L = box(0, 0, 5, 1).union(box(0, 0, 1, 5))  # an L of 1 m legs: the circle fills the corner
    >>> round(feature_width_m(L), 2)
    1.17
    """
    if polygon is None or polygon.is_empty or polygon.area <= 0:
        return 0.0
    rect = shapely.minimum_rotated_rectangle(polygon)
    xy = np.asarray(rect.exterior.coords) if rect.geom_type == "Polygon" else np.zeros((1, 2))
    sides = np.hypot(*np.diff(xy, axis=0).T) if len(xy) > 2 else np.array([0.0])
    rect_w = float(sides[sides > 0].min()) if (sides > 0).any() else 0.0
    tol = max(rect_w, 1e-9) * 1e-3
    if hasattr(shapely, "maximum_inscribed_circle"):
        radius = float(shapely.length(shapely.maximum_inscribed_circle(polygon, tol)))
    else:  # shapely < 2.1

        parts = [p for p in shapely.get_parts(polygon) if p.area > 0]
        radius = max(float(polylabel(p, tol).distance(p.boundary)) for p in parts)
    return float(min(rect_w, 2.0 * radius))


def pixels_across(width_m: float, gsd_m: float) -> float:
    """How many pixels of ``gsd_m`` span ``width_m``.

    >>> pixels_across(0.5, 0.2)
    2.5
    """
    return float(width_m) / float(gsd_m) if gsd_m > 0 else math.inf


def smallest_reliable_area_m2(gsd_m: float, *, pixels_across: float = MIN_PIXELS_ACROSS) -> float:
    """The smallest area measured reliably: a square ``pixels_across`` pixels on a side.

    >>> round(smallest_reliable_area_m2(0.05), 6)    # 3 x 3 pixels of 5 cm
    0.0225
    """
    return float((pixels_across * gsd_m) ** 2)


# --------------------------------------------------------------------------------------
# Focus
# --------------------------------------------------------------------------------------

_IMMERKAER = np.array([[1.0, -2.0, 1.0], [-2.0, 4.0, -2.0], [1.0, -2.0, 1.0]])


def image_noise_sigma(values: np.ndarray) -> float:
    """Robust estimate of the standard deviation of an image's pixel noise.

    ``1.4826 * median(|N * I|) / 6`` over the pixels whose 3 x 3 neighbourhood has data,
    with ``N`` Immerkær's mask (its response to white noise of standard deviation ``s``
    has standard deviation ``6 s``: the square root of the sum of its squared weights;
    1.4826 turns a median absolute deviation into a standard deviation for normal
    noise). The mask cancels planes and linear gradients; the median ignores edges.

    Parameters
    ----------
    values
        ``(rows, cols)``; NaN = no data.

    Returns
    -------
    float
        In the image's units; NaN when no 3 x 3 neighbourhood has data.

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> ramp = np.add.outer(np.arange(200.0), np.arange(300.0)) * 0.01
    >>> round(image_noise_sigma(ramp + rng.normal(0, 0.1, ramp.shape)), 2)
    0.1
    """
    from scipy import ndimage

    v = np.asarray(values, dtype=np.float64)
    ok = np.isfinite(v)
    if v.ndim != 2 or min(v.shape) < 3:
        return math.nan
    r = ndimage.correlate(np.where(ok, v, 0.0), _IMMERKAER, mode="nearest")
    full = ndimage.minimum_filter(ok.astype(np.uint8), size=3, mode="constant", cval=0).astype(bool)
    full[0, :] = full[-1, :] = full[:, 0] = full[:, -1] = False
    if not full.any():
        return math.nan
    return float(1.4826 * np.median(np.abs(r[full])) / 6.0)


def _gradient_energy(v: np.ndarray) -> float:
    """Mean squared forward difference along columns plus along rows (pairs with data)."""
    gx = np.diff(v, axis=1)
    gy = np.diff(v, axis=0)
    gx, gy = gx[np.isfinite(gx)], gy[np.isfinite(gy)]
    if gx.size == 0 or gy.size == 0:
        return math.nan
    return float(np.mean(gx * gx) + np.mean(gy * gy))


@dataclass(frozen=True)
class Sharpness:
    """The sharpness index of one image (see the module notes).

    Attributes
    ----------
    index
        ``1 - E_coarse / E_fine`` in ``[0, 1]``; NaN when the image has too little
        structure to judge.
    noise
        Estimated noise standard deviation, image units.
    detail
        ``E_coarse / (4 noise**2)``: the structure that survives smoothing, in units of the
        noise's gradient energy.
    """

    index: float
    noise: float
    detail: float

    @property
    def judged(self) -> bool:
        """True when the image had enough structure for an index."""
        return math.isfinite(self.index)


def sharpness(values: np.ndarray, *, coarse_sigma_px: float = COARSE_SIGMA_PX,
              min_detail: float = MIN_DETAIL) -> Sharpness:
    """Noise-corrected sharpness index of an image (see the module notes).

    Parameters
    ----------
    values
        ``(rows, cols)`` temperatures (any unit; the index does not depend on it); NaN =
        no data. At least 3 x 3 pixels.
    coarse_sigma_px
        Gaussian sigma of the coarse scale, pixels.
    min_detail
        Smallest ``E_coarse / (4 noise**2)`` judged.

    Returns
    -------
    Sharpness

    Examples
    --------
    A step edge, then the same blurred: the blurred copy scores lower.

    >>> from scipy import ndimage
    >>> step = np.zeros((64, 64)); step[:, 32:] = 2.0
    >>> rng = np.random.default_rng(1)
    >>> a = sharpness(step + rng.normal(0, 0.05, step.shape)).index
    >>> b = sharpness(ndimage.gaussian_filter(step, 2) + rng.normal(0, 0.05, step.shape)).index
    >>> bool(a > 0.7 and b < 0.5 * a)
    True
    """
    from scipy import ndimage

    v = np.asarray(values, dtype=np.float64)
    if v.ndim != 2 or min(v.shape) < 3:
        return Sharpness(math.nan, math.nan, math.nan)
    ok = np.isfinite(v)
    if ok.sum() < 9:
        return Sharpness(math.nan, math.nan, math.nan)
    s = image_noise_sigma(v)
    if not math.isfinite(s):
        return Sharpness(math.nan, math.nan, math.nan)
    fine = _gradient_energy(v) - 4.0 * s * s
    # normalised convolution: the smoothing ignores pixels without data
    w = ndimage.gaussian_filter(ok.astype(np.float64), coarse_sigma_px, mode="nearest")
    num = ndimage.gaussian_filter(np.where(ok, v, 0.0), coarse_sigma_px, mode="nearest")
    with np.errstate(invalid="ignore", divide="ignore"):
        smooth = np.where(ok & (w > 0.5), num / w, np.nan)
    # white noise after a Gaussian of sigma g: variance s^2 / (4 pi g^2), lag-1 correlation exp(-1 / (4 g^2))
    g2 = coarse_sigma_px * coarse_sigma_px
    noise_coarse = 4.0 * s * s / (4.0 * math.pi * g2) * (1.0 - math.exp(-1.0 / (4.0 * g2)))
    coarse = _gradient_energy(smooth) - noise_coarse
    floor = 4.0 * max(s, NOISE_FLOOR) ** 2
    detail = coarse / floor if math.isfinite(coarse) else math.nan
    if not (math.isfinite(detail) and detail >= min_detail):
        return Sharpness(math.nan, s, detail)
    index = 0.0 if not fine > 0 else float(np.clip(1.0 - coarse / fine, 0.0, 1.0))
    return Sharpness(index, s, detail)


@dataclass(frozen=True)
class TileSharpness:
    """Sharpness of square tiles of a raster.

    Attributes
    ----------
    rows, cols
        Upper-left pixel of each tile, ``(n,)`` int.
    size_px
        Tile side, pixels (tiles at the right and bottom edges may be smaller).
    index
        ``(n,)`` sharpness index; NaN where the tile could not be judged.
    """

    rows: np.ndarray
    cols: np.ndarray
    size_px: int
    index: np.ndarray

    @property
    def judged(self) -> int:
        """Number of tiles with an index."""
        return int(np.isfinite(self.index).sum())


def tile_sharpness(values: np.ndarray, *, tile_px: int = FOCUS_TILE_PX,
                   min_valid: float = 0.5) -> TileSharpness:
    """:func:`sharpness` of each ``tile_px`` square of ``values``.

    Tiles with data on fewer than ``min_valid`` of their pixels, or too little structure,
    get NaN.

    Examples
    --------
    >>> t = tile_sharpness(np.zeros((300, 200)), tile_px=128)
    >>> t.rows.tolist(), t.cols.tolist(), t.judged
    ([0, 0, 128, 128, 256, 256], [0, 128, 0, 128, 0, 128], 0)
    """
    v = np.asarray(values)
    rs, cs, idx = [], [], []
    for r0 in range(0, v.shape[0], tile_px):
        for c0 in range(0, v.shape[1], tile_px):
            tile = v[r0:r0 + tile_px, c0:c0 + tile_px]
            rs.append(r0)
            cs.append(c0)
            if np.isfinite(tile).mean() < min_valid:
                idx.append(math.nan)
            else:
                idx.append(sharpness(tile).index)
    return TileSharpness(np.asarray(rs, dtype=np.int64), np.asarray(cs, dtype=np.int64), tile_px,
                         np.asarray(idx, dtype=np.float64))


def mosaic_tile_sharpness(path: Path, *, scale: float = 1.0, within: BaseGeometry | None = None,
                          transform: "Affine | None" = None, tile_px: int = FOCUS_TILE_PX,
                          max_tiles: int = MAX_TILES) -> tuple[TileSharpness, np.ndarray, np.ndarray]:
    """Sharpness of tiles of a mosaic file, read window by window from its own raster.

    Parameters
    ----------
    path
        The mosaic (any raster rasterio reads; declared nodata is no data).
    scale
        Its ``[[mosaic]] scale`` (the noise floor is in degrees).
    within
        Only tiles whose footprint meets this geometry (the outline), plan coordinates.
    transform
        The raster's placement (``RasterInfo.transform``), for ``within`` and tile centres.
    tile_px, max_tiles
        Tile side (pixels) and the largest number of tiles read (a regular subset).

    Returns
    -------
    tiles : TileSharpness
    xs, ys : numpy.ndarray
        Plan coordinates of each tile's centre (NaN without ``transform``).
    """
    import rasterio
    from rasterio.errors import NotGeoreferencedWarning
    from rasterio.windows import Window


    with warnings.catch_warnings():
        warnings.simplefilter("ignore", NotGeoreferencedWarning)
        src = rasterio.open(path)
    # a bounded block cache: GDAL's default (5 % of the memory) would keep every
    # decompressed block the tiles touch, hundreds of MB on a large mosaic
    with src, rasterio.Env(GDAL_CACHEMAX=GDAL_CACHE_BYTES):
        rows, cols = src.height, src.width
        t = transform if transform is not None else src.transform
        starts = [(r0, c0) for r0 in range(0, rows, tile_px) for c0 in range(0, cols, tile_px)]
        centres = np.array([t @ (c0 + min(tile_px, cols - c0) / 2, r0 + min(tile_px, rows - r0) / 2)
                            for r0, c0 in starts], dtype=np.float64).reshape(-1, 2)
        if within is not None and not within.is_empty and starts:
            boxes = []
            for r0, c0 in starts:
                r1, c1 = min(r0 + tile_px, rows), min(c0 + tile_px, cols)
                boxes.append(shapely.Polygon([t @ (c0, r0), t @ (c1, r0), t @ (c1, r1), t @ (c0, r1)]))
            keep = shapely.intersects(np.asarray(boxes, dtype=object), within)
            starts = [s for s, k in zip(starts, keep) if k]
            centres = centres[np.asarray(keep, dtype=bool)]
        if len(starts) > max_tiles:
            pick = np.unique(np.linspace(0, len(starts) - 1, max_tiles).round().astype(int))
            starts = [starts[i] for i in pick]
            centres = centres[pick]
        idx = []
        for r0, c0 in starts:
            h, w = min(tile_px, rows - r0), min(tile_px, cols - c0)
            data = src.read(1, window=Window(c0, r0, w, h), masked=True)
            tile = np.ma.filled(data.astype(np.float64), np.nan) * abs(scale)
            idx.append(math.nan if np.isfinite(tile).mean() < 0.5 else sharpness(tile).index)
    tiles = TileSharpness(np.asarray([s[0] for s in starts], dtype=np.int64),
                          np.asarray([s[1] for s in starts], dtype=np.int64), tile_px,
                          np.asarray(idx, dtype=np.float64))
    return tiles, centres[:, 0] if len(centres) else np.zeros(0), centres[:, 1] if len(centres) else np.zeros(0)


def flag_blurred(indices: Sequence[float], *, ratio: float = FOCUS_RATIO,
                 leave_one_out: bool = True) -> tuple[np.ndarray, np.ndarray]:
    """Which images are far less sharp than the rest of the survey.

    Parameters
    ----------
    indices
        Sharpness index of each image (NaN = not judged: never flagged).
    ratio
        Flag when an index is below ``ratio`` times the reference.
    leave_one_out
        The reference of each image is the median of the *other* judged images (frames);
        otherwise the median of all judged images (tiles).

    Returns
    -------
    flagged : numpy.ndarray of bool
    relative : numpy.ndarray of float
        Each index divided by its reference (NaN when not judged or nothing to compare).

    Examples
    --------
    >>> f, rel = flag_blurred([0.8, 0.75, 0.3, float("nan")])
    >>> f.tolist(), [round(float(v), 2) for v in rel[:3]]
    ([False, False, True, False], [1.52, 1.36, 0.39])
    """
    v = np.asarray(indices, dtype=np.float64)
    rel = np.full(v.shape, np.nan)
    judged = np.isfinite(v)
    if judged.sum() < 2:
        return np.zeros(v.shape, dtype=bool), rel
    if leave_one_out:
        for i in np.flatnonzero(judged):
            others = v[judged & (np.arange(len(v)) != i)]
            ref = float(np.median(others))
            rel[i] = v[i] / ref if ref > 0 else math.nan
    else:
        ref = float(np.median(v[judged]))
        rel[judged] = v[judged] / ref if ref > 0 else np.nan
    with np.errstate(invalid="ignore"):
        flagged = np.isfinite(rel) & (rel < ratio)
    return flagged, rel


# --------------------------------------------------------------------------------------
# Reflections
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class FrameView:
    """One frame as the imagery checks see it: its resampled surface on a plan-grid window.

    Attributes
    ----------
    path
        The frame file as named in survey.toml.
    window
        ``(row0, row1, col0, col1)`` of the plan grid (half-open).
    values_k
        Surface temperature, K, on the window; NaN where the frame gives none.
    weights
        Blending weights on the window (0 where not covered).
    gsd_m
        The footprint's long side at each pixel, m per image pixel (NaN where not covered).
    gsd
        The frame's GSD across the image (:func:`frame_gsd_range_m`).
    sharpness
        Its sharpness (:func:`sharpness` of the frame in image pixels).
    blurred, relative
        Flagged as blurred; its index over the median of the other frames.
    fallback
        Used in the blend only where no sharper frame covers the ground.
    """

    path: str
    window: tuple[int, int, int, int]
    values_k: np.ndarray
    weights: np.ndarray
    gsd_m: np.ndarray
    gsd: GsdRange
    sharpness: Sharpness
    blurred: bool = False
    relative: float = math.nan
    fallback: bool = False


@dataclass(frozen=True)
class ViewDelta:
    """How one frame sees one anomaly.

    Attributes
    ----------
    path
        The frame.
    cover
        Share of the anomaly's pixels the frame covers.
    delta_mean_c
        Mean of the frame's own surface temperature minus the dry background over the
        pixels it covers, degC.
    centroid_xy
        Centroid of the frame's warm pixels (delta above the threshold) in a box around
        the anomaly, plan metres; ``None`` when the frame does not cover the box or sees
        too few warm pixels there.
    """

    path: str
    cover: float
    delta_mean_c: float
    centroid_xy: tuple[float, float] | None


def view_deltas(rows: np.ndarray, cols: np.ndarray, views: Sequence[FrameView], background_c: np.ndarray, *,
                threshold_c: float, transform: "Affine", box: tuple[int, int, int, int] | None = None,
                min_cover: float = MIN_VIEW_COVER) -> list[ViewDelta]:
    """Each frame's own delta-T over an anomaly's pixels.

    Parameters
    ----------
    rows, cols
        Plan-grid pixels of the anomaly, ``(n,)`` int.
    views
        The frames (:class:`FrameView`).
    background_c
        The run's dry background, degC, on the plan grid.
    threshold_c
        Delta-T threshold, degC (for the warm-pixel centroid).
    transform
        The plan grid's affine transform (pixel corner -> plan).
    box
        ``(row0, row1, col0, col1)`` around the anomaly for the centroid (half-open).
    min_cover
        Frames covering less than this share of the pixels are left out.

    Returns
    -------
    list of ViewDelta
        One per frame that covers the anomaly well enough, in ``views`` order.
    """
    rows, cols = np.asarray(rows), np.asarray(cols)
    out = []
    n = len(rows)
    if n == 0:
        return out
    for v in views:
        r0, r1, c0, c1 = v.window
        inside = (rows >= r0) & (rows < r1) & (cols >= c0) & (cols < c1)
        if inside.sum() < min_cover * n:
            continue
        rr, cc = rows[inside] - r0, cols[inside] - c0
        vals = v.values_k[rr, cc]
        good = (v.weights[rr, cc] > 0) & np.isfinite(vals)
        cover = float(good.sum()) / n
        if cover < min_cover:
            continue
        d = vals[good].astype(np.float64) - _KELVIN - background_c[rows[inside][good], cols[inside][good]]
        d = d[np.isfinite(d)]
        if d.size == 0:
            continue
        centroid = None
        if box is not None:
            b0, b1, d0, d1 = box
            if b0 >= r0 and b1 <= r1 and d0 >= c0 and d1 <= c1:
                sub_v = v.values_k[b0 - r0:b1 - r0, d0 - c0:d1 - c0].astype(np.float64)
                sub_w = v.weights[b0 - r0:b1 - r0, d0 - c0:d1 - c0]
                covered = (sub_w > 0) & np.isfinite(sub_v)
                if covered.mean() >= 0.9:
                    with np.errstate(invalid="ignore"):
                        warm = covered & (sub_v - _KELVIN - background_c[b0:b1, d0:d1] > threshold_c)
                    if warm.sum() >= max(1, 0.25 * n):
                        wr, wc = np.nonzero(warm)
                        x, y = transform @ (float(wc.mean()) + d0 + 0.5, float(wr.mean()) + b0 + 0.5)
                        centroid = (float(x), float(y))
        out.append(ViewDelta(path=v.path, cover=cover, delta_mean_c=float(d.mean()), centroid_xy=centroid))
    return out


@dataclass(frozen=True)
class ReflectionSuspect:
    """An anomaly that may be a reflection rather than a warm surface.

    Attributes
    ----------
    id
        The anomaly's id (from 1).
    rule
        ``"one viewpoint"`` (warm in one view, not in another), ``"moves"`` (the warm
        spot shifts between views) or ``"specular surface"``.
    reason
        The finding in words.
    views
        The views compared (empty for ``"specular surface"``).
    surface
        The specular surface it lies on (section name and its words, or the plan layer).
    """

    id: int
    rule: str
    reason: str
    views: tuple[ViewDelta, ...] = ()
    surface: str | None = None

    def as_dict(self) -> dict[str, Any]:
        """JSON-ready."""
        return {
            "id": self.id, "rule": self.rule, "reason": self.reason, "surface": self.surface,
            "views": [{"path": v.path, "cover": round(v.cover, 3), "delta_mean_c": round(v.delta_mean_c, 3),
                       "centroid_xy": None if v.centroid_xy is None else [round(c, 3) for c in v.centroid_xy]}
                      for v in self.views],
        }


def _judge_views(aid: int, vd: list[ViewDelta], *, threshold_c: float, ratio: float, width_m: float,
                 pixel_m: float) -> ReflectionSuspect | None:
    """The view-comparison rules for one anomaly (two or more views)."""
    if len(vd) < 2:
        return None
    strong = max(vd, key=lambda v: v.delta_mean_c)
    weak = min(vd, key=lambda v: v.delta_mean_c)
    if strong.delta_mean_c >= threshold_c and weak.delta_mean_c < ratio * strong.delta_mean_c:
        return ReflectionSuspect(
            id=aid, rule="one viewpoint", views=tuple(vd),
            reason=(f"warm in {strong.path} (mean ΔT {strong.delta_mean_c:+.2f} °C) but not in {weak.path} "
                    f"({weak.delta_mean_c:+.2f} °C) over the same ground: a real wet area is warm from every "
                    "viewpoint; check for a reflection of something warm (look from another angle, or core it)"))
    cents = [(v.path, np.asarray(v.centroid_xy)) for v in vd if v.centroid_xy is not None]
    if len(cents) >= 2:
        best, pair = 0.0, None
        for i in range(len(cents)):
            for j in range(i + 1, len(cents)):
                d = float(np.hypot(*(cents[i][1] - cents[j][1])))
                if d > best:
                    best, pair = d, (cents[i][0], cents[j][0])
        limit = max(0.5 * width_m, 3.0 * pixel_m)
        if pair is not None and best > limit:
            return ReflectionSuspect(
                id=aid, rule="moves", views=tuple(vd),
                reason=(f"the warm spot moves by {best:.2f} m between {pair[0]} and {pair[1]} (more than "
                        f"{limit:.2f} m, half its width): a surface feature stays put, a reflection moves with "
                        "the viewpoint; check it from another angle, or core it"))
    return None


def multi_view_reflections(labels: np.ndarray, count: int, views: Sequence[FrameView], background_c: np.ndarray,
                           *, threshold_c: float, transform: "Affine", widths_m: Sequence[float],
                           ratio: float = REFLECTION_RATIO, min_cover: float = MIN_VIEW_COVER
                           ) -> tuple[dict[int, ReflectionSuspect], dict[int, list[ViewDelta]]]:
    """Compare the frames' views of every anomaly (see the module notes).

    Parameters
    ----------
    labels, count
        Anomaly regions on the plan grid (0 = none, 1..count), as
        :func:`wetmap.polygons.label_regions` gives them.
    views
        The frames; blurred ones should be left out by the caller.
    background_c
        Dry background, degC, plan grid.
    threshold_c
        Delta-T threshold, degC.
    transform
        Plan grid transform.
    widths_m
        Each anomaly's smallest width (:func:`feature_width_m`), metres.
    ratio, min_cover
        See :data:`REFLECTION_RATIO`, :data:`MIN_VIEW_COVER`.

    Returns
    -------
    suspects : dict
        Anomaly id -> :class:`ReflectionSuspect`.
    compared : dict
        Anomaly id -> its views (every anomaly with at least one).
    """
    from scipy import ndimage

    suspects: dict[int, ReflectionSuspect] = {}
    compared: dict[int, list[ViewDelta]] = {}
    if count == 0 or not views:
        return suspects, compared
    pixel_m = float(math.sqrt(abs(transform.determinant)))
    objects = ndimage.find_objects(labels, max_label=count)
    for k, sl in enumerate(objects):
        if sl is None:
            continue
        aid = k + 1
        sub = labels[sl] == aid
        rr, cc = np.nonzero(sub)
        rows, cols = rr + sl[0].start, cc + sl[1].start
        h, w = sl[0].stop - sl[0].start, sl[1].stop - sl[1].start
        pad = max(3, int(math.ceil(0.5 * max(h, w))))
        box = (max(sl[0].start - pad, 0), min(sl[0].stop + pad, labels.shape[0]),
               max(sl[1].start - pad, 0), min(sl[1].stop + pad, labels.shape[1]))
        vd = view_deltas(rows, cols, views, background_c, threshold_c=threshold_c, transform=transform, box=box,
                         min_cover=min_cover)
        if vd:
            compared[aid] = vd
        s = _judge_views(aid, vd, threshold_c=threshold_c, ratio=ratio, width_m=float(widths_m[k]),
                         pixel_m=pixel_m)
        if s is not None:
            suspects[aid] = s
    return suspects, compared


#: Surfaces that reflect long-wave radiation specularly enough to show reflections, by the
#: words that name them in a section's ``assembly`` (matched as whole words, any case).
SPECULAR_SURFACES: tuple[tuple[str, tuple[str, ...]], ...] = (
    ("metal", (r"metal(lic)?", r"sheet ?metal", r"steel", r"galvani[sz]ed", r"alumini?um", r"copper", r"zinc",
               r"tin", r"standing[- ]seam", r"corrugated", r"profiled sheet(ing)?")),
    ("glass", (r"(?<!cellular )(?<!foam )glass(?![- ]?fib)", r"glazing", r"glazed", r"skylights?",
               r"polycarbonate", r"roof ?lights?")),
    ("thermoplastic single-ply", (r"tpo", r"pvc", r"thermoplastic", r"single[- ]ply")),
    ("reflective coating", (r"reflective coating", r"metallic coating", r"alumini[sz]ed")),
)


def _surface_words(assembly: str) -> str:
    """The words that name the surface: the text before the first "on", "over", "above", "with", comma or semicolon."""
    return re.split(r"[,;]|\s(?:on|over|above|under|with)\s", assembly, maxsplit=1, flags=re.IGNORECASE)[0]


def specular_words(assembly: str | None) -> str | None:
    """The kind of specular surface a section's ``assembly`` names, or ``None``.

    Only the surface words count (before the first ``on``/``over``/``above``/
    ``with``/comma): ``"built-up roof on steel deck"`` is not metal.

    Examples
    --------
    >>> specular_words("standing-seam metal roof")
    'metal'
    >>> specular_words("TPO, mechanically fastened")
    'thermoplastic single-ply'
    >>> specular_words("built-up roof on steel deck") is None
    True
    >>> specular_words("EPDM on cellular glass") is None
    True
    >>> specular_words("glass roof") , specular_words("fibreglass-reinforced bitumen")
    ('glass', None)
    """
    if not assembly:
        return None
    words = _surface_words(assembly)
    for kind, patterns in SPECULAR_SURFACES:
        if any(re.search(rf"(?<![a-z0-9]){p}(?![a-z0-9])", words, flags=re.IGNORECASE) for p in patterns):
            return kind
    return None


# --------------------------------------------------------------------------------------
# Display range
# --------------------------------------------------------------------------------------


# --------------------------------------------------------------------------------------
# The whole assessment
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class SourceQuality:
    """Resolution and focus of one ``[[mosaic]]`` or ``[[frame]]`` (``summary.json`` ``imagery.sources``)."""

    kind: str
    path: str
    gsd_m: float
    gsd_low_m: float
    gsd_high_m: float
    coarse_m: float
    """The longest footprint side (the pixel counted by the reliability rule before the optics)."""
    optics_gsd_m: float | None
    sharpness: float
    relative: float
    flags: tuple[str, ...] = ()
    note: str | None = None
    tiles: int = 0
    tiles_judged: int = 0
    soft_tiles: tuple[tuple[float, float, float], ...] = ()
    """Mosaics: ``(x, y, index)`` of tiles flagged as blurred (at most 20 listed)."""
    blending: str | None = None

    def as_dict(self) -> dict[str, Any]:
        """JSON-ready (NaN -> ``None``)."""

        def r(v: float | None, nd: int) -> float | None:
            return None if v is None or not math.isfinite(v) else round(float(v), nd)

        out: dict[str, Any] = {
            "kind": self.kind, "path": self.path, "gsd_m": r(self.gsd_m, 4),
            "gsd_range_m": [r(self.gsd_low_m, 4), r(self.gsd_high_m, 4)], "footprint_max_m": r(self.coarse_m, 4),
            "optics_gsd_m": r(self.optics_gsd_m, 4), "sharpness": r(self.sharpness, 3),
            "sharpness_vs_survey": r(self.relative, 3), "flags": list(self.flags), "note": self.note,
        }
        if self.kind == "mosaic":
            out.update(tiles=self.tiles, tiles_judged=self.tiles_judged,
                       soft_tiles=[{"x": round(x, 3), "y": round(y, 3), "sharpness": round(s, 3)}
                                   for x, y, s in self.soft_tiles])
        else:
            out["blending"] = self.blending
        return out


@dataclass(frozen=True)
class ImageryReport:
    """What the imagery checks found (``SurveyResult.imagery``; ``summary.json`` ``imagery``).

    Attributes
    ----------
    sources
        One per mosaic and frame of the primary pass.
    min_pixels_across
        The reliability rule, pixels.
    reliable_gsd_m
        The pixel the rule counts, median over the covered roof, metres.
    smallest_reliable_area_m2
        ``(min_pixels_across * reliable_gsd_m) ** 2``.
    worst_gsd_m, worst_reliable_area_m2
        The same at the 95th percentile of the covered roof (its coarsest parts).
    anomaly_flags
        Per anomaly (in id order), its flags.
    anomaly_pixels_across
        Per anomaly, its smallest width in pixels of the imagery there.
    reflections
        The reflection suspects.
    compared
        Anomaly ids that two or more frames saw.
    surface_range, delta_range
        Display ranges of the surface temperature and delta-T.
    warnings
        Lines for ``summary.json`` ``warnings``.
    settings
        The settings used (``[limits]`` keys).
    area_word
        What the surveyed area is called (:mod:`wetmap.wording`): ``"roof"``, ``"hull side"``.
    """

    sources: tuple[SourceQuality, ...]
    min_pixels_across: float
    reliable_gsd_m: float
    smallest_reliable_area_m2: float
    worst_gsd_m: float
    worst_reliable_area_m2: float
    anomaly_flags: tuple[tuple[str, ...], ...]
    anomaly_pixels_across: tuple[float, ...]
    reflections: tuple[ReflectionSuspect, ...]
    compared: tuple[int, ...]
    surface_range: DisplayRange
    delta_range: DisplayRange
    warnings: tuple[str, ...] = ()
    settings: dict[str, Any] = field(default_factory=dict)
    area_word: str = "roof"

    def flags_text(self, i: int) -> str:
        """The flags of anomaly ``i`` (0-based) as one text, ``"; "``-separated."""
        return "; ".join(self.anomaly_flags[i]) if i < len(self.anomaly_flags) else ""

    def as_dict(self) -> dict[str, Any]:
        """``summary.json`` ``imagery``."""

        def r(v: float, nd: int) -> float | None:
            return None if v is None or not math.isfinite(v) else round(float(v), nd)

        return {
            "sources": [s.as_dict() for s in self.sources],
            "min_pixels_across": self.min_pixels_across,
            "reliable_gsd_m": r(self.reliable_gsd_m, 4),
            "smallest_reliable_area_m2": r(self.smallest_reliable_area_m2, 4),
            "worst_gsd_m": r(self.worst_gsd_m, 4),
            "worst_reliable_area_m2": r(self.worst_reliable_area_m2, 4),
            "under_resolved": [i + 1 for i, f in enumerate(self.anomaly_flags) if UNDER_RESOLVED_FLAG in f],
            "anomaly_pixels_across": [r(v, 2) for v in self.anomaly_pixels_across],
            "reflection_suspect": [s.id for s in self.reflections],
            "views_compared": list(self.compared),
            "blurred": [s.path for s in self.sources if "blurred" in s.flags],
            "display_range": {
                "surface_c": self.surface_range.as_list(), "centre_c": round(self.surface_range.centre_c, 2),
                "delta_c": self.delta_range.as_list(),
                "percentiles": [self.surface_range.low_pct, self.surface_range.high_pct],
                "basis": (f"{self.area_word} pixels only (inside the outline, outside the exclusions, with data), centred on "
                          "the median dry background; delta-T centred on 0"),
            },
            "settings": dict(self.settings),
        }


def _fmt_m(v: float) -> str:
    return f"{v:.3g} m"


def _ids(ids: Sequence[int]) -> str:
    return ", ".join(f"#{i}" for i in ids)


def assess_imagery(survey: "Survey", *, grid_transform: "Affine", grid_shape: tuple[int, int], grid_pixel_m: float,
                   surface_c: np.ndarray, detection: "Detection", polygons: Sequence[BaseGeometry],
                   labels: np.ndarray | None = None, frames: Sequence[FrameView] = (),
                   sections: Sequence[Any] = (), specular: BaseGeometry | None = None,
                   outline: BaseGeometry | None = None) -> ImageryReport:
    """Resolution, focus, reflections and display range of one run (see the module notes).

    Parameters
    ----------
    survey
        The survey of the primary pass (its mosaics and frames, ``[camera]``, ``[limits]``,
        ``[detect] min_area_m2``).
    grid_transform, grid_shape
        The plan grid of ``surface_c`` and ``detection`` (a preview's in windowed runs).
    grid_pixel_m
        The full plan grid's pixel, metres (anomalies are measured on it).
    surface_c
        Surface temperature, degC, on the grid.
    detection
        The run's detection on the grid (background, delta-T NaN off the usable roof).
    polygons
        The anomalies, in id order.
    labels
        The anomalies' pixels on the grid (``None`` in windowed runs).
    frames
        The frames placed on the grid (:class:`FrameView`), in survey order.
    sections
        Roof sections (``name``, ``geometry``, ``assembly``).
    specular
        The ``[plan] specular`` layer, if any.
    outline
        The outline (mosaic tiles outside it are not judged).
    """
    lim = survey.limits
    n_across = float(getattr(lim, "min_pixels_across", MIN_PIXELS_ACROSS))
    focus_ratio = float(getattr(lim, "focus_ratio", FOCUS_RATIO))
    refl_ratio = float(getattr(lim, "reflection_ratio", REFLECTION_RATIO))
    exclude = bool(getattr(lim, "exclude_blurred", True))
    cam = survey.camera
    ifov = getattr(cam, "ifov_mrad", None)
    optics = optics_gsd_m(ifov, cam.distance_m) if ifov and cam.distance_m > 0 else None
    warnings: list[str] = []
    if ifov and not cam.distance_m > 0:
        warnings.append(f"{survey.file.name}: [camera] ifov_mrad = {ifov:g} without distance_m: the optics' "
                        "ground sampling distance needs the distance to the surface; add [camera] distance_m")
    crs = None if survey.survey.is_local else survey.survey.crs
    usable = np.isfinite(detection.delta_c)
    rows, cols = grid_shape

    # --- resolution of each source, and the pixel counted on the plan grid -----------------
    gsd_grid = np.full(grid_shape, np.nan, dtype=np.float32)
    sources: list[SourceQuality] = []
    tiles_all: list[tuple[int, TileSharpness, np.ndarray, np.ndarray]] = []
    for k, m in enumerate(survey.mosaics):
        info = inspect_raster(m.path, origin=m.origin, pixel_m=m.pixel_m, survey_crs=crs)
        px = mosaic_gsd_m(info.transform)
        counted = max(px.coarse_m, optics or 0.0)
        note = None
        if optics is not None and optics > 1.5 * px.coarse_m:
            note = (f"pixels of {_fmt_m(px.coarse_m)} but the camera resolves {_fmt_m(optics)} ([camera] ifov_mrad x "
                    "distance_m): the mosaic is upsampled; the reliability rule counts the optics' pixel")
            warnings.append(f"{m.path.name}: {note}")
        # its footprint on the grid: the raster's bounds, where no earlier mosaic counted
        ga = ~grid_transform
        corners = [info.transform @ (0, 0), info.transform @ (info.cols, 0), info.transform @ (info.cols, info.rows),
                   info.transform @ (0, info.rows)]
        cc, rr = zip(*[ga @ c for c in corners])
        r0, r1 = max(int(math.floor(min(rr))), 0), min(int(math.ceil(max(rr))), rows)
        c0, c1 = max(int(math.floor(min(cc))), 0), min(int(math.ceil(max(cc))), cols)
        if r1 > r0 and c1 > c0:
            sub = gsd_grid[r0:r1, c0:c1]
            sub[np.isnan(sub)] = counted
        tiles, txs, tys = mosaic_tile_sharpness(m.path, scale=m.scale, within=outline, transform=info.transform)
        tiles_all.append((k, tiles, txs, tys))
        sources.append(SourceQuality(kind="mosaic", path=_rel(m.path, survey.folder), gsd_m=px.gsd_m,
                                     gsd_low_m=px.gsd_m, gsd_high_m=px.gsd_m, coarse_m=px.coarse_m,
                                     optics_gsd_m=optics, sharpness=math.nan, relative=math.nan, note=note,
                                     tiles=len(tiles.index), tiles_judged=tiles.judged))
    # mosaics win over frames: frames count where no mosaic does
    frame_gsd = np.full(grid_shape, np.nan, dtype=np.float32)
    for v in frames:
        if v.fallback:
            continue
        r0, r1, c0, c1 = v.window
        sub = frame_gsd[r0:r1, c0:c1]
        g = np.where(v.weights > 0, v.gsd_m, np.nan)
        with np.errstate(invalid="ignore"):
            sub[:] = np.fmin(sub, g)
    for v in frames:  # a blurred frame counts where it alone covers
        if not v.fallback:
            continue
        r0, r1, c0, c1 = v.window
        sub = frame_gsd[r0:r1, c0:c1]
        g = np.where(v.weights > 0, v.gsd_m, np.nan)
        sub[:] = np.where(np.isnan(sub), g, sub)
    if optics is not None:
        frame_gsd = np.fmax(frame_gsd, np.float32(optics))  # NaN stays NaN
    gsd_grid = np.where(np.isnan(gsd_grid), frame_gsd, gsd_grid)
    gsd_grid = np.fmax(gsd_grid, np.float32(grid_pixel_m))  # never finer than the plan grid
    covered = usable & np.isfinite(gsd_grid)
    gvals = finite_sample(gsd_grid[covered]) if covered.any() else np.zeros(0)
    if gvals.size:
        reliable_gsd, worst_gsd = float(np.median(gvals)), float(np.percentile(gvals, 95))
    else:
        reliable_gsd = worst_gsd = float(grid_pixel_m)
    small_area = smallest_reliable_area_m2(reliable_gsd, pixels_across=n_across)
    worst_area = smallest_reliable_area_m2(worst_gsd, pixels_across=n_across)
    min_area = survey.detect.min_area_m2
    side = math.sqrt(min_area) if min_area > 0 else 0.0
    if pixels_across(side, reliable_gsd) < n_across:
        warnings.append(
            f"{survey.file.name}: [detect] min_area_m2 = {min_area:g} m² (a square of {side:.2f} m) spans "
            f"{pixels_across(side, reliable_gsd):.1f} pixels of {_fmt_m(reliable_gsd)} across, fewer than the "
            f"{n_across:g} a reliable measurement needs ([limits] min_pixels_across): anomalies that small read too "
            f"cool and their outlines are uncertain; the smallest area measured reliably here is {small_area:.3g} m²: "
            "raise min_area_m2 to it, or image closer or with a finer camera")

    # --- focus -------------------------------------------------------------------------------
    for v in frames:
        flags = ("blurred",) if v.blurred else ()
        if v.blurred:
            blending = ("used only where no sharper frame covers" if v.fallback
                        else "used (exclude_blurred = false)")
        else:
            blending = "used"
        optics_note = None
        if optics is not None and math.isfinite(v.gsd.gsd_m) and not (0.5 <= v.gsd.gsd_m / optics <= 2.0):
            optics_note = (f"its control points give {_fmt_m(v.gsd.gsd_m)} per pixel but the optics "
                           f"{_fmt_m(optics)} ([camera] ifov_mrad x distance_m): check those keys or the points")
            warnings.append(f"{v.path}: {optics_note}")
        sources.append(SourceQuality(kind="frame", path=v.path, gsd_m=v.gsd.gsd_m, gsd_low_m=v.gsd.low_m,
                                     gsd_high_m=v.gsd.high_m, coarse_m=v.gsd.coarse_max_m, optics_gsd_m=optics,
                                     sharpness=v.sharpness.index, relative=v.relative, flags=flags,
                                     note=optics_note, blending=blending))
        if v.blurred:
            warnings.append(
                f"{v.path}: sharpness {v.sharpness.index:.2f}, {v.relative:.2f} x the median of the other frames "
                f"(below [limits] focus_ratio = {focus_ratio:g}): likely out of focus or moved during the exposure. "
                "Blur spreads the heat of a warm area over its surroundings, so it lowers the temperatures this "
                "frame reports: small wet areas read cooler and smaller, or vanish; "
                + ("it is used only where no sharper frame covers the ground" if v.fallback
                   else "it is blended like the others ([limits] exclude_blurred = false)")
                + "; retake it if you can")
    # mosaic tiles, compared with the median tile of all mosaics
    if tiles_all:
        pooled = np.concatenate([t.index for _, t, _, _ in tiles_all])
        flagged, rel = flag_blurred(pooled, ratio=focus_ratio, leave_one_out=False)
        if np.isfinite(pooled).sum() < 4:
            flagged[:] = False
        at = 0
        for k, t, txs, tys in tiles_all:
            n = len(t.index)
            f, rl = flagged[at:at + n], rel[at:at + n]
            at += n
            src_i = [i for i, s in enumerate(sources) if s.kind == "mosaic"][k]
            s = sources[src_i]
            med = float(np.nanmedian(t.index)) if t.judged else math.nan
            soft = tuple((float(txs[i]), float(tys[i]), float(t.index[i])) for i in np.flatnonzero(f))
            sources[src_i] = SourceQuality(**{**vars(s), "sharpness": med,
                                              "relative": float(np.nanmedian(rl)) if np.isfinite(rl).any()
                                              else math.nan,
                                              "soft_tiles": soft[:20],
                                              "flags": ("soft tiles",) if soft else ()})
            if soft:
                where = "; ".join(f"({x:.1f}, {y:.1f})" for x, y, _ in soft[:5]) + (" ..." if len(soft) > 5 else "")
                warnings.append(
                    f"{s.path}: {len(soft)} of {t.judged} tiles ({t.size_px} px) are less than "
                    f"{focus_ratio:g} x as sharp as the median tile ([limits] focus_ratio), centred at {where}: "
                    "likely blurred source frames in the mosaic. Blur lowers the temperatures reported there: "
                    "small wet areas read cooler and smaller, or vanish")

    # --- anomalies: width in pixels, reflections -----------------------------------------------
    n = len(polygons)
    widths = [feature_width_m(p) for p in polygons]
    across: list[float] = []
    flags: list[list[str]] = [[] for _ in range(n)]
    from scipy import ndimage

    objects = ndimage.find_objects(labels, max_label=n) if labels is not None and n else [None] * n
    for i, p in enumerate(polygons):
        g = math.nan
        sl = objects[i] if i < len(objects) else None
        if sl is not None:
            vals = gsd_grid[sl][labels[sl] == i + 1]
            vals = vals[np.isfinite(vals)]
            if vals.size:
                g = float(np.median(vals))
        if not math.isfinite(g):
            pt = p.representative_point()
            c, r = ~grid_transform @ (pt.x, pt.y)
            r, c = int(math.floor(r)), int(math.floor(c))
            if 0 <= r < rows and 0 <= c < cols and math.isfinite(gsd_grid[r, c]):
                g = float(gsd_grid[r, c])
            else:
                g = float(grid_pixel_m)
        across.append(pixels_across(widths[i], g))
        if across[-1] < n_across:
            flags[i].append(UNDER_RESOLVED_FLAG)
    small = [i + 1 for i in range(n) if across[i] < n_across]
    if small:
        warnings.append(
            f"anomal{'y' if len(small) == 1 else 'ies'} {_ids(small)} span{'s' if len(small) == 1 else ''} fewer than "
            f"{n_across:g} pixels of the imagery across {'its' if len(small) == 1 else 'their'} narrowest width "
            "([limits] min_pixels_across): too small to measure reliably; the camera's spot size mixes them with "
            f"the dry {wording_of(survey).area_short} around, so their delta-T reads low and the outline is uncertain (flag "
            f"\"{UNDER_RESOLVED_FLAG}\")")

    suspects: dict[int, ReflectionSuspect] = {}
    compared: dict[int, list[ViewDelta]] = {}
    sharp_views = [v for v in frames if not v.blurred]
    if labels is not None and len(sharp_views) >= 2 and n:
        suspects, compared = multi_view_reflections(
            labels, n, sharp_views, detection.background_c, threshold_c=detection.threshold_c,
            transform=grid_transform, widths_m=widths, ratio=refl_ratio)
    # specular surfaces: sections by their words, and the plan layer
    shiny: list[tuple[str, BaseGeometry]] = []
    for sec in sections:
        kind = specular_words(getattr(sec, "assembly", None))
        if kind is not None:
            shiny.append((f"section {sec.name} ({kind}: \"{sec.assembly}\")", sec.geometry))
    if specular is not None and not specular.is_empty:
        shiny.append(("[plan] specular layer", specular))
    for i, p in enumerate(polygons):
        aid = i + 1
        if aid in suspects or len(compared.get(aid, [])) >= 2 or p.area <= 0:
            continue
        for name, geom in shiny:
            share = p.intersection(geom).area / p.area
            if share >= 0.5:
                suspects[aid] = ReflectionSuspect(
                    id=aid, rule="specular surface", surface=name,
                    reason=(f"a warm patch on a specular surface ({name}; {100 * share:.0f} % of its area) seen "
                            "from one viewpoint: shiny metal, glass and smooth single-ply reflect warm objects and "
                            "sky; image it from another angle, or core it"))
                break
    for aid in sorted(suspects):
        flags[aid - 1].append(REFLECTION_FLAG)
    for k in sorted(suspects):
        warnings.append(f"anomaly #{k} is a reflection suspect (flag \"{REFLECTION_FLAG}\"; it keeps its outline "
                        f"and status): {suspects[k].reason}")

    # --- display ranges ------------------------------------------------------------------------
    bg = detection.background_c[usable] if usable.any() else np.zeros(0)
    bg = finite_sample(bg)
    centre = float(np.median(bg)) if bg.size else None
    surface_range = roof_display_range(surface_c, usable, centre_c=centre)
    delta_range = delta_display_range(detection.delta_c, threshold_c=detection.threshold_c)
    return ImageryReport(
        sources=tuple(sources), min_pixels_across=n_across, reliable_gsd_m=reliable_gsd,
        smallest_reliable_area_m2=small_area, worst_gsd_m=worst_gsd, worst_reliable_area_m2=worst_area,
        anomaly_flags=tuple(tuple(f) for f in flags), anomaly_pixels_across=tuple(across),
        reflections=tuple(suspects[k] for k in sorted(suspects)),
        compared=tuple(sorted(k for k, v in compared.items() if len(v) >= 2)),
        surface_range=surface_range, delta_range=delta_range, warnings=tuple(warnings),
        area_word=wording_of(survey).area_short,
        settings={"min_pixels_across": n_across, "focus_ratio": focus_ratio, "reflection_ratio": refl_ratio,
                  "exclude_blurred": exclude, "ifov_mrad": ifov,
                  "distance_m": cam.distance_m if ifov else None},
    )


def frame_views(names: Sequence[str], images_k: Sequence[np.ndarray], matrices: Sequence[np.ndarray],
                parts: Sequence[Any], *, bounds: tuple[float, float, float, float] | None, focus_ratio: float,
                exclude_blurred: bool) -> list[FrameView]:
    """Sharpness and focus flags of the frames, with their resampled parts (for the pipeline).

    Parameters
    ----------
    names
        Frame files as named in survey.toml.
    images_k
        Each frame's surface temperature in image pixels, K.
    matrices
        Each frame's image -> plan homography.
    parts
        Each frame's :class:`wetmap.register.ResampledFrame`, or ``None`` when it lands
        nowhere on the grid.
    bounds
        The plan's bounds (for the GSD range).
    focus_ratio, exclude_blurred
        ``[limits]`` settings.

    Returns
    -------
    list of FrameView
        One per frame that lands on the grid, in order; ``fallback`` set for blurred ones
        when ``exclude_blurred``.
    """
    sharp = [sharpness(img) for img in images_k]
    flagged, rel = flag_blurred([s.index for s in sharp], ratio=focus_ratio, leave_one_out=True)
    out = []
    for i, part in enumerate(parts):
        if part is None:
            continue
        out.append(FrameView(
            path=names[i], window=part.window, values_k=part.values, weights=part.weights, gsd_m=part.gsd_m,
            gsd=frame_gsd_range_m(matrices[i], images_k[i].shape, bounds=bounds), sharpness=sharp[i],
            blurred=bool(flagged[i]), relative=float(rel[i]), fallback=bool(flagged[i]) and exclude_blurred))
    return out


def _rel(path: Path, folder: Path) -> str:
    try:
        return Path(path).relative_to(folder).as_posix()
    except ValueError:
        return str(path)
