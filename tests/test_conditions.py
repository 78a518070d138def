"""Tests for wetmap.conditions: vapour pressure, dew/frost point, sky estimates.

Reference values come from /work/shared/CHECKS.md unless a comment says otherwise;
the source of each outside value is named beside the check.
"""

from __future__ import annotations

import math

import numpy as np
import psychrolib
import pytest
from scipy import constants

from wetmap import conditions as cond
from wetmap.conditions import (
    SKY_CLOUD_TENTHS,
    ReflectedEstimate,
    absolute_humidity_g_m3,
    condensation_point_c,
    dew_point_c,
    estimate_reflected_c,
    frost_point_c,
    saturation_vapour_pressure_hpa,
    sky_emissivity_berdahl_martin,
    sky_emissivity_clark_allen,
    sky_temperature_swinbank_k,
    vapour_pressure_hpa,
)

K0 = 273.15


@pytest.fixture(scope="module")
def psy():
    """psychrolib in SI units (ASHRAE Handbook Fundamentals psychrometrics)."""
    psychrolib.SetUnitSystem(psychrolib.SI)
    return psychrolib


# ------------------------------------------------------------------ Magnus values


@pytest.mark.parametrize(
    ("air_c", "rh", "expected"),
    [
        (20.0, 50.0, 9.261),  # CHECKS.md, Magnus (Alduchov & Eskridge 1996)
        (10.0, 80.0, 6.708),  # CHECKS.md, Magnus (Alduchov & Eskridge 1996)
        (30.0, 70.0, 23.930),  # CHECKS.md, Magnus (Alduchov & Eskridge 1996)
    ],
)
def test_dew_point_magnus_table(air_c, rh, expected):
    assert dew_point_c(air_c, rh) == pytest.approx(expected, abs=0.001)


def test_frost_point_magnus_table():
    # CHECKS.md, Magnus over ice (Alduchov & Eskridge 1996): -5 °C, 85 % -> -6.886
    assert frost_point_c(-5.0, 85.0) == pytest.approx(-6.886, abs=0.001)


def test_saturation_vapour_pressure_coefficients():
    # Alduchov & Eskridge (1996) Magnus coefficients as listed in CHECKS.md; at 0 °C
    # the formula returns its leading coefficient.
    assert saturation_vapour_pressure_hpa(0.0) == pytest.approx(6.1094, rel=1e-12)
    assert saturation_vapour_pressure_hpa(0.0, over="ice") == pytest.approx(6.1121, rel=1e-12)
    # CHECKS.md sky test case: dew point 10 °C <-> water vapour pressure 12.28 hPa.
    # That is the ASHRAE (Hyland-Wexler) value; Magnus gives 12.26 hPa (0.16 % lower).
    assert saturation_vapour_pressure_hpa(10.0) == pytest.approx(12.28, abs=0.03)


def test_saturation_vapour_pressure_against_psychrolib(psy):
    # psychrolib.GetSatVapPres (ASHRAE Handbook Fundamentals, Hyland-Wexler): Magnus
    # agrees within 0.3 % from -30 to 40 °C (over ice below 0 °C, as psychrolib does).
    for t in np.arange(-30.0, 40.5, 2.5):
        over = "water" if t >= 0.0 else "ice"
        ours_pa = 100.0 * saturation_vapour_pressure_hpa(t, over=over)
        assert ours_pa == pytest.approx(psy.GetSatVapPres(float(t)), rel=3e-3)


def test_saturation_vapour_pressure_vectorised():
    temps = np.array([[-10.0, 0.0], [10.0, 20.0]])
    out = saturation_vapour_pressure_hpa(temps)
    assert isinstance(out, np.ndarray) and out.shape == (2, 2)
    assert out[1, 1] == pytest.approx(saturation_vapour_pressure_hpa(20.0))
    assert isinstance(saturation_vapour_pressure_hpa(20.0), float)


# ------------------------------------------------------------- against psychrolib


@pytest.mark.parametrize(
    ("air_c", "rh", "psychrolib_value"),
    [
        (20.0, 50.0, 9.272),  # CHECKS.md, psychrolib (ASHRAE Handbook Fundamentals)
        (10.0, 80.0, 6.713),  # CHECKS.md, psychrolib (ASHRAE Handbook Fundamentals)
        (30.0, 70.0, 23.928),  # CHECKS.md, psychrolib (ASHRAE Handbook Fundamentals)
    ],
)
def test_dew_point_against_psychrolib_rows(psy, air_c, rh, psychrolib_value):
    live = psy.GetTDewPointFromRelHum(air_c, rh / 100.0)
    assert live == pytest.approx(psychrolib_value, abs=0.001)  # table matches the library
    assert dew_point_c(air_c, rh) == pytest.approx(live, abs=0.02)  # CHECKS.md tolerance


def test_frost_point_against_psychrolib_row(psy):
    # psychrolib returns a frost point below 0.01 °C, with the humidity taken over
    # ice below freezing (ASHRAE convention): -5 °C, 85 % -> -6.888 (CHECKS.md)
    live = psy.GetTDewPointFromRelHum(-5.0, 0.85)
    assert live == pytest.approx(-6.888, abs=0.001)
    assert frost_point_c(-5.0, 85.0) == pytest.approx(live, abs=0.02)
    assert condensation_point_c(-5.0, 85.0) == pytest.approx(live, abs=0.02)


def test_condensation_point_against_psychrolib_grid(psy):
    # psychrolib.GetTDewPointFromRelHum (ASHRAE Handbook Fundamentals) returns the dew
    # point above 0.01 °C and the frost point below, as condensation_point_c does.
    # Magnus vs Hyland-Wexler differ by up to about 0.03 K over this grid (computed
    # here), so the tolerance is 0.04 K.
    for air_c in np.arange(-20.0, 40.1, 2.5):
        for rh in (20.0, 40.0, 60.0, 80.0, 100.0):
            ref = psy.GetTDewPointFromRelHum(float(air_c), rh / 100.0)
            assert condensation_point_c(float(air_c), rh) == pytest.approx(ref, abs=0.04)


# ------------------------------------------------------------------ conventions


def test_condensation_point_picks_dew_or_frost():
    assert condensation_point_c(20.0, 50.0) == dew_point_c(20.0, 50.0)
    assert condensation_point_c(-5.0, 85.0) == frost_point_c(-5.0, 85.0)
    # a warm air mass can still have a frost point below 0 °C (dry air)
    assert condensation_point_c(5.0, 30.0) == frost_point_c(5.0, 30.0) < 0.0


def test_frost_point_above_dew_point_below_zero():
    # Saturation over ice is lower than over supercooled water (Magnus coefficients),
    # so for the same vapour pressure the frost point lies above the dew point.
    assert frost_point_c(-5.0, 85.0) > dew_point_c(-5.0, 85.0)


def test_rh_over_water_convention():
    # Below 0 °C with rh_over="water" the humidity is relative to supercooled water
    # (WMO convention): vapour pressure = RH * e_s,water; frost point then inverts
    # Magnus over ice. Self-consistency with saturation_vapour_pressure_hpa.
    e = 0.85 * saturation_vapour_pressure_hpa(-5.0, over="water")
    assert vapour_pressure_hpa(-5.0, 85.0, rh_over="water") == pytest.approx(e)
    tf = frost_point_c(-5.0, 85.0, rh_over="water")
    assert saturation_vapour_pressure_hpa(tf, over="ice") == pytest.approx(e, rel=1e-12)
    assert tf == pytest.approx(-6.315, abs=0.001)  # computed here from Magnus over ice
    # above 0 °C both conventions agree
    assert dew_point_c(20.0, 50.0, rh_over="water") == dew_point_c(20.0, 50.0)


def test_saturated_air_dew_point_equals_air_temperature():
    # definition: at 100 % RH the dew point is the air temperature
    for t in (0.5, 10.0, 25.0, 40.0):
        assert dew_point_c(t, 100.0) == pytest.approx(t, abs=1e-9)
    assert frost_point_c(-10.0, 100.0) == pytest.approx(-10.0, abs=1e-9)


@pytest.mark.parametrize("rh", [0.0, -5.0, 100.5, float("nan")])
def test_humidity_out_of_range(rh):
    with pytest.raises(ValueError, match="humidity_pct"):
        dew_point_c(20.0, rh)


def test_bad_options():
    with pytest.raises(ValueError, match="'water', 'ice'"):
        saturation_vapour_pressure_hpa(10.0, over="steam")
    with pytest.raises(ValueError, match="rh_over"):
        dew_point_c(10.0, 50.0, rh_over="ice")


# ---------------------------------------------------------------- absolute humidity


def test_absolute_humidity_checks_value():
    # CHECKS.md: 20 °C, 50 % RH -> 8.64 g m-3. That figure follows from the ASHRAE
    # (Hyland-Wexler) saturation pressure, 2338.8 Pa; Magnus gives 2333.4 Pa (0.23 %
    # lower) and 8.624 g m-3, hence the tolerance of 0.02 g m-3.
    assert absolute_humidity_g_m3(20.0, 50.0) == pytest.approx(8.64, abs=0.02)


def test_absolute_humidity_against_psychrolib(psy):
    # ideal gas rho_v = p_v / (R_v T) with psychrolib's vapour pressure (ASHRAE
    # Handbook Fundamentals) and R_v = R / M_w (CODATA R, M_w 18.01528 g/mol):
    # agreement within the Magnus vs Hyland-Wexler difference (0.3 %).
    r_v = constants.R / 0.01801528
    for air_c, rh in [(20.0, 50.0), (5.0, 90.0), (30.0, 70.0), (-10.0, 80.0)]:
        ref = 1000.0 * psy.GetVapPresFromRelHum(air_c, rh / 100.0) / (r_v * (air_c + K0))
        assert absolute_humidity_g_m3(air_c, rh) == pytest.approx(ref, rel=3e-3)


# ------------------------------------------------------------------------- sky


def test_swinbank():
    # CHECKS.md, Swinbank (1963): 20 °C air -> 277.06 K (3.91 °C)
    assert sky_temperature_swinbank_k(293.15) == pytest.approx(277.06, abs=0.005)
    with pytest.raises(ValueError, match="air_k"):
        sky_temperature_swinbank_k(-3.0)


def test_berdahl_martin():
    # CHECKS.md, Berdahl & Martin (1984): dew point 10 °C -> 0.7743; with 20 °C air
    # T_sky = eps^0.25 T_air -> 1.84 °C
    eps = sky_emissivity_berdahl_martin(10.0)
    assert eps == pytest.approx(0.7743, abs=5e-5)
    assert eps**0.25 * 293.15 - K0 == pytest.approx(1.84, abs=0.005)


def test_clark_allen_energyplus_example():
    # CHECKS.md: EnergyPlus Engineering Reference worked example, Clark & Allen,
    # 293 K air, 283 K dew point, clear: eps 0.815 and sky IR 340.6 W m-2 in the
    # reference; recomputed 0.8145 and 340.3 W m-2 (sigma from scipy.constants, CODATA).
    eps = sky_emissivity_clark_allen(283.0)
    assert eps == pytest.approx(0.8145, abs=5e-5)
    assert eps == pytest.approx(0.815, abs=1e-3)  # the reference rounds to 3 decimals
    sky_ir = eps * constants.sigma * 293.0**4
    assert sky_ir == pytest.approx(340.3, abs=0.1)  # 340.38 here; CHECKS.md truncates
    assert sky_ir == pytest.approx(340.6, abs=0.5)


@pytest.mark.parametrize(
    ("tenths", "eps_expected", "sky_c_expected"),
    [
        (5, 0.863, 9.25),  # CHECKS.md, Clark & Allen cloud factor, N = 5
        (10, 0.940, 15.35),  # CHECKS.md, Clark & Allen cloud factor, N = 10
    ],
)
def test_clark_allen_cloud_factor(tenths, eps_expected, sky_c_expected):
    eps = sky_emissivity_clark_allen(283.0, cloud_tenths=tenths)
    assert eps == pytest.approx(eps_expected, abs=5e-4)
    assert eps**0.25 * 293.0 - K0 == pytest.approx(sky_c_expected, abs=0.02)


def test_clark_allen_cloud_tenths_range():
    with pytest.raises(ValueError, match="cloud_tenths"):
        sky_emissivity_clark_allen(283.0, cloud_tenths=11)


def test_sky_cloud_tenths_mapping():
    assert SKY_CLOUD_TENTHS == {"clear": 0, "partly": 5, "overcast": 10}


# ------------------------------------------------------------ reflected estimate


def _rh_for_dew_point(air_c: float, dew_c: float) -> float:
    """Relative humidity (%) whose Magnus dew point is ``dew_c`` at ``air_c``."""
    return 100.0 * saturation_vapour_pressure_hpa(dew_c) / saturation_vapour_pressure_hpa(air_c)


def test_estimate_reflected_matches_clark_allen():
    # 20 °C air with a 10 °C dew point (CHECKS.md sky test case); open roof.
    rh = _rh_for_dew_point(20.0, 10.0)
    for sky, tenths in SKY_CLOUD_TENTHS.items():
        est = estimate_reflected_c(20.0, rh, sky)
        eps = sky_emissivity_clark_allen(283.15, cloud_tenths=tenths)
        assert isinstance(est, ReflectedEstimate)
        assert est.sky_c == pytest.approx(eps**0.25 * 293.15 - K0, abs=1e-9)
        assert est.reflected_c == pytest.approx(est.sky_c, abs=1e-9)  # sky_view = 1
    # clear < partly < overcast < air
    values = [estimate_reflected_c(20.0, rh, s).reflected_c for s in ("clear", "partly", "overcast")]
    assert values == sorted(values) and values[-1] < 20.0


def test_estimate_reflected_sky_view_mix():
    rh = _rh_for_dew_point(20.0, 10.0)
    sky_k = estimate_reflected_c(20.0, rh, "clear").sky_c + K0
    half = estimate_reflected_c(20.0, rh, "clear", sky_view=0.5)
    # radiative (fourth-power) mix of sky and air-temperature surroundings
    expected_k = (0.5 * sky_k**4 + 0.5 * 293.15**4) ** 0.25
    assert half.reflected_c + K0 == pytest.approx(expected_k, abs=1e-9)
    assert half.sky_c + K0 == pytest.approx(sky_k)
    assert estimate_reflected_c(20.0, rh, "clear", sky_view=0.0).reflected_c == pytest.approx(20.0)
    with pytest.raises(ValueError, match="sky_view"):
        estimate_reflected_c(20.0, rh, "clear", sky_view=1.5)


def test_estimate_reflected_caps_emissivity():
    # very humid overcast: Clark & Allen exceeds 1 (computed here); the estimate caps
    # the sky at air temperature
    assert sky_emissivity_clark_allen(35.0 + K0, cloud_tenths=10) > 1.0
    est = estimate_reflected_c(35.0, 100.0, "overcast")
    assert est.reflected_c == pytest.approx(35.0)


def test_estimate_reflected_note():
    est = estimate_reflected_c(10.0, 70.0, "clear")
    assert "broadband" in est.note
    assert "8-14 um" in est.note and "colder" in est.note
    assert "ASTM E1862" in est.note
    assert "Clark & Allen" in est.model


def test_estimate_reflected_unknown_sky():
    with pytest.raises(ValueError) as info:
        estimate_reflected_c(10.0, 70.0, "cloudy")
    for name in SKY_CLOUD_TENTHS:
        assert repr(name) in str(info.value)


def test_module_constants_visible():
    assert cond.MAGNUS_WATER == (6.1094, 17.625, 243.04)  # Alduchov & Eskridge (1996)
    assert cond.MAGNUS_ICE == (6.1121, 22.587, 273.86)  # Alduchov & Eskridge (1996)
    assert math.isclose(cond.WATER_VAPOUR_GAS_CONSTANT, constants.R / 0.01801528, rel_tol=1e-4)
