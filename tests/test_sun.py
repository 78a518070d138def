"""Sunset and sunrise from the survey's location and date (wetmap.sun).

Reference times are published sunrise/sunset tables of the US Naval Observatory
(Astronomical Applications, "Sun and Moon Data for One Day"), quoted from memory to the
minute; astral's NOAA equations agree with them within a minute or two at mid latitudes.
"""

from __future__ import annotations

import json
import re
import shutil
from datetime import date, time
from pathlib import Path

import pytest

from wetmap.sun import sun_times, survey_sun_times, with_sun_times
from wetmap.survey import load_survey

SAMPLES = Path(__file__).resolve().parents[1] / "sample_surveys"


def _minutes(t: time) -> int:
    return t.hour * 60 + t.minute


@pytest.mark.parametrize("lat, lon, day, zone, sunrise, sunset", [
    # Royal Observatory Greenwich, winter solstice 2024: sunrise 08:04, sunset 15:53 GMT
    # (USNO table, from memory)
    (51.4779, -0.0015, date(2024, 12, 21), "Europe/London", time(8, 4), time(15, 53)),
    # Washington, DC (National Mall), 20 June 2024: sunrise 05:43, sunset 20:37 EDT
    # (USNO table, from memory)
    (38.8895, -77.0353, date(2024, 6, 20), "America/New_York", time(5, 43), time(20, 37)),
])
def test_sun_times_match_published_tables(lat, lon, day, zone, sunrise, sunset):
    t = sun_times(lat, lon, day)
    assert t.timezone == zone  # found from the position, daylight saving applied by zoneinfo
    assert abs(_minutes(t.sunset) - _minutes(sunset)) <= 2
    assert abs(_minutes(t.sunrise) - _minutes(sunrise)) <= 2
    # civil dusk (sun 6° below the horizon) comes some 30-40 min after sunset at these latitudes
    assert 25 <= _minutes(t.civil_dusk) - _minutes(t.sunset) <= 45


def test_polar_night_has_no_sunset():
    t = sun_times(69.65, 18.96, date(2024, 12, 21))  # Tromsø: the sun stays below the horizon (common knowledge)
    assert t.sunset is None and t.sunrise is None


def _copy(src: Path, dest: Path, edit=None) -> Path:
    shutil.copytree(src, dest, ignore=shutil.ignore_patterns("results"))
    if edit:
        toml = dest / "survey.toml"
        toml.write_text(edit(toml.read_text(encoding="utf-8")), encoding="utf-8")
    return dest


def test_sunset_computed_when_not_typed(tmp_path):
    folder = _copy(SAMPLES / "warehouse_roof", tmp_path / "roof",
                   lambda t: re.sub(r'(?m)^sunset = .*\n', "", t))
    survey = load_survey(folder)
    assert survey.conditions.sunset is None
    filled = with_sun_times(survey)
    times = survey_sun_times(survey)
    # the sample's outline lies near 49.3° N, 15.2° E (UTM 33N) on 2024-11-12: Central European Time
    assert times.timezone == "Europe/Prague"
    assert filled.conditions.sunset == times.sunset
    assert "astral" in filled.conditions.sunset_source and "2024-11-12" in filled.conditions.sunset_source
    # sunset there is about 16:20 CET in mid-November (from memory of central European tables)
    assert abs(_minutes(filled.conditions.sunset) - (16 * 60 + 20)) <= 10
    assert filled.cooldown.sunrise == times.sunrise


def test_typed_sunset_wins(tmp_path):
    survey = load_survey(SAMPLES / "warehouse_roof")
    filled = with_sun_times(survey)
    assert filled.conditions.sunset == time(16, 40) and filled.conditions.sunset_source is None


def test_nothing_computed_without_position_or_date(tmp_path):
    hull = load_survey(SAMPLES / "yacht_hull")
    assert survey_sun_times(hull) is None
    folder = _copy(SAMPLES / "warehouse_roof", tmp_path / "nodate",
                   lambda t: re.sub(r'(?m)^(sunset|date) = .*\n', "", t))
    survey = load_survey(folder)
    assert survey_sun_times(survey) is None and with_sun_times(survey).conditions.sunset is None


@pytest.mark.parametrize("written", ['"mid November"', '"12/11/2024"', '"2024-13-01"', '2024-11-12T20:00:00'])
def test_survey_date_in_free_text_is_refused_with_the_iso_form(tmp_path, written):
    from wetmap.errors import SurveyError

    folder = _copy(SAMPLES / "warehouse_roof", tmp_path / "freetext",
                   lambda t: t.replace('date = "2024-11-12"', f"date = {written}"))
    with pytest.raises(SurveyError) as err:
        load_survey(folder)
    lines = [ln for ln in str(err.value).splitlines() if "[survey] date" in ln]
    assert len(lines) == 1 and "YYYY-MM-DD" in lines[0] and lines[0].startswith(str(folder / "survey.toml"))


def test_survey_date_unquoted_toml_date_is_read_as_iso(tmp_path):
    folder = _copy(SAMPLES / "warehouse_roof", tmp_path / "bare",
                   lambda t: t.replace('date = "2024-11-12"', "date = 2024-11-12"))
    assert load_survey(folder).survey.date == "2024-11-12"


def test_checks_and_window_use_the_computed_sunset(tmp_path):
    from wetmap.pipeline import check_survey

    folder = _copy(SAMPLES / "warehouse_roof", tmp_path / "roof",
                   lambda t: re.sub(r'(?m)^sunset = .*\n', "", t))
    survey, warnings = check_survey(folder)
    assert survey.conditions.sunset is not None and survey.conditions.sunset_source
    # the sample was flown at 19:55, within 4 h of the computed sunset: no window warning
    assert not any("after sunset" in w for w in warnings)


def test_window_runs_on_the_computed_sunset(tmp_path):
    from wetmap.cooldown import run_window

    folder = _copy(SAMPLES / "warehouse_roof", tmp_path / "roof",
                   lambda t: re.sub(r'(?m)^sunset = .*\n', "", t))
    plan, json_path, _ = run_window(folder)
    expected = survey_sun_times(load_survey(folder))
    window = json.loads(json_path.read_text(encoding="utf-8"))
    assert window["weather"]["sunset_h"] == pytest.approx(expected.sunset.hour + expected.sunset.minute / 60)
    assert window["weather"]["sunrise_h"] == pytest.approx(expected.sunrise.hour + expected.sunrise.minute / 60)
    assert any("astral" in n for n in plan.notes)
