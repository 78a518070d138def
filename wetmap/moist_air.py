"""Moist air: saturation vapour pressure, dew and frost point, absolute humidity.

Vapour pressure uses the Magnus form with the coefficients of Alduchov & Eskridge
(1996):

* over water: ``e_s = 6.1094 exp(17.625 T / (T + 243.04))`` hPa,
* over ice: ``e_s = 6.1121 exp(22.587 T / (T + 273.86))`` hPa,

with ``T`` in °C.

Relative humidity convention
----------------------------
A relative humidity is taken over liquid water at every temperature, the WMO
convention (WMO-No. 8, Guide to Instruments and Methods of Observation) that weather
services and hygrometers use: the vapour pressure is ``RH * e_s,water(T_air)`` also
below 0 °C. That vapour pressure gives the dew point (Magnus over water) and the frost
point (Magnus over ice). ``rh_over="auto"`` keeps the ASHRAE Handbook convention (over
ice below 0 °C, as ``psychrolib`` takes it) for humidity stated that way. Above 0 °C the
two are identical; below it, reading a WMO humidity as over ice puts the frost point
0.6 K (at -5 °C) to 1.1 K (at -10 °C) too low.

:mod:`wetmap.radiometry` (the water vapour on the camera's path) and
:mod:`wetmap.conditions` (the survey-condition checks) both build on this module.
"""

from __future__ import annotations

import math
from typing import Literal

import numpy as np
from numpy.typing import ArrayLike

__all__ = [
    "MAGNUS_WATER",
    "MAGNUS_ICE",
    "WATER_VAPOUR_GAS_CONSTANT",
    "RhOver",
    "saturation_vapour_pressure_hpa",
    "vapour_pressure_hpa",
    "dew_point_c",
    "frost_point_c",
    "condensation_point_c",
    "absolute_humidity_g_m3",
]

#: Magnus coefficients over water ``(a_hPa, b, c_degC)``, Alduchov & Eskridge (1996).
MAGNUS_WATER: tuple[float, float, float] = (6.1094, 17.625, 243.04)
#: Magnus coefficients over ice ``(a_hPa, b, c_degC)``, Alduchov & Eskridge (1996).
MAGNUS_ICE: tuple[float, float, float] = (6.1121, 22.587, 273.86)
#: Specific gas constant of water vapour, J kg-1 K-1 (R / M_w, CODATA R, M_w 18.015 g/mol).
WATER_VAPOUR_GAS_CONSTANT: float = 461.52

_ZERO_C_K = 273.15

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


def vapour_pressure_hpa(air_c: float, humidity_pct: float, *, rh_over: RhOver = "water") -> float:
    """Partial pressure of water vapour in the air.

    Parameters
    ----------
    air_c
        Air temperature, °C.
    humidity_pct
        Relative humidity, %, in (0, 100].
    rh_over
        ``"water"`` (default): always over water (WMO convention). ``"auto"``: over
        water at or above 0 °C and over ice below 0 °C (ASHRAE convention).

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


def dew_point_c(air_c: float, humidity_pct: float, *, rh_over: RhOver = "water") -> float:
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


def frost_point_c(air_c: float, humidity_pct: float, *, rh_over: RhOver = "water") -> float:
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
    -6.315
    """
    return _invert_magnus(vapour_pressure_hpa(air_c, humidity_pct, rh_over=rh_over), MAGNUS_ICE)


def condensation_point_c(air_c: float, humidity_pct: float, *, rh_over: RhOver = "water") -> float:
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
    -6.315
    """
    frost = frost_point_c(air_c, humidity_pct, rh_over=rh_over)
    if frost < 0.0:
        return frost
    return dew_point_c(air_c, humidity_pct, rh_over=rh_over)


def absolute_humidity_g_m3(air_c: float, humidity_pct: float, *, rh_over: RhOver = "water") -> float:
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
