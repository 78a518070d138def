"""Survey conditions: humidity, dew and frost point, and a broadband sky estimate.

Vapour pressure, dew and frost point and absolute humidity are computed in
:mod:`wetmap.moist_air` (Magnus form, Alduchov & Eskridge 1996; the relative-humidity
convention is described there) and are importable from here too.

Survey-condition checks
-----------------------
:func:`check_conditions` compares what was recorded on site (``[conditions]``,
``[camera]``, the sections' assemblies and the pass times) with the limits of the
``[limits]`` table and returns one :class:`ConditionWarning` per problem, each saying
what was seen, the limit and why it matters.

Sky temperature
---------------
The broadband sky models (Swinbank 1963; Berdahl & Martin 1984; Clark & Allen 1978)
cover the whole long-wave spectrum; they drive the heat balance of
:mod:`wetmap.cooldown`. A thermal camera sees the sky through the 8-14 um window,
where a clear sky is far colder, so an unmeasured reflected temperature comes from
the window sky (:func:`estimate_reflected_c`, Idso 1981 window emissivity). A measured
reflected apparent temperature (ASTM E1862) is always preferred.
"""

from __future__ import annotations

import math
import re
from collections.abc import Sequence
from dataclasses import dataclass
from datetime import time as clock_time
from typing import Literal, Protocol

from .moist_air import (MAGNUS_ICE, MAGNUS_WATER, WATER_VAPOUR_GAS_CONSTANT, absolute_humidity_g_m3,
                        condensation_point_c, dew_point_c, frost_point_c, saturation_vapour_pressure_hpa,
                        vapour_pressure_hpa)
from .radiometry import band_radiance, band_table
from .survey import Camera, Conditions, Limits, SurveyInfo

__all__ = [
    "MAGNUS_WATER",
    "MAGNUS_ICE",
    "WATER_VAPOUR_GAS_CONSTANT",
    "SKY_CLOUD_TENTHS",
    "saturation_vapour_pressure_hpa",
    "vapour_pressure_hpa",
    "dew_point_c",
    "frost_point_c",
    "condensation_point_c",
    "absolute_humidity_g_m3",
    "sky_temperature_swinbank_k",
    "sky_emissivity_berdahl_martin",
    "sky_emissivity_clark_allen",
    "clark_allen_cloud_factor",
    "WINDOW_BAND_UM",
    "IDSO_WINDOW",
    "sky_window_emissivity_idso",
    "ReflectedEstimate",
    "estimate_reflected_c",
    "EmissivityRange",
    "EMISSIVITY_TABLE",
    "POOR_CANDIDATES",
    "ConditionWarning",
    "hours_after_sunset",
    "surface_emissivity_range",
    "check_conditions",
]

_ZERO_C_K = 273.15

#: Opaque cloud cover in tenths used for each sky description.
SKY_CLOUD_TENTHS: dict[str, int] = {"clear": 0, "partly": 5, "overcast": 10}



def sky_temperature_swinbank_k(air_k: float) -> float:
    """Broadband clear-sky temperature by Swinbank (1963): ``0.0552 T_air^1.5``.

    Parameters
    ----------
    air_k
        Screen-level air temperature, K.

    Returns
    -------
    float
        Effective (broadband) sky temperature, K.

    Examples
    --------
    >>> round(sky_temperature_swinbank_k(293.15), 2)
    277.06
    """
    if not air_k > 0.0:
        raise ValueError(f"air_k = {air_k!r}: expected a temperature above 0 K")
    return 0.0552 * air_k**1.5


def sky_emissivity_berdahl_martin(dew_point_c: float) -> float:
    """Broadband clear-sky emissivity by Berdahl & Martin (1984).

    ``eps = 0.711 + 0.56 (Tdp / 100) + 0.73 (Tdp / 100)^2``.

    Parameters
    ----------
    dew_point_c
        Dew point, °C.

    Returns
    -------
    float
        Sky emissivity, dimensionless. The sky temperature is
        ``eps**0.25 * T_air``.

    Examples
    --------
    >>> round(sky_emissivity_berdahl_martin(10.0), 4)
    0.7743
    """
    t = dew_point_c / 100.0
    return 0.711 + 0.56 * t + 0.73 * t * t


def clark_allen_cloud_factor(cloud_tenths: float) -> float:
    """Cloud factor ``1 + 0.0224 N - 0.0035 N^2 + 0.00028 N^3`` (Clark & Allen 1978).

    Parameters
    ----------
    cloud_tenths
        Opaque cloud cover ``N``, tenths, in [0, 10].

    Returns
    -------
    float
        Multiplier on the clear-sky emissivity, dimensionless.

    Examples
    --------
    >>> round(clark_allen_cloud_factor(10.0), 3)
    1.154
    """
    n = float(cloud_tenths)
    if not (0.0 <= n <= 10.0):
        raise ValueError(f"cloud_tenths = {cloud_tenths!r}: expected 0 <= value <= 10")
    return 1.0 + 0.0224 * n - 0.0035 * n * n + 0.00028 * n**3


def sky_emissivity_clark_allen(dew_point_k: float, *, cloud_tenths: float = 0.0) -> float:
    """Broadband sky emissivity by Clark & Allen (1978), as used by EnergyPlus.

    ``eps = (0.787 + 0.764 ln(Tdp / 273)) * (1 + 0.0224 N - 0.0035 N^2 + 0.00028 N^3)``.
    The result is not capped; a humid overcast sky can exceed 1.

    Parameters
    ----------
    dew_point_k
        Dew point, K.
    cloud_tenths
        Opaque cloud cover ``N``, tenths, in [0, 10].

    Returns
    -------
    float
        Sky emissivity, dimensionless.

    Examples
    --------
    >>> round(sky_emissivity_clark_allen(283.0), 4)
    0.8145
    >>> round(sky_emissivity_clark_allen(283.0, cloud_tenths=10), 3)
    0.94
    """
    if not dew_point_k > 0.0:
        raise ValueError(f"dew_point_k = {dew_point_k!r}: expected a temperature above 0 K")
    clear = 0.787 + 0.764 * math.log(dew_point_k / 273.0)
    return clear * clark_allen_cloud_factor(cloud_tenths)


#: The atmospheric window of :func:`sky_window_emissivity_idso`, um (lower, upper).
WINDOW_BAND_UM: tuple[float, float] = (8.0, 14.0)

#: Idso (1981) clear-sky emissivity of the 8-14 um window, ``a + b e^2 exp(c / T)`` with
#: ``e`` the screen-level vapour pressure in kPa and ``T`` the air temperature in K:
#: ``(a, b_per_kPa2, c_K)``. The coefficients are from memory (Idso, S. B., 1981, "A set of
#: equations for full spectrum and 8- to 14-um and 10.5- to 12.5-um thermal radiation from
#: cloudless skies", Water Resources Research 17(2): 295-304). The units follow from a bound:
#: with ``e`` in hPa the formula gives an emissivity of about 6 for night air of 6 °C and
#: 70 % (impossible), with ``e`` in kPa 0.30. The same paper's full-spectrum form,
#: ``0.70 + 5.95e-5 e exp(1500 / T)``, takes ``e`` in hPa.
IDSO_WINDOW: tuple[float, float, float] = (0.24, 2.98e-6, 3000.0)


def sky_window_emissivity_idso(vapour_pressure_hpa: float, air_k: float) -> float:
    """Clear-sky emissivity of the 8-14 um atmospheric window, Idso (1981).

    ``eps = 0.24 + 2.98e-6 e^2 exp(3000 / T)``, ``e`` in kPa, ``T`` in K (coefficients
    from memory, see :data:`IDSO_WINDOW`), capped at 1. It is the ratio of the clear sky's
    downward (hemispherical) emission in 8-14 um to that of a blackbody at the screen air
    temperature in the same band.

    Parameters
    ----------
    vapour_pressure_hpa
        Screen-level vapour pressure, hPa.
    air_k
        Screen-level air temperature, K.

    Returns
    -------
    float
        Window emissivity, dimensionless, in [0.24, 1].

    Examples
    --------
    >>> round(sky_window_emissivity_idso(6.54, 279.15), 3)
    0.299
    """
    if not air_k > 0.0:
        raise ValueError(f"air_k = {air_k!r}: expected a temperature above 0 K")
    if not vapour_pressure_hpa >= 0.0:
        raise ValueError(f"vapour_pressure_hpa = {vapour_pressure_hpa!r}: expected >= 0")
    a, b, c = IDSO_WINDOW
    e_kpa = vapour_pressure_hpa / 10.0
    return float(min(1.0, a + b * e_kpa * e_kpa * math.exp(c / air_k)))


@dataclass(frozen=True)
class ReflectedEstimate:
    """An estimated reflected apparent temperature, for when none was measured.

    Attributes
    ----------
    reflected_c
        Reflected apparent temperature to use in the measurement equation, °C: the
        blackbody temperature whose radiance in the camera band equals what the surface
        sees (sky and surroundings).
    sky_c
        Apparent temperature of the sky alone in the camera band, °C.
    model
        The sky model and the inputs used, one line.
    note
        A caution for the report, plain text.
    window_emissivity
        Clear-sky emissivity of the 8-14 um window used, dimensionless.
    band_um
        The camera band whose radiance was matched, um.
    """

    reflected_c: float
    sky_c: float
    model: str
    note: str
    window_emissivity: float = float("nan")
    band_um: tuple[float, float] = (7.5, 14.0)


def estimate_reflected_c(
    air_c: float,
    humidity_pct: float,
    sky: Literal["clear", "partly", "overcast"],
    *,
    sky_view: float = 1.0,
    band_um: tuple[float, float] = (7.5, 14.0),
) -> ReflectedEstimate:
    """Estimate the reflected apparent temperature of a surface under an open sky.

    What is matched: the radiance, integrated over the camera band ``band_um`` (Planck's
    law, :func:`wetmap.radiometry.band_radiance`), that reaches the surface from its
    hemisphere; the result is the blackbody temperature with that band radiance, which is
    what the measurement equation needs for its reflected term.

    * Clear sky, inside the 8-14 um window (the part of ``band_um`` that overlaps it):
      ``eps_w L(T_air)`` with ``eps_w`` the Idso (1981) window emissivity
      (:func:`sky_window_emissivity_idso`, vapour pressure from the humidity over water).
      The remaining ``1 - eps_w`` of the window is what the atmosphere does not emit: it
      comes from space beyond the atmosphere, whose radiance in this band is nil (the
      2.7 K background).
    * Clear sky, outside 8-14 um (e.g. 7.5-8 um of a 7.5-14 um camera): water vapour
      (6.3 um band) and carbon dioxide (15 um band) are close to opaque there, so the sky
      emits as a blackbody at the air temperature.
    * Clouds (``SKY_CLOUD_TENTHS``: 0, 5 or 10 tenths) cover that share of the sky and
      emit in the band as a blackbody at the air temperature (a low cloud base; an upper
      bound, a higher base is colder). Clouds raise the estimate toward the air
      temperature.
    * Surroundings: the surface sees the sky over ``sky_view`` of its hemisphere and
      surroundings at air temperature over the rest, mixed as band radiance.

    Idso's emissivity is a hemispherical (flux) value, which is what a diffusely
    reflecting surface returns. The model is for long-wave cameras: a band outside
    8-14 um (a 3-5 um camera looks through another window) is taken as opaque sky at air
    temperature, which is wrong there; measure the reflected temperature for such a camera. A measured reflected apparent temperature (ASTM E1862)
    is always preferred; the estimate is a documented default that ``[conditions]
    reflected_c`` overrides.

    Parameters
    ----------
    air_c
        Air temperature, °C.
    humidity_pct
        Relative humidity over water, %, in (0, 100].
    sky
        ``"clear"``, ``"partly"`` or ``"overcast"``.
    sky_view
        Fraction of the hemisphere above the surface that is sky, in [0, 1]
        (1 for an open flat roof; about 0.5 for a vertical hull side).
    band_um
        The camera band, um (lower, upper).

    Returns
    -------
    ReflectedEstimate

    Examples
    --------
    >>> est = estimate_reflected_c(6.0, 70.0, "clear")
    >>> round(est.window_emissivity, 3), round(est.reflected_c, 1)
    (0.299, -43.9)
    >>> estimate_reflected_c(6.0, 70.0, "overcast").reflected_c
    6.0
    >>> estimate_reflected_c(20.0, 52.5, "clear", sky_view=0.0).reflected_c
    20.0
    """
    if sky not in SKY_CLOUD_TENTHS:
        valid = ", ".join(repr(k) for k in SKY_CLOUD_TENTHS)
        raise ValueError(f"sky = {sky!r}: expected one of {valid}")
    if not (0.0 <= sky_view <= 1.0):
        raise ValueError(f"sky_view = {sky_view!r}: expected 0 <= value <= 1")
    lo, hi = (float(v) for v in band_um)
    table = band_table((lo, hi))
    tenths = SKY_CLOUD_TENTHS[sky]
    cloud = tenths / 10.0
    air_k = air_c + _ZERO_C_K
    e_hpa = vapour_pressure_hpa(air_c, humidity_pct)
    eps_w = sky_window_emissivity_idso(e_hpa, air_k)
    l_air = float(table.radiance_of(air_k))
    w_lo, w_hi = max(lo, WINDOW_BAND_UM[0]), min(hi, WINDOW_BAND_UM[1])
    l_window_air = float(band_radiance(air_k, band_um=(w_lo, w_hi))) if w_hi > w_lo else 0.0
    l_clear = eps_w * l_window_air + (l_air - l_window_air)
    l_sky = (1.0 - cloud) * l_clear + cloud * l_air
    l_refl = sky_view * l_sky + (1.0 - sky_view) * l_air
    # the air temperature itself where the sky adds nothing colder (exact, not through the table)
    sky_k = air_k if cloud == 1.0 else float(table.temperature_of(l_sky))
    refl_k = air_k if (cloud == 1.0 or sky_view == 0.0) else float(table.temperature_of(l_refl))
    model = (
        f"{lo:g}-{hi:g} um band radiance of a sky with Idso (1981) 8-14 um clear-sky window emissivity "
        f"{eps_w:.3f} (vapour pressure {e_hpa:.2f} hPa over water; coefficients from memory), opaque at air "
        f"temperature outside 8-14 um, cloud {tenths}/10 at air temperature, sky view {sky_view:g}"
    )
    note = (
        f"Reflected apparent temperature {refl_k - _ZERO_C_K:.1f} °C is estimated from air temperature, "
        "humidity and cloud cover (the sky's emission in the camera's 8-14 um window, Idso 1981), not measured. "
        "The real sky varies with the air above the ground and with cloud; a measured reflected apparent "
        "temperature (ASTM E1862) is preferred: give it as [conditions] reflected_c."
    )
    return ReflectedEstimate(
        reflected_c=float(refl_k - _ZERO_C_K),
        sky_c=float(sky_k - _ZERO_C_K),
        model=model,
        note=note,
        window_emissivity=eps_w,
        band_um=(lo, hi),
    )


# --------------------------------------------------------------------------------------
# Survey-condition checks
# --------------------------------------------------------------------------------------


@dataclass(frozen=True)
class EmissivityRange:
    """Documented long-wave emissivity range of a surface, with its source.

    Attributes
    ----------
    surface
        What the surface is, in words.
    low, high
        Range of the emissivity, dimensionless.
    source
        Where the range comes from.
    words
        Regular expressions (matched as whole words, case-insensitive) that name this
        surface in a section's ``assembly`` text.
    """

    surface: str
    low: float
    high: float
    source: str
    words: tuple[str, ...]


#: Default emissivity ranges (long-wave), most specific surfaces first: the first entry
#: whose words appear in a section's ``assembly`` is taken as that section's surface.
#: Values as collected in the project's reference checks; the user's emissivity wins,
#: these only trigger a warning.
EMISSIVITY_TABLE: tuple[EmissivityRange, ...] = (
    EmissivityRange("aluminium roof coating", 0.25, 0.65, "from memory",
                    (r"alumini?um (roof )?(coating|paint)", r"aluminized", r"aluminised", r"metallic coating")),
    EmissivityRange("new galvanised steel", 0.05, 0.10, "Incropera, table of surface emissivities",
                    (r"galvani[sz]ed",)),
    EmissivityRange("polished copper", 0.02, 0.05, "Incropera, table of surface emissivities", (r"polished copper",)),
    EmissivityRange("oxidised copper", 0.60, 0.80, "Incropera, table of surface emissivities",
                    (r"oxidi[sz]ed copper", r"patina(ted)?")),
    EmissivityRange("snow", 0.96, 0.99, "Salisbury, D'Aria & Wald 1994", (r"snow",)),
    EmissivityRange("ice", 0.95, 0.98, "Salisbury, D'Aria & Wald 1994", (r"ice",)),
    EmissivityRange("gravel", 0.90, 0.95, "Salisbury & D'Aria 1992", (r"gravel", r"aggregate surfac\w*")),
    EmissivityRange("EPDM", 0.86, 0.90, "cool-roof rating data, ASTM C1371; from memory", (r"epdm",)),
    EmissivityRange("white TPO/PVC", 0.83, 0.90, "cool-roof rating data, ASTM C1371; from memory",
                    (r"tpo", r"pvc")),
    EmissivityRange("bitumen/asphalt", 0.88, 0.95, "Incropera, table of surface emissivities",
                    (r"bitumen", r"bituminous", r"asphalt", r"built-up", r"bur", r"mod-?bit", r"felt",
                     r"coal[- ]tar")),
    EmissivityRange("gelcoat or antifouling paint", 0.90, 0.95,
                    "from memory (measure per ASTM E1933)", (r"gel-? ?coat", r"anti-?fouling")),
)

#: Roof kinds that are poor candidates for a night-time infrared survey (the trade's
#: list: ballasted roofs with large or deep stone, pavers, inverted / protected-membrane
#: and green roofs, recovers over a wet lower roof, highly insulated low-absorbency
#: systems, reflective coatings). ``(kind, word patterns, why)``.
POOR_CANDIDATES: tuple[tuple[str, tuple[str, ...], str], ...] = (
    ("ballasted", (r"ballast(ed)?",),
     "loose stone ballast stores heat and hides the membrane: its pattern dominates and wet areas are missed"),
    ("pavers", (r"pavers?", r"paving( slabs?)?", r"pedestals?"),
     "pavers shade the membrane from the sky, so it barely cools and shows no pattern"),
    ("inverted / protected membrane", (r"inverted", r"protected[- ]membrane", r"irma", r"upside[- ]down"),
     "the insulation lies above the membrane and drains; water below it is not seen the way the method assumes"),
    ("green roof", (r"green roof", r"vegetated", r"garden roof", r"sedum", r"planted", r"growing medium"),
     "soil and plants hold water and hide the membrane"),
    ("recover", (r"re-?cover(ed|s)?", r"overlay", r"over (an )?(old|existing) roof"),
     "a wet lower roof under a recover shows weakly or not at all through the upper layers"),
    ("reflective coating", (r"reflective coating", r"alumini?um (roof )?(coating|paint)", r"metallic coating"),
     "low long-wave emissivity: the camera sees reflected sky more than the roof's own temperature"),
    ("closed-cell insulation", (r"polyiso\w*", r"pir", r"pur", r"eps", r"xps", r"polystyrene", r"cellular glass",
                                r"foam ?glass"),
     "highly insulating, low-absorbency boards give faint patterns, mostly at wet board joints"),
)


def _mentions(text: str, patterns: Sequence[str]) -> bool:
    return any(re.search(rf"(?<![a-z0-9]){p}(?![a-z0-9])", text, flags=re.IGNORECASE) for p in patterns)


def surface_emissivity_range(assembly: str | None) -> EmissivityRange | None:
    """The documented emissivity range of the surface an assembly text names.

    Parameters
    ----------
    assembly
        A section's ``assembly`` text (free words, e.g. ``"EPDM on polyiso"``).

    Returns
    -------
    EmissivityRange or None
        The first entry of :data:`EMISSIVITY_TABLE` whose words appear in the text.

    Examples
    --------
    >>> surface_emissivity_range("built-up roof on perlite board").surface
    'bitumen/asphalt'
    >>> surface_emissivity_range("EPDM, fully adhered").high
    0.9
    >>> surface_emissivity_range("standing seam") is None
    True
    """
    if not assembly:
        return None
    for entry in EMISSIVITY_TABLE:
        if _mentions(assembly, entry.words):
            return entry
    return None


@dataclass(frozen=True)
class ConditionWarning:
    """One survey-condition problem.

    Attributes
    ----------
    check
        Which check fired: ``"wind"``, ``"rain"``, ``"surface_wet"``, ``"dew"``,
        ``"window"``, ``"sky"``, ``"reflected"``, ``"emissivity"``, ``"path"`` or
        ``"assembly"``.
    seen
        What was recorded or computed, with units.
    limit
        The limit and where it is set or comes from.
    why
        Why it matters for the survey.
    """

    check: str
    seen: str
    limit: str
    why: str

    @property
    def text(self) -> str:
        """The warning as one line: what was seen, the limit, why it matters."""
        return f"{self.seen} (limit: {self.limit}): {self.why}"


class _Described(Protocol):
    name: str
    assembly: str | None
    insulation: str | None


def hours_after_sunset(at: clock_time, sunset: clock_time) -> float:
    """Hours from sunset to ``at``, wrapped into (-12, 12] (a survey after midnight counts on).

    Examples
    --------
    >>> hours_after_sunset(clock_time(19, 55), clock_time(16, 40))
    3.25
    >>> hours_after_sunset(clock_time(1, 10), clock_time(20, 10))
    5.0
    >>> hours_after_sunset(clock_time(15, 10), clock_time(16, 40))
    -1.5
    """
    h = (at.hour - sunset.hour) + (at.minute - sunset.minute) / 60.0
    while h <= -12.0:
        h += 24.0
    while h > 12.0:
        h -= 24.0
    return h


def _fmt_h(h: float) -> str:
    sign = "-" if h < 0 else ""
    minutes = int(round(abs(h) * 60.0))
    return f"{sign}{minutes // 60}:{minutes % 60:02d} h"


def check_conditions(
    conditions: Conditions,
    camera: Camera,
    info: SurveyInfo,
    *,
    limits: Limits | None = None,
    sections: Sequence[_Described] = (),
    surface_c: float | None = None,
    surface_source: str | None = None,
    pass_times: Sequence[clock_time] = (),
) -> tuple[ConditionWarning, ...]:
    """Check the survey's recorded conditions against the limits.

    Checks, in this order (each only when its inputs were recorded):

    * wind above ``wind_max_m_s`` (default 6.7 m/s, 15 mph: trade sources citing ASTM C1153);
    * rain within the last ``rain_free_h`` hours (default 24 h: same sources);
    * surface reported not dry;
    * surface within ``dew_margin_c`` of the dew point, or of the frost point below
      0 °C (Magnus, Alduchov & Eskridge 1996; the humidity over water, WMO-No. 8),
      using ``surface_c`` or else the air temperature;
    * survey time (and every pass time) outside ``after_sunset_min_h`` ..
      ``after_sunset_max_h`` hours after sunset (roofs only; common practice: start
      near sunset, window about 4 h);
    * sky overcast (weak cooling, weak contrast) or partly cloudy (changing);
    * reflected temperature estimated rather than measured (ASTM E1862);
    * emissivity outside the documented range of the stated surface
      (:data:`EMISSIVITY_TABLE`, widened by ``emissivity_tolerance``; a hull with no
      stated surface is checked against gelcoat and antifouling paint);
    * a long (over ``path_max_m``), humid (at least ``path_humidity_pct``) air path
      whose transmittance was not given;
    * roof sections of a kind that is a poor candidate (:data:`POOR_CANDIDATES`).

    Parameters
    ----------
    conditions, camera, info
        The survey's ``[conditions]``, ``[camera]`` and ``[survey]`` tables.
    limits
        The ``[limits]`` table; ``None``: the defaults.
    sections
        Roof sections or hull zones with ``name``, ``assembly`` and ``insulation``
        (e.g. :class:`wetmap.vectors.Section`).
    surface_c
        A representative surface temperature, °C (e.g. the median dry background of a
        run); ``None``: the air temperature stands in.
    surface_source
        What ``surface_c`` is, for the message.
    pass_times
        Local times of the imagery passes, checked against the window like
        ``conditions.time``.

    Returns
    -------
    tuple of ConditionWarning
        Empty when nothing was found.

    Examples
    --------
    >>> from wetmap.survey import Camera, Conditions, SurveyInfo
    >>> info = SurveyInfo(title="t", kind="roof", crs="local")
    >>> cond = Conditions(air_c=6.0, humidity_pct=60.0, sky="clear", wind_m_s=9.0, reflected_c=-20.0)
    >>> [w.check for w in check_conditions(cond, Camera(emissivity=0.94), info)]
    ['wind']
    """
    lim = limits if limits is not None else Limits()
    out: list[ConditionWarning] = []
    roof = info.kind == "roof"

    # wind
    if conditions.wind_m_s is not None and conditions.wind_m_s > lim.wind_max_m_s:
        out.append(ConditionWarning(
            "wind",
            f"wind {conditions.wind_m_s:g} m/s during the survey",
            f"at most {lim.wind_max_m_s:g} m/s, [limits] wind_max_m_s; about 6.7 m/s (15 mph) by trade "
            "sources citing ASTM C1153",
            "wind carries heat off the surface by convection and evens out the warm patterns over wet "
            "material, so wet areas can be missed",
        ))

    # rain
    if conditions.hours_since_rain is not None and conditions.hours_since_rain < lim.rain_free_h:
        out.append(ConditionWarning(
            "rain",
            f"rain {conditions.hours_since_rain:g} h before the survey",
            f"no rain in the previous {lim.rain_free_h:g} h, [limits] rain_free_h; trade sources citing "
            "ASTM C1153",
            "surface water and wet gravel or ballast cool by evaporation and make warm and cool patches of "
            "their own, hiding or mimicking wet insulation",
        ))

    # surface dry
    if conditions.surface_dry is False:
        out.append(ConditionWarning(
            "surface_wet",
            "surface recorded as not dry ([conditions] surface_dry = false)",
            "a dry surface, no ice, snow or ponding; trade sources citing ASTM C1153",
            "water, dew or ice on the surface evaporates, freezes or conducts unevenly and masks the "
            "thermal pattern of the material below",
        ))

    # dew and frost
    frost = frost_point_c(conditions.air_c, conditions.humidity_pct)
    forming = frost if frost < 0.0 else dew_point_c(conditions.air_c, conditions.humidity_pct)
    which = "frost point" if frost < 0.0 else "dew point"
    surface = conditions.air_c if surface_c is None else float(surface_c)
    source = surface_source or ("the air temperature (no surface temperature available)"
                                if surface_c is None else "surface temperature")
    if math.isfinite(surface) and surface - forming < lim.dew_margin_c:
        state = ("below it: dew or frost is likely on the surface" if surface <= forming
                 else f"only {surface - forming:.1f} K above it")
        out.append(ConditionWarning(
            "dew",
            f"surface {surface:.1f} °C ({source}) against a {which} of {forming:.1f} °C (air "
            f"{conditions.air_c:g} °C, {conditions.humidity_pct:g} % humidity over water, WMO-No. 8; Magnus, "
            f"Alduchov & Eskridge 1996): {state}",
            f"at least {lim.dew_margin_c:g} K above the {which}, [limits] dew_margin_c; from memory",
            "dew or frost forming releases latent heat and wets the surface evenly, which hides wet areas "
            "(false negatives) and changes the emissivity",
        ))

    # survey window after sunset (roofs)
    if roof and conditions.sunset is not None:
        times: list[tuple[str, clock_time]] = []
        if conditions.time is not None:
            times.append(("survey time", conditions.time))
        for t in pass_times:
            if t not in [x for _, x in times]:
                times.append(("pass at", t))
        for what, t in times:
            h = hours_after_sunset(t, conditions.sunset)
            if h < lim.after_sunset_min_h or h > lim.after_sunset_max_h:
                when = "before the window" if h < lim.after_sunset_min_h else "after the window"
                why = ("the day's sun still heats the surface: warm patterns then come from residual solar "
                       "gain, not from stored heat" if h < lim.after_sunset_min_h else
                       "late in the night wet and dry areas approach the same temperature and contrast fades; "
                       "dew or frost becomes more likely")
                out.append(ConditionWarning(
                    "window",
                    f"{what} {t.strftime('%H:%M')} is {_fmt_h(h)} after sunset ({conditions.sunset.strftime('%H:%M')}),"
                    f" {when}",
                    f"{_fmt_h(lim.after_sunset_min_h)} to {_fmt_h(lim.after_sunset_max_h)} after sunset, [limits] "
                    "after_sunset_min_h / after_sunset_max_h; common practice (trade sources: start near sunset, "
                    "a window of about 4 h)",
                    why + "; `wetmap window` estimates the window for the roof's assembly",
                ))

    # sky
    if conditions.sky == "overcast":
        out.append(ConditionWarning(
            "sky",
            "sky overcast",
            "a clear or mostly clear sky; trade sources citing ASTM C1153 (a mostly sunny day, clear night)",
            "clouds return long-wave radiation, so the roof cools little and wet/dry contrast is weak",
        ))
    elif conditions.sky == "partly":
        out.append(ConditionWarning(
            "sky",
            "sky partly cloudy (changing)",
            "a clear sky that stays clear through the survey; common practice",
            "cloud passing over changes the cooling and the reflected temperature between images, and cloud "
            "arriving mid-survey can hide wet areas",
        ))

    # reflected temperature
    if conditions.reflected_c is None:
        sky_view = 1.0 if roof else 0.5
        est = estimate_reflected_c(conditions.air_c, conditions.humidity_pct, conditions.sky or "clear",
                                   sky_view=sky_view, band_um=camera.band_um)
        out.append(ConditionWarning(
            "reflected",
            f"reflected temperature not measured: estimated {est.reflected_c:.1f} °C ({est.model})",
            "a measured reflected apparent temperature, ASTM E1862",
            est.note,
        ))

    # emissivity against the stated surface
    eps = camera.emissivity
    tol = lim.emissivity_tolerance
    checked: list[tuple[str, EmissivityRange]] = []
    for s in sections:
        entry = surface_emissivity_range(s.assembly)
        if entry is not None:
            checked.append((f"section {s.name} ({s.assembly})", entry))
    if not checked and not roof:
        checked.append(("a hull (no surface stated)", EMISSIVITY_TABLE[-1]))
    seen_entries: set[str] = set()
    for where, entry in checked:
        if entry.low - tol <= eps <= entry.high + tol or entry.surface in seen_entries:
            continue
        seen_entries.add(entry.surface)
        out.append(ConditionWarning(
            "emissivity",
            f"[camera] emissivity {eps:g} for {where}: {entry.surface}",
            f"{entry.low:g}-{entry.high:g} ({entry.source}), widened by {tol:g}, [limits] emissivity_tolerance",
            "a wrong emissivity shifts every surface temperature and mixes in more or less reflected sky; "
            "measure it (ASTM E1933) or correct [camera] emissivity",
        ))

    # long humid air path
    if (camera.transmittance is None and camera.distance_m > lim.path_max_m
            and conditions.humidity_pct >= lim.path_humidity_pct):
        water_mm = absolute_humidity_g_m3(conditions.air_c, conditions.humidity_pct) * camera.distance_m / 1000.0
        out.append(ConditionWarning(
            "path",
            f"air path {camera.distance_m:g} m at {conditions.humidity_pct:g} % humidity ({water_mm:.2f} mm of "
            "precipitable water) with no measured transmittance",
            f"at most {lim.path_max_m:g} m in air of {lim.path_humidity_pct:g} % humidity or more, [limits] "
            "path_max_m / path_humidity_pct; common practice",
            "the approximate water-vapour transmittance is uncertain on long humid paths, which shifts "
            "absolute temperatures; give [camera] transmittance from a radiative-transfer code or fly lower",
        ))

    # poor candidates (roofs)
    if roof:
        for s in sections:
            text = " ".join(t for t in (s.assembly, s.insulation) if t)
            for kind, words, why in POOR_CANDIDATES:
                if text and _mentions(text, words):
                    out.append(ConditionWarning(
                        "assembly",
                        f"section {s.name}: {kind} ({text})",
                        "insulation above the deck, directly under an exposed membrane; ASTM C1153 scope and "
                        "trade sources",
                        f"a poor candidate for an infrared moisture survey: {why}; rely on cores or another method "
                        "there",
                    ))
    return tuple(out)
