"""Tests for wetmap.polygons: labelling, clean-up, statistics and outlines.

Masks are built in code from pixel centres: pixel (row, col) is in a shape when
its centre (row + 0.5, col + 0.5) is. Outside values are named beside each
check: a formula, a reference library (pyproj, shapely, numpy) or the rule the
module documents.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import shapely
from affine import Affine
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from wetmap.polygons import (
    RegionStats,
    fill_small_holes,
    label_regions,
    pixel_edge_perimeter,
    polygonize,
    region_stats,
    remove_small_regions,
)

IDENTITY = Affine.identity()
#: Perimeter of the mid-edge outline of a large circle over 2 pi r: the
#: 8-direction chain averaged over all directions (formula:
#: (4 / pi) * integral of cos t + (sqrt 2 - 1) sin t over 0..pi/4 = 8 (sqrt 2 - 1) / pi).
MID_EDGE_CIRCLE_RATIO = 8 * (math.sqrt(2) - 1) / math.pi


# ------------------------------------------------------------------------ fixtures


def disc_mask(radius: float, *, centre: tuple[float, float] | None = None, margin: int = 3) -> np.ndarray:
    """Pixels whose centres lie within ``radius`` px of ``centre`` (row, col).

    The default centre is off the pixel lattice (by 0.31, 0.17 px) so the
    digital disc has no special symmetry.
    """
    n = int(math.ceil(2 * radius)) + 2 * margin
    if centre is None:
        centre = (n / 2 + 0.31, n / 2 + 0.17)
    rows, cols = np.mgrid[0:n, 0:n] + 0.5
    return (rows - centre[0]) ** 2 + (cols - centre[1]) ** 2 <= radius**2


def rotated_square_mask(side: float, degrees: float) -> np.ndarray:
    """Pixels whose centres lie in a ``side`` px square rotated by ``degrees``
    about a centre off the pixel lattice."""
    n = int(math.ceil(side * math.sqrt(2))) + 6
    rows, cols = np.mgrid[0:n, 0:n] + 0.5
    rc, cc = n / 2 + 0.23, n / 2 + 0.11
    t = math.radians(degrees)
    u = (cols - cc) * math.cos(t) + (rows - rc) * math.sin(t)
    v = -(cols - cc) * math.sin(t) + (rows - rc) * math.cos(t)
    return (np.abs(u) <= side / 2) & (np.abs(v) <= side / 2)


def rectangle_mask(height: int, width: int, *, margin: int = 2) -> np.ndarray:
    """An axis-aligned ``height`` x ``width`` px rectangle inside a margin."""
    mask = np.zeros((height + 2 * margin, width + 2 * margin), dtype=bool)
    mask[margin : margin + height, margin : margin + width] = True
    return mask


def outline_of(mask: np.ndarray, transform: Affine = IDENTITY, **kwargs) -> shapely.Polygon:
    """The one polygon of a one-region mask."""
    labels, n = label_regions(mask)
    assert n == 1
    [polygon] = polygonize(labels, n, transform, **kwargs)
    return polygon


def pixel_centre_mean(mask: np.ndarray, transform: Affine) -> tuple[float, float]:
    """Plan position of the mean pixel centre (pixel-centre rule)."""
    rows, cols = np.nonzero(mask)
    return transform @ (cols.mean() + 0.5, rows.mean() + 0.5)


# ------------------------------------------------------------------------- labelling


def test_label_regions_is_four_connected_int32():
    mask = np.array(
        [
            [1, 1, 0, 0],
            [0, 0, 1, 0],  # touches the first region only at a corner
            [1, 0, 1, 1],
        ],
        dtype=bool,
    )
    labels, n = label_regions(mask)
    assert labels.dtype == np.int32
    assert n == 3
    np.testing.assert_array_equal(labels, [[1, 1, 0, 0], [0, 0, 2, 0], [3, 0, 2, 2]])


def test_label_regions_rejects_non_boolean_masks():
    with pytest.raises(TypeError, match="mask: dtype float64"):
        label_regions(np.zeros((3, 3)))
    with pytest.raises(ValueError, match="2-D"):
        label_regions(np.zeros(3, dtype=bool))


def test_remove_small_regions_by_four_connected_size():
    mask = np.array(
        [
            [1, 1, 0, 0, 1],
            [1, 0, 0, 1, 0],  # the two right-hand pixels touch at a corner: two regions of 1
            [0, 0, 0, 0, 0],
            [1, 1, 1, 1, 0],
        ],
        dtype=bool,
    )
    expected = np.array(
        [
            [1, 1, 0, 0, 0],
            [1, 0, 0, 0, 0],
            [0, 0, 0, 0, 0],
            [1, 1, 1, 1, 0],
        ],
        dtype=bool,
    )
    np.testing.assert_array_equal(remove_small_regions(mask, min_pixels=2), expected)
    np.testing.assert_array_equal(remove_small_regions(mask, min_pixels=3), expected)
    only_big = expected.copy()
    only_big[:2] = False
    np.testing.assert_array_equal(remove_small_regions(mask, min_pixels=4), only_big)
    assert not remove_small_regions(mask, min_pixels=5).any()


@pytest.mark.parametrize("min_pixels", [-3, 0, 1])
def test_remove_small_regions_min_pixels_up_to_one_returns_a_copy(min_pixels):
    mask = np.eye(4, dtype=bool)
    out = remove_small_regions(mask, min_pixels=min_pixels)
    np.testing.assert_array_equal(out, mask)
    assert out is not mask and not np.shares_memory(out, mask)


def test_fill_small_holes():
    mask = np.array(
        [
            [1, 1, 1, 1, 1, 1, 0],  # the 0 at the border is outside, never filled
            [1, 0, 1, 0, 0, 1, 1],  # a 1-px hole and a 3-px hole
            [1, 1, 1, 0, 1, 1, 1],
            [1, 1, 1, 1, 1, 1, 1],
        ],
        dtype=bool,
    )
    filled_1 = mask.copy()
    filled_1[1, 1] = True
    np.testing.assert_array_equal(fill_small_holes(mask, max_pixels=1), filled_1)
    np.testing.assert_array_equal(fill_small_holes(mask, max_pixels=2), filled_1)
    filled_3 = filled_1.copy()
    filled_3[1, 3] = filled_3[1, 4] = filled_3[2, 3] = True
    np.testing.assert_array_equal(fill_small_holes(mask, max_pixels=3), filled_3)
    out = fill_small_holes(mask, max_pixels=0)
    np.testing.assert_array_equal(out, mask)
    assert out is not mask


def test_fill_small_holes_counts_corner_pockets_as_holes():
    """A pocket reaching the outside only through a pixel corner is a hole
    (4-connected background), as in the polygon drawn for the region."""
    mask = np.array(
        [
            [0, 0, 0, 0, 0],
            [0, 1, 1, 1, 0],
            [0, 1, 0, 1, 0],
            [0, 1, 1, 0, 0],  # the pocket (2, 2) meets the outside at a corner
            [0, 0, 0, 0, 0],
        ],
        dtype=bool,
    )
    labels, n = label_regions(mask)
    [polygon] = polygonize(labels, n, IDENTITY, outline="pixel")
    assert len(polygon.interiors) == 1
    filled = fill_small_holes(mask, max_pixels=1)
    assert filled[2, 2] and filled.sum() == mask.sum() + 1


# ------------------------------------------------------------------------ statistics


def _slow_region_stats(labels: np.ndarray, count: int, values: np.ndarray) -> RegionStats:
    """Obviously correct reference: one boolean selection per region."""
    counts, means, maxes = [], [], []
    for label in range(1, count + 1):
        inside = labels == label
        counts.append(int(inside.sum()))
        finite = values[inside & np.isfinite(values)].astype(np.float64)
        means.append(finite.mean() if finite.size else np.nan)
        maxes.append(finite.max() if finite.size else np.nan)
    return RegionStats(np.array(counts, dtype=np.int64), np.array(means), np.array(maxes))


@pytest.mark.parametrize("seed", range(5))
@pytest.mark.parametrize("dtype", [np.float32, np.float64])
def test_region_stats_matches_slow_reference(seed, dtype):
    rng = np.random.default_rng(seed)
    mask = rng.random((60, 70)) < 0.45
    labels, n = label_regions(mask)
    values = rng.normal(2.0, 3.0, mask.shape).astype(dtype)
    values[rng.random(mask.shape) < 0.2] = np.nan
    values[rng.random(mask.shape) < 0.02] = np.inf
    values[rng.random(mask.shape) < 0.02] = -np.inf
    # one region entirely without finite values
    values[labels == 1] = np.nan
    fast = region_stats(labels, n, values)
    slow = _slow_region_stats(labels, n, values)
    assert fast.pixel_count.dtype == np.int64 and fast.pixel_count.shape == (n,)
    assert fast.mean.dtype == np.float64 and fast.max.dtype == np.float64
    np.testing.assert_array_equal(fast.pixel_count, slow.pixel_count)
    np.testing.assert_allclose(fast.mean, slow.mean, rtol=1e-12, equal_nan=True)
    np.testing.assert_array_equal(fast.max, slow.max)
    assert np.isnan(fast.mean[0]) and np.isnan(fast.max[0])


def test_region_stats_empty_and_shape_errors():
    labels = np.zeros((3, 3), dtype=np.int32)
    stats = region_stats(labels, 0, np.ones((3, 3)))
    assert stats.pixel_count.shape == stats.mean.shape == stats.max.shape == (0,)
    with pytest.raises(ValueError, match="values: shape"):
        region_stats(labels, 0, np.ones((3, 4)))
    with pytest.raises(ValueError, match="labels: values 5..5"):
        region_stats(np.full((2, 2), 5, dtype=np.int32), 2, np.ones((2, 2)))


# --------------------------------------------------------------- shapes: disc, squares


@pytest.mark.parametrize("radius", [20, 50, 200])
def test_disc_area_and_perimeter(radius):
    mask = disc_mask(radius)
    polygon = outline_of(mask)
    pixels = int(mask.sum())
    assert polygon.is_valid and len(polygon.interiors) == 0
    # Area: the pixel count is the area estimate the outline must keep.
    assert polygon.area == pytest.approx(pixels, rel=0.01)
    # Area against the circle, pi r^2 (formula).
    assert polygon.area == pytest.approx(math.pi * radius**2, rel=0.01)
    # Perimeter against 2 pi r (formula).
    assert polygon.length == pytest.approx(2 * math.pi * radius, rel=0.03)


def test_disc_staircase_and_mid_edge_perimeters_overstate():
    """Why the smoothed outline is reported: the staircase is 4/pi too long on
    a large circle, the plain mid-edge outline about 5.5 % too long."""
    radius = 200
    mask = disc_mask(radius)
    labels, n = label_regions(mask)
    circle = 2 * math.pi * radius
    staircase = pixel_edge_perimeter(labels, n, IDENTITY)[0]
    # A row- and column-convex region's staircase is as long as its bounding
    # box, 8 r, and 8 r / (2 pi r) = 4 / pi (formula).
    assert staircase / circle == pytest.approx(4 / math.pi, rel=0.01)
    [pixel] = polygonize(labels, n, IDENTITY, outline="pixel")
    assert pixel.length == pytest.approx(staircase, abs=1e-9)
    [mid_edge] = polygonize(labels, n, IDENTITY, outline="mid-edge")
    assert mid_edge.length / circle == pytest.approx(MID_EDGE_CIRCLE_RATIO, rel=0.01)
    [smooth] = polygonize(labels, n, IDENTITY)
    assert abs(smooth.length / circle - 1) < 0.03 < abs(mid_edge.length / circle - 1)


@pytest.mark.parametrize("degrees", [30, 45])
@pytest.mark.parametrize("side", [40, 120])
def test_rotated_square(side, degrees):
    mask = rotated_square_mask(side, degrees)
    polygon = outline_of(mask)
    assert polygon.is_valid
    # Perimeter 4 a and area a^2 of the square (formula).
    assert polygon.length == pytest.approx(4 * side, rel=0.03)
    assert polygon.area == pytest.approx(side**2, rel=0.01)
    assert polygon.area == pytest.approx(mask.sum(), rel=0.01)


def test_straight_edges_at_every_angle_within_three_percent():
    """A 60 px square at 0-45 degrees in 2.5-degree steps: perimeter within 3 %
    of 4 a (formula); the staircase is up to sqrt(2) too long."""
    side = 60
    worst = 0.0
    for degrees in np.arange(0.0, 45.01, 2.5):
        polygon = outline_of(rotated_square_mask(side, degrees))
        worst = max(worst, abs(polygon.length / (4 * side) - 1))
    assert worst < 0.03


@pytest.mark.parametrize(("height", "width"), [(3, 4), (9, 17), (45, 120)])
def test_axis_aligned_rectangle(height, width):
    """Exact values of the three outlines of a rectangle (sides >= 3 px).

    Formulae from the outline rules: the mid-edge rule cuts a 0.125 px^2
    triangle at each corner and replaces 1 px of staircase by sqrt(2)/2; the
    binomial pass turns each corner into a 0.884 + 0.707 + 0.884 px path
    cutting 0.375 px^2, i.e. a perimeter of 2 (w + h) - 12 + 7 sqrt(2).
    """
    mask = rectangle_mask(height, width)
    box = 2 * (height + width)
    pixel = outline_of(mask, outline="pixel")
    assert pixel.area == height * width and pixel.length == box
    assert len(pixel.exterior.coords) == 5  # collinear vertices dropped
    mid_edge = outline_of(mask, outline="mid-edge")
    assert mid_edge.area == pytest.approx(height * width - 4 * 0.125, abs=1e-9)
    assert mid_edge.length == pytest.approx(box - 4 + 2 * math.sqrt(2), abs=1e-9)
    assert len(mid_edge.exterior.coords) == 9  # an octagon
    smooth = outline_of(mask)
    assert smooth.area == pytest.approx(height * width - 4 * 0.375, abs=1e-9)
    assert smooth.length == pytest.approx(box - 12 + 7 * math.sqrt(2), abs=1e-9)
    # The sides stay on the pixel edges: the bounding box is the rectangle's.
    np.testing.assert_allclose(smooth.bounds, (2, 2, 2 + width, 2 + height))


# ---------------------------------------------------------------------- transforms


def _blob() -> np.ndarray:
    """An irregular region with a hole: a disc, a bar and a notch."""
    mask = disc_mask(14, centre=(20.3, 18.8), margin=8)
    mask[18:22, 5:40] = True
    mask[4:12, 16:20] = False  # a notch from the top
    mask[19:22, 24:27] = False  # a hole inside the bar/disc
    labels, n = label_regions(mask)
    assert n == 1
    return mask


TRANSFORMS = {
    "north-up 0.05 m": Affine(0.05, 0.0, 500_000.0, 0.0, -0.05, 5_500_000.0),
    "south-up 0.05 m": Affine(0.05, 0.0, 1_000.0, 0.0, 0.05, 2_000.0),
    "rotated 33 deg": Affine.translation(250.0, -40.0) @ Affine.rotation(33.0) @ Affine.scale(0.03, -0.03),
    "sheared": Affine(0.04, 0.01, 10.0, -0.005, -0.05, 20.0),
}


@pytest.mark.parametrize("name", list(TRANSFORMS))
@pytest.mark.parametrize("outline", ["smooth", "mid-edge", "pixel"])
def test_transforms_scale_area_and_place_polygons(name, outline):
    transform = TRANSFORMS[name]
    mask = _blob()
    in_pixels = outline_of(mask, outline=outline)
    in_plan = outline_of(mask, transform, outline=outline)
    assert in_plan.is_valid and len(in_plan.interiors) == 1
    # Area scales by |det| (formula: affine maps scale areas by |det A|).
    assert in_plan.area == pytest.approx(in_pixels.area * abs(transform.determinant), rel=1e-9)
    # The polygon is the affine image of the pixel-space polygon.
    expected = shapely.affinity.affine_transform(in_pixels, [transform.a, transform.b, transform.d, transform.e, transform.c, transform.f])
    assert shapely.equals_exact(shapely.normalize(in_plan), shapely.normalize(expected), tolerance=1e-6)
    # It lands where the transform puts the pixel centres (pixel-centre rule):
    # the centroid is within 0.1 px of the mean pixel centre.
    cx, cy = pixel_centre_mean(mask, transform)
    step = math.sqrt(abs(transform.determinant))
    assert math.hypot(in_plan.centroid.x - cx, in_plan.centroid.y - cy) < 0.1 * step
    # Shell counter-clockwise, holes clockwise in the plan (shapely.is_ccw).
    assert shapely.is_ccw(in_plan.exterior)
    assert not any(shapely.is_ccw(ring) for ring in in_plan.interiors)


def test_area_in_utm_agrees_with_geodesic_area():
    """30 m x 20 m region at 0.05 m pixels in UTM 33N near the central meridian.

    Source: pyproj.Geod(ellps="WGS84")
    .geometry_area_perimeter after reprojection with pyproj.Transformer.
    The UTM grid scale there is k0 = 0.9996, so the plan area is about
    0.08 % smaller than the ellipsoidal one; pyproj's areal scale factor at
    the centroid removes that difference.
    """
    pyproj = pytest.importorskip("pyproj")
    pixel_m = 0.05
    mask = rectangle_mask(400, 600, margin=5)  # 20 m north-south, 30 m east-west
    transform = Affine(pixel_m, 0.0, 500_010.0, 0.0, -pixel_m, 5_500_030.0)
    polygon = outline_of(mask, transform)
    assert polygon.area == pytest.approx(30 * 20 - 1.5 * pixel_m**2, rel=1e-12)
    to_wgs84 = pyproj.Transformer.from_crs("EPSG:32633", "EPSG:4326", always_xy=True)
    lonlat = shapely.transform(polygon, lambda xy: np.column_stack(to_wgs84.transform(xy[:, 0], xy[:, 1])))
    geod_area, geod_perimeter = pyproj.Geod(ellps="WGS84").geometry_area_perimeter(lonlat)
    geod_area = abs(geod_area)
    assert polygon.area == pytest.approx(geod_area, rel=1e-3)  # within 0.1 % (UTM scale k0 = 0.9996: 0.08 %)
    assert polygon.length == pytest.approx(geod_perimeter, rel=1e-3)
    lon, lat = to_wgs84.transform(polygon.centroid.x, polygon.centroid.y)
    factors = pyproj.Proj("EPSG:32633").get_factors(lon, lat)
    assert polygon.area / factors.areal_scale == pytest.approx(geod_area, rel=2e-6)


# ------------------------------------------------------------------ topology, edges


def test_ring_shaped_region_keeps_its_hole():
    mask = disc_mask(10, centre=(12.2, 12.1), margin=3) & ~disc_mask(4, centre=(12.2, 12.1), margin=9)
    labels, n = label_regions(mask)
    assert n == 1
    for outline in ["smooth", "mid-edge", "pixel"]:
        [polygon] = polygonize(labels, n, IDENTITY, outline=outline)
        assert polygon.is_valid and len(polygon.interiors) == 1
    [mid_edge] = polygonize(labels, n, IDENTITY, outline="mid-edge")
    # mid-edge rule: area = pixels - 0.5 + 0.5 * holes
    assert mid_edge.area == pytest.approx(mask.sum(), abs=1e-9)


def test_regions_touching_at_a_corner_give_separate_disjoint_polygons():
    mask = np.zeros((6, 6), dtype=bool)
    mask[1:3, 1:3] = True
    mask[3:5, 3:5] = True
    labels, n = label_regions(mask)
    assert n == 2
    for outline in ["smooth", "mid-edge"]:
        first, second = polygonize(labels, n, IDENTITY, outline=outline)
        assert first.is_valid and second.is_valid
        assert first.intersection(second).area == 0
        assert first.distance(second) >= (math.sqrt(2) / 2 - (0.5 if outline == "smooth" else 0)) - 1e-9
    first, second = polygonize(labels, n, IDENTITY, outline="pixel")
    assert first.touches(second)  # the staircases share the corner point


def test_whole_array_region():
    mask = np.ones((7, 5), dtype=bool)
    polygon = outline_of(mask, Affine(0.1, 0, 0, 0, -0.1, 0.7))
    assert polygon.is_valid
    assert polygon.area == pytest.approx((35 - 1.5) * 0.01)
    np.testing.assert_allclose(polygon.bounds, (0, 0, 0.5, 0.7), atol=1e-12)


def test_tiny_arrays():
    pixel = np.ones((1, 1), dtype=bool)
    for outline, area in [("pixel", 1.0), ("mid-edge", 0.5), ("smooth", 0.125)]:
        # 1 px: the mid-edge outline is the diamond through the edge midpoints.
        polygon = outline_of(pixel, outline=outline)
        assert polygon.is_valid and polygon.area == pytest.approx(area)
    labels, n = label_regions(np.zeros((1, 1), dtype=bool))
    assert n == 0 and polygonize(labels, n, IDENTITY) == []
    row = np.array([[1, 1, 0, 1, 1, 1, 0, 0, 1]], dtype=bool)
    labels, n = label_regions(row)
    polygons = polygonize(labels, n, IDENTITY, outline="mid-edge")
    assert [p.area for p in polygons] == pytest.approx([2 - 0.5, 3 - 0.5, 1 - 0.5])
    assert all(p.is_valid for p in polygonize(labels, n, IDENTITY))
    labels, n = label_regions(row.T.copy())
    assert n == 3 and all(p.is_valid for p in polygonize(labels, n, IDENTITY))


def test_empty_mask_gives_no_polygons():
    labels, n = label_regions(np.zeros((50, 40), dtype=bool))
    assert n == 0
    assert polygonize(labels, n, IDENTITY) == []
    assert pixel_edge_perimeter(labels, n, IDENTITY).shape == (0,)
    labels, n = label_regions(np.zeros((0, 4), dtype=bool))
    assert polygonize(labels, n, IDENTITY) == []


def test_label_without_pixels_gives_an_empty_polygon():
    labels = np.zeros((4, 4), dtype=np.int32)
    labels[1:3, 1:3] = 2
    first, second, third = polygonize(labels, 3, IDENTITY, outline="mid-edge")
    assert first.is_empty and third.is_empty
    assert second.area == pytest.approx(4 - 0.5)  # mid-edge rule
    assert isinstance(first, shapely.Polygon)


def test_polygonize_rejects_misuse():
    labels = np.zeros((4, 4), dtype=np.int32)
    labels[0, 0] = labels[3, 3] = 1  # one label, two pieces
    with pytest.raises(ValueError, match="label.s. 1 made of several 4-connected pieces"):
        polygonize(labels, 1, IDENTITY)
    with pytest.raises(ValueError, match="1..count"):
        polygonize(labels, 0, IDENTITY)
    with pytest.raises(ValueError, match="outline: 'staircase'"):
        polygonize(labels, 1, IDENTITY, outline="staircase")
    with pytest.raises(ValueError, match="determinant"):
        polygonize(labels, 1, Affine(1, 0, 0, 2, 0, 0))
    with pytest.raises(TypeError, match="labels: dtype bool"):
        polygonize(labels > 0, 1, IDENTITY)
    with pytest.raises(TypeError, match="affine.Affine"):
        polygonize(labels, 1, (1, 0, 0, 0, -1, 0))


def test_other_integer_label_dtypes_are_accepted():
    mask = disc_mask(6)
    labels, n = label_regions(mask)
    expected = polygonize(labels, n, IDENTITY)
    for dtype in [np.int64, np.uint16, np.uint8]:
        assert shapely.equals_exact(polygonize(labels.astype(dtype), n, IDENTITY)[0], expected[0], tolerance=0)


@pytest.mark.parametrize("name", list(TRANSFORMS))
def test_pixel_edge_perimeter_matches_pixel_outline(name):
    transform = TRANSFORMS[name]
    rng = np.random.default_rng(7)
    mask = rng.random((30, 40)) < 0.55
    labels, n = label_regions(mask)
    edges = pixel_edge_perimeter(labels, n, transform)
    outlines = polygonize(labels, n, transform, outline="pixel")
    # rtol: plan coordinates near 5.5e6 m carry ~1e-9 m rounding per vertex
    np.testing.assert_allclose(edges, [p.length for p in outlines], rtol=1e-7)


# ---------------------------------------------------------------- property tests


@st.composite
def random_masks(draw) -> np.ndarray:
    """Up to 24 x 24: either independent random pixels or a union of random
    rectangles and discs minus a few random pixels."""
    rows = draw(st.integers(1, 24))
    cols = draw(st.integers(1, 24))
    if draw(st.booleans()):
        return draw(arrays(np.bool_, (rows, cols)))
    mask = np.zeros((rows, cols), dtype=bool)
    rr, cc = np.mgrid[0:rows, 0:cols] + 0.5
    for _ in range(draw(st.integers(1, 6))):
        r0, c0 = draw(st.integers(0, rows - 1)), draw(st.integers(0, cols - 1))
        if draw(st.booleans()):
            mask[r0 : r0 + draw(st.integers(1, 10)), c0 : c0 + draw(st.integers(1, 10))] = True
        else:
            radius = draw(st.floats(0.5, 8.0))
            mask |= (rr - r0 - 0.3) ** 2 + (cc - c0 - 0.6) ** 2 <= radius**2
    for _ in range(draw(st.integers(0, 8))):
        mask[draw(st.integers(0, rows - 1)), draw(st.integers(0, cols - 1))] = False
    return mask


@settings(max_examples=150, deadline=None)
@given(random_masks())
def test_property_outlines_of_random_masks(mask):
    labels, n = label_regions(mask)
    pixels = np.bincount(labels.ravel(), minlength=n + 1)[1:]
    pixel = polygonize(labels, n, IDENTITY, outline="pixel")
    mid_edge = polygonize(labels, n, IDENTITY, outline="mid-edge")
    smooth = polygonize(labels, n, IDENTITY)
    assert len(pixel) == len(mid_edge) == len(smooth) == n
    staircase = pixel_edge_perimeter(labels, n, IDENTITY)
    for i in range(n):
        for polygon in (pixel[i], mid_edge[i], smooth[i]):
            assert isinstance(polygon, shapely.Polygon) and polygon.is_valid and not polygon.is_empty
        holes = len(pixel[i].interiors)
        assert len(mid_edge[i].interiors) == len(smooth[i].interiors) == holes
        # pixel outline: exact area and staircase length
        assert pixel[i].area == pixels[i]
        assert pixel[i].length == pytest.approx(staircase[i], abs=1e-9)
        # mid-edge rule: each ring turns 4 more times one way than the other
        # and each turn moves 0.125 px^2, so area = pixels - 0.5 + 0.5 * holes
        assert mid_edge[i].area == pytest.approx(pixels[i] - 0.5 + 0.5 * holes, abs=1e-9)
        # binomial pass: every vertex moves <= 0.25 px, so the boundaries stay
        # within 0.25 px (Hausdorff, shapely) and the area changes by at most
        # the 0.25 px tube around the mid-edge boundary: 2 * 0.25 * L + pi * 0.25^2
        # per ring (the tube-area bound for a closed curve of length L).
        gap = shapely.hausdorff_distance(smooth[i].boundary, mid_edge[i].boundary, densify=0.25)
        assert gap <= 0.25 + 1e-9
        tube = 0.5 * mid_edge[i].length + math.pi * 0.25**2 * (1 + holes)
        assert abs(smooth[i].area - mid_edge[i].area) <= tube
    # Different regions never overlap: mid-edge outlines of corner-touching
    # regions are sqrt(2)/2 apart, smoothing moves each by <= 0.25 px.
    if n < 2:
        return
    for polygons, min_gap in ((mid_edge, math.sqrt(2) / 2), (smooth, math.sqrt(2) / 2 - 0.5)):
        tree = shapely.STRtree(polygons)
        left, right = tree.query(polygons, predicate="dwithin", distance=min_gap - 1e-6)
        pairs = left < right
        assert not pairs.any(), [(int(a), int(b)) for a, b in zip(left[pairs], right[pairs])]
    tree = shapely.STRtree(pixel)
    left, right = tree.query(pixel, predicate="intersects")
    pairs = left < right
    assert all(pixel[a].intersection(pixel[b]).area == 0 for a, b in zip(left[pairs], right[pairs]))


def test_every_3x3_mask():
    """Exhaustive: all 512 masks of 3 x 3 pixels give valid, disjoint outlines
    with the mid-edge area identity."""
    weights = 1 << np.arange(9)
    for bits in range(512):
        mask = ((bits & weights) > 0).reshape(3, 3)
        labels, n = label_regions(mask)
        pixels = np.bincount(labels.ravel(), minlength=n + 1)[1:]
        mid_edge = polygonize(labels, n, IDENTITY, outline="mid-edge")
        smooth = polygonize(labels, n, IDENTITY)
        assert all(p.is_valid and not p.is_empty for p in mid_edge + smooth), mask
        holes = np.array([len(p.interiors) for p in mid_edge])
        np.testing.assert_allclose([p.area for p in mid_edge], pixels - 0.5 + 0.5 * holes)
        for i in range(n):
            for j in range(i + 1, n):
                assert smooth[i].distance(smooth[j]) > math.sqrt(2) / 2 - 0.5 - 1e-9, mask


@settings(max_examples=60, deadline=None)
@given(random_masks(), st.sampled_from(list(TRANSFORMS)))
def test_property_transform_keeps_validity_and_scales_area(mask, name):
    transform = TRANSFORMS[name]
    labels, n = label_regions(mask)
    in_pixels = polygonize(labels, n, IDENTITY)
    in_plan = polygonize(labels, n, transform)
    for p, q in zip(in_pixels, in_plan):
        assert q.is_valid
        # abs: shoelace rounding of plan coordinates near 5.5e6 m (~1e-10 m^2)
        assert q.area == pytest.approx(p.area * abs(transform.determinant), rel=1e-9, abs=1e-9)


@settings(max_examples=60, deadline=None)
@given(random_masks(), st.integers(0, 6))
def test_property_clean_up(mask, size):
    kept = remove_small_regions(mask, min_pixels=size)
    assert not (kept & ~mask).any()
    labels, n = label_regions(kept)
    if n and size > 1:
        assert np.bincount(labels.ravel())[1:].min() >= size
    filled = fill_small_holes(mask, max_pixels=size)
    assert not (mask & ~filled).any()
    added, _ = label_regions(filled & ~mask)
    if added.any():
        assert np.bincount(added.ravel())[1:].max() <= size
        border = np.concatenate([added[0], added[-1], added[:, 0], added[:, -1]])
        assert not border.any()
