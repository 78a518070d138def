"""Confirming or refuting anomalies with cores and readings.

``status`` of an anomaly is exactly one of

- ``wet``: at least one confirmation inside says wet;
- ``dry``: confirmations inside exist and all say dry (the warm patch has another cause);
- ``unverified``: no confirmation inside.

A point on an anomaly's boundary counts as inside. A wet confirmation outside every
anomaly is a possible missed wet area and is reported as a warning.

Percussion soundings (``sound`` column): a ``dull`` sounding says wet exactly as a wet
reading does. A ``solid`` sounding is weaker than a core or reading (a well-bonded skin
over wet core sounds solid too): it is not a confirmation for the status, so an anomaly
with only solid soundings inside stays ``unverified``, and they are not listed in its
``confirmations`` (:attr:`wetmap.confirmations.Confirmations.decisive`).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import numpy as np
import shapely
from shapely.geometry.base import BaseGeometry
from shapely.ops import polylabel

from .confirmations import Confirmations
from .wording import ROOF, Wording
from .detect import anomaly_mask
from .polygons import label_regions

__all__ = ["Status", "STATUSES", "NOT_REFUTED", "counted_statuses", "Verdicts", "assign_status"]

Status = Literal["wet", "dry", "unverified"]
STATUSES: tuple[Status, ...] = ("wet", "dry", "unverified")

#: Statuses no confirmation refutes: the apparent wet area (``wet_area_m2``, ``wet_fraction``)
#: adds them up whatever the repair counts.
NOT_REFUTED: tuple[Status, ...] = ("wet", "unverified")


def counted_statuses(*, include_unverified: bool) -> frozenset[Status]:
    """The statuses counted as wet for the repair: ``wet``, and ``unverified`` when
    ``include_unverified`` (``[repair] include_unverified``). The one rule every table,
    figure, map, the repair outline and the comparison of two surveys count by.

    >>> sorted(counted_statuses(include_unverified=True)), sorted(counted_statuses(include_unverified=False))
    (['unverified', 'wet'], ['wet'])
    """
    return frozenset(NOT_REFUTED) if include_unverified else frozenset(("wet",))


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
    decisive = confirmations.decisive
    inside = [[p for p in members if decisive[p]] for members in inside]  # solid soundings never decide
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


# --------------------------------------------------------------------------------------
# Threshold calibration from the confirmations
# --------------------------------------------------------------------------------------

#: Where the cores do not bound the threshold on one side, the range extends this far
#: from the chosen threshold (a setting: [detect] threshold_spread_c). Half the usual
#: 1-2 degC night-time wet/dry contrast (common practice); our choice.
DEFAULT_THRESHOLD_SPREAD_C = 0.5


def sample_at_points(values: np.ndarray, transform, xs: np.ndarray, ys: np.ndarray, *,
                     radius_px: int = 1) -> np.ndarray:
    """Median of ``values`` in the ``(2 r + 1)^2`` pixels around each plan point.

    Parameters
    ----------
    values
        ``(rows, cols)`` raster (NaN ignored).
    transform
        Affine of the raster: ``(col, row)`` corners -> plan ``(x, y)``.
    xs, ys
        Plan coordinates, shape ``(n,)``.
    radius_px
        Neighbourhood half-width in pixels (1: a 3 x 3 neighbourhood), so one noisy
        pixel at a core does not decide.

    Returns
    -------
    numpy.ndarray
        ``(n,)``; NaN off the raster or where the neighbourhood has no data.

    >>> from affine import Affine
    >>> v = np.arange(25, dtype=float).reshape(5, 5)
    >>> sample_at_points(v, Affine(1, 0, 0, 0, -1, 5), np.array([2.5, 9.0]), np.array([2.5, 9.0])).tolist()
    [12.0, nan]
    """
    out = np.full(len(xs), np.nan)
    if not len(xs):
        return out
    rows_n, cols_n = values.shape
    cols, rows = ~transform @ (np.asarray(xs, float), np.asarray(ys, float))
    for i, (r, c) in enumerate(zip(np.floor(rows).astype(int), np.floor(cols).astype(int))):
        if not (0 <= r < rows_n and 0 <= c < cols_n):
            continue
        window = values[max(r - radius_px, 0):r + radius_px + 1, max(c - radius_px, 0):c + radius_px + 1]
        if np.isfinite(window).any():
            out[i] = float(np.nanmedian(window))
    return out


@dataclass(frozen=True)
class ThresholdCheck:
    """How the chosen threshold fares against the confirmations.

    A confirmation is *predicted wet* when its delta-T is above the threshold.

    Attributes
    ----------
    chosen_c
        The threshold used (``[detect] delta_c``).
    low_c, high_c
        Thresholds ``t`` with ``low_c <= t < high_c`` classify the confirmations with the
        fewest errors (the interval nearest ``chosen_c``); a side the cores do not bound
        is ``chosen_c -+ spread_c`` and named in ``bounded_by``.
    errors
        Misclassified confirmations at the best thresholds.
    confusion
        At ``chosen_c``: ``wet_above`` (wet, delta above: found), ``wet_below`` (wet, missed),
        ``dry_below`` (dry, correctly not flagged), ``dry_above`` (dry but flagged).
    separable
        Wet and dry confirmations exist and every wet delta is above every dry one.
    misclassified
        Ids of confirmations the chosen threshold gets wrong.
    bounded_by
        ``(low, high)``: ``"cores"`` or ``"default spread"``.
    warnings
        Lines for the summary.
    """

    chosen_c: float
    low_c: float
    high_c: float
    errors: int
    confusion: dict[str, int]
    separable: bool
    misclassified: tuple[str, ...]
    bounded_by: tuple[str, str]
    n_wet: int
    n_dry: int
    warnings: tuple[str, ...]


def threshold_check(ids: tuple[str, ...], delta_c: np.ndarray, wet: np.ndarray, *, chosen_c: float,
                    spread_c: float = DEFAULT_THRESHOLD_SPREAD_C, words: Wording = ROOF) -> ThresholdCheck:
    """Range of thresholds the confirmations allow, and the chosen one's confusion counts.

    Parameters
    ----------
    ids
        Confirmation ids.
    delta_c
        Delta-T at each confirmation, degC (NaN: no data there; left out).
    wet
        Judgement of each confirmation.
    chosen_c
        The threshold in use, degC.
    spread_c
        Half-width used on a side the confirmations do not bound, degC.
    words
        The survey's vocabulary for the warnings (:func:`wetmap.wording.wording_for`).

    Examples
    --------
    >>> c = threshold_check(("A", "B", "C", "D"), np.array([2.1, 1.6, 0.3, 0.7]),
    ...                     np.array([True, True, False, False]), chosen_c=1.0)
    >>> (c.low_c, c.high_c, c.errors, c.separable, c.confusion["wet_above"])
    (0.7, 1.6, 0, True, 2)
    """
    ids_arr = np.asarray(ids, dtype=object)
    ok = np.isfinite(delta_c)
    notes: list[str] = []
    if (~ok).any():
        notes.append(f"no thermal data at {', '.join(ids_arr[~ok])}: left out of the threshold check")
    d, w, names = np.asarray(delta_c)[ok], np.asarray(wet, bool)[ok], ids_arr[ok]
    n_wet, n_dry = int(w.sum()), int((~w).sum())
    pred = d > chosen_c
    confusion = {
        "wet_above": int((w & pred).sum()),
        "wet_below": int((w & ~pred).sum()),
        "dry_below": int((~w & ~pred).sum()),
        "dry_above": int((~w & pred).sum()),
    }
    wrong = tuple(names[w != pred].tolist())

    # errors(t) is constant between consecutive core deltas: test one t per interval
    edges = np.unique(d)
    cands = np.concatenate(([-np.inf], edges, [np.inf]))
    errors = np.array([int(((d <= t) & w).sum() + ((d > t) & ~w).sum()) for t in cands[:-1]])
    best = errors.min() if errors.size else 0
    # intervals [cands[i], cands[i+1]) with the fewest errors; take the one nearest chosen_c
    starts = np.flatnonzero(errors == best)
    dist = [0.0 if cands[i] <= chosen_c < cands[i + 1] else min(abs(chosen_c - cands[i]), abs(chosen_c - cands[i + 1]))
            for i in starts]
    i = int(starts[int(np.argmin(dist))]) if len(starts) else 0
    lo, hi = float(cands[i]), float(cands[i + 1])
    bounded = ("cores", "cores")
    if not np.isfinite(lo):
        lo, bounded = chosen_c - spread_c, ("default spread", bounded[1])
    if not np.isfinite(hi):
        hi, bounded = chosen_c + spread_c, (bounded[0], "default spread")
    separable = bool(n_wet and n_dry and d[w].min() > d[~w].max())

    if n_wet == 0 or n_dry == 0:
        missing = "wet" if n_wet == 0 else "dry"
        notes.append(
            f"no {missing} confirmation with thermal data: the {words.confirmations} cannot bound the threshold on "
            f"that side (range uses the default spread of {spread_c:g} °C); {words.sample_both}"
        )
    elif not separable:
        notes.append(
            f"wet and dry confirmations overlap in delta-T (wet from {d[w].min():+.2f} °C, dry up to "
            f"{d[~w].max():+.2f} °C): no threshold separates them; {best} would be misclassified at best"
        )
    wet_missed = names[w & ~pred].tolist()
    dry_flagged = names[~w & pred].tolist()
    if wet_missed:
        notes.append(
            f"the threshold delta_c = {chosen_c:g} °C misses wet {', '.join(wet_missed)} (delta-T at or below it); "
            f"thresholds from {lo:+.2f} to {hi:+.2f} °C fit the confirmations best"
        )
    if dry_flagged:
        notes.append(
            f"dry {', '.join(dry_flagged)} {'lies' if len(dry_flagged) == 1 else 'lie'} above the threshold delta_c = {chosen_c:g} °C: the warmth there has "
            f"another cause ({words.other_causes}) or the threshold is low; thresholds from "
            f"{lo:+.2f} to {hi:+.2f} °C fit the confirmations best"
        )
    return ThresholdCheck(chosen_c=chosen_c, low_c=round(lo, 4), high_c=round(hi, 4), errors=int(best),
                          confusion=confusion, separable=separable, misclassified=wrong, bounded_by=bounded,
                          n_wet=n_wet, n_dry=n_dry, warnings=tuple(notes))


# --------------------------------------------------------------------------------------
# Wet-area range and where the next core is worth most
# --------------------------------------------------------------------------------------


def counted_wet_mask(delta_c: np.ndarray, threshold_c: float, *, min_pixels: int, core_rows: np.ndarray,
                     core_cols: np.ndarray, core_wet: np.ndarray, include_unverified: bool = True) -> np.ndarray:
    """Pixels counted as wet at ``threshold_c``: the cleaned anomaly mask, statuses from the cores.

    A region is ``wet`` when a wet core's pixel lies in it, ``dry`` when only dry cores
    do, ``unverified`` with none; ``wet`` (and ``unverified`` when ``include_unverified``)
    regions are returned. Cores off the grid are ignored.
    """
    mask = anomaly_mask(delta_c, threshold_c, min_pixels=min_pixels)
    labels, count = label_regions(mask)
    rows_n, cols_n = labels.shape
    on = (core_rows >= 0) & (core_rows < rows_n) & (core_cols >= 0) & (core_cols < cols_n)
    at = labels[core_rows[on], core_cols[on]]
    has_core = np.zeros(count + 1, bool)
    has_wet = np.zeros(count + 1, bool)
    has_core[at] = True
    has_wet[at[core_wet[on]]] = True
    keep = has_wet | (~has_core if include_unverified else False)
    keep[0] = False
    return keep[labels]


@dataclass(frozen=True)
class AreaRange:
    """The counted wet area with its range (m2).

    ``low_m2`` is the area at the higher of :func:`area_thresholds` less the outline's
    geometric uncertainty (pixel size times perimeter); ``high_m2`` the area at the lower
    one plus it. ``likely_m2`` is the area at the chosen threshold.
    """

    likely_m2: float
    low_m2: float
    high_m2: float
    threshold_low_c: float
    threshold_high_c: float
    geometric_m2: float


def area_thresholds(check: ThresholdCheck, *, spread_c: float = DEFAULT_THRESHOLD_SPREAD_C) -> tuple[float, float]:
    """The thresholds ``(low, high)`` at which the wet-area range is taken.

    The cores narrow the default spread around the chosen threshold, never widen it:
    ``[max(low_c, chosen - spread), min(high_c, chosen + spread)]``. When the chosen
    threshold lies farther than the spread outside the range the cores allow, the span
    runs from the chosen threshold to the nearest threshold they allow.

    >>> c = threshold_check(("w", "d"), np.array([3.0, 0.0]), np.array([True, False]), chosen_c=1.0)
    >>> area_thresholds(c)
    (0.5, 1.5)
    >>> c = threshold_check(("w", "d"), np.array([2.4, 1.7]), np.array([True, False]), chosen_c=1.0)
    >>> area_thresholds(c)
    (1.0, 1.7)
    """
    chosen = check.chosen_c
    low, high = max(check.low_c, chosen - spread_c), min(check.high_c, chosen + spread_c)
    if low <= high:
        return (low, high)
    nearest = check.low_c if check.low_c > chosen else check.high_c
    return (min(chosen, nearest), max(chosen, nearest))


def wet_area_range(delta_c: np.ndarray, check: ThresholdCheck, *, likely_m2: float, perimeter_m: float,
                   pixel_m: float, min_pixels: int, core_rows: np.ndarray, core_cols: np.ndarray,
                   core_wet: np.ndarray, include_unverified: bool = True,
                   spread_c: float = DEFAULT_THRESHOLD_SPREAD_C) -> tuple[AreaRange, np.ndarray]:
    """Wet area at both edges of :func:`area_thresholds`, widened by the outline's uncertainty.

    Returns the range and the *uncertain band*: pixels counted wet at the low threshold but
    not at the high one (where a boundary core is worth most).
    """
    t_low, t_high = area_thresholds(check, spread_c=spread_c)
    kw = dict(min_pixels=min_pixels, core_rows=core_rows, core_cols=core_cols, core_wet=core_wet,
              include_unverified=include_unverified)
    wide = counted_wet_mask(delta_c, t_low, **kw)
    narrow = counted_wet_mask(delta_c, t_high, **kw)
    px = pixel_m * pixel_m
    geometric = pixel_m * perimeter_m
    low = max(0.0, min(float(narrow.sum()) * px, likely_m2) - geometric)
    high = max(float(wide.sum()) * px, likely_m2) + geometric
    return (AreaRange(likely_m2=likely_m2, low_m2=low, high_m2=high, threshold_low_c=t_low,
                      threshold_high_c=t_high, geometric_m2=geometric), wide & ~narrow)


@dataclass(frozen=True)
class SuggestedCore:
    """A place where one more core (or reading) is worth most."""

    x: float
    y: float
    kind: Literal["unverified", "boundary"]
    anomaly: int | None
    reason: str


def suggest_cores(anomalies: list[BaseGeometry], status: tuple[Status, ...], ids: list[int], *,
                  band: np.ndarray, transform, pixel_m: float, min_pixels: int,
                  max_boundary: int = 3, words: Wording = ROOF) -> list[SuggestedCore]:
    """One point inside each unverified anomaly, then the widest parts of the uncertain band.

    The point in an anomaly is its pole of inaccessibility (:func:`shapely.ops.polylabel`):
    the interior point farthest from every edge, where a core is least likely to hit the
    boundary. A boundary point is the pixel farthest from the edge of one connected part
    of the uncertain band (largest parts first), leaving out parts that lie within 1 m
    (or two pixels) of an unverified anomaly: that anomaly's own core settles them.
    ``words`` names the confirmation in the reasons (a core on a roof, a reading on a hull).
    """
    c1, cn = words.confirmation, words.confirmations
    from scipy import ndimage


    out: list[SuggestedCore] = []
    order = sorted(range(len(anomalies)), key=lambda i: -anomalies[i].area)
    for i in order:
        if status[i] != "unverified":
            continue
        p = polylabel(anomalies[i], tolerance=max(pixel_m / 2, 1e-6))
        if not anomalies[i].contains(p):
            p = anomalies[i].representative_point()
        out.append(SuggestedCore(
            x=round(p.x, 3), y=round(p.y, 3), kind="unverified", anomaly=ids[i],
            reason=f"anomaly {ids[i]} ({anomalies[i].area:.1f} m2) has no {c1}: a {c1} here confirms or refutes it",
        ))
    labels, count = label_regions(band)
    unverified = [anomalies[i] for i in range(len(anomalies)) if status[i] == "unverified"]
    near_m = max(1.0, 2 * pixel_m)  # a boundary this close to an unverified anomaly is settled by its core
    tree = shapely.STRtree(unverified)  # one query per band part, not a distance to every anomaly
    if count:
        sizes = np.bincount(labels.ravel(), minlength=count + 1)
        sizes[0] = 0
        boxes = ndimage.find_objects(labels)
        found = 0
        for lab in np.argsort(sizes)[::-1]:
            if found >= max_boundary or sizes[lab] < max(min_pixels, 1):
                break
            sl = boxes[lab - 1]
            part = np.pad(labels[sl] == lab, 1)
            dist = ndimage.distance_transform_edt(part)
            r, c = np.unravel_index(int(np.argmax(dist)), dist.shape)
            x, y = transform @ (sl[1].start + c - 1 + 0.5, sl[0].start + r - 1 + 0.5)
            point = shapely.Point(x, y)
            # candidates from the tree (within near_m, inclusive), then the strict test on each
            if any(unverified[j].distance(point) < near_m
                   for j in tree.query(point, predicate="dwithin", distance=near_m)):
                continue
            found += 1
            area = sizes[lab] * pixel_m * pixel_m
            out.append(SuggestedCore(
                x=round(float(x), 3), y=round(float(y), 3), kind="boundary", anomaly=None,
                reason=(f"{area:.1f} m2 here is wet or not depending on the threshold the {cn} allow: "
                        f"a {c1} here fixes the outline"),
            ))
    return out
