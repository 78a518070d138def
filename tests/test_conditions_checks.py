"""Tests for the survey-condition checks (wetmap.conditions.check_conditions) and their wiring.

Outside references, named beside each check: the trade's survey conditions as summarised
by trade sources citing ASTM C1153 (wind below about 6.7 m/s, no rain in the previous
24 h, dry membrane, start near sunset with a window of about 4 h; common practice), the
dew and frost point by psychrolib (ASHRAE Handbook Fundamentals), the emissivity ranges of
the project's reference checks (Incropera; cool-roof rating data, from memory), and the
trade's list of poor candidates. The survey folders are invented demo scenarios.
"""

from __future__ import annotations

import json
import re
from datetime import time as clock_time
from types import SimpleNamespace

import psychrolib
import pytest
from click.testing import CliRunner

from wetmap.conditions import check_conditions, hours_after_sunset, surface_emissivity_range
from wetmap.demo import RoofScene, write_roof_survey
from wetmap.errors import SurveyError
from wetmap.pipeline import check_survey, run_survey
from wetmap.survey import Camera, Conditions, Limits, SurveyInfo, load_survey

ROOF = SurveyInfo(title="t", kind="roof", crs="local")
HULL = SurveyInfo(title="t", kind="hull", crs="local")
CAM = Camera(emissivity=0.94)


def _good(**changes) -> Conditions:
    """A night that passes every check (reflected temperature measured)."""
    base = dict(air_c=6.0, humidity_pct=60.0, sky="clear", wind_m_s=2.0, reflected_c=-20.0,
                sunset=clock_time(16, 40), time=clock_time(19, 0), hours_since_rain=72.0, surface_dry=True)
    base.update(changes)
    return Conditions(**base)


def _checks(cond, cam=CAM, info=ROOF, **kw) -> dict[str, str]:
    return {w.check: w.text for w in check_conditions(cond, cam, info, **kw)}


def _section(name, assembly=None, insulation=None):
    return SimpleNamespace(name=name, assembly=assembly, insulation=insulation)


def test_good_night_has_no_warning():
    assert _checks(_good()) == {}


def test_every_warning_says_seen_limit_and_why():
    cond = _good(wind_m_s=9.0, hours_since_rain=6.0, surface_dry=False, humidity_pct=95.0, sky="overcast",
                 reflected_c=None, time=clock_time(23, 30))
    found = check_conditions(cond, Camera(emissivity=0.70, distance_m=60.0), ROOF,
                             sections=[_section("A", "ballasted EPDM")])
    assert {w.check for w in found} == {"wind", "rain", "surface_wet", "dew", "window", "sky", "reflected",
                                        "emissivity", "path", "assembly"}
    for w in found:
        assert w.seen and w.limit and w.why
        assert "(limit: " in w.text


@pytest.mark.parametrize(("wind", "warned"), [(9.0, True), (6.8, True), (6.7, False), (2.0, False)])
def test_wind_limit(wind, warned):
    # trade sources citing ASTM C1153: wind below about 6.7 m/s (15 mph)
    found = _checks(_good(wind_m_s=wind))
    assert ("wind" in found) is warned
    if warned:
        assert f"{wind:g} m/s" in found["wind"] and "6.7 m/s" in found["wind"]


@pytest.mark.parametrize(("hours", "warned"), [(2.0, True), (23.5, True), (24.0, False), (72.0, False)])
def test_rain_within_24_hours(hours, warned):
    # trade sources citing ASTM C1153: no rain in the previous 24 h
    assert ("rain" in _checks(_good(hours_since_rain=hours))) is warned


def test_surface_not_dry():
    assert "surface_wet" in _checks(_good(surface_dry=False))
    assert "surface_wet" not in _checks(_good(surface_dry=None))


def test_high_humidity_warns_of_dew_with_the_ashrae_dew_point():
    psychrolib.SetUnitSystem(psychrolib.SI)
    text = _checks(_good(humidity_pct=95.0))["dew"]
    dew = float(re.search(r"dew point of (-?[\d.]+) °C", text).group(1))
    # psychrolib.GetTDewPointFromRelHum (ASHRAE Handbook Fundamentals): 6 °C, 95 % -> 5.2 °C
    assert dew == pytest.approx(psychrolib.GetTDewPointFromRelHum(6.0, 0.95), abs=0.06)
    assert "air temperature" in text  # no surface figure: the air stands in


def test_frost_point_below_zero():
    psychrolib.SetUnitSystem(psychrolib.SI)
    text = _checks(_good(air_c=-5.0, humidity_pct=85.0))["dew"]
    frost = float(re.search(r"frost point of (-?[\d.]+) °C", text).group(1))
    # The humidity is over water (WMO-No. 8): its vapour pressure, 85 % of Magnus over water
    # at -5 °C (Alduchov & Eskridge 1996: 6.1094 exp(17.625 T / (T + 243.04)) hPa), gives
    # the frost point by psychrolib.GetTDewPointFromVapPres (ASHRAE Handbook Fundamentals;
    # a frost point below 0.01 °C): -6.32 °C. Reading it over ice would give -6.89 °C.
    import math

    e_pa = 100.0 * 0.85 * 6.1094 * math.exp(17.625 * -5.0 / (-5.0 + 243.04))
    assert frost == pytest.approx(psychrolib.GetTDewPointFromVapPres(-5.0, e_pa), abs=0.06)
    assert frost > psychrolib.GetTDewPointFromRelHum(-5.0, 0.85) + 0.4  # the safe side


def test_surface_temperature_is_used_when_given():
    cond = _good(humidity_pct=70.0)  # dew point 0.9 °C (Magnus)
    assert "dew" not in _checks(cond)  # air 6 °C: 5.1 K above
    text = _checks(cond, surface_c=1.5, surface_source="median dry background of the run")["dew"]
    assert "1.5 °C (median dry background of the run)" in text
    assert "below it" in _checks(cond, surface_c=0.0)["dew"]


@pytest.mark.parametrize(("at", "warned"), [(clock_time(16, 0), True), (clock_time(17, 0), False),
                                            (clock_time(20, 30), False), (clock_time(21, 0), True),
                                            (clock_time(1, 0), True)])
def test_survey_window_after_sunset(at, warned):
    # common practice (trade sources): start near sunset, a useful window of about 4 h
    assert ("window" in _checks(_good(time=at))) is warned


def test_pass_times_are_checked_and_hulls_have_no_sunset_window():
    found = check_conditions(_good(), CAM, ROOF, pass_times=[clock_time(19, 0), clock_time(22, 0)])
    assert [w.check for w in found] == ["window"] and "22:00" in found[0].text
    assert check_conditions(_good(time=clock_time(23, 0)), CAM, HULL) == ()


def test_hours_after_sunset_wraps_midnight():
    assert hours_after_sunset(clock_time(0, 30), clock_time(17, 0)) == pytest.approx(7.5)


def test_limits_are_settings():
    cond = _good(wind_m_s=8.0, time=clock_time(21, 30))
    assert _checks(cond, limits=Limits(wind_max_m_s=10.0, after_sunset_max_h=6.0)) == {}


def test_sky_overcast_and_changing():
    assert "little" in _checks(_good(sky="overcast"))["sky"]
    assert "changing" in _checks(_good(sky="partly"))["sky"]


def test_reflected_estimate_is_a_warning():
    text = _checks(_good(reflected_c=None))["reflected"]
    assert "ASTM E1862" in text and "estimated" in text
    assert "8-14 um" in text and "Idso (1981)" in text  # the window sky, not the broadband one


@pytest.mark.parametrize(
    ("assembly", "eps", "warned"),
    [
        ("EPDM, fully adhered", 0.95, True),        # EPDM 0.86-0.90 (cool-roof rating data; from memory)
        ("EPDM, fully adhered", 0.88, False),
        ("built-up roof on perlite", 0.94, False),   # bitumen/asphalt 0.88-0.95 (Incropera)
        ("aluminium coating over BUR", 0.94, True),  # aluminium roof coating 0.25-0.65 (from memory)
        ("standing seam", 0.30, False),              # no documented surface named: nothing to check
    ],
)
def test_emissivity_against_the_stated_surface(assembly, eps, warned):
    found = _checks(_good(), cam=Camera(emissivity=eps), sections=[_section("A", assembly)])
    assert ("emissivity" in found) is warned


def test_emissivity_table_lookup():
    assert surface_emissivity_range("white TPO").surface == "white TPO/PVC"
    assert surface_emissivity_range("gravel-surfaced built-up roof").surface == "gravel"
    assert "emissivity" in _checks(_good(), cam=Camera(emissivity=0.80), info=HULL)  # gelcoat 0.90-0.95


def test_long_humid_path():
    assert "path" in _checks(_good(humidity_pct=80.0), cam=Camera(emissivity=0.94, distance_m=60.0))
    assert "path" not in _checks(_good(humidity_pct=80.0), cam=Camera(emissivity=0.94, distance_m=60.0,
                                                                       transmittance=0.95))
    assert "path" not in _checks(_good(humidity_pct=80.0), cam=Camera(emissivity=0.94, distance_m=25.0))


@pytest.mark.parametrize(
    ("assembly", "insulation", "kind"),
    [
        ("ballasted EPDM", None, "ballasted"),
        ("pavers on pedestals over PVC", None, "pavers"),
        ("inverted roof", "XPS", "inverted"),
        ("green roof, sedum", None, "green roof"),
        ("recover over existing BUR", "perlite", "recover"),
        ("BUR with reflective coating", None, "reflective coating"),
        ("BUR", "polyiso", "closed-cell"),
    ],
)
def test_poor_candidates_per_section(assembly, insulation, kind):
    # trade sources: poor candidates for an infrared roof survey
    found = check_conditions(_good(), CAM, ROOF, sections=[_section("S1", assembly, insulation)])
    texts = [w.text for w in found if w.check == "assembly"]
    assert texts and all("S1" in t for t in texts) and any(kind in t for t in texts)


def test_good_assembly_is_not_flagged():
    assert check_conditions(_good(), CAM, ROOF, sections=[_section("A", "built-up roof on perlite board",
                                                                   "perlite")]) == ()


# ------------------------------------------------------------------ survey.toml and the pipeline


@pytest.fixture(scope="module")
def bad_night(tmp_path_factory):
    """The invented roof surveyed on a humid, windy night after rain."""
    folder = tmp_path_factory.mktemp("bad_night")
    write_roof_survey(folder, RoofScene(pixel_m=0.25, humidity_pct=95.0, wind_m_s=9.0))
    toml = folder / "survey.toml"
    toml.write_text(toml.read_text(encoding="utf-8").replace("hours_since_rain = 72", "hours_since_rain = 6"),
                    encoding="utf-8")
    return folder


def test_check_command_prints_the_warnings(bad_night):
    from wetmap_cli.main import main

    res = CliRunner().invoke(main, ["check", str(bad_night)])
    assert res.exit_code == 0, res.output
    out = res.output
    assert "wind 9 m/s" in out and "rain 6 h before the survey" in out and "dew point" in out
    assert out.count("warning:") >= 3


def test_run_summary_carries_the_warnings(bad_night, tmp_path):
    result = run_survey(bad_night, out=tmp_path / "results")
    warnings = json.loads((tmp_path / "results" / "summary.json").read_text(encoding="utf-8"))["warnings"]
    assert any(w.startswith("wind 9 m/s") for w in warnings)
    assert any(w.startswith("rain 6 h") for w in warnings)
    dew = [w for w in warnings if "dew point" in w]
    assert dew and "median dry background of the run" in dew[0]
    assert list(result.warnings) == warnings


def test_demo_night_has_no_condition_warning(tmp_path):
    write_roof_survey(tmp_path, RoofScene(pixel_m=0.5))
    _, warnings = check_survey(tmp_path)
    assert warnings == ()


def test_limits_table_in_survey_toml(tmp_path):
    write_roof_survey(tmp_path, RoofScene(pixel_m=0.5, wind_m_s=9.0))
    toml = tmp_path / "survey.toml"
    toml.write_text(toml.read_text(encoding="utf-8") + "\n[limits]\nwind_max_m_s = 10.0\ndew_margin_c = 2\n",
                    encoding="utf-8")
    survey = load_survey(tmp_path)
    assert survey.limits.wind_max_m_s == 10.0 and survey.limits.dew_margin_c == 2.0
    assert survey.limits.rain_free_h == 24.0  # default kept
    assert not any("wind" in w for w in check_survey(tmp_path)[1])


def test_bad_limits_are_reported_with_key_and_value(tmp_path):
    write_roof_survey(tmp_path, RoofScene(pixel_m=0.5))
    toml = tmp_path / "survey.toml"
    toml.write_text(toml.read_text(encoding="utf-8")
                    + '\n[limits]\nwind_max_m_s = "fast"\nrain_free = 12\nafter_sunset_max_h = -1\n', encoding="utf-8")
    with pytest.raises(SurveyError) as err:
        load_survey(tmp_path)
    lines = err.value.problems
    assert any('[limits] wind_max_m_s' in l and '"fast"' in l for l in lines)
    assert any("[limits] rain_free" in l and "rain_free_h" in l for l in lines)  # the did-you-mean hint
    assert any("[limits] after_sunset_max_h" in l for l in lines)
