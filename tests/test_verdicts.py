"""Statuses from confirmations, exactly as the output format defines them."""

from __future__ import annotations

import numpy as np
from shapely.geometry import Polygon, box

from wetmap.verdicts import assign_status
from wetmap.confirmations import Confirmations


def _conf(points, wet):
    n = len(points)
    xs = np.array([p[0] for p in points], float)
    ys = np.array([p[1] for p in points], float)
    return Confirmations(tuple(f"C{i + 1}" for i in range(n)), xs, ys, np.array(wet, bool), ("result",) * n,
                         np.full(n, np.nan))


def test_wet_if_any_wet_dry_if_all_dry_unverified_if_none():
    polys = [box(0, 0, 10, 10), box(20, 0, 30, 10), box(40, 0, 50, 10)]
    conf = _conf([(1, 1), (2, 2), (21, 1), (22, 2)], [False, True, False, False])
    v = assign_status(polys, conf)
    assert v.status == ("wet", "dry", "unverified")
    assert v.confirmation_ids == (("C1", "C2"), ("C3", "C4"), ())
    assert v.anomaly_of.tolist() == [0, 0, 1, 1]


def test_point_on_boundary_counts_and_holes_do_not():
    ring = Polygon([(0, 0), (10, 0), (10, 10), (0, 10)], [[(3, 3), (7, 3), (7, 7), (3, 7)]])
    conf = _conf([(10, 5), (5, 5)], [True, True])  # on the edge; inside the hole
    v = assign_status([ring], conf)
    assert v.status == ("wet",)
    assert v.anomaly_of.tolist() == [0, -1]


def test_no_anomalies_or_no_confirmations():
    assert assign_status([], _conf([(1, 1)], [True])).anomaly_of.tolist() == [-1]
    v = assign_status([box(0, 0, 1, 1)], Confirmations.empty())
    assert v.status == ("unverified",)


# ------------------------------------------------------------------ threshold calibration
# Hand-made core sets; the expected ranges follow from the definition (predicted wet when
# delta-T is above the threshold), worked by hand beside each case.

import pytest
import shapely
from affine import Affine

from wetmap.verdicts import counted_wet_mask, suggest_cores, threshold_check, wet_area_range


def test_separable_cores_give_the_gap_between_them():
    # dry at 0.2, 0.9; wet at 1.4, 2.0 -> any t in [0.9, 1.4) is right
    c = threshold_check(("d1", "d2", "w1", "w2"), np.array([0.2, 0.9, 1.4, 2.0]),
                        np.array([False, False, True, True]), chosen_c=1.0)
    assert (c.low_c, c.high_c, c.errors, c.separable) == (0.9, 1.4, 0, True)
    assert c.confusion == {"wet_above": 2, "wet_below": 0, "dry_below": 2, "dry_above": 0}
    assert c.misclassified == () and c.warnings == ()


def test_overlapping_cores_give_fewest_errors_and_a_warning():
    # wet 0.8, dry 1.2, wet 1.5. Errors by hand: t < 0.8 -> 1 (d1); [0.8, 1.2) -> 2 (w1, d1);
    # [1.2, 1.5) -> 1 (w1); t >= 1.5 -> 2. Best: one error, nearest to 1.1 is [1.2, 1.5).
    c = threshold_check(("w1", "d1", "w2"), np.array([0.8, 1.2, 1.5]), np.array([True, False, True]), chosen_c=1.1)
    assert c.errors == 1
    assert not c.separable
    assert (c.low_c, c.high_c) == (1.2, 1.5)
    assert any("overlap" in w for w in c.warnings)


def test_one_sided_cores_use_the_default_spread():
    c = threshold_check(("w1", "w2"), np.array([1.6, 2.2]), np.array([True, True]), chosen_c=1.0, spread_c=0.5)
    assert (c.low_c, c.high_c) == (0.5, 1.6)
    assert c.bounded_by == ("default spread", "cores")
    assert any("no dry confirmation" in w for w in c.warnings)
    c = threshold_check(("d1",), np.array([0.3]), np.array([False]), chosen_c=1.0, spread_c=0.5)
    assert (c.low_c, c.high_c) == (0.3, 1.5)


def test_misclassification_is_named():
    c = threshold_check(("w1", "d1"), np.array([0.7, 1.3]), np.array([True, False]), chosen_c=1.0)
    assert set(c.misclassified) == {"w1", "d1"}
    assert any("misses wet w1" in w for w in c.warnings)
    assert any("dry d1" in w for w in c.warnings)


def test_cores_without_data_are_left_out():
    c = threshold_check(("w1", "d1"), np.array([np.nan, 0.2]), np.array([True, False]), chosen_c=1.0)
    assert c.n_wet == 0 and c.n_dry == 1
    assert any("no thermal data at w1" in w for w in c.warnings)


def _square_field():
    """delta-T: 0 outside, a 20 x 20 px square whose rim (3 px) is +1.5 and core +3.0 degC."""
    d = np.zeros((60, 60))
    d[20:40, 20:40] = 1.5
    d[23:37, 23:37] = 3.0
    return d


def test_counted_mask_statuses_from_cores():
    d = _square_field()
    wet = counted_wet_mask(d, 1.0, min_pixels=4, core_rows=np.array([30]), core_cols=np.array([30]),
                           core_wet=np.array([True]))
    assert wet.sum() == 400
    dry = counted_wet_mask(d, 1.0, min_pixels=4, core_rows=np.array([30]), core_cols=np.array([30]),
                           core_wet=np.array([False]))
    assert dry.sum() == 0


def test_area_range_brackets_the_truth_and_the_band_is_the_rim():
    """Truth: the whole 20 x 20 px square is wet (a wet core at the centre, delta 3.0; a dry
    core outside at 0). Cores allow t in [0, 3.0), narrowed to the default spread around the
    chosen 1.0: [0.5, 1.5]. At 1.5 only the 14 x 14 core counts; at 0.5 the whole square."""
    d = _square_field()
    check = threshold_check(("w", "d"), np.array([3.0, 0.0]), np.array([True, False]), chosen_c=1.0)
    px = 0.1
    rng, band = wet_area_range(d, check, likely_m2=400 * px * px, perimeter_m=80 * px, pixel_m=px, min_pixels=4,
                               core_rows=np.array([30, 5]), core_cols=np.array([30, 5]),
                               core_wet=np.array([True, False]))
    assert rng.low_m2 == pytest.approx(196 * 0.01 - 0.8)
    assert rng.high_m2 == pytest.approx(400 * 0.01 + 0.8)
    assert rng.low_m2 <= 4.0 <= rng.high_m2  # the true wet area lies in the range
    assert band.sum() == 400 - 196


def test_suggested_points_lie_inside_their_anomalies():
    polys = [shapely.Polygon([(0, 0), (10, 0), (10, 2), (2, 2), (2, 10), (0, 10)]),  # an L
             shapely.box(20, 20, 24, 23)]
    band = np.zeros((50, 50), bool)
    band[5:15, 30:34] = True
    out = suggest_cores(polys, ("unverified", "wet"), [1, 2], band=band, transform=Affine(1, 0, 0, 0, -1, 50),
                        pixel_m=1.0, min_pixels=4)
    assert [s.kind for s in out] == ["unverified", "boundary"]
    assert polys[0].contains(shapely.Point(out[0].x, out[0].y))
    bx, by = out[1].x, out[1].y
    assert 30 <= bx <= 34 and 35 <= by <= 45  # inside the band (rows 5-15 -> y 45-35)
