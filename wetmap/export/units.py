"""How figures are shown: metric or imperial units, shared by the report, the map and the change outputs.

``[report] units`` chooses the system; :class:`DisplayUnits` converts areas, lengths,
temperatures, temperature differences and wind with the exact factors of NIST SP 811 and
rewrites the metric figures of prose (each converted figure keeps its metric value in
``data-metric``). :func:`ticks_in` puts an axis's ticks at round values of the shown unit.
"""

from __future__ import annotations

import dataclasses
import html
import math
import re
from typing import TYPE_CHECKING, Any

import numpy as np

from ..quantities import M2_PER_FT2, M2_PER_SQUARE, M_PER_FT

if TYPE_CHECKING:
    from ..results import SurveyResult

__all__ = ["M_PER_FT_EXACT", "M2_PER_FT2_EXACT", "M_S_PER_MPH", "DisplayUnits", "display_units", "esc_html",
           "format_value", "ticks_in"]


def esc_html(value: Any) -> str:
    """``value`` as HTML-escaped text (``None``: empty)."""
    return html.escape("" if value is None else str(value))


def format_value(value: Any, fmt: str = ",.2f") -> str:
    """A table value as text: ``–`` for none, yes/no, integers with separators, ``n/a`` for non-finite."""
    if value is None:
        return "–"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, (int, np.integer)):
        return f"{int(value):,d}"
    if isinstance(value, (float, np.floating)):
        return f"{float(value):{fmt}}" if math.isfinite(float(value)) else "n/a"
    return esc_html(value)


#: One foot in metres and one square foot in square metres, exactly (NIST SP 811, appendix B).
M_PER_FT_EXACT = 0.3048
M2_PER_FT2_EXACT = 0.09290304
#: One mile per hour in metres per second, exactly (NIST SP 811, appendix B: 0.44704).
M_S_PER_MPH = 0.44704


@dataclasses.dataclass(frozen=True)
class DisplayUnits:
    """How the report shows areas, lengths, temperatures and wind: ``[report] units``.

    Metric: m², m, °C, m/s. Imperial: ft² (and roofing squares of 100 ft² on a roof), ft,
    °F, mph, with the exact factors of NIST SP 811 (1 ft = 0.3048 m; 1 mph = 0.44704 m/s;
    °F = 1.8 °C + 32). Each converted cell carries its metric value in ``data-metric``.
    """

    system: str = "metric"
    squares: bool = False

    @property
    def imperial(self) -> bool:
        return self.system == "imperial"

    @property
    def area_unit(self) -> str:
        return "ft²" if self.imperial else "m²"

    @property
    def length_unit(self) -> str:
        return "ft" if self.imperial else "m"

    @property
    def temp_unit(self) -> str:
        return "°F" if self.imperial else "°C"

    def area(self, area_m2: Any) -> Any:
        return area_m2 / M2_PER_FT2 if self.imperial and isinstance(area_m2, (int, float)) else area_m2

    def length(self, length_m: Any) -> Any:
        return length_m / M_PER_FT if self.imperial and isinstance(length_m, (int, float)) else length_m

    def temp(self, temp_c: float) -> float:
        return temp_c * 1.8 + 32.0 if self.imperial else temp_c

    def delta(self, delta_c: float) -> float:
        """A temperature difference (1 K = 1.8 °F)."""
        return delta_c * 1.8 if self.imperial else delta_c

    def wind(self, wind_m_s: float) -> str:
        return f"{wind_m_s / M_S_PER_MPH:.1f} mph" if self.imperial else f"{wind_m_s:g} m/s"

    def area_text(self, area_m2: Any, fmt: str = ",.2f") -> str:
        """``area_m2`` as text with its unit(s)."""
        if not isinstance(area_m2, (int, float)) or isinstance(area_m2, bool):
            return format_value(area_m2, fmt)
        text = f"{format_value(self.area(area_m2), fmt)} {self.area_unit}"
        if self.imperial and self.squares:
            text += f" ({area_m2 / M2_PER_SQUARE:,.2f} squares)"
        return text

    def area_cell(self, area_m2: Any, key: str | None = None, fmt: str = ",.2f", *, unit: bool = True) -> str:
        """A table cell of an area: the value in the report's unit, the metric one in ``data-metric``."""
        attr = f' data-key="{esc_html(key)}"' if key else ""
        if self.imperial and isinstance(area_m2, (int, float)) and not isinstance(area_m2, bool):
            attr += f' data-metric="{float(area_m2)!r}"'
        text = self.area_text(area_m2, fmt) if unit else format_value(self.area(area_m2), fmt)
        return f'<td class="num"{attr}>{text}</td>'

    def span(self, value: float, unit: str, decimals: int, *, signed: bool = False) -> str:
        """One converted figure as HTML: ``<span data-metric=".." data-from="unit">shown</span>``.

        ``unit`` is the metric unit of ``value``: ``"m"``, ``"m²"``, ``"m/s"``, ``"°C"`` (a
        temperature) or ``"K"`` (a temperature difference). Metric: the value as it is.
        """
        sign = "+" if signed else ""
        if not self.imperial:
            return f"{value:{sign},.{decimals}f}"
        if unit == "m":
            shown, d = self.length(value), decimals if decimals >= 2 else decimals + 1
        elif unit == "m²":
            shown, d = self.area(value), decimals
        elif unit == "m/s":
            shown, d = value / M_S_PER_MPH, max(decimals, 1)
        elif unit == "mm":  # 1 in = 25.4 mm exactly (NIST SP 811)
            shown, d = value / 25.4, decimals + 2
        elif unit == "°C":
            shown, d = self.temp(value), max(decimals, 1)
        else:  # "K": a difference
            shown, d = self.delta(value), max(decimals, 1)
        return (f'<span class="conv" data-metric="{value!r}" data-from="{unit}">'
                f"{shown:{sign},.{d}f}</span>")

    def unit_of(self, unit: str) -> str:
        """The unit shown for a metric ``unit`` (``"K"``: a temperature difference)."""
        if not self.imperial:
            return "°C" if unit == "K" else unit
        return {"m": "ft", "m²": "ft²", "m2": "ft²", "m/s": "mph", "°C": "°F", "K": "°F", "mm": "in"}.get(unit, unit)

    def html(self, fragment: str, *, differences: bool = False) -> str:
        """Every metric figure in the text of an HTML ``fragment`` in the report's units.

        Used on the report's prose and on messages written by other stages ("0.3 m",
        "192.96 m2", "-2.59 to +2.59 °C"): in imperial units each number becomes a
        :meth:`span` carrying its metric value and the unit follows the system. A
        temperature in °C is a difference (1 K = 1.8 °F) when ``differences`` is set, when
        it carries an explicit sign or ``±``, or when the words before it say so (ΔT,
        threshold, within, limit, ...); otherwise a temperature (°F = 1.8 °C + 32). Tags
        and the page's style sheet are left alone. Metric: ``fragment`` unchanged.
        """
        if not self.imperial:
            return fragment
        parts = re.split(r"(<style>.*?</style>|<[^>]*>)", fragment, flags=re.S)
        for i in range(0, len(parts), 2):  # text between tags
            text = parts[i]

            def one(m: re.Match, text: str = text) -> str:
                unit = "m²" if m.group("unit") == "m2" else m.group("unit")
                if unit == "°C":
                    before = text[max(0, m.start() - 48):m.start()].lower()
                    diff = (differences or (m.group("b") or "").startswith(("+", "±"))
                            or (m.group("a") or "").startswith("+") or before.rstrip().endswith("±")
                            or any(w in before for w in _DIFFERENCE_WORDS))
                    unit = "K" if diff else "°C"
                out = []
                for key in ("a", "b"):
                    raw = m.group(key)
                    if raw is None:
                        continue
                    value = float(raw.replace(",", "").replace("−", "-"))
                    decimals = len(raw.split(".")[1]) if "." in raw else 0
                    out.append(self.span(value, unit, decimals, signed=raw.startswith("+")))
                    if key == "a":
                        out.append(m.group("sep"))
                return "".join(out) + " " + self.unit_of(unit)

            parts[i] = _METRIC_FIGURE.sub(one, text)
        return "".join(parts)

    def length_cell(self, length_m: Any, key: str | None = None, fmt: str = ",.2f") -> str:
        attr = f' data-key="{esc_html(key)}"' if key else ""
        if self.imperial and isinstance(length_m, (int, float)) and not isinstance(length_m, bool):
            attr += f' data-metric="{float(length_m)!r}"'
        value = self.length(length_m)
        suffix = f" {self.length_unit}" if isinstance(value, (int, float)) else ""
        return f'<td class="num"{attr}>{format_value(value, fmt)}{suffix}</td>'


_NUM = r"[-+−]?\d[\d,]*(?:\.\d+)?"
#: A metric figure in prose: a number (or a range "a to b", "a–b") and its unit.
_METRIC_FIGURE = re.compile(
    rf"(?<![\w.,/:#-])(?:(?P<a>{_NUM})(?P<sep>\s(?:down\s)?to\s|\s?–\s?))?(?P<b>{_NUM})\s?"
    r"(?P<unit>°C|m²|m2|m/s|mm|m)(?![\w²/])")
#: Words before a °C figure that make it a temperature difference (1 K = 1.8 °F).
_DIFFERENCE_WORDS = ("δt", "delta", "threshold", "within", "scatter", "limit", "spread", "warmer", "colder",
                     "cooler", "contrast", "noise", "above the dry", "background by", "about the", "smooth up")


def display_units(result: "SurveyResult") -> DisplayUnits:
    """The report's units: ``[report] units`` (squares shown on a roof when asked for)."""
    survey = result.survey
    info = getattr(survey, "report", None)
    system = getattr(info, "units", "metric")
    return DisplayUnits(system=system, squares=survey.survey.kind != "hull"
                        and "squares" in survey.repair.area_units)


def ticks_in(axis, lo: float, hi: float, *, scale: float, offset: float = 0.0, origin: float = 0.0) -> None:
    """Ticks of a metric axis at round values of another unit: ``shown = (value - origin) * scale + offset``.

    The data stay metric; only where the ticks sit and what they read changes.
    """
    from matplotlib.ticker import FixedFormatter, FixedLocator, MaxNLocator

    a, b = sorted(((lo - origin) * scale + offset, (hi - origin) * scale + offset))
    shown = [t for t in MaxNLocator(nbins=7, steps=[1, 2, 2.5, 5, 10]).tick_values(a, b) if a <= t <= b]
    axis.set_major_locator(FixedLocator([(t - offset) / scale + origin for t in shown]))
    axis.set_major_formatter(FixedFormatter([f"{t:g}" for t in shown]))
