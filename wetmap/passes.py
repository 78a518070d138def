"""Several passes of one night: anomalies matched across passes, persistence, cooling rates.

A roof imaged more than once through the cool-down holds more than one image can:
wet insulation keeps its heat, so its anomaly persists from pass to pass and cools no
faster than the dry roof around it; surface water, dew and residual sun make warm
patches that fade. The functions here work on arrays on one plan grid (``(rows, cols)``,
pixel ``(row, col)`` represented by its centre) and on the passes' times:

* :func:`group_passes` groups the ``[[mosaic]]`` and ``[[frame]]`` entries by their
  ``time`` (entries of one time are one pass);
* :func:`match_regions` links the labelled anomalies of every pass by overlap;
* :func:`cooling_rate` fits, per pixel, the least-squares slope of temperature against
  time (°C per hour, positive when cooling);
* :func:`pass_contrast_c` and :func:`choose_primary`: the *primary* pass, whose anomalies
  are reported, is the one with the greatest wet-dry contrast (the mean delta-T over
  the anomalies seen in more than one pass, the same pixels in every pass); passes
  within :data:`CONTRAST_TIE_C` (or :data:`CONTRAST_TIE_REL`) of the greatest count as
  equal and the latest of them is taken;
* :func:`compare_passes` puts these together for the pipeline: each anomaly of the
  primary pass gets its persistence (in how many passes it appears), its delta in each
  pass and its cooling rate relative to the dry background; it is flagged *fading*
  (:func:`judge_fading`) when its delta in the latest pass fell below ``fade_ratio`` of
  its earlier maximum *after dividing each pass's delta by the wet-dry contrast the
  cool-down model predicts for its assembly at that time* (:mod:`wetmap.cooldown`), so
  that a wet area whose contrast decays as wet insulation of that kind does (closed-cell
  boards) is kept; without a model the raw deltas are compared. Anomalies of other
  passes not seen in the primary pass are listed as *faded*.

The relative cooling rate of a pixel is the cooling rate of its delta-T (surface
minus dry background): positive when it cools faster than the dry roof (a fading
pattern), zero or negative when it keeps its heat.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from datetime import time as clock_time
from typing import Any

import numpy as np
from affine import Affine

__all__ = [
    "PassGroup",
    "pass_hours",
    "group_passes",
    "match_regions",
    "cooling_rate",
    "AnomalyPasses",
    "FadedAnomaly",
    "PassComparison",
    "compare_passes",
    "align_to_grid",
    "pass_contrast_c",
    "choose_primary",
    "judge_fading",
    "MIN_OVERLAP",
    "FADE_RATIO",
    "CONTRAST_TIE_C",
    "CONTRAST_TIE_REL",
    "MODEL_MIN_C",
]

#: Two anomalies of different passes are the same when their overlap is at least this
#: share of the smaller one (common practice for matching detections; a setting).
MIN_OVERLAP: float = 0.2
#: An anomaly is fading when its delta in the latest pass is below this share of its
#: largest delta in the earlier passes, each delta first divided by the contrast the
#: cool-down model predicts at that pass's time (common practice for a persistence test;
#: a setting).
FADE_RATIO: float = 0.5
#: Passes whose contrast is within this many kelvin of the greatest count as equal
#: (about the noise of a mean over many pixels; a setting).
CONTRAST_TIE_C: float = 0.05
#: ... or within this share of the greatest contrast (a setting).
CONTRAST_TIE_REL: float = 0.05
#: A predicted wet-dry contrast below this (K) says nothing about fading: such passes are
#: left out of the model-relative comparison (a setting).
MODEL_MIN_C: float = 0.05


@dataclass(frozen=True)
class PassGroup:
    """The imagery of one pass.

    Attributes
    ----------
    label
        ``"HH:MM"``, or ``"untimed"`` when no entry has a time.
    time
        The pass's local time, or ``None``.
    hours
        Hours after sunset (after noon when no sunset was recorded), for ordering and rates.
    mosaics, frames
        The survey entries of this pass.
    """

    label: str
    time: clock_time | None
    hours: float
    mosaics: tuple[Any, ...] = ()
    frames: tuple[Any, ...] = ()


def pass_hours(at: clock_time, *, sunset: clock_time | None = None) -> float:
    """Hours of a pass: after sunset (wrapped into (-12, 12]), or after noon (0-24) without sunset.

    Either way a night that crosses midnight keeps its order.

    >>> pass_hours(clock_time(23, 30)), pass_hours(clock_time(0, 30))
    (11.5, 12.5)
    >>> pass_hours(clock_time(0, 30), sunset=clock_time(17, 0))
    7.5
    """
    h = at.hour + at.minute / 60.0
    if sunset is None:
        return (h - 12.0) % 24.0
    d = h - (sunset.hour + sunset.minute / 60.0)
    while d <= -12.0:
        d += 24.0
    while d > 12.0:
        d -= 24.0
    return d


def group_passes(mosaics: Sequence[Any], frames: Sequence[Any] = (), *,
                 sunset: clock_time | None = None) -> tuple[tuple[PassGroup, ...], tuple[str, ...]]:
    """Group imagery entries (anything with a ``time`` attribute) into passes, in time order.

    Entries without a time join the last pass when other entries have times (a note
    says so); when none has a time there is one pass, ``"untimed"``.

    Returns
    -------
    groups : tuple of PassGroup
        One or more passes, earliest first.
    notes : tuple of str
        Things to tell the user.

    Examples
    --------
    >>> from types import SimpleNamespace as S
    >>> ms = [S(time=clock_time(22, 0)), S(time=clock_time(20, 0)), S(time=clock_time(22, 0))]
    >>> groups, _ = group_passes(ms, sunset=clock_time(17, 0))
    >>> [(g.label, g.hours, len(g.mosaics)) for g in groups]
    [('20:00', 3.0, 1), ('22:00', 5.0, 2)]
    """
    timed: dict[clock_time, tuple[list, list]] = {}
    untimed: tuple[list, list] = ([], [])
    for which, items in ((0, mosaics), (1, frames)):
        for item in items:
            t = getattr(item, "time", None)
            if t is None:
                untimed[which].append(item)
            else:
                timed.setdefault(t, ([], []))[which].append(item)
    if not timed:
        return (PassGroup("untimed", None, 0.0, tuple(mosaics), tuple(frames)),), ()
    order = sorted(timed, key=lambda t: pass_hours(t, sunset=sunset))
    groups = [PassGroup(t.strftime("%H:%M"), t, pass_hours(t, sunset=sunset), tuple(timed[t][0]),
                        tuple(timed[t][1])) for t in order]
    notes: list[str] = []
    if untimed[0] or untimed[1]:
        last = groups[-1]
        groups[-1] = PassGroup(last.label, last.time, last.hours, last.mosaics + tuple(untimed[0]),
                               last.frames + tuple(untimed[1]))
        n = len(untimed[0]) + len(untimed[1])
        if len(groups) > 1:
            notes.append(f"{n} imagery entr{'y' if n == 1 else 'ies'} without a time joined the last pass "
                         f"({last.label}); give each [[mosaic]] / [[frame]] its time to place it in its pass")
    return tuple(groups), tuple(notes)


def match_regions(labels: Sequence[np.ndarray], counts: Sequence[int], *,
                  min_overlap: float = MIN_OVERLAP) -> tuple[list[np.ndarray], int]:
    """Link labelled regions of several passes (same grid) that overlap.

    Regions ``i`` of pass ``p`` and ``j`` of pass ``q`` are linked when their common
    pixels are at least ``min_overlap`` of the smaller region; linked regions (also
    through other passes) form one *track*.

    Parameters
    ----------
    labels
        Label images, one per pass, each ``(rows, cols)`` int, 0 background, 1..count.
    counts
        Number of regions of each pass.
    min_overlap
        Share of the smaller region that must overlap, in (0, 1].

    Returns
    -------
    track_of : list of numpy.ndarray of int
        For each pass, the track of region ``label - 1``, shape ``(count,)``.
    n_tracks : int
        Tracks are numbered ``0..n_tracks-1`` in order of first appearance.

    Examples
    --------
    >>> a = np.array([[1, 1, 0, 2]]); b = np.array([[0, 1, 0, 0]])
    >>> track_of, n = match_regions([a, b], [2, 1])
    >>> [t.tolist() for t in track_of], n
    ([[0, 1], [0]], 2)
    """
    if len(labels) != len(counts):
        raise ValueError(f"labels and counts: {len(labels)} and {len(counts)} passes: expected the same number")
    if not (0.0 < min_overlap <= 1.0):
        raise ValueError(f"min_overlap = {min_overlap!r}: expected 0 < value <= 1")
    offsets = np.concatenate([[0], np.cumsum(counts)]).astype(np.int64)
    parent = np.arange(int(offsets[-1]))

    def find(i: int) -> int:
        while parent[i] != i:
            parent[i] = parent[parent[i]]
            i = int(parent[i])
        return i

    sizes = [np.bincount(np.asarray(lab).ravel(), minlength=c + 1)[1:] for lab, c in zip(labels, counts)]
    for p in range(len(labels)):
        for q in range(p + 1, len(labels)):
            lp, lq = np.asarray(labels[p]), np.asarray(labels[q])
            if lp.shape != lq.shape:
                raise ValueError(f"labels: passes {p} and {q} have shapes {lp.shape} and {lq.shape}: expected one grid")
            both = (lp > 0) & (lq > 0)
            if not both.any():
                continue
            key = lp[both].astype(np.int64) * (counts[q] + 1) + lq[both]
            pairs, overlap = np.unique(key, return_counts=True)
            i, j = pairs // (counts[q] + 1), pairs % (counts[q] + 1)
            smaller = np.minimum(sizes[p][i - 1], sizes[q][j - 1])
            for a, b in zip(i[overlap >= min_overlap * smaller], j[overlap >= min_overlap * smaller]):
                ra, rb = find(int(offsets[p] + a - 1)), find(int(offsets[q] + b - 1))
                if ra != rb:
                    parent[max(ra, rb)] = min(ra, rb)
    roots = np.array([find(i) for i in range(len(parent))], dtype=np.int64)
    _, track = np.unique(roots, return_inverse=True)  # roots are the smallest member: first appearance order
    return [track[offsets[p]:offsets[p + 1]] for p in range(len(labels))], int(track.max() + 1 if track.size else 0)


def cooling_rate(values: Sequence[np.ndarray], hours: Sequence[float]) -> np.ndarray:
    """Per-pixel cooling rate: minus the least-squares slope of ``values`` against time.

    Parameters
    ----------
    values
        One array per pass, each ``(rows, cols)``, °C (NaN where missing).
    hours
        Time of each pass, h.

    Returns
    -------
    numpy.ndarray of float32, shape (rows, cols)
        °C per hour, positive when cooling; NaN where fewer than two passes have a value
        (or their times coincide).

    Examples
    --------
    >>> cooling_rate([np.array([[10.0, 5.0]]), np.array([[8.0, np.nan]]), np.array([[7.0, 4.0]])], [0, 1, 2])
    array([[1.5, 0.5]], dtype=float32)
    """
    if len(values) != len(hours):
        raise ValueError(f"values and hours: {len(values)} and {len(hours)} passes: expected the same number")
    t_mean = float(np.mean(hours))
    shape = np.shape(values[0])
    n = np.zeros(shape, dtype=np.float64)
    st = np.zeros(shape)
    stt = np.zeros(shape)
    sy = np.zeros(shape)
    sty = np.zeros(shape)
    for v, h in zip(values, hours):
        v = np.asarray(v, dtype=np.float64)
        if v.shape != shape:
            raise ValueError(f"values: shapes {shape} and {v.shape}: expected one grid")
        ok = np.isfinite(v)
        t = float(h) - t_mean
        vv = np.where(ok, v, 0.0)
        n += ok
        st += ok * t
        stt += ok * t * t
        sy += vv
        sty += vv * t
    den = n * stt - st * st
    with np.errstate(invalid="ignore", divide="ignore"):
        slope = (n * sty - st * sy) / den
    slope[(n < 2) | ~(np.abs(den) > 1e-12)] = np.nan
    return (-slope).astype(np.float32)


@dataclass(frozen=True)
class AnomalyPasses:
    """An anomaly of the primary pass followed through the passes.

    Attributes
    ----------
    region
        Its label in the primary pass (the anomaly ``id`` of the run).
    persistence
        Number of passes in which it (or a region linked to it) appears.
    seen_in
        Labels of those passes.
    delta_by_pass_c
        Mean delta-T over its pixels in each pass, °C (NaN without data).
    cooling_vs_background_c_per_h
        Mean cooling rate of its delta-T, °C/h: positive when it cools faster than
        the dry roof.
    fading
        It fades faster than wet insulation of its assembly would (:func:`judge_fading`).
    model_delta_by_pass_c
        Wet-dry contrast the cool-down model predicts for its assembly at each pass, K
        (empty or NaN: no model).
    fade_basis
        How fading was judged, in words.
    """

    region: int
    persistence: int
    seen_in: tuple[str, ...]
    delta_by_pass_c: tuple[float, ...]
    cooling_vs_background_c_per_h: float
    fading: bool
    model_delta_by_pass_c: tuple[float, ...] = ()
    fade_basis: str = ""


@dataclass(frozen=True)
class FadedAnomaly:
    """An anomaly of an earlier pass that is gone by the primary pass.

    Attributes
    ----------
    seen_in
        Labels of the passes where it appears.
    area_m2
        Area in the pass where it is largest, m2.
    x, y
        Centroid of that region, plan coordinates.
    delta_mean_c
        Mean delta-T there, °C.
    cooling_vs_background_c_per_h
        Mean cooling rate of its delta-T over that region, °C/h.
    """

    seen_in: tuple[str, ...]
    area_m2: float
    x: float
    y: float
    delta_mean_c: float
    cooling_vs_background_c_per_h: float


@dataclass(frozen=True)
class PassComparison:
    """The passes of a night compared.

    Attributes
    ----------
    labels, hours
        Each pass's label and time (h after sunset, or after noon), earliest first.
    primary
        Index of the pass whose anomalies are the run's anomalies.
    cooling_c_per_h
        Per-pixel surface cooling rate, °C/h (positive when cooling), ``(rows, cols)`` float32.
    anomalies
        One entry per anomaly of the primary pass, in label order.
    faded
        Anomalies of earlier passes that are gone by the primary pass.
    fade_ratio, min_overlap
        The settings used.
    contrast_c
        Each pass's wet-dry contrast (:func:`pass_contrast_c`), K.
    primary_rule
        How the primary pass was chosen, in words.
    """

    labels: tuple[str, ...]
    hours: tuple[float, ...]
    primary: int
    cooling_c_per_h: np.ndarray
    anomalies: tuple[AnomalyPasses, ...]
    faded: tuple[FadedAnomaly, ...]
    fade_ratio: float = FADE_RATIO
    min_overlap: float = MIN_OVERLAP
    contrast_c: tuple[float, ...] = ()
    primary_rule: str = ""

    def summary(self) -> dict[str, Any]:
        """The ``passes`` entry of ``summary.json``."""
        def r(v, nd=3):
            return None if not np.isfinite(v) else round(float(v), nd)

        return {
            "count": len(self.labels),
            "times": list(self.labels),
            "hours": [round(h, 3) for h in self.hours],
            "primary": self.labels[self.primary],
            "primary_rule": self.primary_rule,
            "contrast_c": [r(c) for c in self.contrast_c],
            "min_overlap": self.min_overlap,
            "fade_ratio": self.fade_ratio,
            "anomalies": [
                {"id": a.region, "persistence": a.persistence, "seen_in": list(a.seen_in),
                 "delta_by_pass_c": [r(d) for d in a.delta_by_pass_c],
                 "model_delta_by_pass_c": [r(d) for d in a.model_delta_by_pass_c],
                 "cooling_vs_background_c_per_h": r(a.cooling_vs_background_c_per_h), "fading": a.fading,
                 "fade_basis": a.fade_basis}
                for a in self.anomalies
            ],
            "faded": [
                {"seen_in": list(f.seen_in), "area_m2": r(f.area_m2, 4), "x": r(f.x, 3), "y": r(f.y, 3),
                 "delta_mean_c": r(f.delta_mean_c), "cooling_vs_background_c_per_h": r(f.cooling_vs_background_c_per_h)}
                for f in self.faded
            ],
        }

    def warnings(self) -> tuple[str, ...]:
        """One line per faded or fading anomaly."""
        primary = self.labels[self.primary]
        out = []
        at = {label: i for i, label in enumerate(self.labels)}
        for f in self.faded:
            before = all(at.get(label, -1) < self.primary for label in f.seen_in)
            where = (f"is gone by the {primary} pass" if before else
                     f"is not seen in the {primary} pass (the one with the greatest wet-dry contrast)")
            out.append(
                f"a warm patch of {f.area_m2:.1f} m2 near ({f.x:.2f}, {f.y:.2f}) seen at {', '.join(f.seen_in)} "
                f"(delta {f.delta_mean_c:+.2f} °C, cooling {_signed_rate(f.cooling_vs_background_c_per_h)} the dry "
                f"roof) {where}: a fading pattern points to surface water, dew or residual "
                "sun rather than wet insulation; it is not reported as an anomaly"
            )
        for a in self.anomalies:
            if a.fading:
                deltas = ", ".join("-" if not np.isfinite(d) else f"{d:+.2f}" for d in a.delta_by_pass_c)
                out.append(
                    f"anomaly {a.region} is fading (delta by pass {deltas} °C; cooling "
                    f"{_signed_rate(a.cooling_vs_background_c_per_h)} the dry roof; {a.fade_basis}): possibly "
                    "surface water, dew or residual sun rather than wet insulation; verify before counting it"
                )
        return tuple(out)


def _signed_rate(rate: float) -> str:
    if not np.isfinite(rate):
        return "at an unknown rate relative to"
    return f"{abs(rate):.2f} °C/h {'faster than' if rate > 0 else 'slower than'}"


def _region_means(labels: np.ndarray, count: int, values: np.ndarray) -> np.ndarray:
    lab = np.asarray(labels).ravel()
    v = np.asarray(values, dtype=np.float64).ravel()
    ok = (lab > 0) & np.isfinite(v)
    n = np.bincount(lab[ok], minlength=count + 1)[1:]
    s = np.bincount(lab[ok], weights=v[ok], minlength=count + 1)[1:]
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(n > 0, s / np.maximum(n, 1), np.nan)


def pass_contrast_c(deltas_c: Sequence[np.ndarray], labels: Sequence[np.ndarray], counts: Sequence[int], *,
                    min_overlap: float = MIN_OVERLAP) -> np.ndarray:
    """Wet-dry contrast of each pass: mean delta-T over the same anomaly pixels in every pass.

    The pixels are those of the anomalies seen in more than one pass (any pass's extent);
    when no anomaly is seen twice, those of every anomaly. Comparing the passes on the
    same pixels keeps a pass's threshold from choosing its own pixels.

    Parameters
    ----------
    deltas_c
        Delta-T (surface minus dry background) of each pass, °C, ``(rows, cols)``, NaN
        where unusable.
    labels, counts
        Each pass's labelled anomalies.
    min_overlap
        As in :func:`match_regions`.

    Returns
    -------
    numpy.ndarray of float, shape (passes,)
        Mean delta-T, °C; NaN when no pass has an anomaly.

    Examples
    --------
    >>> lab = np.array([[1, 0], [0, 0]])
    >>> d1 = np.array([[1.0, 0.0], [0.0, 0.0]]); d2 = np.array([[2.0, 0.1], [0.0, 0.0]])
    >>> pass_contrast_c([d1, d2], [lab, lab], [1, 1]).tolist()
    [1.0, 2.0]
    """
    track_of, _ = match_regions(labels, counts, min_overlap=min_overlap)
    seen: dict[int, set[int]] = {}
    for p, tracks in enumerate(track_of):
        for t in tracks.tolist():
            seen.setdefault(int(t), set()).add(p)
    persistent = {t for t, ps in seen.items() if len(ps) > 1}
    shape = np.shape(labels[0])
    pixels = np.zeros(shape, dtype=bool)
    for p, lab in enumerate(labels):
        lab = np.asarray(lab)
        if not counts[p]:
            continue
        keep = np.zeros(counts[p] + 1, dtype=bool)
        keep[1:] = [int(t) in persistent for t in track_of[p]] if persistent else True
        pixels |= keep[lab]
    out = np.full(len(deltas_c), np.nan)
    if pixels.any():
        for p, d in enumerate(deltas_c):
            v = np.asarray(d, dtype=np.float64)[pixels]
            v = v[np.isfinite(v)]
            if v.size:
                out[p] = float(v.mean())
    return out


def choose_primary(contrast_c: Sequence[float], *, tie_c: float = CONTRAST_TIE_C,
                   tie_rel: float = CONTRAST_TIE_REL) -> tuple[int, str]:
    """The pass with the greatest wet-dry contrast; among near-equals, the latest.

    Parameters
    ----------
    contrast_c
        Each pass's contrast (:func:`pass_contrast_c`), earliest pass first; NaN unknown.
    tie_c, tie_rel
        Passes within ``max(tie_c, tie_rel * greatest)`` of the greatest are equal.

    Returns
    -------
    index : int
        The primary pass.
    rule : str
        The rule in words.

    Examples
    --------
    >>> choose_primary([0.8, 1.6, 1.1])[0], choose_primary([1.60, 1.58, 0.9])[0], choose_primary([np.nan, np.nan])[0]
    (1, 1, 1)
    """
    c = np.asarray(contrast_c, dtype=np.float64)
    if not np.isfinite(c).any():
        return len(c) - 1, "no anomaly to compare the passes on: the last pass"
    best = float(np.nanmax(c))
    tol = max(tie_c, tie_rel * abs(best))
    near = np.flatnonzero(np.isfinite(c) & (c >= best - tol))
    rule = (f"the greatest wet-dry contrast (mean delta-T over the anomalies seen in more than one pass, the same "
            f"pixels in every pass); passes within {tol:.2f} K of it count as equal and the latest is taken")
    return int(near[-1]), rule


def judge_fading(delta_by_pass_c: Sequence[float], *, model_c: Sequence[float] | None = None,
                 fade_ratio: float = FADE_RATIO) -> tuple[bool, str]:
    """Does an anomaly fade faster than wet insulation of its assembly would?

    Each pass's delta is divided by the wet-dry contrast the cool-down model predicts at
    that pass's time (passes where the model predicts less than :data:`MODEL_MIN_C` are
    left out); the anomaly fades when this ratio in the latest pass with data is below
    ``fade_ratio`` of its largest value in the earlier passes. Without a model the raw
    deltas are compared (a fixed ratio).

    Parameters
    ----------
    delta_by_pass_c
        Observed mean delta-T of the anomaly in each pass, °C (NaN: no data), earliest first.
    model_c
        Predicted wet-dry contrast at each pass, K; ``None`` or all NaN: no model.
    fade_ratio
        See :data:`FADE_RATIO`.

    Returns
    -------
    fading : bool
    basis : str
        How it was judged, in words.

    Examples
    --------
    >>> judge_fading([1.6, 1.0, 0.66], model_c=[0.41, 0.26, 0.17])[0]   # decays as the model: kept
    False
    >>> judge_fading([1.6, 1.0, 0.66])[0]                              # a fixed ratio: 0.41 < 0.5
    True
    """
    d = np.asarray(delta_by_pass_c, dtype=np.float64)
    m = None if model_c is None else np.asarray(model_c, dtype=np.float64)
    use_model = m is not None and m.shape == d.shape and bool(np.any(np.isfinite(m) & (m >= MODEL_MIN_C)))
    if use_model:
        ok = np.isfinite(d) & np.isfinite(m) & (m >= MODEL_MIN_C)
        value = np.where(ok, d / np.where(ok, m, 1.0), np.nan)
        basis = (f"delta divided by the cool-down model's predicted wet-dry contrast at each pass, the latest below "
                 f"{fade_ratio:g} of its earlier maximum")
    else:
        value = np.where(np.isfinite(d), d, np.nan)
        basis = f"no cool-down model: delta in the latest pass below {fade_ratio:g} of its earlier maximum"
    idx = np.flatnonzero(np.isfinite(value))
    if idx.size < 2:
        return False, basis
    last = int(idx[-1])
    earlier = value[idx[:-1]]
    top = float(earlier.max())
    return bool(top > 0 and value[last] < fade_ratio * top), basis


def compare_passes(
    surfaces_c: Sequence[np.ndarray],
    deltas_c: Sequence[np.ndarray],
    labels: Sequence[np.ndarray],
    counts: Sequence[int],
    *,
    hours: Sequence[float],
    pass_labels: Sequence[str],
    transform: Affine,
    primary: int = -1,
    min_overlap: float = MIN_OVERLAP,
    fade_ratio: float = FADE_RATIO,
    model_delta_c: np.ndarray | None = None,
    contrast_c: Sequence[float] = (),
    primary_rule: str = "",
) -> PassComparison:
    """Compare the passes of a night on one plan grid.

    Parameters
    ----------
    surfaces_c, deltas_c
        Surface temperature and delta-T (surface minus dry background) of each pass,
        °C, each ``(rows, cols)``, NaN where unusable; earliest pass first.
    labels, counts
        Each pass's labelled anomalies (0 background, 1..count).
    hours
        Time of each pass, h (increasing).
    pass_labels
        Name of each pass (its ``HH:MM``).
    transform
        The plan grid's affine (pixel corner ``(col, row)`` -> plan ``(x, y)``).
    primary
        Index of the pass whose anomalies are reported (default: the last; the pipeline
        passes :func:`choose_primary`'s choice).
    min_overlap, fade_ratio
        See :data:`MIN_OVERLAP` and :data:`FADE_RATIO`.
    model_delta_c
        The cool-down model's predicted wet-dry contrast for each primary anomaly's
        assembly at each pass, K, shape ``(counts[primary], passes)`` (NaN rows: no
        model); ``None``: fading is judged on the raw deltas.
    contrast_c, primary_rule
        Each pass's contrast and the rule that chose the primary pass, for the record.

    Returns
    -------
    PassComparison
    """
    n_pass = len(surfaces_c)
    if not (len(deltas_c) == len(labels) == len(counts) == len(hours) == len(pass_labels) == n_pass):
        raise ValueError("surfaces_c, deltas_c, labels, counts, hours, pass_labels: expected one entry per pass")
    if n_pass < 2:
        raise ValueError(f"{n_pass} pass: expected at least two to compare")
    if not (0.0 < fade_ratio < 1.0):
        raise ValueError(f"fade_ratio = {fade_ratio!r}: expected 0 < value < 1")
    primary = primary % n_pass
    track_of, _ = match_regions(labels, counts, min_overlap=min_overlap)
    cooling = cooling_rate(surfaces_c, hours)
    relative = cooling_rate(deltas_c, hours)

    passes_of_track: dict[int, list[int]] = {}
    for p in range(n_pass):
        for t in set(track_of[p].tolist()):
            passes_of_track.setdefault(int(t), []).append(p)

    lab_primary = labels[primary]
    deltas_by_pass = np.stack([_region_means(lab_primary, counts[primary], d) for d in deltas_c], axis=1) \
        if counts[primary] else np.zeros((0, n_pass))
    rel_primary = _region_means(lab_primary, counts[primary], relative)
    anomalies = []
    if model_delta_c is not None and np.shape(model_delta_c) != (counts[primary], n_pass):
        raise ValueError(f"model_delta_c: shape {np.shape(model_delta_c)}: expected ({counts[primary]}, {n_pass})")
    for i in range(counts[primary]):
        seen = sorted(passes_of_track[int(track_of[primary][i])])
        d = deltas_by_pass[i]
        model = None if model_delta_c is None else np.asarray(model_delta_c[i], dtype=np.float64)
        fading, basis = judge_fading(d, model_c=model, fade_ratio=fade_ratio)
        anomalies.append(AnomalyPasses(
            region=i + 1, persistence=len(seen), seen_in=tuple(pass_labels[p] for p in seen),
            delta_by_pass_c=tuple(float(v) for v in d), cooling_vs_background_c_per_h=float(rel_primary[i]),
            fading=fading, model_delta_by_pass_c=() if model is None else tuple(float(v) for v in model),
            fade_basis=basis,
        ))

    kept = set(track_of[primary].tolist())
    px_area = abs(transform.a * transform.e - transform.b * transform.d)
    faded = []
    for t, seen in sorted(passes_of_track.items()):
        if t in kept:
            continue
        best = None  # (pixels, pass, label)
        for p in seen:
            lab = np.flatnonzero(track_of[p] == t) + 1
            sizes = np.bincount(np.asarray(labels[p]).ravel(), minlength=counts[p] + 1)
            for L in lab:
                if best is None or sizes[L] > best[0]:
                    best = (int(sizes[L]), p, int(L))
        assert best is not None
        npx, p, L = best
        rows, cols = np.nonzero(np.asarray(labels[p]) == L)
        x, y = _apply(transform, float(cols.mean()) + 0.5, float(rows.mean()) + 0.5)
        region = np.asarray(labels[p]) == L
        d = np.asarray(deltas_c[p])[region]
        rel = relative[region]
        faded.append(FadedAnomaly(
            seen_in=tuple(pass_labels[q] for q in seen), area_m2=npx * px_area, x=float(x), y=float(y),
            delta_mean_c=float(np.nanmean(d)) if np.isfinite(d).any() else float("nan"),
            cooling_vs_background_c_per_h=float(np.nanmean(rel)) if np.isfinite(rel).any() else float("nan"),
        ))
    return PassComparison(
        labels=tuple(pass_labels), hours=tuple(float(h) for h in hours), primary=primary, cooling_c_per_h=cooling,
        anomalies=tuple(anomalies), faded=tuple(faded), fade_ratio=fade_ratio, min_overlap=min_overlap,
        contrast_c=tuple(float(c) for c in contrast_c), primary_rule=primary_rule,
    )


def _apply(t: Affine, u, v):
    """``t`` applied to coordinates ``(u, v)`` (arrays or floats)."""
    return t.a * u + t.b * v + t.c, t.d * u + t.e * v + t.f


def align_to_grid(values: np.ndarray, src_transform: Affine, dst_transform: Affine,
                  dst_shape: tuple[int, int]) -> np.ndarray:
    """Resample ``values`` (NaN nodata) onto another plan grid, bilinearly (pixel centres).

    Returns ``values`` itself when the grids are the same; NaN where the source has no
    data or does not reach.

    >>> v = np.array([[0.0, 2.0], [4.0, 6.0]])
    >>> align_to_grid(v, Affine(2, 0, 0, 0, -2, 4), Affine(1, 0, 1, 0, -1, 3), (2, 2))
    array([[1.5, 2.5],
           [3.5, 4.5]], dtype=float32)
    """
    if tuple(values.shape) == tuple(dst_shape) and src_transform.almost_equals(dst_transform):
        return values
    from scipy.ndimage import map_coordinates

    rows, cols = np.mgrid[0:dst_shape[0], 0:dst_shape[1]].astype(np.float64)
    xs, ys = _apply(dst_transform, cols + 0.5, rows + 0.5)
    src_cols, src_rows = _apply(~src_transform, xs, ys)
    out = map_coordinates(np.asarray(values, dtype=np.float32), [src_rows - 0.5, src_cols - 0.5], order=1,
                          mode="constant", cval=np.nan)
    return out.astype(np.float32)
