"""Simplified outlines for the later stages, and the fewest margin segments.

The bounds checked here are geometric facts, not outside values:

- Douglas-Peucker keeps a subset of the vertices and drops a run only when every
  dropped vertex lies within the tolerance of the chord that replaces it, so the
  Hausdorff distance between a chain and its copy is at most the tolerance (Douglas and
  Peucker 1973); GEOS may also drop a ring's start vertex afterwards, which can double
  it (hence wetmap runs it at half the stated bound).
- The area between a chain and its chord, when every point of the chain is within
  ``t`` of the chord, is at most ``t`` times the chain's length (each piece of the
  chain sweeps at most ``t`` across); summed over an outline: ``|dA| <= t * perimeter``.
- A circular arc of radius ``m`` drawn with chords of angle ``theta`` lies at most the
  sagitta ``m * (1 - cos(theta / 2))`` from its chords (elementary geometry).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest
import shapely
from affine import Affine
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import ndimage
from shapely.geometry import Point, box

import wetmap.pipeline as pipeline
from wetmap.polygons import SIMPLIFY_TOLERANCE_PX, label_regions, polygonize, simplify_outlines
from wetmap.quantities import MARGIN_CHORD_FRACTION, QUAD_SEGS, repair_outline

SAMPLES = Path(__file__).resolve().parents[1] / "sample_surveys"


def _hausdorff(a, b, *, step: float) -> float:
    """Hausdorff distance between two regions, their boundaries sampled every ``step``.

    GEOS's own is discrete (vertices only), so both outlines are densified first; a
    point inside the other region is at distance 0 (a hole that collapsed counts by its
    points' distance to the region, not to a ring that no longer exists).
    """
    def one_way(p, q):
        pts = shapely.points(shapely.get_coordinates(shapely.segmentize(p, step)))
        return float(shapely.distance(pts, q).max())

    return max(one_way(a, b), one_way(b, a))


def _check_bound(exact: list, simple: list, tolerance: float) -> None:
    """Every copy valid, same orientation, within ``tolerance`` (Hausdorff) and the area bound."""
    assert len(simple) == len(exact)
    for e, s in zip(exact, simple):
        if e.is_empty:
            assert s.is_empty
            continue
        assert s.geom_type == "Polygon" and s.is_valid
        assert len(s.interiors) <= len(e.interiors)
        assert shapely.get_num_coordinates(s) <= shapely.get_num_coordinates(e)
        assert _hausdorff(e, s, step=tolerance / 8) <= tolerance * (1 + 1e-9)
        assert abs(s.area - e.area) <= tolerance * e.length * (1 + 1e-9)
        assert s.exterior.is_ccw == e.exterior.is_ccw


@pytest.mark.parametrize("name", ["warehouse_roof", "walked_roof", "yacht_hull"])
def test_samples_draw_simplified_outlines_and_measure_exact_ones(name, monkeypatch):
    seen = []
    real = pipeline.simplify_outlines

    def spy(polys, *, tolerance):
        out = real(polys, tolerance=tolerance)
        seen.append((list(polys), out, tolerance))
        return out

    monkeypatch.setattr(pipeline, "simplify_outlines", spy)
    result = pipeline.process_survey(SAMPLES / name)
    [(exact, simple, tolerance)] = seen
    pixel_m = (result.full_rasters.grid if result.full_rasters is not None else result.grid).pixel_m
    assert tolerance == pytest.approx(SIMPLIFY_TOLERANCE_PX * pixel_m)
    assert len(exact) == len(result.anomalies) > 0
    _check_bound(exact, simple, tolerance)
    # fewer vertices overall: the point of the copy
    assert sum(map(shapely.get_num_coordinates, simple)) < 0.7 * sum(map(shapely.get_num_coordinates, exact))
    for a, e, s in zip(result.anomalies, exact, simple):
        assert a.geometry is s and a.exact is e
        assert a.area_m2 == e.area and a.perimeter_m == e.length  # measured on the exact outline
    # the repair outline grows the copies: within the tolerance plus the margin's chord error
    # (growing two sets by one distance never moves them further apart than they were)
    settings_ = result.survey.repair
    counted = ("wet", "unverified") if settings_.include_unverified else ("wet",)
    wet_exact = [e for e, a in zip(exact, result.anomalies) if a.status in counted]
    if wet_exact:
        from_exact = repair_outline(wet_exact, margin_m=settings_.margin_m, outline=result.outline,
                                    exclusions=result.exclusions)
        bound = tolerance + MARGIN_CHORD_FRACTION * settings_.margin_m
        assert from_exact.hausdorff_distance(result.repair) <= bound * (1 + 1e-9)
        # and the repair area within that distance times the perimeter
        assert abs(from_exact.area - result.repair.area) <= bound * from_exact.length


@st.composite
def blobs(draw):
    """A random mask of smoothed noise (holes, bays, several regions) and a random grid."""
    seed = draw(st.integers(0, 2**32 - 1))
    rows, cols = draw(st.integers(8, 60)), draw(st.integers(8, 60))
    sigma = draw(st.floats(0.8, 4.0))
    level = draw(st.floats(-0.5, 0.8))
    rng = np.random.default_rng(seed)
    field = ndimage.gaussian_filter(rng.standard_normal((rows, cols)), sigma)
    mask = field > level * field.std()
    pixel_m = draw(st.sampled_from([0.01, 0.03, 0.05, 0.25]))
    angle = draw(st.sampled_from([0.0, 17.0, 90.0, 180.0]))
    flip = draw(st.booleans())
    transform = (Affine.translation(500000.0, 5500000.0) @ Affine.rotation(angle)
                 @ Affine.scale(pixel_m, pixel_m if flip else -pixel_m))
    return mask, transform, pixel_m


@settings(max_examples=80, deadline=None)
@given(blobs())
def test_random_blobs_simplified_within_the_bound(blob):
    mask, transform, pixel_m = blob
    labels, count = label_regions(mask)
    exact = polygonize(labels, count, transform)
    tolerance = SIMPLIFY_TOLERANCE_PX * pixel_m
    simple = simplify_outlines(exact, tolerance=tolerance)
    _check_bound(exact, simple, tolerance)
    # the copies do not overlap where the exact outlines did not (more than a sliver)
    if count > 1:
        union_area = shapely.union_all(simple).area
        assert union_area >= sum(s.area for s in simple) - 2 * tolerance * sum(e.length for e in exact)


def test_zero_tolerance_and_empties_are_kept():
    polys = [box(0, 0, 1, 1), shapely.Polygon()]
    assert simplify_outlines(polys, tolerance=0.0) == polys
    out = simplify_outlines(polys, tolerance=0.1)
    assert out[0].equals(polys[0]) and out[1].is_empty
    assert simplify_outlines([], tolerance=0.1) == []


@pytest.mark.parametrize("tolerance", [-0.1, float("nan"), float("inf")])
def test_bad_tolerance_refused(tolerance):
    with pytest.raises(ValueError, match="tolerance"):
        simplify_outlines([box(0, 0, 1, 1)], tolerance=tolerance)


def test_quad_segs_is_the_fewest_within_the_chord_fraction():
    def sagitta_fraction(n: int) -> float:  # chord error of a quarter circle in n chords, per unit radius
        return 1.0 - np.cos(np.pi / (4 * n))

    assert sagitta_fraction(QUAD_SEGS) <= MARGIN_CHORD_FRACTION
    assert sagitta_fraction(QUAD_SEGS - 1) > MARGIN_CHORD_FRACTION


@pytest.mark.parametrize("margin_m", [0.05, 0.3, 1.0])
def test_margin_corners_within_the_chord_error(margin_m):
    """The rounded corners of the repair margin lie within the stated fraction of the true circle."""
    grown = repair_outline([box(10, 10, 10.5, 10.5)], margin_m=margin_m, outline=box(0, 0, 50, 50))
    exact = box(10, 10, 10.5, 10.5).buffer(margin_m, quad_segs=512)  # a near-true rounded square
    assert grown.hausdorff_distance(exact) <= MARGIN_CHORD_FRACTION * margin_m * (1 + 1e-6)
    assert grown.within(exact.buffer(1e-5 * margin_m))  # chords lie inside the arcs (512 chords: 1e-5 m out)
    # the corner area lost is the inscribed polygon's: under 1.2 % of pi m^2
    assert 0 < exact.area - grown.area <= 0.012 * np.pi * margin_m**2
    # a lone point: the chord polygon of the circle of radius m
    disc = repair_outline([Point(25, 25).buffer(1e-6, quad_segs=1)], margin_m=margin_m, outline=box(0, 0, 50, 50))
    assert disc.area == pytest.approx(2 * QUAD_SEGS * margin_m**2 * np.sin(np.pi / (2 * QUAD_SEGS)), rel=1e-4)


# derandomize: the same 40 examples every run, so the suite's time is fixed (no unlucky draw)
@settings(max_examples=40, deadline=None, derandomize=True)
@given(blobs(), st.sampled_from([(1.2, 2.4), (0.6, 0.6), (1.0, 3.0)]), st.sampled_from([1, 3, 7]))
def test_board_counts_over_origins_equal_clipping_each_board(blob, board_m, steps):
    """The take-off counts every origin's boards from fine cells clipped once: the same
    counts as clipping each board of each origin against the outline."""
    from wetmap.quantities import _counts_over_origins, _grid_cells

    mask, _, _ = blob
    labels, count = label_regions(mask)
    if not count:
        return
    # 0.4 m a mask pixel: regions up to 24 m across (boards of about a metre), a few thousand
    # board placings per example (scaling by the drawn pixel size made 600 m regions)
    scale = 0.4
    polys = polygonize(labels, count, Affine.scale(scale, scale))
    repair = shapely.union_all([p.buffer(0.3 * scale, quad_segs=QUAD_SEGS) for p in polys])
    w, h = board_m
    ox0, oy0 = repair.bounds[0] - 0.37, repair.bounds[1] - 0.11
    fine = _counts_over_origins(repair, ox0, oy0, w, h, steps)
    each = [len(_grid_cells(repair, ox0 + i * w / steps, oy0 + j * h / steps, w, h))
            for i in range(steps) for j in range(steps)]
    assert fine.tolist() == each
