"""Statuses from confirmations, exactly as the output format defines them."""

from __future__ import annotations

import numpy as np
from shapely.geometry import Polygon, box

from wetmap.confirm import assign_status
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
