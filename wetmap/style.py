"""How the map and the report draw: colours, line styles and colour ranges.

One module for both outputs (:mod:`wetmap.export.webmap`, :mod:`wetmap.export.report`)
and for the recommended display range the imagery checks report (:mod:`wetmap.image_checks`,
``summary.json`` ``imagery.display_range``). Every colour range is taken from
percentiles of a regular subsample of the finite values (:func:`_percentiles`):

- :func:`display_range`: the plain ``low_pct``-``high_pct`` stretch of the images;
- :func:`roof_display_range`: from the roof's pixels alone, centred on the median dry
  background (the half-width is the larger distance from the centre to either
  percentile), so a hot rooftop unit or the ground never stretches the scale;
- :func:`delta_display_range`: delta-T centred on 0 with a half-width of at least twice
  the threshold.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

__all__ = [
    "THERMAL_CMAP",
    "StatusStyle",
    "STATUS_STYLES",
    "CORE_COLOURS",
    "LAYER_COLOURS",
    "DISPLAY_PCT",
    "finite_sample",
    "display_range",
    "DisplayRange",
    "roof_display_range",
    "delta_display_range",
]

#: Colour map of the thermal images (map and report).
THERMAL_CMAP = "cividis"


@dataclass(frozen=True)
class StatusStyle:
    """How one anomaly status is drawn.

    Attributes
    ----------
    colour
        Line colour, ``#rrggbb`` (Okabe & Ito 2008 palette).
    dash
        Leaflet ``dashArray`` (SVG stroke pattern in screen pixels); ``None`` = solid.
    linestyle
        The same pattern for matplotlib.
    label
        Words for the legend.
    """

    colour: str
    dash: str | None
    linestyle: Any
    label: str


STATUS_STYLES: dict[str, StatusStyle] = {
    "wet": StatusStyle("#D55E00", None, "-", "wet: a core inside says wet"),
    "unverified": StatusStyle("#CC79A7", "8 5", (0, (5, 3)), "unverified: no core inside"),
    "dry": StatusStyle("#0072B2", "2 5", (0, (1, 2)), "dry: every core inside says dry"),
}

#: Fill of a confirmation judged wet / ring of one judged dry.
CORE_COLOURS = {"wet": "#D55E00", "dry": "#0072B2"}

#: Colours of the other layers.
LAYER_COLOURS = {
    "outline": "#000000",
    "sections": "#000000",
    "exclusions": "#999999",
    "repair": "#000000",
    "boards": "#009E73",
    "uncovered": "#BBBBBB",
}

#: Percentiles of the display range (our own choice: robust to a few hot or cold pixels).
DISPLAY_PCT = (1.0, 99.0)
_RANGE_SAMPLE = 4_000_000  # at most this many values enter a display range's percentiles


def finite_sample(values: np.ndarray) -> np.ndarray:
    """The finite values of a regular subsample of at most about 4 million values (plenty
    for the percentiles of a display range)."""
    v = np.asarray(values).ravel()
    if v.size > _RANGE_SAMPLE:
        v = v[:: v.size // _RANGE_SAMPLE]
    return v[np.isfinite(v)]


def _percentiles(finite: np.ndarray, low_pct: float, high_pct: float) -> tuple[float, float]:
    lo, hi = (float(x) for x in np.percentile(finite, [low_pct, high_pct]))
    return lo, hi


def display_range(values: np.ndarray, *, low_pct: float = DISPLAY_PCT[0], high_pct: float = DISPLAY_PCT[1]) -> tuple[float, float]:
    """A robust colour range: the ``low_pct`` and ``high_pct`` percentiles of the finite values.

    A few very hot or cold pixels (a vent, a cold sky reflection) do not stretch the
    range. Inputs of more than 4 million values are subsampled regularly first. Returns ``(0.0, 1.0)`` when nothing is finite, and widens a constant image by
    0.5 either way.

    Parameters
    ----------
    values
        Any shape, degC; NaN ignored.

    Examples
    --------
    >>> v = np.r_[np.linspace(10.0, 20.0, 1001), 500.0]   # one hot pixel
    >>> lo, hi = display_range(v)
    >>> round(lo, 2), round(hi, 2)
    (10.1, 19.91)
    >>> display_range(np.full(4, np.nan))
    (0.0, 1.0)
    >>> display_range(np.full(4, 3.0))
    (2.5, 3.5)
    """
    finite = finite_sample(values)
    if finite.size == 0:
        return (0.0, 1.0)
    lo, hi = _percentiles(finite, low_pct, high_pct)
    if not hi > lo:
        lo, hi = lo - 0.5, hi + 0.5
    return (lo, hi)


@dataclass(frozen=True)
class DisplayRange:
    """A colour range chosen from the roof alone (see the module notes).

    Attributes
    ----------
    low_c, high_c
        The range, degC.
    centre_c
        Its centre: the median dry background over the roof (0 for delta-T), degC.
    low_pct, high_pct
        The percentiles that set the half-width.
    pixels
        Roof pixels the statistics used.
    """

    low_c: float
    high_c: float
    centre_c: float
    low_pct: float
    high_pct: float
    pixels: int

    def as_list(self) -> list[float]:
        """``[low_c, high_c]`` rounded to 0.01 degC."""
        return [round(self.low_c, 2), round(self.high_c, 2)]

    @property
    def percentile_words(self) -> str:
        """E.g. ``"1st-99th percentile"``.

        >>> DisplayRange(0.0, 1.0, 0.5, 1.0, 99.0, 10).percentile_words
        '1st-99th percentile'
        """
        return f"{_ordinal(self.low_pct)}-{_ordinal(self.high_pct)} percentile"


def _ordinal(v: float) -> str:
    """``1 -> "1st"``, ``2.5 -> "2.5th"``, ``99 -> "99th"``, ``12 -> "12th"``."""
    if v != int(v):
        return f"{v:g}th"
    n = int(v)
    suffix = "th" if 10 <= n % 100 <= 20 else {1: "st", 2: "nd", 3: "rd"}.get(n % 10, "th")
    return f"{n}{suffix}"


def roof_display_range(values_c: np.ndarray, roof: np.ndarray, *, centre_c: float | None = None,
                       low_pct: float = DISPLAY_PCT[0], high_pct: float = DISPLAY_PCT[1],
                       min_half_c: float = 0.5) -> DisplayRange:
    """Colour range of ``values_c`` from the roof's pixels alone, centred on ``centre_c``.

    Parameters
    ----------
    values_c
        ``(rows, cols)``, degC.
    roof
        ``(rows, cols)`` bool: pixels that count (inside the outline, outside the
        exclusions, with data).
    centre_c
        The centre (the median dry background); ``None``: the median of the roof values.
    low_pct, high_pct
        Percentiles of the roof values that must lie inside the range.
    min_half_c
        Smallest half-width, degC.

    Returns
    -------
    DisplayRange
        ``centre_c -/+ max(centre - p_low, p_high - centre, min_half_c)``; ``(0, 1)``
        when no roof pixel has data.

    Examples
    --------
    A roof at 5 °C with 1 % of warm pixels at 8 °C, next to a 40 °C unit and 1 °C ground
    that are not roof:

    >>> v = np.full((100, 100), 5.0); v[:, :10] = 1.0; v[:5, 90:] = 40.0; v[50, 20:29] = 8.0
    >>> roof = np.ones(v.shape, bool); roof[:, :10] = False; roof[:5, 90:] = False
    >>> r = roof_display_range(v, roof, centre_c=5.0)
    >>> r.low_c, r.high_c, r.centre_c
    (4.5, 5.5, 5.0)
    """
    sel = finite_sample(np.where(roof, values_c, np.nan))
    if sel.size == 0:
        return DisplayRange(0.0, 1.0, 0.5, low_pct, high_pct, 0)
    lo, hi = _percentiles(sel, low_pct, high_pct)
    c = float(np.median(sel)) if centre_c is None or not math.isfinite(centre_c) else float(centre_c)
    half = max(c - lo, hi - c, min_half_c)
    return DisplayRange(c - half, c + half, c, low_pct, high_pct, int(np.count_nonzero(roof & np.isfinite(values_c))))


def delta_display_range(delta_c: np.ndarray, *, threshold_c: float, low_pct: float = DISPLAY_PCT[0],
                        high_pct: float = DISPLAY_PCT[1]) -> DisplayRange:
    """Colour range of delta-T: centred on 0, half-width at least twice the threshold.

    ``delta_c`` is NaN off the usable roof already (:class:`wetmap.detect.Detection`).

    >>> d = np.r_[np.linspace(-0.4, 0.4, 990), np.full(10, 3.0)]
    >>> r = delta_display_range(d[None, :], threshold_c=1.0)
    >>> r.low_c, r.high_c
    (-2.0, 2.0)
    """
    roof = np.isfinite(delta_c)
    return roof_display_range(delta_c, roof, centre_c=0.0, low_pct=low_pct, high_pct=high_pct,
                              min_half_c=2.0 * threshold_c)
