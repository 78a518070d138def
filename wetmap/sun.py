"""Sunset, sunrise and civil dusk from the survey's location and date.

A georeferenced roof survey with an ISO ``[survey] date`` says where and when the sun
set: the outline's centre is taken to WGS84 with pyproj, its time zone is looked up
offline with ``timezonefinder`` (IANA names, read by :mod:`zoneinfo`), and the times are
computed with ``astral`` (the NOAA solar calculator's equations; sunrise and sunset at
the sun's upper limb 0.833° below the horizon, civil dusk at 6°). A time typed in
``[conditions] sunset`` or ``[cooldown] sunrise`` always wins; hull and ``local`` surveys
have no position, so nothing is computed for them.
"""

from __future__ import annotations

from zoneinfo import ZoneInfo
import dataclasses
import logging
from dataclasses import dataclass
from datetime import date as date_type
from datetime import time as clock_time
from typing import TYPE_CHECKING
from .vectors import read_outline

if TYPE_CHECKING:
    from .survey import Survey

__all__ = ["SunTimes", "sun_times", "with_sun_times"]

log = logging.getLogger(__name__)


@dataclass(frozen=True)
class SunTimes:
    """Local clock times of one day at one place.

    ``None`` when the sun does not rise or set that day (polar day or night).
    """

    sunrise: clock_time | None
    sunset: clock_time | None
    civil_dusk: clock_time | None
    timezone: str
    lat: float
    lon: float
    day: date_type

    @property
    def source(self) -> str:
        """How the times were found, for notes and the report."""
        return (f"computed for {abs(self.lat):.4f}° {'N' if self.lat >= 0 else 'S'}, "
                f"{abs(self.lon):.4f}° {'E' if self.lon >= 0 else 'W'} on {self.day.isoformat()}, "
                f"{self.timezone} (NOAA solar equations, astral)")


def _clock(moment) -> clock_time:
    """A timezone-aware datetime -> local clock time to the nearest minute."""
    seconds = moment.hour * 3600 + moment.minute * 60 + moment.second + moment.microsecond / 1e6
    minutes = int(round(seconds / 60.0)) % (24 * 60)
    return clock_time(minutes // 60, minutes % 60)


def sun_times(lat: float, lon: float, day: date_type, *, timezone: str | None = None) -> SunTimes:
    """Sunrise, sunset and civil dusk at ``lat, lon`` (WGS84 degrees) on ``day``, local clock time.

    Parameters
    ----------
    lat, lon
        Degrees north and east.
    day
        The local calendar day.
    timezone
        IANA time zone name; ``None``: looked up from the position (``timezonefinder``);
        :class:`LookupError` where none is known.

    Examples
    --------
    >>> from datetime import date
    >>> t = sun_times(51.4779, -0.0015, date(2024, 12, 21))  # Greenwich, winter solstice
    >>> t.timezone, t.sunset.strftime("%H:%M")
    ('Europe/London', '15:53')
    """
    from astral import Observer
    from astral.sun import dusk, sunrise, sunset

    if timezone is None:
        from timezonefinder import TimezoneFinder

        timezone = TimezoneFinder().timezone_at(lng=float(lon), lat=float(lat))
        if timezone is None:
            raise LookupError(f"no time zone is known at {lat:.4f}, {lon:.4f}")
    tz = ZoneInfo(timezone)
    obs = Observer(latitude=float(lat), longitude=float(lon))

    def at(fn, **kw) -> clock_time | None:
        try:
            return _clock(fn(obs, day, tzinfo=tz, **kw))
        except ValueError:  # the sun never reaches that elevation that day
            return None

    return SunTimes(sunrise=at(sunrise), sunset=at(sunset), civil_dusk=at(dusk, depression=6.0),
                    timezone=timezone, lat=float(lat), lon=float(lon), day=day)


def _survey_day(text: str | None) -> date_type | None:
    if not text:
        return None
    try:
        return date_type.fromisoformat(text.strip()[:10])
    except ValueError:
        return None


def survey_sun_times(survey: "Survey") -> SunTimes | None:
    """The sun times at the survey's outline centre on its date, or ``None`` (hull, local, no ISO date)."""
    info = survey.survey
    day = _survey_day(info.date)
    if info.kind == "hull" or info.is_local or day is None:
        return None
    from pyproj import Transformer


    outline, _ = read_outline(survey.plan.outline, survey_crs=info.crs)
    centre = outline.centroid
    lon, lat = Transformer.from_crs(info.crs, "EPSG:4326", always_xy=True).transform(centre.x, centre.y)
    try:
        return sun_times(lat, lon, day)
    except LookupError as err:  # open sea: no local clock to give the times in
        log.warning("sunset not computed: %s; type [conditions] sunset", err)
        return None


def with_sun_times(survey: "Survey") -> "Survey":
    """``survey`` with ``[conditions] sunset`` and ``[cooldown] sunrise`` computed when not typed in.

    Typed values win. The computed sunset's origin is kept in ``conditions.sunset_source``
    (the report and the checks quote it). Unchanged for a hull, a ``local`` plan, a survey
    with no ISO date, or when both times were typed.
    """
    cond, cool = survey.conditions, survey.cooldown
    if cond.sunset is not None and cool.sunrise is not None:
        return survey
    times = survey_sun_times(survey)
    if times is None:
        return survey
    if cond.sunset is None and times.sunset is not None:
        cond = dataclasses.replace(cond, sunset=times.sunset, sunset_source=times.source)
        log.info("sunset %s %s", times.sunset.strftime("%H:%M"), times.source)
    if cool.sunrise is None and times.sunrise is not None:
        cool = dataclasses.replace(cool, sunrise=times.sunrise)
    return dataclasses.replace(survey, conditions=cond, cooldown=cool)
