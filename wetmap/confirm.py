"""Confirming or refuting anomalies with cores and readings.

``status`` of an anomaly is exactly one of

- ``wet``: at least one confirmation inside says wet;
- ``dry``: confirmations inside exist and all say dry (the warm patch has another cause);
- ``unverified``: no confirmation inside.

A point on an anomaly's boundary counts as inside. A wet confirmation outside every
anomaly is a possible missed wet area and is reported as a warning.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import numpy as np
import shapely
from shapely.geometry.base import BaseGeometry

from .confirmations import Confirmations

__all__ = ["Status", "STATUSES", "Verdicts", "assign_status"]

Status = Literal["wet", "dry", "unverified"]
STATUSES: tuple[Status, ...] = ("wet", "dry", "unverified")


@dataclass(frozen=True)
class Verdicts:
    """Statuses and the confirmations behind them.

    Attributes
    ----------
    status
        One per anomaly.
    confirmation_ids
        Per anomaly, the ids of the confirmations inside it (in file order).
    anomaly_of
        Per confirmation, the index of the anomaly holding it, or -1.
    """

    status: tuple[Status, ...]
    confirmation_ids: tuple[tuple[str, ...], ...]
    anomaly_of: np.ndarray


def assign_status(anomalies: list[BaseGeometry], confirmations: Confirmations) -> Verdicts:
    """Give each anomaly its status from the confirmations inside it.

    Parameters
    ----------
    anomalies
        Anomaly polygons in plan coordinates.
    confirmations
        Cores and readings in the same coordinates.

    Examples
    --------
    >>> from shapely.geometry import box
    >>> from wetmap.confirmations import Confirmations
    >>> c = Confirmations(("C1", "C2", "C3"), np.array([1.0, 5.0, 9.0]), np.array([1.0, 1.0, 9.0]),
    ...                   np.array([True, False, True]), ("result",) * 3, np.full(3, np.nan))
    >>> v = assign_status([box(0, 0, 2, 2), box(4, 0, 6, 2), box(20, 20, 21, 21)], c)
    >>> v.status, v.anomaly_of.tolist()
    (('wet', 'dry', 'unverified'), [0, 1, -1])
    """
    n = len(anomalies)
    anomaly_of = np.full(len(confirmations), -1, dtype=np.intp)
    inside: list[list[int]] = [[] for _ in range(n)]
    if n and len(confirmations):
        points = shapely.points(confirmations.xs, confirmations.ys)
        tree = shapely.STRtree(np.asarray(anomalies, dtype=object))
        point_idx, poly_idx = tree.query(points, predicate="intersects")
        for p, a in sorted(zip(point_idx.tolist(), poly_idx.tolist())):
            if anomaly_of[p] < 0:  # anomalies do not overlap; keep the first if they touch
                anomaly_of[p] = a
                inside[a].append(p)
    status: list[Status] = []
    for members in inside:
        if not members:
            status.append("unverified")
        elif confirmations.wet[members].any():
            status.append("wet")
        else:
            status.append("dry")
    ids = tuple(tuple(confirmations.ids[i] for i in members) for members in inside)
    return Verdicts(status=tuple(status), confirmation_ids=ids, anomaly_of=anomaly_of)
