"""Tests for wetmap.cooldown: the heat solver, the assembly presets and the window planner.

Outside references (named beside each check): the semi-infinite solid with surface
convection and the plane wall's series solution (Incropera, Fundamentals of Heat and Mass
Transfer; Carslaw & Jaeger section 2.7), with the numbers of the project's reference
checks; handbook material properties through the ``ht`` package (ASHRAE Handbook
Fundamentals, EN 12524); the trade's observation that absorbent boards show stronger
patterns than closed-cell foams (trade sources; common practice).
"""

from __future__ import annotations

import json
import math
import re

import numpy as np
import pytest
from click.testing import CliRunner
from scipy.optimize import brentq
from scipy.special import erfc

from wetmap.cooldown import (
    INSULATION_DEFAULTS,
    MATERIALS,
    STEFAN_BOLTZMANN,
    WATER_RHO_C_J_M3K,
    Layer,
    Material,
    NightWeather,
    air_temperature_c,
    discretise,
    plan_window,
    roof_assembly,
    run_window,
    simulate,
    sky_temperature_c,
)
from wetmap.demo import RoofScene, write_roof_survey
from wetmap.errors import SurveyError
from wetmap.survey import COOLDOWN_DECKS, COOLDOWN_INSULATIONS

# ------------------------------------------------------------------ analytical checks

K, RHO, C, H, T_I, T_INF = 0.10, 400.0, 2000.0, 10.0, 15.0, -5.0  # the reference checks' case
ALPHA = K / (RHO * C)


def _semi_infinite_c(x_m: float, t_s: float) -> float:
    """Semi-infinite solid with surface convection (Incropera; Carslaw & Jaeger 2.7)."""
    eta = x_m / (2.0 * math.sqrt(ALPHA * t_s))
    theta = erfc(eta) - math.exp(H * x_m / K + H * H * ALPHA * t_s / K**2) * erfc(
        eta + H * math.sqrt(ALPHA * t_s) / K)
    return T_I + theta * (T_INF - T_I)


@pytest.fixture(scope="module")
def semi_infinite():
    """A 0.2 m slab (about 9 penetration depths after 1 h: semi-infinite), 0.25 mm cells, 1 s steps."""
    column = discretise([Layer(Material("test solid", K, RHO, C), 0.2)], max_cell_m=0.00025)
    times = np.arange(1.0, 3600.0 + 0.5, 1.0)
    return simulate(column, T_I, times_s=times, air_c=T_INF, h_out_w_m2k=H)


@pytest.mark.parametrize(("x_m", "expected_c"), [(0.0, -0.1394), (0.01, 4.4219), (0.02, 8.1692)])
def test_semi_infinite_solid_against_reference_values(semi_infinite, x_m, expected_c):
    # reference checks (Incropera; Carslaw & Jaeger 2.7): k 0.10, rho 400, c 2000, h 10,
    # T_i 15 °C, T_inf -5 °C, t = 1 h; within 0.01 K
    assert semi_infinite.temperature_at(x_m)[-1] == pytest.approx(expected_c, abs=0.01)


def test_semi_infinite_solid_against_erfc_formula(semi_infinite):
    # the closed form with scipy.special.erfc, at several depths and times
    for t_s in (600.0, 1800.0, 3600.0):
        i = int(np.argmin(np.abs(semi_infinite.times_s - t_s)))
        for x_m in (0.0, 0.0025, 0.005, 0.01, 0.02, 0.03):
            assert semi_infinite.temperature_at(x_m)[i] == pytest.approx(_semi_infinite_c(x_m, t_s), abs=0.01)
    assert _semi_infinite_c(0.0, 3600.0) == pytest.approx(-0.1394, abs=1e-4)  # the formula reproduces the table


def _one_term(bi: float) -> tuple[float, float]:
    """First root of zeta tan(zeta) = Bi and C1 = 4 sin(zeta) / (2 zeta + sin(2 zeta)) (Incropera)."""
    zeta = brentq(lambda z: z * math.tan(z) - bi, 1e-9, math.pi / 2 - 1e-9)
    return zeta, 4.0 * math.sin(zeta) / (2.0 * zeta + math.sin(2.0 * zeta))


@pytest.mark.parametrize(("bi", "zeta1", "c1"), [(0.1, 0.3111, 1.0161), (1.0, 0.8603, 1.1191), (10.0, 1.4289, 1.2620)])
def test_one_term_coefficients_match_the_table(bi, zeta1, c1):
    # Incropera, table of one-term coefficients for the plane wall
    zeta, c = _one_term(bi)
    assert zeta == pytest.approx(zeta1, abs=1e-4)
    assert c == pytest.approx(c1, abs=1e-4)


def test_plane_wall_centre_against_series_solution():
    """Plane wall of half-thickness L, Bi = hL/k = 1, convection on the face, centre adiabatic."""
    length = 0.01  # with k 0.1 and h 10: Bi = 1
    column = discretise([Layer(Material("wall", K, RHO, C), length)], max_cell_m=length / 200)
    times = np.arange(0.1, 800.0 + 0.05, 0.1)
    t_i, t_inf = 20.0, 0.0  # 0.01 K = 5e-4 in theta*
    sim = simulate(column, t_i, times_s=times, air_c=t_inf, h_out_w_m2k=K / length)
    centre = sim.temperature_at(length)
    zeta, c1 = _one_term(1.0)
    for fo, theta_ref in ((0.5, 0.77253), (1.0, 0.53386)):  # reference checks (series, Bi 1)
        i = int(np.argmin(np.abs(times - fo * length**2 / ALPHA)))
        got = centre[i]
        assert got == pytest.approx(t_inf + (t_i - t_inf) * theta_ref, abs=0.01)
        one_term = c1 * math.exp(-zeta**2 * fo)  # Incropera's one-term approximation, within 0.01 K
        assert got == pytest.approx(t_inf + (t_i - t_inf) * one_term, abs=0.01)


# ------------------------------------------------------------------ energy conservation


def test_energy_is_conserved_over_a_night():
    assembly = roof_assembly("perlite", emissivity=0.9).with_water(0.15)
    column = discretise(assembly.layers)
    weather = NightWeather(sunset_h=17.0, sunrise_h=7.0, air_c=6.0, air_at_h=20.0, humidity_pct=70.0)
    hours = 17.0 + np.arange(1, 14 * 60 + 1) / 60.0
    air = air_temperature_c(hours, weather)
    sky = sky_temperature_c(air, weather)
    h_out = 12.0
    initial = np.linspace(8.0, 18.0, column.dz_m.size)
    sim = simulate(column, initial, times_s=hours * 3600.0, start_s=17.0 * 3600.0, air_c=air, h_out_w_m2k=h_out,
                   sky_c=sky, emissivity=0.9, inside_c=20.0, h_in_w_m2k=10.0)
    stored = float(np.sum(sim.heat_capacity_j_m2k * (sim.cells_c[-1] - sim.initial_c)))  # J m-2
    through = float(np.sum(sim.step_s * (sim.top_flux_w_m2 - sim.bottom_flux_w_m2)))
    throughput = float(np.sum(sim.step_s * (np.abs(sim.top_flux_w_m2) + np.abs(sim.bottom_flux_w_m2))))
    assert abs(stored) > 1e5  # the night takes a real amount of heat out
    assert stored == pytest.approx(through, abs=1e-9 * throughput)  # to round-off
    # the exact (non-linear) surface balance at the computed surface temperatures
    ts_k = sim.surface_c + 273.15
    exact_top = 0.9 * STEFAN_BOLTZMANN * ((sky + 273.15) ** 4 - ts_k**4) + h_out * (air - sim.surface_c)
    exact = float(np.sum(sim.step_s * (exact_top - sim.bottom_flux_w_m2)))
    assert stored == pytest.approx(exact, rel=0.01)


# ------------------------------------------------------------------ materials


@pytest.mark.parametrize(
    ("preset", "ht_name", "check_c"),
    [
        ("perlite", "Perlite board", False),  # ASHRAE gives no heat capacity for the board
        ("polyiso", "Polyisocyanurate, aged, with facers", True),
        ("eps", "Expanded polystyrene, molded beads", True),
        ("xps", "Expanded polystyrene, extruded", True),
        ("wood_fibre", "Wood, fibreboard, 250 kg/m^3", True),
        ("bitumen", "Bitumen, felt or sheet", True),
        ("steel", "Metals, steel", True),
        ("concrete", "Concrete, medium density 2000 kg/m^3", True),
        ("water", "Water at 10°C", True),
        ("ice", "Water, ice at 0 °C", True),
    ],
)
def test_presets_are_handbook_values(preset, ht_name, check_c):
    # ASHRAE Handbook Fundamentals 2013 ch. 26 / EN 12524 as tabulated in ht.insulation
    import ht.insulation as ins

    m = MATERIALS[preset]
    assert m.rho_kg_m3 == pytest.approx(ins.rho_material(ht_name))
    assert m.k_w_mk == pytest.approx(ins.k_material(ht_name))
    if check_c:
        assert m.c_j_kgk == pytest.approx(ins.Cp_material(ht_name))


def test_perlite_heat_capacity_is_the_aggregate_value():
    # ASHRAE lists no heat capacity for perlite board; the expanded perlite aggregate's is used
    import ht.insulation as ins

    assert MATERIALS["perlite"].c_j_kgk == pytest.approx(ins.Cp_material("Perlite aggregate"))


def test_wet_layer_properties():
    # rho c_wet = rho c_dry + psi rho_w c_w; k_wet = k exp(f psi) (ISO 10456; f from memory)
    import ht.insulation as ins

    assert WATER_RHO_C_J_M3K == pytest.approx(ins.rho_material("Water at 10°C") * ins.Cp_material("Water at 10°C"))
    dry = Layer(MATERIALS["eps"], 0.1)
    wet = Layer(MATERIALS["eps"], 0.1, 0.2)
    assert wet.rho_c_j_m3k - dry.rho_c_j_m3k == pytest.approx(0.2 * 1000.0 * 4190.0)
    assert wet.k_w_mk / dry.k_w_mk == pytest.approx(math.exp(4.0 * 0.2))  # EPS f = 4 (from memory)
    assert MATERIALS["xps"].moisture_factor == 2.5 and MATERIALS["polyiso"].moisture_factor == 6.0  # PUR 6
    with pytest.raises(ValueError, match="water_vol_fraction"):
        Layer(MATERIALS["eps"], 0.1, 1.2)


def test_presets_match_the_survey_choices():
    assert set(INSULATION_DEFAULTS) == set(COOLDOWN_INSULATIONS)
    for deck in COOLDOWN_DECKS:
        assert roof_assembly("perlite", deck=deck).layers[-1].material is MATERIALS[deck]


# ------------------------------------------------------------------ the planner

WEATHER = NightWeather(sunset_h=16 + 40 / 60, sunrise_h=7 + 20 / 60, air_c=6.0, air_at_h=19 + 55 / 60,
                       humidity_pct=70.0, wind_m_s=2.0, cloud_tenths=0.0)  # an invented autumn night


@pytest.fixture(scope="module")
def perlite_plan():
    return plan_window(roof_assembly("perlite", emissivity=0.94), WEATHER, water_vol_fraction=0.15,
                       insulation="perlite")


def test_wet_perlite_is_warmer_than_dry_all_night(perlite_plan):
    # trade sources: at night wet insulation stays warmer than dry (absorbent boards: strong patterns)
    p = perlite_plan
    assert np.all(p.delta_c > 0.0)
    assert p.peak_delta_c > 0.5
    assert p.best_start_h is not None and 0.0 <= p.best_start_h < p.best_end_h <= WEATHER.night_h
    inside = (p.hours_after_sunset >= p.best_start_h) & (p.hours_after_sunset <= p.best_end_h)
    assert np.all(p.delta_c[inside] >= p.window_fraction * p.peak_delta_c - 1e-9)
    assert np.allclose(p.delta_c, p.surface_wet_c - p.surface_dry_c)


def test_absorbent_board_shows_more_contrast_than_closed_cell_foam(perlite_plan):
    # trade sources: absorbent insulation gives strong patterns, closed-cell boards faint ones
    polyiso = plan_window(roof_assembly("polyiso", emissivity=0.94), WEATHER,
                          water_vol_fraction=INSULATION_DEFAULTS["polyiso"][1] / 100, insulation="polyiso")
    assert polyiso.peak_delta_c < perlite_plan.peak_delta_c


def test_window_ends_when_dew_forms(perlite_plan):
    p = perlite_plan
    if p.dew_from_h is not None and p.best_end_h is not None:
        assert p.best_end_h <= p.dew_from_h
    # the model's dry surface falls below the air at night (radiative cooling to a clear sky)
    night = p.hours_after_sunset > 1.0
    assert np.all(p.surface_dry_c[night] < p.air_c[night])


# ------------------------------------------------------------------ from a survey folder


@pytest.fixture
def roof_survey(tmp_path):
    folder = tmp_path / "roof"
    write_roof_survey(folder, RoofScene(pixel_m=0.5))
    return folder


def _add_table(folder, text):
    toml = folder / "survey.toml"
    toml.write_text(toml.read_text(encoding="utf-8") + "\n" + text, encoding="utf-8")


def test_run_window_writes_json_and_png_and_keeps_other_results(roof_survey):
    _add_table(roof_survey, '[cooldown]\ninsulation = "perlite"\nsunrise = "07:15"\n')
    results = roof_survey / "results"
    results.mkdir()
    (results / "summary.json").write_text("{}", encoding="utf-8")
    (results / "window.json").write_text("old", encoding="utf-8")
    plan, json_path, png_path = run_window(roof_survey)
    doc = json.loads(json_path.read_text(encoding="utf-8"))
    for key in ("hours_after_sunset", "delta_c", "best_start_h", "best_end_h", "peak_delta_c"):
        assert key in doc
    assert isinstance(doc["hours_after_sunset"], list) and len(doc["delta_c"]) == len(doc["hours_after_sunset"])
    assert doc["peak_delta_c"] == pytest.approx(max(doc["delta_c"]), abs=1e-3)
    assert png_path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert (results / "summary.json").read_text(encoding="utf-8") == "{}"  # other results kept
    assert not [p for p in results.iterdir() if p.name.startswith(".")]  # no temporary files left


def test_a_later_run_keeps_the_window_files(roof_survey):
    from wetmap.pipeline import run_survey

    _, json_path, png_path = run_window(roof_survey)
    before = json_path.read_bytes()
    run_survey(roof_survey)  # replaces results/ as a whole, but carries the cool-down plan over
    assert json_path.read_bytes() == before and png_path.is_file()
    assert (roof_survey / "results" / "summary.json").is_file()


def test_window_insulation_from_sections(roof_survey):
    plan, _, _ = run_window(roof_survey)  # the demo's sections name perlite (A) and wood fibre (B, larger)
    assert plan.insulation == "wood_fibre"
    assert any("sections" in n for n in plan.notes)


def test_window_cli(roof_survey):
    from wetmap_cli.main import main

    _add_table(roof_survey, '[cooldown]\ninsulation = "polyiso"\ninsulation_m = 0.1\n')
    res = CliRunner().invoke(main, ["window", str(roof_survey)])
    assert res.exit_code == 0, res.output
    assert "window" in res.output and (roof_survey / "results" / "window.png").is_file()


def test_bad_cooldown_value_is_one_clear_line(roof_survey):
    from wetmap.survey import load_survey

    _add_table(roof_survey, '[cooldown]\ninsulation = "perlit"\nwater_vol_pct = -3\n')
    with pytest.raises(SurveyError) as err:
        load_survey(roof_survey)
    lines = err.value.problems
    assert any("[cooldown] insulation" in l and '"perlit"' in l and "perlite" in l for l in lines)
    assert any("[cooldown] water_vol_pct" in l and "-3" in l for l in lines)


def test_window_needs_a_sunset(roof_survey):
    """No sunset typed and none computable (no survey date): refused, naming the key."""
    toml = roof_survey / "survey.toml"
    text = toml.read_text(encoding="utf-8").replace('sunset = "16:40"\n', "")
    text = re.sub(r'(?m)^date = .*\n', "", text)
    toml.write_text(text, encoding="utf-8")
    with pytest.raises(SurveyError, match="sunset"):
        run_window(roof_survey)
