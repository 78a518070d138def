"""Survey conditions: humidity, dew and frost point, and a broadband sky estimate.

Vapour pressure uses the Magnus form with the coefficients of Alduchov & Eskridge
(1996):

* over water: ``e_s = 6.1094 exp(17.625 T / (T + 243.04))`` hPa,
* over ice: ``e_s = 6.1121 exp(22.587 T / (T + 273.86))`` hPa,

with ``T`` in °C.

Relative humidity convention
----------------------------
Below 0 °C a relative humidity can be stated with respect to saturation over water
(the WMO convention, used by most weather services) or over ice (the ASHRAE
Handbook convention, followed by ``psychrolib``). The functions here take
``rh_over="auto"`` by default: over water at or above 0 °C and over ice below it,
as ASHRAE does. Pass ``rh_over="water"`` when the humidity comes from a weather
report or a hygrometer that states it over water at all temperatures. Above
0 °C the two are identical.

Sky temperature
---------------
The sky models (Swinbank 1963; Berdahl & Martin 1984; Clark & Allen 1978) are
*broadband* (whole long-wave spectrum). In the 8-14 um window of a thermal camera a
clear sky is much colder than these values (often tens of degrees below zero),
so they over-estimate the reflected temperature a roof sees. A measured reflected
apparent temperature (ASTM E1862) is always preferred.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Literal

import numpy as np
from numpy.typing import ArrayLike

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
    "ReflectedEstimate",
    "estimate_reflected_c",
]

#: Magnus coefficients over water ``(a_hPa, b, c_degC)``, Alduchov & Eskridge (1996).
MAGNUS_WATER: tuple[float, float, float] = (6.1094, 17.625, 243.04)
#: Magnus coefficients over ice ``(a_hPa, b, c_degC)``, Alduchov & Eskridge (1996).
MAGNUS_ICE: tuple[float, float, float] = (6.1121, 22.587, 273.86)
#: Specific gas constant of water vapour, J kg-1 K-1 (R / M_w, CODATA R, M_w 18.015 g/mol).
WATER_VAPOUR_GAS_CONSTANT: float = 461.52

_ZERO_C_K = 273.15

#: Opaque cloud cover in tenths used for each sky description.
SKY_CLOUD_TENTHS: dict[str, int] = {"clear": 0, "partly": 5, "overcast": 10}

RhOver = Literal["auto", "water"]


def _check_humidity(humidity_pct: float) -> None:
    if not (0.0 < humidity_pct <= 100.0):
        raise ValueError(f"humidity_pct = {humidity_pct!r}: expected 0 < value <= 100")


def _check_rh_over(rh_over: str) -> None:
    if rh_over not in ("auto", "water"):
        raise ValueError(f"rh_over = {rh_over!r}: expected one of 'auto', 'water'")


def saturation_vapour_pressure_hpa(
    temp_c: ArrayLike, *, over: Literal["water", "ice"] = "water"
) -> float | np.ndarray:
    """Saturation vapour pressure by the Magnus formula.

    Parameters
    ----------
    temp_c
        Temperature, °C. Scalar or array of any shape.
    over
        ``"water"`` (liquid, also supercooled) or ``"ice"``.

    Returns
    -------
    float or numpy.ndarray
        Saturation vapour pressure, hPa, same shape as ``temp_c`` (a float for a
        scalar).

    Examples
    --------
    >>> round(saturation_vapour_pressure_hpa(20.0), 3)
    23.334
    >>> round(saturation_vapour_pressure_hpa(-5.0, over="ice"), 3)
    4.016
    """
    if over == "water":
        a, b, c = MAGNUS_WATER
    elif over == "ice":
        a, b, c = MAGNUS_ICE
    else:
        raise ValueError(f"over = {over!r}: expected one of 'water', 'ice'")
    t = np.asarray(temp_c, dtype=np.float64)
    e = a * np.exp(b * t / (t + c))
    return float(e) if e.ndim == 0 else e


def vapour_pressure_hpa(air_c: float, humidity_pct: float, *, rh_over: RhOver = "auto") -> float:
    """Partial pressure of water vapour in the air.

    Parameters
    ----------
    air_c
        Air temperature, °C.
    humidity_pct
        Relative humidity, %, in (0, 100].
    rh_over
        ``"auto"``: the humidity is relative to saturation over water at or above
        0 °C and over ice below 0 °C (ASHRAE convention). ``"water"``: always over
        water (WMO convention).

    Returns
    -------
    float
        Vapour pressure, hPa.

    Examples
    --------
    >>> round(vapour_pressure_hpa(20.0, 50.0), 3)
    11.667
    """
    _check_humidity(humidity_pct)
    _check_rh_over(rh_over)
    over = "ice" if (rh_over == "auto" and air_c < 0.0) else "water"
    return humidity_pct / 100.0 * float(saturation_vapour_pressure_hpa(air_c, over=over))


def _invert_magnus(e_hpa: float, coeffs: tuple[float, float, float]) -> float:
    a, b, c = coeffs
    g = math.log(e_hpa / a)
    return c * g / (b - g)


def dew_point_c(air_c: float, humidity_pct: float, *, rh_over: RhOver = "auto") -> float:
    """Dew point (saturation over liquid water), Magnus formula.

    Parameters
    ----------
    air_c
        Air temperature, °C.
    humidity_pct
        Relative humidity, %, in (0, 100].
    rh_over
        Reference of the relative humidity below 0 °C; see the module notes.

    Returns
    -------
    float
        Dew point, °C.

    Examples
    --------
    >>> round(dew_point_c(20.0, 50.0), 3)
    9.261
    """
    return _invert_magnus(vapour_pressure_hpa(air_c, humidity_pct, rh_over=rh_over), MAGNUS_WATER)


def frost_point_c(air_c: float, humidity_pct: float, *, rh_over: RhOver = "auto") -> float:
    """Frost point (saturation over ice), Magnus formula.

    Parameters
    ----------
    air_c
        Air temperature, °C.
    humidity_pct
        Relative humidity, %, in (0, 100].
    rh_over
        Reference of the relative humidity below 0 °C; see the module notes.

    Returns
    -------
    float
        Frost point, °C. Meaningful when it is below 0 °C.

    Examples
    --------
    >>> round(frost_point_c(-5.0, 85.0), 3)
    -6.886
    """
    return _invert_magnus(vapour_pressure_hpa(air_c, humidity_pct, rh_over=rh_over), MAGNUS_ICE)


def condensation_point_c(air_c: float, humidity_pct: float, *, rh_over: RhOver = "auto") -> float:
    """Surface temperature at which dew or frost forms.

    The frost point when it is below 0 °C, otherwise the dew point. A surface
    (membrane, hull) colder than this gathers dew or frost, which masks thermal
    patterns.

    Parameters
    ----------
    air_c
        Air temperature, °C.
    humidity_pct
        Relative humidity, %, in (0, 100].
    rh_over
        Reference of the relative humidity below 0 °C; see the module notes.

    Returns
    -------
    float
        Condensation point, °C.

    Examples
    --------
    >>> round(condensation_point_c(20.0, 50.0), 3)
    9.261
    >>> round(condensation_point_c(-5.0, 85.0), 3)
    -6.886
    """
    frost = frost_point_c(air_c, humidity_pct, rh_over=rh_over)
    if frost < 0.0:
        return frost
    return dew_point_c(air_c, humidity_pct, rh_over=rh_over)


def absolute_humidity_g_m3(air_c: float, humidity_pct: float, *, rh_over: RhOver = "auto") -> float:
    """Mass of water vapour per volume of air (ideal gas).

    ``rho_v = e / (R_v T)`` with ``R_v`` = :data:`WATER_VAPOUR_GAS_CONSTANT`.

    Parameters
    ----------
    air_c
        Air temperature, °C.
    humidity_pct
        Relative humidity, %, in (0, 100].
    rh_over
        Reference of the relative humidity below 0 °C; see the module notes.

    Returns
    -------
    float
        Absolute humidity, g m-3.

    Examples
    --------
    >>> round(absolute_humidity_g_m3(20.0, 50.0), 2)
    8.62
    """
    e_pa = 100.0 * vapour_pressure_hpa(air_c, humidity_pct, rh_over=rh_over)
    return 1000.0 * e_pa / (WATER_VAPOUR_GAS_CONSTANT * (air_c + _ZERO_C_K))


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


@dataclass(frozen=True)
class ReflectedEstimate:
    """An estimated reflected temperature, for when none was measured.

    Attributes
    ----------
    reflected_c
        Reflected temperature to use in the measurement equation, °C.
    sky_c
        Broadband effective sky temperature, °C.
    model
        The sky model and the inputs used, one line.
    note
        A caution for the report, plain text.
    """

    reflected_c: float
    sky_c: float
    model: str
    note: str


def estimate_reflected_c(
    air_c: float,
    humidity_pct: float,
    sky: Literal["clear", "partly", "overcast"],
    *,
    sky_view: float = 1.0,
) -> ReflectedEstimate:
    """Estimate the reflected temperature of a surface under an open sky.

    The sky emissivity comes from Clark & Allen (1978) with the dew point of the air
    and the cloud cover of :data:`SKY_CLOUD_TENTHS`; it is capped at 1. The sky
    temperature is ``eps**0.25 * T_air``. The surface sees the sky over the fraction
    ``sky_view`` of its hemisphere and surroundings at air temperature over the
    rest, mixed as radiation (fourth powers):
    ``T_refl^4 = sky_view T_sky^4 + (1 - sky_view) T_air^4``.

    This is a broadband estimate. In the 8-14 um camera window a clear sky is much
    colder, so the estimate is too warm under clear skies. A measured reflected
    apparent temperature (ASTM E1862) is preferred.

    Parameters
    ----------
    air_c
        Air temperature, °C.
    humidity_pct
        Relative humidity, %, in (0, 100].
    sky
        ``"clear"``, ``"partly"`` or ``"overcast"``.
    sky_view
        Fraction of the hemisphere above the surface that is sky, in [0, 1]
        (1 for an open flat roof; about 0.5 for a vertical hull side).

    Returns
    -------
    ReflectedEstimate

    Examples
    --------
    >>> est = estimate_reflected_c(20.0, 52.5, "overcast")
    >>> round(est.reflected_c, 1)
    15.5
    >>> estimate_reflected_c(20.0, 52.5, "clear", sky_view=0.0).reflected_c
    20.0
    """
    if sky not in SKY_CLOUD_TENTHS:
        valid = ", ".join(repr(k) for k in SKY_CLOUD_TENTHS)
        raise ValueError(f"sky = {sky!r}: expected one of {valid}")
    if not (0.0 <= sky_view <= 1.0):
        raise ValueError(f"sky_view = {sky_view!r}: expected 0 <= value <= 1")
    tenths = SKY_CLOUD_TENTHS[sky]
    dew_c = dew_point_c(air_c, humidity_pct, rh_over="auto")
    eps = min(1.0, sky_emissivity_clark_allen(dew_c + _ZERO_C_K, cloud_tenths=tenths))
    air_k = air_c + _ZERO_C_K
    sky_k = eps**0.25 * air_k
    refl_k = (sky_view * sky_k**4 + (1.0 - sky_view) * air_k**4) ** 0.25
    model = (
        f"Clark & Allen (1978) broadband sky emissivity {eps:.3f} "
        f"(dew point {dew_c:.1f} °C, cloud {tenths}/10), sky view {sky_view:g}"
    )
    note = (
        f"Reflected temperature {refl_k - _ZERO_C_K:.1f} °C is a broadband estimate from "
        "air temperature, humidity and cloud cover, not a measurement. In the 8-14 um "
        "camera window a clear sky is much colder than this (often tens of degrees below "
        "zero), so the estimate is too warm under clear skies. A measured reflected "
        "apparent temperature (ASTM E1862) is preferred."
    )
    return ReflectedEstimate(
        reflected_c=float(refl_k - _ZERO_C_K),
        sky_c=float(sky_k - _ZERO_C_K),
        model=model,
        note=note,
    )
