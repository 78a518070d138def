"""Tests for wetmap.radiometry: band radiance and the measurement equation.

The source of each outside value is named beside its check: Planck's law with CODATA
constants (scipy.constants), Incropera's table of blackbody radiation functions, the
`ht` library, ASTM E1862/E1933 for the measurement equation. Fast (table) paths
are checked against slow, obviously-correct references (adaptive quadrature and
root-finding on the exact band integral).
"""

from __future__ import annotations

import logging
import math

import ht.radiation
import numpy as np
import pytest
from scipy import constants
from scipy.integrate import quad
from scipy.optimize import brentq

from wetmap import radiometry
from wetmap.radiometry import (
    DEFAULT_BAND_UM,
    WATER_VAPOUR_EXTINCTION_PER_MM,
    BandTable,
    apparent_from_surface,
    atmospheric_transmittance,
    band_radiance,
    band_table,
    precipitable_water_mm,
    spectral_radiance,
    surface_from_apparent,
)

K0 = 273.15
SIGMA = constants.sigma  # CODATA Stefan-Boltzmann constant


def quad_band_radiance(temp_k: float, band_um: tuple[float, float]) -> float:
    """Slow reference: adaptive quadrature (scipy.integrate.quad) of Planck's law."""
    lo, hi = band_um

    def planck(lam: float) -> float:
        return float(spectral_radiance(lam, temp_k))

    return quad(planck, lo * 1e-6, hi * 1e-6, epsabs=0.0, epsrel=1e-13, limit=500)[0]


def slow_temperature(radiance: float, band_um=DEFAULT_BAND_UM) -> float:
    """Slow reference: blackbody temperature by root-finding on the exact band integral."""
    return brentq(
        lambda t: float(band_radiance(t, band_um=band_um)) - radiance, 50.0, 1000.0, xtol=1e-12
    )


# ---------------------------------------------------------------- band radiance


@pytest.mark.parametrize(
    ("temp_k", "l_75_14", "l_8_14"),
    [
        # Planck's law integrated over the band, CODATA 2018 constants (scipy.constants);
        # cross-checked below against Incropera's blackbody radiation functions
        (250.0, 23.5608, 22.2923),
        (273.15, 37.5330, 35.1520),
        (300.0, 59.3117, 54.9335),
        (373.15, 151.5811, 136.7783),
    ],
)
def test_band_radiance_checks_table(temp_k, l_75_14, l_8_14):
    assert float(band_radiance(temp_k)) == pytest.approx(l_75_14, rel=1e-5, abs=1e-4)
    assert float(band_radiance(temp_k, band_um=(8.0, 14.0))) == pytest.approx(
        l_8_14, rel=1e-5, abs=1e-4
    )


@pytest.mark.parametrize(
    ("temp_k", "fraction"),
    [
        (300.0, 0.37574),  # Incropera, blackbody radiation functions: F(4200) - F(2400)
        (250.0, 0.31618),  # Incropera, Fundamentals of Heat and Mass Transfer, table of blackbody radiation functions
    ],
)
def test_band_fraction_incropera(temp_k, fraction):
    in_band = float(band_radiance(temp_k, band_um=(8.0, 14.0)))
    assert math.pi * in_band / (SIGMA * temp_k**4) == pytest.approx(fraction, abs=1e-4)


def test_blackbody_functions_incropera():
    # Incropera table of blackbody radiation functions: F(0 -> 2400 um K) = 0.14025,
    # F(0 -> 4200 um K) = 0.51599 (Incropera, table of blackbody radiation functions); at 300 K these are 8 and
    # 14 um. Below 0.5 um nothing is emitted at 300 K (exp(-96)).
    total = SIGMA * 300.0**4 / math.pi
    assert float(band_radiance(300.0, band_um=(0.5, 8.0))) / total == pytest.approx(0.14025, abs=1e-4)
    assert float(band_radiance(300.0, band_um=(0.5, 14.0))) / total == pytest.approx(0.51599, abs=1e-4)


@pytest.mark.parametrize("temp_k", [200.0, 300.0, 600.0, 1000.0])
def test_stefan_boltzmann(temp_k):
    # Stefan-Boltzmann law: the integral over all wavelengths is sigma T^4 / pi
    # (sigma from scipy.constants, CODATA).
    expected = SIGMA * temp_k**4 / math.pi
    # 0.1-1000 um misses the far tail: up to 2e-5 of the total at 200 K
    assert float(band_radiance(temp_k, band_um=(0.1, 1000.0))) == pytest.approx(expected, rel=1e-4)
    # 0.05 um - 10 cm: tails below 1e-10
    assert float(band_radiance(temp_k, band_um=(0.05, 1e5))) == pytest.approx(expected, rel=1e-9)


def test_against_ht_spectral_radiance():
    # ht.radiation.blackbody_spectral_radiance (PyPI ht): its docstring value at
    # 800 K, 4 um is 1.3116941297e9 W m-2 sr-1 m-1. ht uses CODATA 2014 h, ours CODATA
    # 2018 (scipy.constants): they differ by 2e-8, hence rel 1e-7.
    assert ht.radiation.blackbody_spectral_radiance(800.0, 4e-6) == pytest.approx(1.3116941297e9, rel=1e-10)
    assert float(spectral_radiance(4e-6, 800.0)) == pytest.approx(1.3116941297e9, rel=1e-7)
    # ht's function integrated over 8-14 um at 300 K with scipy.integrate.quad = 54.9335
    ht_band = quad(lambda lam: ht.radiation.blackbody_spectral_radiance(300.0, lam), 8e-6, 14e-6, epsrel=1e-12)[0]
    assert ht_band == pytest.approx(54.9335, abs=1e-4)
    assert float(band_radiance(300.0, band_um=(8.0, 14.0))) == pytest.approx(ht_band, rel=1e-7)


@pytest.mark.parametrize("band_um", [(7.5, 14.0), (8.0, 14.0), (3.0, 5.0), (0.1, 1000.0)])
@pytest.mark.parametrize("temp_k", [100.0, 180.0, 273.15, 330.0, 500.0, 700.0])
def test_band_radiance_against_quad(band_um, temp_k):
    # reference library: scipy.integrate.quad on the same Planck function; the fixed
    # Gauss-Legendre rule must agree to 1e-9 relative
    ref = quad_band_radiance(temp_k, band_um)
    assert float(band_radiance(temp_k, band_um=band_um)) == pytest.approx(ref, rel=1e-9)


def test_band_radiance_shapes_and_nan():
    temps = np.array([[250.0, np.nan], [300.0, -1.0], [0.0, 373.15]])
    out = band_radiance(temps)
    assert out.shape == (3, 2) and out.dtype == np.float64
    assert np.isnan(out[0, 1]) and np.isnan(out[1, 1]) and np.isnan(out[2, 0])
    assert out[1, 0] == pytest.approx(float(band_radiance(300.0)))
    assert np.ndim(band_radiance(300.0)) == 0
    # more temperatures than one internal block: same as one at a time
    many = np.linspace(150.0, 450.0, 40_001)
    whole = band_radiance(many)
    singles = [float(band_radiance(t)) for t in many[::5000]]
    assert np.allclose(whole[::5000], singles, rtol=1e-14, atol=0.0)  # BLAS rounding only


def test_band_radiance_increases_with_temperature():
    assert np.all(np.diff(band_radiance(np.linspace(100.0, 700.0, 601))) > 0)


@pytest.mark.parametrize("band_um", [(14.0, 7.5), (0.0, 14.0), (7.5,), "x"])
def test_bad_band(band_um):
    with pytest.raises(ValueError, match="band_um"):
        band_radiance(300.0, band_um=band_um)


# --------------------------------------------------------------------- the table


def test_band_table_shape_and_cache():
    table = band_table()
    assert isinstance(table, BandTable)
    assert table.band_um == DEFAULT_BAND_UM
    assert table.temps_k[0] <= 100.0 and table.temps_k[-1] >= 700.0
    assert table.temps_k.ndim == 1 and table.radiance.shape == table.temps_k.shape
    assert np.all(np.diff(table.radiance) > 0)
    assert band_table() is table and band_table([7.5, 14.0]) is table
    assert band_table((8.0, 14.0)) is not table
    with pytest.raises(ValueError):
        table.radiance[0] = 1.0  # shared by every caller: read-only


def test_band_table_against_exact_integral():
    # slow reference: the exact band integral; linear interpolation in the table must
    # reproduce it to 1e-5 K
    table = band_table()
    rng = np.random.default_rng(1)
    temps = rng.uniform(100.0, 700.0, 20_000)
    assert np.max(np.abs(table.temperature_of(band_radiance(temps)) - temps)) < 1e-5
    assert np.allclose(table.radiance_of(temps), band_radiance(temps), rtol=1e-6, atol=0.0)


def test_band_table_outside_is_nan():
    table = band_table()
    assert np.isnan(table.temperature_of(table.radiance[0] * 0.5))
    assert np.isnan(table.temperature_of(table.radiance[-1] * 1.01))
    assert np.isnan(table.temperature_of(-1.0))
    assert np.isnan(table.radiance_of(50.0)) and np.isnan(table.radiance_of(800.0))
    assert np.isnan(table.temperature_of(np.nan))


def test_band_table_validates():
    with pytest.raises(ValueError):
        BandTable(band_um=(7.5, 14.0), temps_k=np.array([1.0, 2.0]), radiance=np.array([2.0, 1.0]))


# ---------------------------------------------------------- measurement equation


@pytest.mark.parametrize(
    ("emissivity", "reads_c"),
    [
        # common practice (shiny metal reads far below its true temperature); values from
        # the measurement equation of ASTM E1862 / E1933 with the band integral:
        # true 150 °C, reflected 21 °C, tau = 1, 7.5-14 um
        (0.0540, 32.0),
        (0.05, 31.2),
        (0.07, 35.1),
        (0.10, 40.6),
    ],
)
def test_shiny_metal(emissivity, reads_c):
    app = apparent_from_surface(150.0 + K0, emissivity=emissivity, reflected_k=21.0 + K0)
    assert float(app) - K0 == pytest.approx(reads_c, abs=0.1)
    back = surface_from_apparent(app, emissivity=emissivity, reflected_k=21.0 + K0)
    assert float(back) - K0 == pytest.approx(150.0, abs=1e-4)


def test_power_law_is_wrong_for_shiny_metal():
    # A T^4 power law in place of the band integral errs by 9-18 K on hot, shiny metal
    # (computed from Planck's law; the equation of ASTM E1862). A 32 °C reading, eps 0.054, reflected 21 °C: band integral gives
    # 150 °C, the T^4 law about 141 °C.
    t_app, t_refl, eps = 32.0 + K0, 21.0 + K0, 0.054
    t4_surface = ((t_app**4 - (1.0 - eps) * t_refl**4) / eps) ** 0.25
    band_surface = float(surface_from_apparent(t_app, emissivity=eps, reflected_k=t_refl))
    assert band_surface - K0 == pytest.approx(150.0, abs=0.1)
    assert band_surface - t4_surface > 8.0


def _grid():
    ts, eps, tr, tau = np.meshgrid(
        np.array([230.0, 255.0, 273.15, 290.0, 310.0, 350.0, 420.0]),
        np.array([0.05, 0.2, 0.5, 0.85, 0.95, 1.0]),
        np.array([200.0, 250.0, 280.0, 300.0, 320.0]),
        np.array([0.8, 0.95, 0.99, 1.0]),
        indexing="ij",
    )
    return ts.ravel(), eps.ravel(), tr.ravel(), tau.ravel()


def test_round_trip_grid():
    # common practice: surface -> apparent -> surface must agree to 1e-4 K
    ts, eps, tr, tau = _grid()
    atm = 283.0
    app = apparent_from_surface(ts, emissivity=eps, reflected_k=tr, transmittance=tau, atmosphere_k=atm)
    back = surface_from_apparent(app, emissivity=eps, reflected_k=tr, transmittance=tau, atmosphere_k=atm)
    assert np.all(np.isfinite(back))
    assert np.max(np.abs(back - ts)) < 1e-4


def test_against_slow_reference():
    # slow reference: exact band integral (Gauss-Legendre, itself checked against quad)
    # and brentq on the same, per point
    ts, eps, tr, tau = _grid()
    rng = np.random.default_rng(7)
    pick = rng.choice(ts.size, 40, replace=False)
    atm = 290.0
    app = apparent_from_surface(ts, emissivity=eps, reflected_k=tr, transmittance=tau, atmosphere_k=atm)
    for i in pick:
        l_meas = (
            tau[i] * eps[i] * band_radiance(ts[i])
            + tau[i] * (1 - eps[i]) * band_radiance(tr[i])
            + (1 - tau[i]) * band_radiance(atm)
        )
        assert app[i] == pytest.approx(slow_temperature(float(l_meas)), abs=2e-5)
        l_s = (
            float(band_radiance(app[i]))
            - tau[i] * (1 - eps[i]) * band_radiance(tr[i])
            - (1 - tau[i]) * band_radiance(atm)
        ) / (tau[i] * eps[i])
        assert float(
            surface_from_apparent(app[i], emissivity=eps[i], reflected_k=tr[i], transmittance=tau[i], atmosphere_k=atm)
        ) == pytest.approx(slow_temperature(float(l_s)), abs=1e-4)


def test_blackbody_reads_true():
    # definition: with eps = 1 and tau = 1 the apparent temperature is the surface one
    temps = np.linspace(150.0, 650.0, 101)
    assert np.allclose(apparent_from_surface(temps, emissivity=1.0, reflected_k=250.0), temps, atol=1e-6)


def test_sensitivity_to_transmittance():
    # Set-up: the surface is seen with eps = 1 (equivalently: reflected temperature =
    # air temperature, for which eps cancels exactly); the true path has tau = 0.97 and
    # emits at air temperature; the correction wrongly assumes tau = 1.
    def error_k(surface_c: float, air_c: float) -> float:
        app = apparent_from_surface(
            surface_c + K0, emissivity=1.0, reflected_k=air_c + K0, transmittance=0.97, atmosphere_k=air_c + K0
        )
        est = surface_from_apparent(app, emissivity=1.0, reflected_k=air_c + K0)
        return float(est) - (surface_c + K0)

    # computed from the measurement equation (ASTM E1862 form, tau 0.97 assumed 1):
    # -0.29 K for a 30 °C surface in 20 °C air
    assert error_k(30.0, 20.0) == pytest.approx(-0.29, abs=0.01)
    # For a 0 °C surface in 5 °C air the measurement equation gives +0.154 K, close to
    # the first-order estimate
    # (1 - tau)(T_air - T_s) = 0.15 K (common practice linearisation).
    assert error_k(0.0, 5.0) == pytest.approx(0.154, abs=0.005)
    assert error_k(0.0, 5.0) == pytest.approx(0.03 * 5.0, abs=0.01)
    # eps cancels when reflected = air
    app = apparent_from_surface(273.15, emissivity=0.9, reflected_k=278.15, transmittance=0.97, atmosphere_k=278.15)
    assert float(surface_from_apparent(app, emissivity=0.9, reflected_k=278.15)) - 273.15 == pytest.approx(
        error_k(0.0, 5.0), abs=1e-5
    )


# --------------------------------------------------------- arrays, dtypes, NaN


def test_nan_preserved_and_float32():
    data = np.array([[290.0, np.nan], [300.0, 310.0]], dtype=np.float32)
    out = surface_from_apparent(data, emissivity=0.9, reflected_k=250.0)
    assert out.dtype == np.float32 and out.shape == (2, 2)
    assert np.isnan(out[0, 1]) and np.all(np.isfinite(out[[0, 1, 1], [0, 0, 1]]))
    out2 = apparent_from_surface(data, emissivity=0.9, reflected_k=250.0)
    assert out2.dtype == np.float32 and np.isnan(out2[0, 1])
    ref = surface_from_apparent(data.astype(np.float64), emissivity=0.9, reflected_k=250.0)
    assert np.allclose(out, ref, equal_nan=True, atol=1e-4)


@pytest.mark.parametrize("dtype", [np.float64, np.int32, np.int64, np.float16])
def test_other_dtypes_give_float64(dtype):
    data = np.array([280, 300], dtype=dtype)
    assert surface_from_apparent(data, emissivity=0.95, reflected_k=260.0).dtype == np.float64


def test_scalar_in_scalar_out():
    out = surface_from_apparent(300.0, emissivity=0.95, reflected_k=260.0)
    assert np.ndim(out) == 0
    assert math.isfinite(float(out))


def test_impossible_gives_nan():
    # apparent far below what the reflection alone would give: corrected radiance <= 0
    out = surface_from_apparent(
        np.array([240.0, 250.0, 305.0]), emissivity=0.1, reflected_k=300.0
    )
    assert np.isnan(out[0]) and np.isnan(out[1]) and np.isfinite(out[2])
    # a surface hotter than the table (700 K) after correction
    assert np.isnan(surface_from_apparent(400.0, emissivity=0.1, reflected_k=250.0))
    # outside the table on input
    assert np.isnan(apparent_from_surface(900.0, emissivity=0.9, reflected_k=250.0))
    assert np.isnan(surface_from_apparent(50.0, emissivity=0.9, reflected_k=250.0))


def test_array_parameters_broadcast():
    data = np.array([[280.0, 290.0, 300.0], [285.0, 295.0, 305.0]])
    eps = np.array([[0.9, 0.8, 0.95], [0.5, 1.0, 0.7]])
    refl = np.array([250.0, 260.0, 270.0])  # one per column
    out = surface_from_apparent(data, emissivity=eps, reflected_k=refl)
    for r in range(2):
        for c in range(3):
            one = surface_from_apparent(data[r, c], emissivity=eps[r, c], reflected_k=refl[c])
            assert out[r, c] == pytest.approx(float(one), abs=1e-12)
    with pytest.raises(ValueError, match="reflected_k"):
        surface_from_apparent(data, emissivity=0.9, reflected_k=np.array([250.0, 260.0]))


def test_chunking_matches_one_block(monkeypatch):
    # the blocked loop must give exactly what a single block gives, for 1-D, 2-D and
    # 3-D data whose leading slices are smaller and larger than a block
    rng = np.random.default_rng(3)
    cases = [
        rng.uniform(250, 320, 2_003).astype(np.float32),
        rng.uniform(250, 320, (37, 53)),
        rng.uniform(250, 320, (3, 41, 29)).astype(np.float32),
    ]
    for data in cases:
        eps = rng.uniform(0.5, 1.0, data.shape[-1:])  # broadcast parameter
        kwargs = dict(emissivity=eps, reflected_k=255.0, transmittance=0.96, atmosphere_k=285.0)
        monkeypatch.setattr(radiometry, "CHUNK_ELEMENTS", 2**30)
        whole = surface_from_apparent(data, **kwargs)
        whole_app = apparent_from_surface(data, **kwargs)
        for chunk in (5, 64, 1000):
            monkeypatch.setattr(radiometry, "CHUNK_ELEMENTS", chunk)
            assert np.array_equal(surface_from_apparent(data, **kwargs), whole, equal_nan=True)
            assert np.array_equal(apparent_from_surface(data, **kwargs), whole_app, equal_nan=True)


def test_large_array_matches_small():
    # a few million pixels (several default blocks) against the same pixels done a
    # few at a time
    rng = np.random.default_rng(5)
    data = rng.uniform(240.0, 330.0, (1500, 2100)).astype(np.float32)
    data[::97, ::13] = np.nan
    big = surface_from_apparent(data, emissivity=0.92, reflected_k=240.0)
    rows = [0, 1, 499, 500, 1499]
    small = surface_from_apparent(data[rows], emissivity=0.92, reflected_k=240.0)
    assert np.array_equal(big[rows], small, equal_nan=True)
    assert big.dtype == np.float32 and np.array_equal(np.isnan(big), np.isnan(data))


def test_input_not_modified():
    data = np.array([280.0, 300.0])
    copy = data.copy()
    surface_from_apparent(data, emissivity=0.9, reflected_k=250.0)
    assert np.array_equal(data, copy)


# ------------------------------------------------------------------ validation


@pytest.mark.parametrize("bad", [0.0, -0.1, 1.01, 2.0])
def test_emissivity_validated(bad):
    with pytest.raises(ValueError, match="emissivity"):
        surface_from_apparent(300.0, emissivity=bad, reflected_k=250.0)
    with pytest.raises(ValueError, match="emissivity"):
        apparent_from_surface(np.array([300.0]), emissivity=np.array([bad]), reflected_k=250.0)


@pytest.mark.parametrize("bad", [0.0, -0.5, 1.5])
def test_transmittance_validated(bad):
    with pytest.raises(ValueError, match="transmittance"):
        surface_from_apparent(300.0, emissivity=0.9, reflected_k=250.0, transmittance=bad, atmosphere_k=280.0)


def test_atmosphere_required_below_tau_one():
    with pytest.raises(ValueError, match="atmosphere_k"):
        surface_from_apparent(300.0, emissivity=0.9, reflected_k=250.0, transmittance=0.97)
    # tau == 1 without an atmosphere is fine, also as an array of ones
    one = surface_from_apparent(300.0, emissivity=0.9, reflected_k=250.0, transmittance=1.0)
    ones = surface_from_apparent(
        np.array([300.0, 300.0]), emissivity=0.9, reflected_k=250.0, transmittance=np.ones(2)
    )
    assert np.all(ones == one)


def test_non_numeric_input():
    with pytest.raises(ValueError):
        surface_from_apparent(np.array(["a"]), emissivity=0.9, reflected_k=250.0)


# ------------------------------------------------------------------ atmosphere


def test_precipitable_water():
    # ideal gas law with the Magnus vapour pressure (Alduchov & Eskridge 1996):
    # 20 °C, 50 % RH -> 8.64 g m-3 -> 0.259 mm over 30 m
    assert precipitable_water_mm(30.0, air_c=20.0, humidity_pct=50.0) == pytest.approx(0.259, abs=0.001)


def test_transmittance_model():
    # from memory: band-average coefficient 0.1 per mm -> tau about 0.975 at 30 m,
    # 20 °C, 50 % RH
    assert WATER_VAPOUR_EXTINCTION_PER_MM == 0.1
    assert atmospheric_transmittance(30.0, air_c=20.0, humidity_pct=50.0) == pytest.approx(0.975, abs=0.002)
    assert atmospheric_transmittance(0.0, air_c=20.0, humidity_pct=50.0) == 1.0


def test_transmittance_monotone():
    dists = [0.0, 1.0, 5.0, 10.0, 30.0]
    taus = [atmospheric_transmittance(d, air_c=15.0, humidity_pct=70.0) for d in dists]
    assert all(a > b for a, b in zip(taus, taus[1:]))
    hums = [10.0, 30.0, 60.0, 100.0]
    taus = [atmospheric_transmittance(20.0, air_c=15.0, humidity_pct=h) for h in hums]
    assert all(a > b for a, b in zip(taus, taus[1:]))
    assert all(0.0 < t <= 1.0 for t in taus)


def test_transmittance_long_path_logs(caplog):
    with caplog.at_level(logging.WARNING, logger="wetmap.radiometry"):
        atmospheric_transmittance(100.0, air_c=25.0, humidity_pct=80.0)
    assert any("100 m" in r.getMessage() for r in caplog.records)


@pytest.mark.parametrize("bad", [-1.0, float("nan"), float("inf")])
def test_distance_validated(bad):
    with pytest.raises(ValueError, match="distance_m"):
        atmospheric_transmittance(bad, air_c=20.0, humidity_pct=50.0)


def test_uniform_lookup_fast_path_equals_general_path():
    """Scalar parameters take the uniform-grid look-up; the same parameters given as arrays
    take the general two-table path (the slower reference). They agree to 1e-5 K."""
    rng = np.random.default_rng(3)
    app = rng.uniform(240.0, 330.0, size=(300, 400))
    app[0, :5] = np.nan
    app[1, 0] = 90.0  # below the table: NaN on both paths
    kw = dict(reflected_k=255.0, transmittance=0.97, atmosphere_k=280.0)
    fast = surface_from_apparent(app, emissivity=0.91, **kw)
    general = surface_from_apparent(app, emissivity=np.full((1, 400), 0.91), **kw)
    np.testing.assert_array_equal(np.isnan(fast), np.isnan(general))
    np.testing.assert_allclose(fast[~np.isnan(fast)], general[~np.isnan(general)], atol=1e-5, rtol=0)
